"""Panels larger than memory, on Dask: exact sufficient statistics in a few passes.

`fit_panel` and `fit_fama_macbeth` accept a Dask DataFrame or a folder of Parquet files (read with
`dask.dataframe.read_parquet`, only the columns the model uses). The data never come back to the
client; each pass maps a function over the partitions and sums small arrays (a tree reduction in
the Dask graph), on a `dask.distributed` cluster when a Client is given or active, and on Dask's
local scheduler otherwise:

0. labels: the distinct entity and time labels (parsed and checked as in memory);
1. counts: rows per entity and per period, column sums, minima and maxima, per-group sums for the
   fixed effects, and a bitmap of the (entity, period) cells present (duplicates, balance, gaps);
2. cross products of the centred (or demeaned) columns, Z'Z, and the per-period cross products
   Fama-MacBeth needs;
3. with the coefficients: the residual sum of squares, sum g g', and the sums of the moment
   contributions per period (T_p x k) and per entity (G x k).

Every estimator that needs only these (classical, HC0/HC1, clustering by entity, time or both,
Driscoll-Kraay with any kernel and bandwidth rule, fixed-b, the bandwidth sweeps, Fama-MacBeth
with any time-series estimator) then runs locally on small arrays; the results equal the
in-memory path to rounding (tested to 1e-10).

Two-way fixed effects on an unbalanced panel: the passes demean by the larger dimension; the
other dimension's dummies are then projected out exactly by a system of its size built from the
cell incidence (Frisch-Waugh-Lovell), and the scores pass applies the same projection row by
row. Estimators that need more than sums run one further pass when first asked for, on the
client that fitted the panel: HC2/HC3 (each row's leverage in closed form: none with two-way
effects on an unbalanced panel, as in memory), CR2/CR3 by entity or period (per-cluster p x p
blocks; with absorbed effects only when they are nested in the clusters, since otherwise their
basis spans all rows: a typed error says so; two-way CR2/CR3 on pooled panels, whose cells are
single rows, use the HC2/HC3 sums), and entity clusters with a time kernel (the within-entity
lag products, partition by partition when no entity spans two partitions, after a shuffle of the
rows by entity otherwise). The wild cluster bootstrap and clustering by other columns need the
rows in memory.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import scipy.linalg as sla
from scipy import sparse

from ..errors import DataError, EstimationError, SpecificationError
from ..capabilities import Capabilities
from ..data.columns import INTERCEPT, SampleInfo, check_magnitudes, index_label
from ..data.dates import spacing_note
from ..data.panels import (PanelInfo, describe_effects, id_values, register_large_data,
                           time_values)
from ..models.base import MomentModel
from ..models.fama_macbeth import FamaMacBethFit, assemble_fama_macbeth
from ..covariance.fewclusters import blocks_from_sums
from ..data.groupings import Grouping
from ..models.panel import (ABSORBED_TOL, PanelRows, PeriodSums, compare_panel,
                            within_lag_products)


#: The counting pass keeps a map of the (entity, period) cells present (duplicates, balance):
#: at most this many cells (one byte each in a partition's pass, one bit once combined), checked
#: before the pass.
MAX_CELL_MAP = 100_000_000


def is_distributed(data) -> bool:
    """A Dask DataFrame, or a path to a folder (of Parquet files)."""
    if isinstance(data, (str, os.PathLike)):
        return Path(data).is_dir()
    mod = type(data).__module__ or ""
    return mod.startswith("dask") and hasattr(data, "map_partitions")


def _family(t) -> str:
    """A column type's kind, for comparing files: number, text, date, bool, null or the type."""
    if pa.types.is_dictionary(t):
        t = t.value_type
    if pa.types.is_integer(t) or pa.types.is_floating(t) or pa.types.is_decimal(t):
        return "number"
    if pa.types.is_string(t) or pa.types.is_large_string(t):
        return "text"
    if pa.types.is_timestamp(t) or pa.types.is_date(t):
        return "date"
    if pa.types.is_boolean(t):
        return "bool"
    if pa.types.is_null(t):
        return "null"
    return str(t)


def _dataset_files(path: Path) -> list[Path]:
    """The files a Parquet dataset read of the folder takes: every file whose path (inside the
    folder) has no part starting with '.' or '_' (Arrow's own rule), whatever its suffix."""
    return sorted(f for f in path.rglob("*") if f.is_file() and not any(
        part.startswith((".", "_")) for part in f.relative_to(path).parts))


def check_folder(path: Path, columns, numeric) -> list[Path]:
    """Every file of a Parquet folder checked before any pass: its footer readable, each of
    `columns` present (or a hive partition key in its path), the `numeric` columns numbers, and
    each column of one kind across the files. DataError names the file and the column."""
    files = _dataset_files(path)
    if not any(f.suffix in (".parquet", ".parq", ".pq") for f in files):
        raise DataError(f"folder {path} holds no Parquet files (*.parquet)")
    schemas = []
    for f in files:
        rel = f.relative_to(path)
        try:
            schemas.append((rel, pq.read_schema(f)))
        except Exception as exc:               # pyarrow raises several types for bad files
            raise DataError(f"'{rel}' in {path} is not a readable Parquet file (its footer "
                            f"cannot be read: {' '.join(str(exc).split())[:160]}); remove it "
                            "or replace it with a complete Parquet file") from None
    seen: dict[str, tuple[str, Path]] = {}
    for rel, schema in schemas:
        keys = {part.split("=", 1)[0] for part in rel.parts[:-1] if "=" in part}
        for c in columns:
            if c not in schema.names:
                if c in keys:
                    continue
                if not any(c in other.names for _, other in schemas):
                    raise SpecificationError(f"no column named '{c}'; available: "
                                             + ", ".join(schema.names[:20]))
                raise DataError(f"'{rel}' in {path} has no column '{c}' (its columns: "
                                + ", ".join(schema.names[:12]) + "); every file of the folder "
                                "needs the model's columns")
            kind = _family(schema.field(c).type)
            if c in numeric and kind not in ("number", "null"):
                raise DataError(f"column '{c}' of '{rel}' in {path} holds "
                                f"{schema.field(c).type}, not numbers")
            if kind == "null":
                continue
            first = seen.setdefault(c, (kind, rel))
            if first[0] != kind:
                raise DataError(f"column '{c}' holds {kind} values in '{rel}' but {first[0]} "
                                f"values in '{first[1]}' ({path}); every file needs the same "
                                "kind of values")
    return files


