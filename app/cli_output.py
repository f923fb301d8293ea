"""Where a command's output goes: the file named by --output, or stdout."""

from __future__ import annotations

import sys
from pathlib import Path


def emit(args, text: str) -> int:
    """The command's output to the file named by --output, or to stdout; exit status 0."""
    if args.output:
        Path(args.output).write_text(text)
        print(f"wrote {args.output}", file=sys.stderr)
    else:
        sys.stdout.write(text)
    return 0
