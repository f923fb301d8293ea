"""Timing helpers for the benchmarks: interleaved rounds in one process, medians and spreads,
ratios against a peer, and a busy neighbour process.

Interleaving (peer, ours, peer, ours, ...) keeps a drift of the shared machine's speed from
favouring either side; every figure is a median with its spread (the middle half of the rounds
and the whole range), never a best-of.
"""

from __future__ import annotations

import contextlib
import json
import os
import signal
import subprocess
import sys
import time

import numpy as np


def interleaved(cases: dict, rounds: int, warmup: int = 1, gap: float = 0.0) -> dict:
    """Seconds per call of each case (name -> callable), measured in turn within every round,
    after `warmup` untimed rounds; with `gap`, the process sleeps that many seconds before each
    timed call (as a server idles between key presses). Returns {name: [seconds per round]}."""
    for _ in range(warmup):
        for fn in cases.values():
            fn()
    times = {name: [] for name in cases}
    for _ in range(rounds):
        for name, fn in cases.items():
            if gap:
                time.sleep(gap)
            t0 = time.perf_counter()
            fn()
            times[name].append(time.perf_counter() - t0)
    return times


def spread(seconds, unit: float = 1e3) -> dict:
    """Median, interquartile range and whole range of a list of timings (milliseconds)."""
    s = np.asarray(seconds) * unit
    q1, med, q3 = np.percentile(s, [25, 50, 75])
    return {"median": round(float(med), 2), "iqr": [round(float(q1), 2), round(float(q3), 2)],
            "range": [round(float(s.min()), 2), round(float(s.max()), 2)], "rounds": len(s)}


def ratio(times: dict, peer: str, ours: str) -> dict:
    """peer / ours: the ratio of the medians, and the spread of the round-by-round ratios."""
    a, b = np.asarray(times[peer]), np.asarray(times[ours])
    per_round = a / b
    q1, q3 = np.percentile(per_round, [25, 75])
    return {"of_medians": round(float(np.median(a) / np.median(b)), 2),
            "per_round_iqr": [round(float(q1), 2), round(float(q3), 2)],
            "per_round_range": [round(float(per_round.min()), 2),
                                round(float(per_round.max()), 2)]}


def report(title: str, payload: dict) -> None:
    """Print one line per figure (compact JSON values) under a title naming the machine."""
    lines = [f"\nBENCH {title} ({machine()})"]
    for key, value in payload.items():
        if isinstance(value, dict) and value and all(isinstance(v, dict) for v in value.values()):
            lines.append(f"{key}:")
            lines += [f"  {k}: {json.dumps(v)}" for k, v in value.items()]
        else:
            lines.append(f"{key}: {json.dumps(value)}")
    print("\n".join(lines))


def machine() -> str:
    cpu = "unknown CPU"
    try:
        with open("/proc/cpuinfo") as fh:
            for line in fh:
                if line.startswith("model name"):
                    cpu = line.split(":", 1)[1].strip()
                    break
    except OSError:                                   # pragma: no cover - not Linux
        pass
    return f"{os.cpu_count()} cores, {cpu}, load {os.getloadavg()[0]:.2f}"


@contextlib.contextmanager
def busy_neighbours(n: int | None = None):
    """`n` other processes (default: one per core) each spinning a core in a busy loop for the
    duration of the block; ended by their own ids on exit."""
    n = (os.cpu_count() or 1) if n is None else n
    procs = [subprocess.Popen([sys.executable, "-c", "while True:\n    pass"],
                              stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL,
                              stderr=subprocess.DEVNULL) for _ in range(n)]
    try:
        time.sleep(0.3)                              # let them reach the loop
        yield procs
    finally:
        for p in procs:
            p.send_signal(signal.SIGKILL)
        for p in procs:
            p.wait()