def _frame(data, columns, numeric=()):
    import dask.dataframe as dd
    if isinstance(data, (str, os.PathLike)):
        path = Path(data)
        check_folder(path, columns, numeric)
        try:
            ddf = dd.read_parquet(str(path))
        except Exception as exc:               # pyarrow and fsspec raise many kinds
            raise DataError(f"the Parquet files in {path} cannot be read: "
                            f"{' '.join(str(exc).split())[:300]}") from None
    else:
        ddf = data
    missing = [c for c in columns if c not in ddf.columns]
    if missing:
        raise SpecificationError(f"no column named '{missing[0]}'; available: "
                                 + ", ".join(map(str, list(ddf.columns)[:20])))
    for c in numeric:
        dtype = ddf.dtypes[c]
        if not (pd.api.types.is_numeric_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype)):
            raise DataError(f"column '{c}' holds {dtype} values, not numbers")
    return ddf[columns]


def _compute(client, *things):
    import dask
    try:
        if client is not None:
            futures = client.compute(list(things))
            return client.gather(futures)
        return dask.compute(*things)
    except (pa.ArrowException, OSError, EOFError) as exc:
        # the files were checked up front; a page damaged inside a file shows only here
        raise DataError(f"the data could not be read: {' '.join(str(exc).split())[:300]}") \
            from None


def _tree(delayed_parts, combine):
    """Pairwise reduction of delayed partition results inside the graph."""
    from dask import delayed            # optional heavy dependency: imported when used
    level = list(delayed_parts)
    if not level:
        raise DataError("the data have no partitions")
    while len(level) > 1:
        nxt = [delayed(combine, pure=True)(a, b) for a, b in zip(level[::2], level[1::2])]
        if len(level) % 2:
            nxt.append(level[-1])
        level = nxt
    return level[0]


def _add(a: dict, b: dict) -> dict:
    out = {}
    for key in a:
        if key == "bitmap":
            both = a[key] & b[key]
            out["duplicate"] = a.get("duplicate") or b.get("duplicate") or (
                _first_bit(both) if both.any() else None)
            out[key] = a[key] | b[key]
        elif key == "duplicate":
            continue
        elif key == "lo":
            out[key] = np.fmin(a[key], b[key])
        elif key == "hi":
            out[key] = np.fmax(a[key], b[key])
        else:
            out[key] = a[key] + b[key]
    return out


def _first_bit(packed: np.ndarray) -> int:
    return int(np.flatnonzero(np.unpackbits(packed))[0])


# --------------------------------------------------------------------------- passes

def _labels(part, entity, time):
    return {"entity": pd.unique(part[entity].dropna()), "time": pd.unique(part[time].dropna())}


def _merge_labels(a, b):
    return {k: pd.unique(np.concatenate([np.asarray(a[k], dtype=object),
                                         np.asarray(b[k], dtype=object)])) for k in a}


def _codes(part, col, lookup: pd.Index, codes: np.ndarray):
    ix = lookup.get_indexer(part[col])
    return np.where(ix >= 0, codes[np.maximum(ix, 0)], -1)


def _rows(part, spec):
    """Codes and values of the usable rows of one partition."""
    e = _codes(part, spec["entity"], spec["e_lookup"], spec["e_codes"])
    t = _codes(part, spec["time"], spec["t_lookup"], spec["t_codes"])
    v = np.empty((len(part), len(spec["cols"])))
    for j, c in enumerate(spec["cols"]):
        v[:, j] = part[c].to_numpy(dtype=float, na_value=np.nan)
    labelled = (e >= 0) & (t >= 0)
    finite = np.isfinite(v).all(axis=1)
    return e, t, v, labelled, finite


def _pass_counts(part, spec):
    e, t, v, labelled, finite = _rows(part, spec)
    g, tp = spec["n_entities"], spec["n_periods"]
    ok = labelled & finite
    inf = np.isinf(v).any(axis=0)
    e, t, v = e[ok], t[ok], v[ok]
    key = e * tp + t
    bitmap = np.zeros(g * tp, dtype=bool)
    bitmap[key] = True
    dup = None
    if key.size:
        uniq, counts = np.unique(key, return_counts=True)
        if (counts > 1).any():
            dup = int(uniq[np.argmax(counts > 1)])
    m = v.shape[1]
    out = {"n": np.array([ok.sum()]), "no_label": np.array([(~labelled).sum()]),
           "missing": np.array([(labelled & ~finite).sum()]), "inf": inf.astype(int),
           "sum": v.sum(axis=0), "lo": v.min(axis=0) if len(v) else np.full(m, np.inf),
           "hi": v.max(axis=0) if len(v) else np.full(m, -np.inf),
           "bitmap": np.packbits(bitmap), "duplicate": dup,
           "e_count": np.bincount(e, minlength=g), "t_count": np.bincount(t, minlength=tp),
           "e_parts": (np.bincount(e, minlength=g) > 0).astype(np.int64)}
    if "entity" in spec["effects"]:
        out["e_sum"] = np.column_stack([np.bincount(e, weights=v[:, j], minlength=g)
                                        for j in range(m)]) if m else np.zeros((g, 0))
    if "time" in spec["effects"]:
        out["t_sum"] = np.column_stack([np.bincount(t, weights=v[:, j], minlength=tp)
                                        for j in range(m)]) if m else np.zeros((tp, 0))
    return out


