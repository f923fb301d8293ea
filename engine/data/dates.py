"""Dates: parsing a text column as dates and describing the spacing of a date index (regular,
with gaps, irregular)."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from .table import LoadReport


def parse_dates(raw: pd.Series):
    s = raw.astype("string").str.strip()
    if not s.str.contains(r"\d").fillna(False).all():
        return None
    for kwargs in ({"format": "ISO8601"}, {"format": "mixed", "dayfirst": False}):
        try:
            return pd.to_datetime(s, errors="raise", **kwargs)
        except (ValueError, TypeError, OverflowError):
            continue
    return None


def report_spacing(index: pd.DatetimeIndex, report: LoadReport) -> None:
    """Say whether the dates are equally spaced (kernel estimators assume they are)."""
    if len(index) < 3:
        return
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")                 # the string form is what we show
        freq = pd.infer_freq(index)
    if freq is not None:
        report.spacing = f"regular ({getattr(freq, 'freqstr', freq)})"
        return
    days = np.diff(index.to_numpy()).astype("timedelta64[s]").astype(float) / 86_400.0
    step = float(np.median(days))
    unit = _unit(step)
    if unit is None:
        report.spacing = "irregular"
        report.notes.append("the dates are irregularly spaced; kernel estimators treat rows as "
                            "equally spaced periods")
        return
    name, days_per, tol = unit
    if name == "daily" and (index.day_of_week < 5).all():
        name, days_per, tol = "business-daily", 1.0, 0.01     # weekends are not gaps
        d = index.to_numpy().astype("datetime64[D]")
        days = np.busday_count(d[:-1], d[1:]).astype(float)
    multiples = np.round(days / days_per)
    regular = (multiples >= 1) & (np.abs(days - multiples * days_per) <= tol * multiples)
    if not regular.all() or np.mean(multiples == 1) < 0.8:
        report.spacing = "irregular"
        report.notes.append("the dates are irregularly spaced; kernel estimators treat rows as "
                            "equally spaced periods")
        return
    gaps = np.flatnonzero(multiples > 1)
    if gaps.size:
        missing = int(multiples[gaps].sum() - gaps.size)
        first = index[gaps[0]].date().isoformat()
        report.spacing = f"{name} with gaps"
        report.notes.append(f"the dates are {name} with {gaps.size} gap(s) ({missing} missing "
                            f"period(s), the first after {first}); kernel estimators treat rows "
                            "as equally spaced periods")
    else:
        report.spacing = f"{name}"


def _unit(step_days: float):
    for name, days, tol in (("daily", 1, 0.2), ("daily", 1.4, 0.5), ("weekly", 7, 1),
                            ("monthly", 30.44, 3.5), ("quarterly", 91.3, 6),
                            ("annual", 365.25, 10)):
        if abs(step_days - days) <= tol:
            return name, days, tol
    return None


def spacing_note(periods: pd.Index) -> str | None:
    """Calendar gaps between the periods present (the kernel estimators over time treat the
    periods present as consecutive)."""
    if not isinstance(periods, pd.DatetimeIndex) or len(periods) < 3:
        return None
    rep = LoadReport()
    report_spacing(periods, rep)
    if rep.spacing and ("gap" in rep.spacing or rep.spacing == "irregular"):
        return (f"the periods are {rep.spacing}; estimators with a kernel over time treat the "
                "periods present as consecutive")
    return None
