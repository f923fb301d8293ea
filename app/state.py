"""The server-side store: per-session budgets inside a global byte cap.

The browser holds only a session id and keys; tables, fits, sweeps and every other derived
result stay here. Session ids are issued by the server when a page is served (`open_session`)
and nothing is stored for an id the server did not issue. Issuing an id stores nothing: the
session itself is created by its first stored result (a page that never stores anything, such
as a plain GET from a script or another web page, costs one small entry that expires after
PENDING_SECONDS without a request, and when MAX_PENDING such ids are waiting the least recently
used one is dropped; a page load is never refused). The data every page opens on (the demo or
the file given to `lagwise serve`) is stored once for all sessions (`put_shared`).

Each session has its own byte budget: when a session exceeds it, that session's least recently
used entries are evicted (and the session is told so when it asks for them again); another
session's data is never evicted to make room. When the global cap would be exceeded, sessions
idle for longer than the idle limit are closed first; if that is not enough the new entry is
refused with a message. Sizes count every array an object holds, including a fit's filled
caches (`refresh`).
"""

from __future__ import annotations

import hashlib
import json
import secrets
import threading
import time
from collections import OrderedDict

from ..engine.caches import nbytes_of
from ..engine.errors import LagwiseError

#: Upload limit shown on screen and enforced on the server (bytes of the decoded file).
MAX_UPLOAD_BYTES = 25 * 1024 * 1024
#: Everything held server-side, all sessions together.
MAX_TOTAL_BYTES = 3 * 1024**3
#: What one session may hold.
SESSION_BYTES = 900 * 1024**2
#: Entries per session.
SESSION_ENTRIES = 48
#: Sessions holding data at most, and how long an untouched session is kept.
MAX_SESSIONS = 400
IDLE_SECONDS = 4 * 3600
#: Issued ids that have stored nothing yet: at most this many, each kept this long after its
#: last request (the least recently used is dropped first when the table is full).
MAX_PENDING = 20_000
PENDING_SECONDS = 10 * 60


class CapacityError(LagwiseError):
    """The server holds as much as it may; the request is refused instead of evicting another
    session's data."""


class SessionError(LagwiseError):
    """A session id the server did not issue, or one that has expired."""