def _transformed(part, spec):
    """Compact codes and centred / demeaned values of one partition's usable rows (two-way
    effects on an unbalanced panel: demeaned by the larger dimension, then, once the small
    system is solved, the dummies of the other dimension projected out)."""
    e, t, v, labelled, finite = _rows(part, spec)
    ok = labelled & finite
    e, t, v = spec["e_compact"][e[ok]], spec["t_compact"][t[ok]], v[ok]
    eff = spec["effects"]
    if not eff:
        z = v - spec["mean"]
    elif eff == ("entity",):
        z = v - spec["e_mean"][e]
    elif eff == ("time",):
        z = v - spec["t_mean"][t]
    elif not spec.get("unbalanced"):
        z = v - spec["e_mean"][e] - spec["t_mean"][t] + spec["mean"]
    else:
        a, d = (e, t) if spec["a_dim"] == "entity" else (t, e)
        z = v - spec["a_mean"][a]
        if "gamma" in spec:
            z = z - spec["gamma"][d] + spec["gbar"][a]
    return e, t, v, z


def _pass_cross(part, spec):
    e, t, v, z = _transformed(part, spec)
    out = {"zz": z.T @ z, "centred_ss": ((v - spec["mean"]) ** 2).sum(axis=0)}
    if spec.get("unbalanced"):
        d, nd = (t, spec["n_periods_compact"]) if spec["a_dim"] == "entity" else \
            (e, spec["n_entities_compact"])
        out["d_sum"] = np.column_stack([np.bincount(d, weights=z[:, j], minlength=nd)
                                        for j in range(z.shape[1])])
    if spec.get("fama_macbeth"):
        out.update(_fm_sums(t, v - spec["mean"], spec["n_periods_compact"]))
    return out


def _fm_sums(t, w, n_periods):
    """Per-period rows, sums and cross products of the centred columns w (regressors, response)."""
    m = w.shape[1]
    iu = np.triu_indices(m)
    out = {"fm_n": np.bincount(t, minlength=n_periods).astype(float),
           "fm_sum": np.column_stack([np.bincount(t, weights=w[:, j], minlength=n_periods)
                                      for j in range(m)]),
           "fm_cross": np.column_stack([np.bincount(t, weights=w[:, a] * w[:, b],
                                                    minlength=n_periods)
                                        for a, b in zip(*iu)])}
    return out


def _scored(part, spec):
    """Codes, the design rows x_c (the constant and the centred or demeaned regressors) and the
    residuals of one partition's usable rows."""
    e, t, v, z = _transformed(part, spec)
    k_s = spec["n_slopes"]
    resid = z[:, -1] - z[:, :k_s] @ spec["slopes"]
    x = z[:, :k_s]
    if spec["intercept"]:
        x = np.column_stack([np.ones(len(resid)), x])
    return e, t, x, resid


def _pass_scores(part, spec):
    e, t, x, resid = _scored(part, spec)
    g = x * resid[:, None]
    m = g.shape[1]
    return {"ssr": np.array([resid @ resid]), "outer": g.T @ g,
            "t_sums": np.column_stack([np.bincount(t, weights=g[:, j],
                                                   minlength=spec["n_periods_compact"])
                                       for j in range(m)]),
            "e_sums": np.column_stack([np.bincount(e, weights=g[:, j],
                                                   minlength=spec["n_entities_compact"])
                                       for j in range(m)])}


def _grouped_cross(codes, x, n):
    """(n, k, k) sums of x_i x_i' within each group."""
    k = x.shape[1]
    out = np.empty((n, k, k))
    for a in range(k):
        for b in range(a, k):
            out[:, a, b] = np.bincount(codes, weights=x[:, a] * x[:, b], minlength=n)
            out[:, b, a] = out[:, a, b]
    return out


def _pass_extras(part, spec):
    """What leverage-based and within-entity estimators need, in one pass: the HC2 and HC3
    sums (rows' leverage in closed form), the per-cluster blocks of CR2 and CR3 (groupings with
    no absorbed effect outside them) and, when no entity spans partitions, the within-entity
    lag products."""
    e, t, x, resid = _scored(part, spec)
    out = {}
    if spec["hc"]:
        h = np.einsum("ij,jk,ik->i", x, spec["xx_inv"], x) + _dummy_leverage(e, t, spec)
        out["lev_max"] = np.array([h.max() if len(h) else -np.inf])
        for power in (1, 2):
            w = resid ** 2 / (1.0 - np.minimum(h, 1.0 - 1e-300)) ** power
            out[f"hc{power + 1}"] = (x * w[:, None]).T @ x
    for dim in spec["block_dims"]:
        codes, n = (e, spec["n_entities_compact"]) if dim == "entity" else \
            (t, spec["n_periods_compact"])
        out[f"W_{dim}"] = _grouped_cross(codes, x, n)
        out[f"qe_{dim}"] = np.column_stack([np.bincount(codes, weights=x[:, j] * resid,
                                                        minlength=n) for j in range(x.shape[1])])
        out[f"q1_{dim}"] = np.column_stack([np.bincount(codes, weights=x[:, j], minlength=n)
                                            for j in range(x.shape[1])])
        out[f"esum_{dim}"] = np.bincount(codes, weights=resid, minlength=n)
    if spec["lags"]:
        out["lags"] = _lags_of(e, t, x * resid[:, None], spec)
    return out


