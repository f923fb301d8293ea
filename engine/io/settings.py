"""Settings records: a plain, versioned JSON of what the analyst chose (data transforms, model,
estimator, law, level), validated when read back so a settings file cannot carry anything else."""

from __future__ import annotations

import json
import math

from ..covariance.bandwidth import MAX_BANDWIDTH_OVER_T
from ..covariance.registry import FAMILIES, estimator
from ..data.columns import shown_number
from ..data.reading import MAX_CELLS
from ..data.transforms import (AHEAD, OLD_TRANSFORM_NAMES, TRANSFORMS, current_column_name,
                               transform_kind)
from ..errors import DataError, LagwiseError
from ..laws.reference import REQUESTS
from ..models.iv import METHODS

SETTINGS_VERSION = 2


#: Largest settings file accepted (bytes) and deepest nesting.
SETTINGS_MAX_BYTES = 100_000

_MAX_DEPTH = 4

_SCALAR = (str, int, float, bool, type(None))


#: key -> (accepted types, check) for a settings record
_FIELDS = {
    "dataset": ((str, type(None)), None),
    "transforms": ((list,), "transforms"),
    "response": ((str, type(None)), None),
    "regressors": ((list,), "names"),
    "intercept": ((bool,), None),
    "horizon": ((int, type(None)), "positive"),
    "window": ((list, type(None)), "window"),
    "estimator": ((str,), None),
    "params": ((dict,), None),
    "rule": ((str,), None),
    "value": ((int, float, type(None)), "tuning"),
    "reference": ((str,), None),
    "level": ((float, int), "level"),
    "focus": ((str, type(None)), None),
    "chart_mode": ((str,), None),
    "endogenous": ((list,), "names"),
    "instruments": ((list,), "names"),
    "method": ((str,), None),
    "entity": ((str, type(None)), None),
    "time": ((str, type(None)), None),
    "effects": ((list,), "effects"),
    # where the file came from (engine.io.provenance): read for the record, never applied
    "made_by": ((dict,), "made_by"),
}


#: names used by version 1 files
_OLD_KEYS = {"bandwidth": "value"}

_OLD_PARAMS = {"terms": "cosines", "max_lag": "max_order"}


def settings_json(settings: dict) -> str:
    """A replayable settings record (plain JSON, versioned)."""
    return json.dumps({"lagwise_settings": SETTINGS_VERSION, **settings}, indent=2,
                      sort_keys=True, default=str)


def _depth(obj, level=0) -> int:
    if isinstance(obj, dict):
        return max([level] + [_depth(v, level + 1) for v in obj.values()])
    if isinstance(obj, list):
        return max([level] + [_depth(v, level + 1) for v in obj])
    return level


def load_settings(text) -> dict:
    """Parse and validate a settings record: known keys with the right types and sizes, a
    known estimator with valid parameters, names of transforms the engine has. Version-1 files
    (older names) load through a mapping. Raises DataError with one clear message."""
    if isinstance(text, bytes):
        if len(text) > SETTINGS_MAX_BYTES:
            raise DataError(f"a settings file is at most {SETTINGS_MAX_BYTES // 1000} kB")
        try:
            text = text.decode("utf-8")
        except UnicodeDecodeError:
            raise DataError("settings file is not UTF-8 text") from None
    if not isinstance(text, str) or len(text) > SETTINGS_MAX_BYTES:
        raise DataError(f"a settings file is text of at most {SETTINGS_MAX_BYTES // 1000} kB")
    try:
        data = json.loads(text)
    except (json.JSONDecodeError, RecursionError) as exc:
        raise DataError(f"settings file is not valid JSON: {exc}") from None
    if not isinstance(data, dict) or data.get("lagwise_settings") not in (1, SETTINGS_VERSION):
        raise DataError("not a Lagwise settings file (missing 'lagwise_settings': 2)")
    if _depth(data) > _MAX_DEPTH:
        raise DataError("settings file is nested too deeply")
    version = data.pop("lagwise_settings")
    return validate_settings(_upgrade(data) if version == 1 else data)


def _upgrade(data: dict) -> dict:
    out = {_OLD_KEYS.get(k, k): v for k, v in data.items()}
    if isinstance(out.get("params"), dict):
        out["params"] = {_OLD_PARAMS.get(k, k): v for k, v in out["params"].items()}
    if isinstance(out.get("transforms"), list):
        out["transforms"] = [[OLD_TRANSFORM_NAMES.get(s[0], s[0]), *s[1:]]
                             if isinstance(s, list) and s else s for s in out["transforms"]]
    for key in ("response", "focus"):
        if isinstance(out.get(key), str):
            out[key] = current_column_name(out[key])
    if isinstance(out.get("regressors"), list):
        out["regressors"] = [current_column_name(r) if isinstance(r, str) else r
                             for r in out["regressors"]]
    if out.get("estimator") in ("hc0", "hc1", "hc2", "hc3"):
        out["params"] = {"kind": out["estimator"]}
        out["estimator"] = "hc"
    return out


#: No table the loader accepts has more rows than this (its cell bound with one column): a
#: horizon or a tuning value beyond it can never fit any sample.
MAX_SAMPLE = MAX_CELLS


def _finite(value) -> bool:
    try:
        return math.isfinite(float(value))
    except (OverflowError, TypeError, ValueError):
        return False


