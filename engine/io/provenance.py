"""Where an export came from: the Lagwise version that made it, when, and the data behind it
(the file's name, its number of rows and the SHA-256 of its bytes), so a reviewer can tie a
table, a chart or a report to the exact file it was computed from.

`provenance(source)` takes a model, a Table, a LoadReport or None; `Provenance.lines()` gives
the statement in words, `Provenance.record()` the same as a plain dictionary (settings files,
workbook properties, chart metadata).
"""

from __future__ import annotations

import datetime as _dt
import html
import re
import struct
import zlib
from dataclasses import dataclass
from importlib import metadata

from ..data.table import LoadReport, Table
from ..models.base import MomentModel


def lagwise_version() -> str:
    """The installed Lagwise version (the package metadata; "unknown" outside an install)."""
    try:
        return metadata.version("lagwise")
    except metadata.PackageNotFoundError:
        return "unknown"


def _now() -> str:
    return _dt.datetime.now().astimezone().isoformat(sep=" ", timespec="seconds")


@dataclass(frozen=True)
class Provenance:
    version: str
    made: str                      # ISO 8601 local time with its UTC offset
    source: str | None = None      # the data file's name (or what the data were)
    rows: int | None = None        # rows read from it
    sha256: str | None = None      # of the file's bytes, as read
    from_file: bool = False

    def data_text(self) -> str:
        if self.source is None:
            return "data: given in memory (not read from a file, so no file hash)"
        rows = f"{self.rows:,} rows" if self.rows is not None else "rows not recorded"
        if self.from_file and self.sha256:
            return f"data: {self.source} ({rows}, SHA-256 {self.sha256})"
        return f"data: {self.source} ({rows}; not read from a file, so no file hash)"

    def lines(self) -> list[str]:
        """Two short sentences: who made it and when; which data."""
        return [f"Made by Lagwise {self.version} on {self.made}", self.data_text()]

    def text(self) -> str:
        return "; ".join(self.lines())

    def record(self) -> dict:
        return {"lagwise": self.version, "made": self.made,
                "data": {"file": self.source, "rows": self.rows, "sha256": self.sha256}}


def _report_of(source) -> LoadReport | None:
    if source is None:
        return None
    if isinstance(source, LoadReport):
        return source
    if isinstance(source, Table):
        return source.report
    if isinstance(source, MomentModel):
        return source.source_report
    return None


def provenance(source=None, made: str | None = None) -> Provenance:
    """The stamp for an export of `source` (a fitted model, a Table, a LoadReport or None)."""
    report = _report_of(source)
    made = made or _now()
    if report is None:
        return Provenance(lagwise_version(), made)
    from_file = report.file_format in ("csv", "parquet")
    return Provenance(lagwise_version(), made, report.source or None,
                      int(report.rows_read), report.sha256, from_file)


def combined(sources, made: str | None = None) -> list[Provenance]:
    """One stamp per distinct data source among several models (a robustness table)."""
    made = made or _now()
    out, seen = [], set()
    for s in sources:
        p = provenance(s, made)
        key = (p.source, p.sha256, p.rows)
        if key not in seen:
            seen.add(key)
            out.append(p)
    return out


def stamp_lines(stamps) -> list[str]:
    """The statement for one or several stamps (made once, each data source once)."""
    stamps = list(stamps)
    if not stamps:
        return []
    return [stamps[0].lines()[0]] + [p.data_text() for p in stamps]


# --------------------------------------------------------------------------- chart files

def _png_text_chunk(key: str, value: str) -> bytes:
    data = key.encode("latin-1") + b"\x00" + value.encode("latin-1", "replace")
    return struct.pack(">I", len(data)) + b"tEXt" + data + \
        struct.pack(">I", zlib.crc32(b"tEXt" + data) & 0xFFFFFFFF)


def stamp_png(data: bytes, fields: dict) -> bytes:
    """PNG bytes with tEXt chunks (keyword: value) inserted before the image end."""
    end = data.rfind(b"IEND")
    if not data.startswith(b"\x89PNG") or end < 4:
        return data
    cut = end - 4                                   # the IEND chunk's length field
    chunks = b"".join(_png_text_chunk(k, v) for k, v in fields.items())
    return data[:cut] + chunks + data[cut:]


def stamp_svg(data: bytes, fields: dict) -> bytes:
    """SVG bytes with a <metadata> element (and a comment) right after the root's start tag."""
    text = data.decode("utf-8")
    start = text.find("<svg")
    close = text.find(">", start)
    if start < 0 or close < 0:
        return data
    body = "".join(f"<lagwise:{k.lower().replace(' ', '-')}>{html.escape(v)}"
                   f"</lagwise:{k.lower().replace(' ', '-')}>" for k, v in fields.items())
    meta = ("<metadata xmlns:lagwise=\"https://lagwise.invalid/provenance\">" + body
            + "</metadata>")
    comment = "<!-- " + " | ".join(f"{k}: {v}".replace("--", "-") for k, v in fields.items()) \
        + " -->"
    return (text[:close + 1] + comment + meta + text[close + 1:]).encode("utf-8")


def _pdf_string(value: str) -> bytes:
    safe = value.encode("latin-1", "replace").replace(b"\\", b"\\\\") \
        .replace(b"(", b"\\(").replace(b")", b"\\)")
    return b"(" + safe + b")"


def stamp_pdf(data: bytes, fields: dict) -> bytes:
    """PDF bytes with an incremental update whose document information dictionary holds the
    fields (Title, Subject, Keywords, Creator, Producer are standard keys; others are kept as
    custom keys). The original bytes are left untouched in front."""
    tail = data[-2048:]
    m = re.search(rb"startxref\s+(\d+)", tail)
    trailer = data[data.rfind(b"trailer"):] if b"trailer" in data else b""
    size = re.search(rb"/Size\s+(\d+)", trailer)
    root = re.search(rb"/Root\s+(\d+\s+\d+\s+R)", trailer)
    if not (m and size and root):
        return data                                 # not a plain xref-table PDF: unchanged
    n = int(size.group(1))
    entries = b"".join(b"/" + re.sub(r"[^A-Za-z0-9]", "", k).encode() + b" " + _pdf_string(v)
                       for k, v in fields.items())
    body = data if data.endswith(b"\n") else data + b"\n"
    offset = len(body)
    obj = f"{n} 0 obj\n".encode() + b"<< " + entries + b" >>\nendobj\n"
    xref_at = offset + len(obj)
    xref = (f"xref\n{n} 1\n{offset:010d} 00000 n \n"
            f"trailer\n<< /Size {n + 1} /Root ").encode() + root.group(1) + \
        f" /Info {n} 0 R /Prev {m.group(1).decode()} >>\nstartxref\n{xref_at}\n%%EOF\n".encode()
    return body + obj + xref


def stamp_chart(data: bytes, fmt: str, fields: dict) -> bytes:
    """Chart file bytes (png, svg or pdf) carrying `fields` in the format's own metadata."""
    return {"png": stamp_png, "svg": stamp_svg, "pdf": stamp_pdf}.get(
        fmt, lambda d, f: d)(data, fields)


def chart_fields(stamp: Provenance, title: str = "", subject: str = "") -> dict:
    out = {"Title": title, "Subject": subject, "Creator": f"Lagwise {stamp.version}",
           "Creation Time": stamp.made, "Source": stamp.data_text()}
    return {k: v for k, v in out.items() if v}


__all__ = ["Provenance", "chart_fields", "combined", "lagwise_version", "provenance",
           "stamp_chart", "stamp_lines", "stamp_pdf", "stamp_png", "stamp_svg"]