def _pass_lags(part, spec):
    """Within-entity lag products of a partition holding whole entities (after a shuffle)."""
    e, t, x, resid = _scored(part, spec)
    return {"lags": _lags_of(e, t, x * resid[:, None], spec)}


def _lags_of(e, t, g, spec):
    if not len(e):
        return np.zeros((spec["n_periods_compact"], g.shape[1], g.shape[1]))
    local, ents = pd.factorize(e)
    return within_lag_products(g, local.astype(np.int64), t, len(ents),
                               spec["n_periods_compact"])


def _dummy_leverage(e, t, spec):
    """The effects' part of each row's leverage (closed forms; see PanelFit)."""
    eff = spec["effects"]
    if not eff:
        return 0.0
    if eff == ("entity",):
        return 1.0 / spec["e_n"][e]
    if eff == ("time",):
        return 1.0 / spec["t_n"][t]
    return 1.0 / spec["n_periods_compact"] + 1.0 / spec["n_entities_compact"] - 1.0 / spec["n"]


def _map(ddf, func, spec):
    from dask import delayed
    spec_d = delayed(spec, pure=True, traverse=False)
    return _tree([delayed(func, pure=True)(p, spec_d) for p in ddf.to_delayed()], _add)


# --------------------------------------------------------------------------- shared preparation

def _prepare(data, response, regs, entity, time, effects, sample, client, fama_macbeth,
             progress=None):
    step = progress or (lambda done, total, what: None)
    cols = [*regs, response]
    ddf = _frame(data, [entity, time, *cols], numeric=cols)
    from dask import delayed
    step(0, 4, "reading the labels")
    parts = [delayed(_labels, pure=True)(p, entity, time) for p in ddf.to_delayed()]
    (labels,) = _compute(client, _tree(parts, _merge_labels))
    step(1, 4, "counting rows per entity and period")
    ent_raw = pd.Index(labels["entity"])
    tim_raw = pd.Index(labels["time"])
    ent_vals = id_values(pd.Series(ent_raw.to_numpy()), entity, "entity")
    tim_vals = time_values(pd.Series(tim_raw.to_numpy()), time)
    if not len(ent_vals):
        raise DataError(f"entity column '{entity}' has no values")
    e_codes, entities = pd.factorize(ent_vals, sort=True)
    t_codes, periods = pd.factorize(tim_vals, sort=True)
    keep_t = np.ones(len(periods), dtype=bool)
    if sample is not None:
        try:
            start, end = sample
            pv = pd.Series(periods)
            if start is not None:
                keep_t &= (pv >= (pd.Timestamp(start) if isinstance(periods, pd.DatetimeIndex)
                                  else start)).to_numpy()
            if end is not None:
                keep_t &= (pv <= (pd.Timestamp(end) if isinstance(periods, pd.DatetimeIndex)
                                  else end)).to_numpy()
        except (TypeError, ValueError) as exc:
            raise SpecificationError(f"sample window {sample!r} does not match the time column "
                                     f"'{time}': {exc}") from None
    t_codes = np.where(keep_t[t_codes], t_codes, -1)
    spec = {"entity": entity, "time": time, "cols": cols, "effects": effects,
            "e_lookup": ent_raw, "e_codes": e_codes.astype(np.int64),
            "t_lookup": tim_raw, "t_codes": t_codes.astype(np.int64),
            "n_entities": len(entities), "n_periods": len(periods)}
    cells = len(entities) * len(periods)
    if cells > MAX_CELL_MAP:
        raise EstimationError(
            f"the Dask path tracks each (entity, period) cell in a map of entities x periods: "
            f"{len(entities):,} x {len(periods):,} = {cells:,} cells, more than its budget of "
            f"{MAX_CELL_MAP:,} (a sparse panel); fit it in memory, where nothing is laid out "
            "on that grid")
    (counts,) = _compute(client, _map(ddf, _pass_counts, spec))
    n = int(counts["n"][0])
    for j in np.flatnonzero(counts["inf"]):
        raise DataError(f"column '{cols[j]}' contains infinite values")
    if n == 0:
        raise DataError("no rows have every value of the model and both panel labels")
    if counts["duplicate"] is not None:
        d = counts["duplicate"]
        raise DataError(f"entity {index_label(entities[d // len(periods)])!r} has two rows for "
                        f"period {index_label(periods[d % len(periods)])!s}; a panel needs one "
                        "row per entity and period. Aggregate or drop the duplicates.")
    present_e = counts["e_count"] > 0
    present_t = counts["t_count"] > 0
    if present_e.sum() < 2:
        raise SpecificationError("the panel has one entity only: panel estimators need several")
    if present_t.sum() < 2:
        raise SpecificationError("the panel has one period only: use a cross-sectional fit, or "
                                 "a time column with several periods")
    check_magnitudes(cols, counts["lo"], counts["hi"], None)
    spread = counts["hi"] - counts["lo"]
    if spread[-1] == 0:
        raise SpecificationError(f"response '{response}' is constant: nothing to explain")
    spec["e_compact"] = np.where(present_e, np.cumsum(present_e) - 1, -1)
    spec["t_compact"] = np.where(present_t, np.cumsum(present_t) - 1, -1)
    spec["n_entities_compact"] = int(present_e.sum())
    spec["n_periods_compact"] = int(present_t.sum())
    spec["mean"] = counts["sum"] / n
    bitmap = np.unpackbits(counts["bitmap"])[: len(entities) * len(periods)].astype(bool)
    cells = bitmap.reshape(len(entities), len(periods))[present_e][:, present_t]
    balanced = n == cells.shape[0] * cells.shape[1]
    spec["e_n"] = counts["e_count"][present_e].astype(float)
    spec["t_n"] = counts["t_count"][present_t].astype(float)
    spec["n"] = float(n)
    spec["entities_split"] = bool((counts["e_parts"][present_e] > 1).any())
    if "entity" in effects:
        spec["e_mean"] = counts["e_sum"][present_e] / counts["e_count"][present_e][:, None]
    if "time" in effects:
        spec["t_mean"] = counts["t_sum"][present_t] / counts["t_count"][present_t][:, None]
    if effects == ("entity", "time") and not balanced:
        # demean by the larger dimension exactly; the smaller one's dummies are projected out
        # after the cross products, by a system of its size (see _two_way_system)
        spec["unbalanced"] = True
        spec["a_dim"] = "entity" if cells.shape[0] >= cells.shape[1] else "time"
        spec["a_mean"] = spec["e_mean"] if spec["a_dim"] == "entity" else spec["t_mean"]
        small = min(cells.shape)
        if small > MAX_TWO_WAY_LEVELS or n * small > MAX_TWO_WAY_WORK:
            raise SpecificationError(
                f"two-way fixed effects on this unbalanced panel need a {small} x {small} "
                f"system built from {n:,} rows (about {n * small:.2g} operations, above the "
                "limit of the Dask path); use entity or time effects with clustering or "
                "Driscoll-Kraay for the other dimension, or fit in memory")
    info = SampleInfo(rows_available=n + int(counts["no_label"][0] + counts["missing"][0]),
                      rows_used=n, dropped_missing=int(counts["missing"][0]))
    if counts["no_label"][0]:
        info.notes.append(f"{int(counts['no_label'][0])} rows without an entity or time label "
                          "(or outside the sample window) dropped")
    if counts["missing"][0]:
        info.notes.append(f"{int(counts['missing'][0])} rows with missing values dropped")
    return ddf, spec, counts, cells, pd.Index(entities[present_e], name=entity), \
        pd.Index(periods[present_t], name=time), info


