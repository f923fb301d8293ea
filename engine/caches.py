"""Explicit caches of a fitted model, with honest byte counts.

A model's derived quantities (the autocovariance cache of its moment contributions, the influence
series' cache, prewhitened series and their cache, cosine transforms, bandwidth choices) are built
once, on first use, and kept in the model's `caches`; `model.nbytes` counts them with the model's
own arrays, so a server can bound what it holds. Nothing else is stored on a model.
"""

from __future__ import annotations

import sys
from typing import Callable

import numpy as np
import pandas as pd


def nbytes_of(obj, _seen=None) -> int:
    """Bytes held by numpy arrays (and objects reporting `nbytes`) inside `obj`; containers are
    walked, shared arrays are counted once, views count nothing beyond their base."""
    seen = set() if _seen is None else _seen
    if obj is None or isinstance(obj, (bool, int, float, str, np.generic)):
        return 0
    if id(obj) in seen:
        return 0
    seen.add(id(obj))
    if isinstance(obj, np.ndarray):
        if obj.base is not None and isinstance(obj.base, np.ndarray):
            return nbytes_of(obj.base, seen)
        return int(obj.nbytes)
    own = getattr(obj, "own_nbytes", None)
    if callable(own):
        return int(own(seen))
    if isinstance(obj, pd.Index):
        return int(obj.memory_usage(deep=False))
    if isinstance(obj, (pd.Series, pd.DataFrame)):
        usage = obj.memory_usage(index=True, deep=False)
        return int(usage.sum() if hasattr(usage, "sum") else usage)
    if isinstance(obj, dict):
        return sum(nbytes_of(v, seen) for v in obj.values()) + sys.getsizeof(obj)
    if isinstance(obj, (list, tuple, set)):
        return sum(nbytes_of(v, seen) for v in obj) + sys.getsizeof(obj)
    return sum(nbytes_of(v, seen) for v in getattr(obj, "__dict__", {}).values())


class Caches:
    """Named values built once on first use (`get(name, build)`) and counted by `nbytes`."""

    def __init__(self):
        self._items: dict[str, object] = {}

    def get(self, name: str, build: Callable[[], object]):
        if name not in self._items:
            self._items[name] = build()
        return self._items[name]

    def peek(self, name: str):
        return self._items.get(name)

    def put(self, name: str, value) -> None:
        self._items[name] = value

    def __contains__(self, name) -> bool:
        return name in self._items

    def names(self) -> list[str]:
        return list(self._items)

    def clear(self) -> None:
        self._items.clear()

    def own_nbytes(self, seen=None) -> int:
        seen = set() if seen is None else seen
        return sum(nbytes_of(v, seen) for v in self._items.values())

    @property
    def nbytes(self) -> int:
        return self.own_nbytes()

    def __repr__(self):
        return f"Caches({', '.join(self._items)}; {self.nbytes / 2**20:.1f} MiB)"
