"""What each session's long steps are doing, for the progress strip.

A callback that may take more than a second (reading a large file, fitting, comparing every
estimator, residual diagnostics, the persistence card) runs its work inside
`WORK.step(session, label)`; the engine calls the `update(done, total, what)` it is handed
between stages. The page polls `WORK.active(session)` a few times a second while such a callback
is running (the callbacks switch the poll on through Dash's `running` outputs) and shows a bar
per step, its stage and the seconds spent. Steps live in this process only and hold no data;
a session sees only its own steps.
"""

from __future__ import annotations

import threading
import time
from contextlib import contextmanager
from dataclasses import dataclass, field

#: A step appears once it has run this long (shorter ones would only flicker); with a poll a
#: second, every step still running at the first poll is shown.
SHOW_AFTER = 0.3
#: Polls with nothing running before the poll switches itself off again (the grace covers a
#: request that is on its way to the server but has not started its step yet).
IDLE_POLLS = 2
#: Polling interval of the page, in milliseconds (once a second keeps the extra requests small
#: when many pages are busy at once: 20 pages loading together are not slowed measurably).
POLL_MS = 1000


@dataclass
class Step:
    label: str
    started: float = field(default_factory=time.monotonic)
    done: int = 0
    total: int | None = None
    what: str = ""

    def update(self, done, total=None, what: str = "") -> None:
        """Called by the engine: `done` of `total` units finished, `what` is under way."""
        self.done = int(done)
        if total is not None:
            self.total = int(total)
        self.what = str(what or "")

    @property
    def elapsed(self) -> float:
        return time.monotonic() - self.started

    @property
    def fraction(self) -> float | None:
        if not self.total:
            return None
        return min(max(self.done / self.total, 0.0), 1.0)


class Work:
    """Thread-safe registry of running steps per session."""

    def __init__(self):
        self._lock = threading.Lock()
        self._steps: dict[str, list[Step]] = {}

    @contextmanager
    def step(self, session, label: str):
        """Register a step for `session` while the block runs; yields its update function."""
        st = Step(label=label)
        sid = session if isinstance(session, str) and session else None
        if sid is not None:
            with self._lock:
                self._steps.setdefault(sid, []).append(st)
        try:
            yield st.update
        finally:
            if sid is not None:
                with self._lock:
                    steps = self._steps.get(sid, [])
                    if st in steps:
                        steps.remove(st)
                    if not steps:
                        self._steps.pop(sid, None)

    def active(self, session) -> list[Step]:
        """This session's running steps, oldest first (copies: safe to read while they run)."""
        if not isinstance(session, str):
            return []
        with self._lock:
            return [Step(s.label, s.started, s.done, s.total, s.what)
                    for s in self._steps.get(session, [])]


WORK = Work()


def tracked(session, label: str, run):
    """run(update) inside a step of `session` labelled `label`."""
    with WORK.step(session, label) as update:
        return run(update)