#: Two-way effects on an unbalanced panel: the smaller dimension's system is at most this large,
#: and building it at most this much work (rows times its size).
MAX_TWO_WAY_LEVELS = 4000
MAX_TWO_WAY_WORK = 5e10


def _two_way_system(cross, cells, spec):
    """Two-way within cross products on an unbalanced panel, exactly (Frisch-Waugh-Lovell):
    with A the dimension demeaned in the passes and D the other's dummies (L levels),
    D~ = M_A D, D~'D~ = diag(n_d) - C' diag(1/n_a) C (C the cell incidence, a x d), and for every
    column a~'b~ - (D~'a~)' (D~'D~)^+ (D~'b~). Returns (zz, gamma, gbar, rank of D~'D~):
    gamma = (D~'D~)^+ D~'z per level of D and gbar its mean over each A unit's cells, so a row's
    two-way within value is z - gamma[d] + gbar[a]."""
    C = cells if spec["a_dim"] == "entity" else cells.T
    C = C.astype(float)
    n_a = C.sum(axis=1)
    S = sparse.csr_matrix(C / np.sqrt(n_a)[:, None])
    dtd = np.diag(C.sum(axis=0)) - (S.T @ S).toarray()
    lam, vec = np.linalg.eigh(0.5 * (dtd + dtd.T))
    keep = lam > 1e-10 * max(float(lam.max()), 1e-300)
    pinv = (vec[:, keep] / lam[keep]) @ vec[:, keep].T
    d_sum = cross["d_sum"]
    gamma = pinv @ d_sum
    zz = cross["zz"] - d_sum.T @ gamma
    gbar = (C @ gamma) / n_a[:, None]
    return 0.5 * (zz + zz.T), gamma, gbar, int(keep.sum())


class _Structure(PanelInfo):
    """Panel structure known from the counts and the cell bitmap (no per-row codes)."""

    def __init__(self, cells: np.ndarray, **kw):
        super().__init__(entity_codes=np.zeros(0, dtype=np.int64),
                         time_codes=np.zeros(0, dtype=np.int64), **kw)
        self.cells = cells

    @property
    def counts(self):
        return self.cells.sum(axis=1)

    @property
    def period_counts(self):
        return self.cells.sum(axis=0)

    @property
    def balanced(self):
        return bool(self.cells.all())

    @property
    def entities_with_gaps(self):
        has = self.cells
        first = has.argmax(axis=1)
        last = has.shape[1] - 1 - has[:, ::-1].argmax(axis=1)
        return int(np.sum(last - first + 1 > has.sum(axis=1)))


# --------------------------------------------------------------------------- the fitted summary

