"""Server-side store of datasets, fits and derived results, bounded in entries and bytes.

The browser holds only keys and small settings. Keys combine a per-page session id (a random
token minted when the page is served) with a content hash, so two browser sessions never reach
each other's data even when they upload the same file.
"""

from __future__ import annotations

import hashlib
import json
import secrets
import threading
from collections import OrderedDict

import numpy as np

#: Upload limit shown on screen and enforced on the server (bytes of the decoded file).
MAX_UPLOAD_BYTES = 25 * 1024 * 1024
#: Bound on everything kept server-side (approximate bytes) and on the number of entries.
MAX_CACHE_BYTES = 1_500 * 1024 * 1024
MAX_ENTRIES = 64


def new_session_id() -> str:
    return secrets.token_urlsafe(16)


def content_hash(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()[:32]


def spec_hash(obj) -> str:
    return hashlib.sha256(json.dumps(obj, sort_keys=True, default=str).encode()).hexdigest()[:24]


def _size(obj) -> int:
    """Rough memory footprint of a cached object."""
    if isinstance(obj, np.ndarray):
        return obj.nbytes
    frame = getattr(obj, "frame", None)
    if frame is not None:
        return int(frame.memory_usage(index=True, deep=False).sum())
    total = 0
    attrs = getattr(obj, "__dict__", {})
    for attr in ("X", "q", "raw_scores", "scores", "_cosine"):
        arr = attrs.get(attr)
        if isinstance(arr, np.ndarray):
            total += arr.nbytes
    for name in ("moments", "_influence"):
        cache = attrs.get(name)
        if cache is not None:
            if getattr(cache, "_packed", None) is not None:
                total += cache._packed.nbytes
            total += sum(v[2].nbytes for v in getattr(cache, "_far", {}).values())
    return max(total, 1024)


class Store:
    """A thread-safe LRU map, evicting least-recently-used entries beyond the bounds."""

    def __init__(self, max_bytes: int = MAX_CACHE_BYTES, max_entries: int = MAX_ENTRIES):
        self._data: OrderedDict[str, tuple[object, int]] = OrderedDict()
        self._lock = threading.Lock()
        self.max_bytes = max_bytes
        self.max_entries = max_entries

    def put(self, key: str, value) -> str:
        with self._lock:
            self._data[key] = (value, _size(value))
            self._data.move_to_end(key)
            self._evict()
        return key

    def get(self, key: str | None):
        if not key:
            return None
        with self._lock:
            item = self._data.get(key)
            if item is None:
                return None
            self._data.move_to_end(key)
            return item[0]

    def refresh_size(self, key: str) -> None:
        with self._lock:
            if key in self._data:
                value = self._data[key][0]
                self._data[key] = (value, _size(value))
                self._evict()

    def _evict(self):
        total = sum(s for _, s in self._data.values())
        while self._data and (len(self._data) > self.max_entries or total > self.max_bytes):
            if len(self._data) == 1:
                break
            _, (_, size) = self._data.popitem(last=False)
            total -= size

    def __len__(self):
        return len(self._data)

    def keys(self):
        return list(self._data)


STORE = Store()


def key_for(session: str, *parts) -> str:
    if not session:
        raise ValueError("missing session id")
    return session + ":" + ":".join(str(p) for p in parts)


def owned(session: str, key: str | None) -> bool:
    return bool(key) and bool(session) and key.startswith(session + ":")
