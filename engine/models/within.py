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


def within(values, e_codes, t_codes, g, t, effects):
    """The within transformation of every column; returns (transformed, absorbed df,
    components, sweeps of alternating projections)."""
    if not effects:
        return values, 0, 1, 0
    ce = np.bincount(e_codes, minlength=g).astype(float)
    ct = np.bincount(t_codes, minlength=t).astype(float)
    if effects == ("entity",):
        return values - _group_means(values, e_codes, g, ce)[e_codes], g, 1, 0
    if effects == ("time",):
        return values - _group_means(values, t_codes, t, ct)[t_codes], t, 1, 0
    comps = _components(e_codes, t_codes, g, t)
    absorbed = g + t - comps
    if values.shape[0] == g * t:                          # balanced: closed form
        out = values - _group_means(values, e_codes, g, ce)[e_codes]
        out -= _group_means(out, t_codes, t, ct)[t_codes]
        return out, absorbed, comps, 0
    out = values - _group_means(values, e_codes, g, ce)[e_codes]
    scale = np.maximum(np.abs(values).max(axis=0), np.finfo(float).tiny)
    for it in range(1, PROJECTION_MAX_ITER + 1):
        step = _group_means(out, t_codes, t, ct)
        out -= step[t_codes]
        step_e = _group_means(out, e_codes, g, ce)
        out -= step_e[e_codes]
        if np.all(np.abs(step).max(axis=0) <= PROJECTION_TOL * scale) and \
                np.all(np.abs(step_e).max(axis=0) <= PROJECTION_TOL * scale):
            return out, absorbed, comps, it
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