class PanelSummaryFit(MomentModel):
    """A panel fitted on Dask: coefficients and the grouped sums of the moment contributions,
    without the rows. Offers the panel interface (`group_sums`, `outer`, `period_model`) so the
    panel and time-series estimators run as in memory."""

    kind = "panel least squares (Dask)"
    df_reason = "N - K"
    kernel_family = "driscoll_kraay"

    @property
    def capabilities(self) -> Capabilities:
        """A panel's grouped sums without its rows (no residual diagnostics): leverage in
        closed form (not for two-way effects on an unbalanced panel), clusters by entity and
        period with the per-cluster blocks of CR2 and CR3 from a further pass."""
        return Capabilities(panel=True, rows=False, design=True, least_squares=True,
                            leverage=self._leverage_closed, clusters=("entity", "time"),
                            cluster_leverage=True)

    def __init__(self, *, beta, terms, response, nobs, panel, sample, gram, mean_x, intercept,
                 ssr, outer_c, t_sums_c, e_sums_c, tss, fm=None, source=None):
        self._init_model()
        #: (Dask DataFrame, pass specification, client) for the passes that leverage and
        #: within-entity estimators need, run when first asked for (`_extras`)
        self._source = source
        self._leverage_closed = not (len(panel.effects) == 2 and not panel.balanced)
        self.beta = beta
        self.terms = list(terms)
        self.response = response
        self.nobs = int(nobs)
        self.k = len(terms)
        self.panel = panel
        self.sample = sample
        self.index = pd.RangeIndex(0)
        self.horizon = None
        self.table = None
        self.resid = None
        self.leverage = None
        self._ssr = float(ssr)
        self._tss = float(tss)
        self._fm = fm
        # centred design: the constant and the centred (or demeaned) regressors; original
        # design X = X_c A with A = [[1, mean'], [0, I]] when there is an intercept
        c_gram = np.zeros((self.k, self.k))
        if intercept:
            c_gram[0, 0] = nobs
            c_gram[1:, 1:] = gram
        else:
            c_gram[:] = gram
        scale = np.sqrt(np.diag(c_gram))
        r = sla.cholesky(c_gram / np.outer(scale, scale), lower=False) * scale[None, :]
        inv_r = sla.solve_triangular(r, np.eye(self.k))
        a_inv = np.eye(self.k)
        basis_a = np.eye(self.k)
        if intercept:
            a_inv[0, 1:] = -mean_x
            basis_a[0, 1:] = mean_x
        self._inv_c = inv_r                       # working row = centred contribution @ R^-1
        self._influence = a_inv @ inv_r           # beta = A^-1 beta_c
        self._basis_c = r                         # centred contribution = working @ R
        self._a = basis_a                         # x = A' x_c
        w = lambda s: s @ inv_r                    # noqa: E731
        self._outer_w = inv_r.T @ outer_c @ inv_r
        self._sums = {"time": w(t_sums_c), "entity": w(e_sums_c)}

    # panel interface
    def group_sums(self, dim):
        if dim not in self._sums:
            raise SpecificationError(f"group by 'entity' or 'time', not {dim!r}")
        return self._sums[dim]

    def outer(self):
        return self._outer_w

    @property
    def period_model(self):
        return self.caches.get("period_model", lambda: PeriodSums(self, self._sums["time"]))

    # ------------------------------------------------------------------ further passes
    def _pass(self, func, what, data=None, extra=None):
        if self._source is None:
            raise EstimationError(f"{what} needs a further pass over the data, which this fit "
                                  "no longer has; fit again")
        ddf, spec, client = self._source
        if client is not None and getattr(client, "status", "running") != "running":
            raise EstimationError(f"{what} needs a further pass over the data, and the Dask "
                                  "client that fitted this panel is closed; fit again with an "
                                  "open client")
        (out,) = _compute(client, _map(ddf if data is None else data, func,
                                       {**spec, **(extra or {})}))
        return out

    def _extras(self) -> dict:
        """One pass for HC2/HC3, the CR2/CR3 blocks and (entities within partitions) the
        within-entity lag products; computed once."""
        def build():
            _, spec, _ = self._source if self._source is not None else (None, {}, None)
            dims = [d for d in ("entity", "time") if self.effects_nested_in(d)
                    or not self.panel.effects]
            k = self.k
            c_gram = np.linalg.inv(self._basis_c.T @ self._basis_c)
            return self._pass(_pass_extras, "this estimator", extra={
                "hc": self._leverage_closed, "xx_inv": c_gram, "block_dims": dims,
                "lags": not spec.get("entities_split", True), "k": k})
        return self.caches.get("extras", build)

    def leverage_outer(self, power: int) -> np.ndarray:
        if not self._leverage_closed:
            raise EstimationError("HC2/HC3 need each row's leverage, which has no closed form "
                                  "with two-way effects on an unbalanced panel")
        ex = self._extras()
        if ex["lev_max"][0] > 1.0 - 1e-10:
            raise EstimationError(f"HC{power + 1} is undefined: some observations have leverage "
                                  "1 (each is fitted exactly); use HC0/HC1")
        return self._inv_c.T @ ex[f"hc{power + 1}"] @ self._inv_c

    def effects_nested_in(self, name: str) -> bool:
        return tuple(self.panel.effects) == (name,)

    def grouping(self, name: str) -> Grouping:
        if name not in ("entity", "time"):
            return super().grouping(name)
        labels = self.panel.entities if name == "entity" else self.panel.periods
        return Grouping(name, np.zeros(0, dtype=np.int64), labels)

    def cluster_design(self):
        raise EstimationError("this needs the rows of the panel (the wild cluster bootstrap, "
                              "CR2/CR3 with effects outside the clusters), which the Dask path "
                              "does not gather; fit in memory")

    def cluster_blocks(self, name: str):
        """Per-cluster blocks of CR2/CR3 by entity or period, from the further pass; refused
        with absorbed effects not nested in the clusters (their basis spans all rows)."""
        if name not in ("entity", "time"):
            raise EstimationError(f"CR2/CR3 by {name!r} are not available on the Dask path")
        if self.panel.effects and not self.effects_nested_in(name):
            raise EstimationError(
                f"CR2/CR3 clustered by {name} with {' and '.join(self.panel.effects)} effects "
                "need the effects' basis over all rows (the effects are not nested in the "
                "clusters; Pustejovsky & Tipton 2018), which the Dask path does not gather; use "
                "CR1, cluster by the effects' own dimension, or fit in memory")

        def build():
            ex = self._extras()
            inv = self._inv_c
            W = np.einsum("ai,gab,bj->gij", inv, ex[f"W_{name}"], inv)
            counts = self.panel.counts if name == "entity" else self.panel.period_counts
            return blocks_from_sums(self.grouping(name), W, ex[f"qe_{name}"] @ inv,
                                    ex[f"q1_{name}"] @ inv, ex[f"esum_{name}"], self._ssr,
                                    self.nobs, counts, nested=list(self.panel.effects))
        return self.caches.get(f"cluster_blocks_{name}", build)

    def cluster_meat(self, name: str, correction: str) -> np.ndarray:
        """The cells of entities and periods are single rows: their CR2 / CR3 term is the
        HC2 / HC3 sum (the row's leverage with the effects, in closed form)."""
        if name == PanelRows.CELLS:
            return self.leverage_outer(1 if correction == "cr2" else 2)
        return super().cluster_meat(name, correction)

    def within_lags(self):
        """sum_i sum_t g_it g_i,t-j' (working basis): in the further pass when no entity spans
        partitions, otherwise after a shuffle of the rows by entity."""
        def build():
            ddf, spec, _ = self._source if self._source is not None else (None, {}, None)
            if self._source is not None and not spec.get("entities_split", True):
                lags = self._extras()["lags"]
            else:
                shuffled = ddf.shuffle(on=spec["entity"]) if ddf is not None else None
                lags = self._pass(_pass_lags, "entity clusters + a time kernel",
                                  data=shuffled)["lags"]
            inv = self._inv_c
            return np.einsum("ai,jab,bk->jik", inv, lags, inv)
        return self.caches.get("within_lags", build)

    @property
    def working_basis(self):
        """Original contributions x e from working ones: (working @ R) @ A."""
        return self._basis_c @ self._a

    @property
    def influence_map(self):
        return self._influence

    # what the row-based parts of the protocol would need
    @property
    def working_contributions(self):
        raise EstimationError("the moment contributions of every row are not gathered on the "
                              "Dask path; this estimator needs them")

    @property
    def working_design(self):
        raise EstimationError("the regression design is not gathered on the Dask path; use "
                              "classical, HC0/HC1, clustering or Driscoll-Kraay")

    def homoskedastic_long_run(self):
        return self.sigma2 * np.eye(self.k) / self.nobs

    def fits_exactly(self) -> bool:
        return self._ssr <= 1e-24 * max(self._tss, 1e-300)

    @property
    def ssr(self):
        return self._ssr

    @property
    def df_resid(self):
        return self.nobs - self.k - self.panel.absorbed

    @property
    def r_squared(self):
        return 1.0 - self._ssr / self._tss if self._tss > 0 else float("nan")

    def describe_method(self):
        p = self.panel
        text = describe_effects(p.effects, p.absorbed, p.components, p.iterations, p.balanced)
        if len(p.effects) == 2 and not p.balanced:
            a = self._source[1]["a_dim"] if self._source is not None else "entity"
            d = "time" if a == "entity" else "entity"
            text = (f"entity and time fixed effects removed exactly: demeaning by {a}, then the "
                    f"{d} dummies projected out by a system of their size; {p.absorbed} degrees "
                    "of freedom absorbed by the effects, counted in N - K")
        return text + "; fitted on Dask from sufficient statistics"

    def fama_macbeth(self):
        if self._fm is None:
            raise EstimationError("Fama-MacBeth sums were not gathered for this fit")
        return self._fm

    def compare(self, level=0.95, reference="auto", fama_macbeth=True, **kwargs):
        return compare_panel(self, level, reference, fama_macbeth, **kwargs)

    def __repr__(self):
        p = self.panel
        return (f"PanelSummaryFit(response={self.response!r}, terms={self.terms}, N={self.nobs}, "
                f"entities={p.n_entities}, periods={p.n_periods}, effects={p.effects})")


