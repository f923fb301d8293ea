"""The within transformation of a panel: demeaning by entity, by period, or both (closed form on
a balanced panel, alternating projections otherwise), with the degrees of freedom it absorbs."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from ..errors import EstimationError, SpecificationError

EFFECTS = ("entity", "time")


#: Alternating projections stop when the largest change is below this fraction of the scale.
PROJECTION_TOL = 1e-13

PROJECTION_MAX_ITER = 10_000


def _group_means(values, codes, n_groups, counts):
    out = np.empty((n_groups, values.shape[1]))
    for j in range(values.shape[1]):
        out[:, j] = np.bincount(codes, weights=values[:, j], minlength=n_groups)
    return out / counts[:, None]


def _components(e_codes, t_codes, g, t) -> int:
    n = e_codes.size
    graph = coo_matrix((np.ones(n), (e_codes, g + t_codes)), shape=(g + t, g + t))
    return int(connected_components(graph, directed=False)[0])


@dataclass
class Within:
    """The within-transformed block and what the fit needs to know about it."""

    values: np.ndarray               # transformed columns (column-major)
    absorbed: int                    # effect parameters absorbed (degrees of freedom)
    components: int = 1              # connected components of the entity-period graph
    iterations: int = 0              # sweeps of alternating projections (0: closed form)
    between: np.ndarray | None = None   # per column: sum of squares removed about the mean
    squares: np.ndarray | None = None   # per column: sum of squares of the transformed values
    lo: np.ndarray | None = None     # per column: smallest and largest transformed value
    hi: np.ndarray | None = None


def within(values, e_codes, t_codes, g, t, effects, grid=None) -> Within:
    """The within transformation of every column, column by column into one column-major
    result. `grid` = (entities, periods) when the rows are a balanced panel in (entity, period)
    order: each column reshapes to that grid and the group means are its row and column means.
    Also returns each column's sum of squares removed about its mean (so the total sum of
    squares is the within one plus it: no second pass over the data) and the transformed
    columns' ranges (taken while each column is in cache)."""
    if not effects:
        return Within(values, 0)
    if len(effects) == 2:
        comps = _components(e_codes, t_codes, g, t)
        absorbed = g + t - comps
    else:
        comps, absorbed = 1, (g if effects == ("entity",) else t)
    if grid is None and len(effects) == 2 and values.shape[0] != g * t:
        return _alternating_projections(values, e_codes, t_codes, g, t, absorbed, comps)
    m = values.shape[1]
    out = np.empty(values.shape, order="F")
    between, squares, lo, hi = np.zeros(m), np.empty(m), np.empty(m), np.empty(m)
    ce = np.bincount(e_codes, minlength=g).astype(float) if grid is None else None
    ct = np.bincount(t_codes, minlength=t).astype(float) if grid is None else None
    n = values.shape[0]
    for j in range(m):
        col = out[:, j]
        if grid is not None:
            v, w = values[:, j].reshape(grid), col.reshape(grid)
            axis = 1 if "entity" in effects else 0
            means = v.mean(axis=axis, keepdims=True)
            np.subtract(v, means, out=w)
            centre = means.mean()
            between[j] = grid[axis] * float(((means - centre) ** 2).sum())
            if len(effects) == 2:
                step = w.mean(axis=0, keepdims=True)
                w -= step
                between[j] += grid[0] * float((step ** 2).sum())
        else:
            codes, counts, size = ((e_codes, ce, g) if "entity" in effects else (t_codes, ct, t))
            means = np.bincount(codes, weights=values[:, j], minlength=size) / counts
            np.subtract(values[:, j], means[codes], out=col)
            centre = float(counts @ means) / n
            between[j] = float(counts @ (means - centre) ** 2)
            if len(effects) == 2:                          # balanced: closed form
                step = np.bincount(t_codes, weights=col, minlength=t) / ct
                col -= step[t_codes]
                between[j] += float(ct @ step ** 2)
        lo[j], hi[j], squares[j] = col.min(), col.max(), col @ col
    return Within(out, absorbed, comps, 0, between, squares, lo, hi)


def _alternating_projections(values, e_codes, t_codes, g, t, absorbed, comps):
    """Demeaning by entity and period on an unbalanced panel (alternating projections)."""
    ce = np.bincount(e_codes, minlength=g).astype(float)
    ct = np.bincount(t_codes, minlength=t).astype(float)
    out = values - _group_means(values, e_codes, g, ce)[e_codes]
    scale = np.maximum(np.abs(values).max(axis=0), np.finfo(float).tiny)
    for it in range(1, PROJECTION_MAX_ITER + 1):
        step = _group_means(out, t_codes, t, ct)
        out -= step[t_codes]
        step_e = _group_means(out, e_codes, g, ce)
        out -= step_e[e_codes]
        if np.all(np.abs(step).max(axis=0) <= PROJECTION_TOL * scale) and \
                np.all(np.abs(step_e).max(axis=0) <= PROJECTION_TOL * scale):
            centred = values - values.mean(axis=0)
            squares = (out ** 2).sum(axis=0)
            between = np.maximum((centred ** 2).sum(axis=0) - squares, 0.0)
            return Within(np.asfortranarray(out), absorbed, comps, it, between, squares,
                          out.min(axis=0), out.max(axis=0))
    raise EstimationError(f"demeaning by entity and period did not converge in "
                          f"{PROJECTION_MAX_ITER} sweeps of alternating projections (the panel "
                          "is very unbalanced or weakly connected); use one set of effects")


def effects_of(effects) -> tuple:
    if effects is None or effects == "none" or effects == ():
        return ()
    if isinstance(effects, str):
        effects = {"both": EFFECTS, "two-way": EFFECTS}.get(effects, (effects,))
    out = tuple(e for e in EFFECTS if e in set(effects))
    unknown = set(effects) - set(EFFECTS)
    if unknown:
        raise SpecificationError("effects must be 'entity', 'time' or both, not "
                                 + ", ".join(repr(u) for u in sorted(map(str, unknown))))
    return out