def content_hash(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()[:32]


def spec_hash(obj) -> str:
    return hashlib.sha256(json.dumps(obj, sort_keys=True, default=str).encode()).hexdigest()[:24]


def size_of(value) -> int:
    return max(nbytes_of(value), 1024)


class _Session:
    def __init__(self):
        self.entries: OrderedDict[str, tuple[object, int]] = OrderedDict()
        self.evicted: set[str] = set()
        self.touched = time.monotonic()

    @property
    def nbytes(self) -> int:
        return sum(size for _, size in self.entries.values())


class Store:
    """Thread-safe, session-scoped, bounded."""

    def __init__(self, total_bytes: int = MAX_TOTAL_BYTES, session_bytes: int = SESSION_BYTES,
                 session_entries: int = SESSION_ENTRIES, max_sessions: int = MAX_SESSIONS,
                 idle_seconds: float = IDLE_SECONDS, max_pending: int = MAX_PENDING,
                 pending_seconds: float = PENDING_SECONDS):
        self._sessions: dict[str, _Session] = {}
        self._pending: OrderedDict[str, float] = OrderedDict()    # issued id -> last request
        self._shared: dict[str, tuple[object, int]] = {}
        self._lock = threading.RLock()
        self._gates: dict[tuple, list] = {}     # (session, key) -> [lock, waiting requests]
        self.total_bytes = total_bytes
        self.session_bytes = session_bytes
        self.session_entries = session_entries
        self.max_sessions = max_sessions
        self.idle_seconds = idle_seconds
        self.max_pending = max_pending
        self.pending_seconds = pending_seconds

    # ------------------------------------------------------------------ sessions
    def open_session(self) -> str:
        """Issue a session id. Nothing is stored for it until its first result (`put`); a
        full table of waiting ids drops its least recently used one, so this never refuses."""
        with self._lock:
            self._expire_pending()
            while len(self._pending) >= self.max_pending:
                self._pending.popitem(last=False)
            sid = secrets.token_urlsafe(18)
            self._pending[sid] = time.monotonic()
            return sid

    def has_session(self, sid) -> bool:
        if not isinstance(sid, str):
            return False
        with self._lock:
            self._expire_pending()
            return sid in self._sessions or sid in self._pending

    @property
    def session_count(self) -> int:
        """Sessions holding data (issued ids that stored nothing are not sessions yet)."""
        return len(self._sessions)

    def _known(self, sid) -> bool:
        """An issued id (touched: its pending time restarts) or a session."""
        if not isinstance(sid, str):
            return False
        if sid in self._sessions:
            self._sessions[sid].touched = time.monotonic()
            return True
        self._expire_pending()
        if sid in self._pending:
            self._pending[sid] = time.monotonic()
            self._pending.move_to_end(sid)
            return True
        return False

    def _session(self, sid, create: bool = False) -> _Session:
        s = self._sessions.get(sid) if isinstance(sid, str) else None
        if s is None and create and self._known(sid):
            self._expire_idle()
            if len(self._sessions) >= self.max_sessions:
                raise CapacityError("the server holds data for as many sessions as it allows; "
                                    "try again later")
            self._pending.pop(sid, None)
            s = self._sessions[sid] = _Session()
        if s is None:
            raise SessionError("this page's session is not known to the server (it expired or "
                               "the server restarted): reload the page")
        s.touched = time.monotonic()
        return s

    def _expire_idle(self):
        now = time.monotonic()
        for sid in [k for k, s in self._sessions.items() if now - s.touched > self.idle_seconds]:
            del self._sessions[sid]

    def _expire_pending(self):
        now = time.monotonic()
        while self._pending:
            sid, last = next(iter(self._pending.items()))
            if now - last <= self.pending_seconds:
                break
            self._pending.popitem(last=False)

    # ------------------------------------------------------------------ entries
    @property
    def nbytes(self) -> int:
        return sum(s.nbytes for s in self._sessions.values()) \
            + sum(size for _, size in self._shared.values())

    def put_shared(self, key: str, value) -> str:
        """Store a value every issued session may read (the data every page opens on): kept
        once, never evicted, counted in the global total."""
        with self._lock:
            if key not in self._shared:
                self._shared[key] = (value, size_of(value))
        return key

    def put(self, sid: str, key: str, value) -> str:
        size = size_of(value)
        with self._lock:
            s = self._session(sid, create=True)
            if size > self.session_bytes:
                raise CapacityError(f"this result needs {size / 2**20:.0f} MiB, more than a "
                                    f"session may hold ({self.session_bytes / 2**20:.0f} MiB); "
                                    "use a shorter sample or fewer columns")
            # plan: this session's own least recently used entries go first, for its budget
            # and for the global cap; another session's data is never touched
            others = self.nbytes - s.nbytes
            victims, own = [], s.nbytes - (s.entries[key][1] if key in s.entries else 0)
            for k, (_, sz) in s.entries.items():
                if k == key:
                    continue
                if (own + size <= self.session_bytes and others + own + size <= self.total_bytes
                        and len(s.entries) - len(victims) - (key in s.entries) < self.session_entries):
                    break
                victims.append(k)
                own -= sz
            if others + own + size > self.total_bytes:
                self._expire_idle()
                others = self.nbytes - s.nbytes
                if others + own + size > self.total_bytes:
                    raise CapacityError("the server is holding as much data as it may; close "
                                        "other sessions or try again later")
            for k in victims:
                s.entries.pop(k)
                s.evicted.add(k)
            s.entries.pop(key, None)
            s.entries[key] = (value, size)
            s.evicted.discard(key)
        return key

    def _trim(self, s: _Session, keep: str):
        while (len(s.entries) > self.session_entries or s.nbytes > self.session_bytes) \
                and len(s.entries) > 1:
            victim = next(k for k in s.entries if k != keep)
            s.entries.pop(victim)
            s.evicted.add(victim)

    def get(self, sid, key):
        """The value, or None. A key this session never stored is None as well."""
        if not key or not isinstance(key, str):
            return None
        with self._lock:
            if not self._known(sid):
                return None
            s = self._sessions.get(sid)
            item = s.entries.get(key) if s is not None else None
            if item is None:
                shared = self._shared.get(key)
                return shared[0] if shared is not None else None
            s.entries.move_to_end(key)
            return item[0]

    def was_evicted(self, sid, key) -> bool:
        s = self._sessions.get(sid) if isinstance(sid, str) else None
        return bool(s and key in s.evicted)

    def refresh(self, sid, key) -> None:
        """Re-count an entry whose caches have grown (a fit after its first sweep)."""
        with self._lock:
            s = self._sessions.get(sid) if isinstance(sid, str) else None
            if s is None or key not in s.entries:
                return
            value = s.entries[key][0]
            s.entries[key] = (value, size_of(value))
            self._trim(s, keep=key)

    def keys(self, sid) -> list[str]:
        s = self._sessions.get(sid) if isinstance(sid, str) else None
        return list(s.entries) if s else []

    def derived(self, sid, key: str, build):
        """A result derived from stored objects, computed once and kept in this session.
        Requests that need the same result at the same time (the table, the chart and the
        interval plot all use one comparison) wait for the first to build it instead of
        computing it again side by side."""
        value = self.get(sid, key)
        if value is not None:
            return value
        with self._lock:
            gate = self._gates.setdefault((sid, key), [threading.Lock(), 0])
            gate[1] += 1
        try:
            with gate[0]:
                value = self.get(sid, key)
                if value is None:
                    value = build()
                    self.put(sid, key, value)
        finally:
            with self._lock:
                gate[1] -= 1
                if gate[1] == 0:
                    self._gates.pop((sid, key), None)
        return value


STORE = Store()


def key_for(*parts) -> str:
    return ":".join(str(p) for p in parts)