def check_against_sample(settings: dict, nobs: int) -> None:
    """Refuse a settings record whose horizon, transforms or tuning value cannot fit a sample
    of `nobs` rows (DataError naming the value and T): a horizon needs T >= 2h, a look-ahead
    transform at least 2p rows, a tuning value (bandwidth, cosine terms, order) at most
    MAX_BANDWIDTH_OVER_T x T."""
    h = settings.get("horizon")
    if h is not None and 2 * h > nobs:
        raise DataError(f"settings: horizon h = {shown_number(h)} leaves too few observations "
                        f"for this data (T = {nobs}; an h-period response needs T >= 2h)")
    for kind, column, p in settings.get("transforms") or []:
        if transform_kind(kind) in AHEAD and 2 * p > nobs:
            raise DataError(f"settings: {kind} of {shown_number(p)} periods of '{column}' "
                            f"leaves too few rows for this data (T = {nobs})")
    top = MAX_BANDWIDTH_OVER_T * nobs
    values = [("value", settings.get("value"))] + [
        (name, v) for name, v in (settings.get("params") or {}).items()
        if name in ("bandwidth", "cosines", "max_order") and not isinstance(v, (str, bool))]
    for name, v in values:
        if v is not None and _finite(v) and float(v) > top:
            raise DataError(f"settings: {name} = {shown_number(v)} is beyond this data "
                            f"(T = {nobs}; at most {top:g})")


def validate_settings(data: dict) -> dict:
    unknown = sorted(set(data) - set(_FIELDS))
    if unknown:
        raise DataError(f"settings file has unknown entries: {', '.join(map(str, unknown[:5]))}")
    for key, (types, check) in _FIELDS.items():
        if key not in data:
            continue
        value = data[key]
        if isinstance(value, bool) and bool not in types:
            raise DataError(f"settings: '{key}' has the wrong type")
        if not isinstance(value, types):
            raise DataError(f"settings: '{key}' should be {' or '.join(t.__name__ for t in types)}")
        if isinstance(value, float) and not math.isfinite(value):
            raise DataError(f"settings: '{key}' must be a finite number")
        if isinstance(value, list) and any(isinstance(v, float) and not math.isfinite(v)
                                           for v in value):
            raise DataError(f"settings: '{key}' holds a number that is not finite")
        if isinstance(value, str) and len(value) > 500:
            raise DataError(f"settings: '{key}' is too long")
        if check == "names" and (len(value) > 200 or not all(isinstance(v, str) and len(v) < 500
                                                             for v in value)):
            raise DataError(f"settings: '{key}' must be a short list of column names")
        if check == "effects" and not all(v in ("entity", "time") for v in value):
            raise DataError("settings: 'effects' may hold 'entity' and 'time' only")
        if check == "positive" and value is not None and not 1 <= value <= MAX_SAMPLE // 2:
            raise DataError(f"settings: 'horizon' must be a whole number from 1 to "
                            f"{MAX_SAMPLE // 2:,} (half the rows of the largest table the "
                            f"loader accepts), got {shown_number(value)}")
        if check == "tuning" and value is not None and not (
                _finite(value) and 0 < value <= MAX_SAMPLE):
            raise DataError(f"settings: 'value' must be a positive number of at most "
                            f"{MAX_SAMPLE:,} (the rows of the largest table the loader "
                            f"accepts), got {shown_number(value)}")
        if check == "level" and not (_finite(value) and 0.5 <= float(value) < 1):
            raise DataError("settings: 'level' must be between 0.5 and 1")
        if check == "window" and value is not None and (
                len(value) != 2 or not all(isinstance(v, int) and not isinstance(v, bool)
                                           and abs(v) <= MAX_SAMPLE for v in value)):
            raise DataError("settings: 'window' must be two row positions")
        if check == "made_by" and not all(
                k in ("lagwise", "made", "data") and (isinstance(v, _SCALAR) or (
                    isinstance(v, dict) and all(isinstance(x, _SCALAR) for x in v.values())))
                for k, v in value.items()):
            raise DataError("settings: 'made_by' holds the version, the time and the data's "
                            "file, rows and hash only")
        if check == "transforms":
            if len(value) > 50:
                raise DataError("settings: at most 50 transforms")
            for step in value:
                if not (isinstance(step, list) and len(step) == 3 and isinstance(step[0], str)
                        and isinstance(step[1], str) and isinstance(step[2], int)
                        and not isinstance(step[2], bool)):
                    raise DataError("settings: each transform is [kind, column, periods]")
                if not 1 <= step[2] <= MAX_SAMPLE:
                    raise DataError(f"settings: the periods of a transform must be from 1 to "
                                    f"{MAX_SAMPLE:,}, got {shown_number(step[2])}")
                try:
                    transform_kind(step[0])
                except LagwiseError:
                    raise DataError(f"settings: unknown transform {step[0]!r}; known: "
                                    + ", ".join(TRANSFORMS)) from None
    if "reference" in data and data["reference"] not in REQUESTS:
        raise DataError(f"settings: unknown reference law {data['reference']!r}")
    if "estimator" in data:
        if data["estimator"] not in FAMILIES:
            raise DataError(f"settings: unknown estimator {data['estimator']!r}")
        params = data.get("params") or {}
        if not all(isinstance(v, _SCALAR) for v in params.values()):
            raise DataError("settings: estimator parameters must be plain values")
        try:
            estimator(data["estimator"], **params)
        except LagwiseError as exc:
            raise DataError(f"settings: {exc}") from None
        family = FAMILIES[data["estimator"]]
        rules = set(family.axis.rules) if family.axis else set()
        if data.get("rule", "fixed") not in rules | {"fixed"}:
            raise DataError(f"settings: rule {data.get('rule')!r} does not belong to "
                            f"{family.title}")
    if data.get("chart_mode", "t") not in ("t", "se", "ci", "estimate"):
        raise DataError("settings: 'chart_mode' is t, estimate, se or ci")
    if data.get("method", "2sls") not in METHODS:
        raise DataError(f"settings: unknown estimation method {data.get('method')!r}")
    return data