def _fm_from_sums(sums, periods, terms, regs, response, mean, intercept, sample, panel=None):
    """Fama-MacBeth from per-period counts, sums and cross products of the centred columns."""
    n_t, s, cross = sums["fm_n"], sums["fm_sum"], sums["fm_cross"]
    m = s.shape[1]
    k_s = m - 1
    k = k_s + int(intercept)
    iu = np.triu_indices(m)
    rows, labels, counts, skipped = [], [], [], {}
    for p in range(len(periods)):
        label = index_label(periods[p])
        n = n_t[p]
        if n < k:
            skipped[label] = f"{int(n)} rows for {k} coefficients"
            continue
        c = np.zeros((m, m))
        c[iu] = cross[p]
        c = c + np.triu(c, 1).T
        if intercept:
            mu = s[p] / n
            c = c - n * np.outer(mu, mu)           # within-period centred cross products
        sxx, sxy = c[:k_s, :k_s], c[:k_s, k_s]
        d = np.sqrt(np.diag(sxx))
        if (d == 0).any():
            skipped[label] = "a regressor is constant throughout the period"
            continue
        scaled = sxx / np.outer(d, d)
        ev = np.linalg.eigvalsh(scaled)
        if ev[0] <= 1e-10 * ev[-1]:
            skipped[label] = "regressors are collinear within the period"
            continue
        slope = np.linalg.solve(scaled, sxy / d) / d
        if intercept:
            mu_orig = mu + mean
            coef = np.r_[mu_orig[k_s] - mu_orig[:k_s] @ slope, slope]
        else:
            # uncentred model on shifted columns: solve in original coordinates
            raw = c + (np.outer(s[p], mean) + np.outer(mean, s[p]) + n * np.outer(mean, mean))
            coef = np.linalg.solve(raw[:k_s, :k_s], raw[:k_s, k_s])
        rows.append(coef)
        labels.append(periods[p])
        counts.append(int(n))
    return assemble_fama_macbeth(rows, labels, counts, skipped, periods, terms, response,
                                 sample, panel)


