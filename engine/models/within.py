"""The within transformation of a panel: demeaning by entity, by period, or both (closed form on
a balanced panel, alternating projections otherwise), with the degrees of freedom it absorbs."""

from __future__ import annotations

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


def within(values, e_codes, t_codes, g, t, effects, grid=None):
    """The within transformation of every column; returns (transformed, absorbed df,
    components, sweeps of alternating projections). Column by column into one column-major
    result; `grid` = (entities, periods) when the rows are a balanced panel in (entity, period)
    order, where each column reshapes to that grid and group means are row or column means."""
    if not effects:
        return values, 0, 1, 0
    if len(effects) == 2:
        comps = _components(e_codes, t_codes, g, t)
        absorbed = g + t - comps
    else:
        comps, absorbed = 1, (g if effects == ("entity",) else t)
    if grid is None and len(effects) == 2 and values.shape[0] != g * t:
        return _alternating_projections(values, e_codes, t_codes, g, t, absorbed, comps)
    out = np.empty(values.shape, order="F")
    if grid is not None:
        for j in range(values.shape[1]):
            v, w = values[:, j].reshape(grid), out[:, j].reshape(grid)
            if "entity" in effects:
                np.subtract(v, v.mean(axis=1, keepdims=True), out=w)
                if "time" in effects:
                    w -= w.mean(axis=0, keepdims=True)
            else:
                np.subtract(v, v.mean(axis=0, keepdims=True), out=w)
        return out, absorbed, comps, 0
    ce = np.bincount(e_codes, minlength=g).astype(float)
    ct = np.bincount(t_codes, minlength=t).astype(float)
    for j in range(values.shape[1]):
        col = out[:, j]
        if "entity" in effects:
            means = np.bincount(e_codes, weights=values[:, j], minlength=g) / ce
            np.subtract(values[:, j], means[e_codes], out=col)
            if "time" in effects:                          # balanced: closed form
                col -= (np.bincount(t_codes, weights=col, minlength=t) / ct)[t_codes]
        else:
            means = np.bincount(t_codes, weights=values[:, j], minlength=t) / ct
            np.subtract(values[:, j], means[t_codes], out=col)
    return out, absorbed, comps, 0


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
            return np.asfortranarray(out), absorbed, comps, it
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
        raise SpecificationError(f"effects must be 'entity', 'time' or both, not "
                                 + ", ".join(repr(u) for u in sorted(map(str, unknown))))
    return out