def fit_panel_distributed(data, response, regs, entity, time, effects=(), intercept=True,
                          sample=None, client=None, fama_macbeth=True,
                          progress=None, clusters=None) -> PanelSummaryFit:
    """`fit_panel` on a Dask DataFrame or a Parquet folder (see the module docstring).
    progress(done, total, what) is called before each pass over the data."""
    if clusters:
        raise SpecificationError(f"clustering by a column ({clusters!r}) is not offered on the "
                                 "Dask path: it clusters by entity, by period or both; fit in "
                                 "memory to cluster by another grouping")
    step = progress or (lambda done, total, what: None)
    ddf, spec, counts, cells, entities, periods, info = _prepare(
        data, response, regs, entity, time, effects, sample, client, fama_macbeth, progress)
    k_s = len(regs)
    spec["fama_macbeth"] = fama_macbeth
    step(2, 4, "cross products")
    (cross,) = _compute(client, _map(ddf, _pass_cross, spec))
    zz = cross["zz"]
    rank = None
    if spec.get("unbalanced"):
        zz, spec["gamma"], spec["gbar"], rank = _two_way_system(cross, cells, spec)
    before, after = np.sqrt(cross["centred_ss"]), np.sqrt(np.diag(zz))
    if effects:
        gone = [j for j in range(k_s) if after[j] <= ABSORBED_TOL * max(before[j], 1e-300)]
        if gone:
            names = ", ".join(f"'{regs[j]}'" for j in gone)
            raise SpecificationError(f"regressor {names} does not vary within "
                                     f"{'entities' if effects == ('entity',) else 'periods'}: "
                                     f"it is absorbed by the {' and '.join(effects)} fixed "
                                     "effects. Remove it, or drop those effects.")
    for j in range(k_s):
        if before[j] == 0 and (intercept or effects):
            raise SpecificationError(f"regressor '{regs[j]}' is constant; remove it")
    gram, xy = zz[:k_s, :k_s], zz[:k_s, k_s]
    if k_s:
        d = np.sqrt(np.diag(gram))
        try:
            chol = sla.cho_factor(gram / np.outer(d, d))
        except np.linalg.LinAlgError:
            raise SpecificationError("regressors are collinear (after centring or demeaning); "
                                     "drop one of them") from None
        cond = np.linalg.cond(gram / np.outer(d, d))
        if cond > 1e12:
            raise SpecificationError("regressors are collinear (after centring or demeaning); "
                                     "drop one of them")
        slopes = sla.cho_solve(chol, xy / d) / d
    else:
        slopes = np.zeros(0)
    mean = spec["mean"]
    g_e, g_t = len(entities), len(periods)
    absorbed = {(): 0, ("entity",): g_e, ("time",): g_t}.get(effects, g_e + g_t - 1)
    components = 1
    if rank is not None:
        big = g_e if spec["a_dim"] == "entity" else g_t
        absorbed = big + rank
        components = g_e + g_t - absorbed
    n = int(counts["n"][0])
    k = k_s + int(intercept)
    if n <= k + absorbed:
        raise SpecificationError(f"{n} rows are too few for {k} coefficients and {absorbed} "
                                 "effect parameters")
    spec.update(slopes=slopes, n_slopes=k_s, intercept=intercept, fama_macbeth=False)
    step(3, 4, "sums of the moment contributions")
    (scores,) = _compute(client, _map(ddf, _pass_scores, spec))
    step(4, 4, "done")
    beta = np.r_[mean[k_s] - mean[:k_s] @ slopes, slopes] if intercept else slopes
    panel = _Structure(cells, entity=entity, time=time, entities=entities, periods=periods,
                       effects=effects, absorbed=absorbed, components=components, iterations=0)
    note = spacing_note(periods)
    if note:
        panel.notes.append(note)
    info.first, info.last = index_label(periods[0]), index_label(periods[-1])
    info.notes.extend(panel.describe())
    terms = ([INTERCEPT] if intercept else []) + list(regs)
    fm = None
    if fama_macbeth:
        try:
            fm = _fm_from_sums(cross, periods, [INTERCEPT] + list(regs), regs, response, mean,
                               True, info, panel)
        except SpecificationError:
            fm = None
    fit = PanelSummaryFit(beta=beta, terms=terms, response=response, nobs=n, panel=panel,
                          sample=info, gram=gram, mean_x=mean[:k_s], intercept=intercept,
                          ssr=scores["ssr"][0], outer_c=scores["outer"],
                          t_sums_c=scores["t_sums"], e_sums_c=scores["e_sums"],
                          tss=zz[k_s, k_s], fm=fm, source=(ddf, spec, client))
    if effects:
        fit.sample.notes.append(fit.describe_method())
    return fit


def fit_fama_macbeth_distributed(data, response, regs, entity, time, intercept=True,
                                 sample=None, client=None, progress=None) -> FamaMacBethFit:
    """`fit_fama_macbeth` on a Dask DataFrame or a Parquet folder: one pass for the labels, one
    for counts and means, one for the per-period cross products."""
    ddf, spec, counts, cells, entities, periods, info = _prepare(
        data, response, regs, entity, time, (), sample, client, True, progress)
    spec["fama_macbeth"] = True
    (cross,) = _compute(client, _map(ddf, _pass_cross, spec))
    info.first, info.last = index_label(periods[0]), index_label(periods[-1])
    structure = _Structure(cells, entity=entity, time=time, entities=entities, periods=periods)
    info.notes.extend(structure.describe())
    terms = ([INTERCEPT] if intercept else []) + list(regs)
    return _fm_from_sums(cross, periods, terms, regs, response, spec["mean"], intercept, info)


register_large_data(is_distributed, {"panel": fit_panel_distributed,
                                     "fama_macbeth": fit_fama_macbeth_distributed})
