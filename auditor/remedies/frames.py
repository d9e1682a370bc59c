"""The target search over several frames of one geometry (a scan or a trajectory): one kept
set whose overlap meets the target in every frame.

For one frame these are the searches of `subset` unchanged. For several, with the frames
ordered worst first (smallest eigenvalue of the full basis first):

1. the worst frame's kept set, by `subset.select_for_target` (or seeded from the
   function-level set, `shells_from_functions`);
2. each further frame whose overlap on that set falls below the target restricts it by the
   same search on its own overlap, inside the set (a subset meets the target in every frame
   that the set met, by Cauchy interlacing, so one pass over the frames suffices);
3. the units left out are offered back one by one and kept when every frame's overlap still
   meets the target (one incremental Cholesky factor per frame);
4. every frame's smallest eigenvalue is checked, and the last units added back are removed
   again if rounding let a frame slip below the target.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence

import numpy as np
import scipy.linalg

from ..numerics.cholesky import CholeskyResult, smallest_eigenvalue
from .subset import TARGET_SLACK, Selection, add_back, extend_rows, select_for_target, shells_from_functions


def _renumbered(units: np.ndarray) -> np.ndarray:
    return np.unique(units, return_inverse=True)[1].astype(np.int64)


def joint_select(
    Ss: Sequence[np.ndarray],
    target: float,
    units: np.ndarray | None,
    atoms: np.ndarray,
    verify: str = "eigvalsh",
    pivoted: CholeskyResult | None = None,
) -> Selection:
    """The longest kept set (functions, or whole ``units``) meeting ``target`` in every frame
    of ``Ss`` (worst frame first); raises UsageError as `select_for_target` does.
    ``pivoted``: the first frame's shift-pivoted factorization at ``target``, if made already."""
    first = select_for_target(Ss[0], target, units, atoms, verify=verify, pivoted=pivoted)
    if len(Ss) == 1:
        return first
    kept = first.kept
    steps = [first]
    for S in Ss[1:]:
        if smallest_eigenvalue(S, kept) >= target * (1.0 - TARGET_SLACK):
            continue
        sub_units = None if units is None else _renumbered(units[kept])
        sub = select_for_target(S[np.ix_(kept, kept)], target, sub_units, atoms[kept], verify=verify)
        kept = kept[sub.kept]
        steps.append(sub)
    return _joint_finish(Ss, target, kept, units, first, sum(s.factorizations for s in steps))


def joint_shells_from_functions(
    Ss: Sequence[np.ndarray], functions: Selection, units: np.ndarray, verify: str = "eigvalsh", consume: bool = False
) -> Selection | None:
    """`shells_from_functions` for every frame: the units none of whose functions the joint
    function-level set drops, then the others offered back (None when no unit is clean;
    ``consume``: ``functions.factor`` may be used up)."""
    if len(Ss) == 1:
        return shells_from_functions(Ss[0], functions, units, verify=verify, consume=consume)
    bad = set(units[functions.dropped].tolist())
    keep = np.array([u not in bad for u in units])
    if not keep.any():
        return None
    seed = dataclasses.replace(functions, search="from-functions")
    return _joint_finish(Ss, functions.target, np.flatnonzero(keep), units, seed, functions.factorizations)


def _joint_finish(
    Ss: Sequence[np.ndarray],
    target: float,
    kept: np.ndarray,
    units: np.ndarray | None,
    first: Selection,
    factorizations: int,
) -> Selection:
    """Offer back the units left out of ``kept`` (ascending), check every frame, assemble."""
    goal = target * (1.0 - TARGET_SLACK)
    n = Ss[0].shape[0]
    unit_of = np.arange(n) if units is None else np.asarray(units)
    out = np.setdiff1d(np.arange(n), kept)
    groups = [out[unit_of[out] == u] for u in dict.fromkeys(unit_of[out].tolist())]
    order, sizes = joint_add_back(Ss, kept, groups, goal)
    notes: list[str] = []
    while True:
        lows = [smallest_eigenvalue(S, order) for S in Ss]
        if min(lows) >= goal or not sizes:
            break
        order = order[: order.size - sizes.pop()]
        notes.append("shortened after the eigenvalue check (rounding at the target)")
    final = np.sort(order)
    kept_units = dropped_units = None
    if units is not None:
        kept_units = np.unique(unit_of[final])
        dropped_units = np.setdiff1d(np.arange(int(unit_of.max()) + 1), kept_units)
    return dataclasses.replace(
        first,
        kept=final,
        dropped=np.setdiff1d(np.arange(n), final),
        order=order,
        smallest_kept=float(min(lows)),
        factorizations=factorizations + len(Ss),
        eigen_checks=first.eigen_checks + len(Ss),
        kept_shells=kept_units,
        dropped_shells=dropped_units,
        notes=first.notes + notes,
        prefix=int(kept.size),
        added_back=int(order.size - kept.size),
        factor=None,
    )


def joint_add_back(
    Ss: Sequence[np.ndarray], order: np.ndarray, groups: list[np.ndarray], goal: float
) -> tuple[np.ndarray, list[int]]:
    """Append each group (in turn) while ``S[kept, kept] - goal*I`` stays positive definite
    in every frame (one growing Cholesky factor per frame). Returns (order, sizes added)."""
    if len(Ss) == 1:
        new_order, sizes, _ = add_back(Ss[0], order, groups, goal)
        return new_order, sizes
    if not groups:
        return order, []
    cand = np.concatenate(groups)
    starts = np.cumsum([0] + [g.size for g in groups])
    W = []
    for S in Ss:
        A = S[np.ix_(order, order)]
        A[np.diag_indices_from(A)] -= goal
        try:
            L = scipy.linalg.cholesky(A, lower=True, check_finite=False)
        except np.linalg.LinAlgError:
            return order, []
        W.append([scipy.linalg.solve_triangular(L, S[np.ix_(order, cand)], lower=True, check_finite=False)])
    kept, sizes = [order], []
    for gi, g in enumerate(groups):
        rows = _extend_all(Ss, W, g, cand, slice(starts[gi], starts[gi + 1]), goal)
        if rows is None:
            continue
        for w, row in zip(W, rows):
            w.append(row)
        kept.append(g)
        sizes.append(g.size)
    return np.concatenate(kept), sizes


def _extend_all(
    Ss: Sequence[np.ndarray], W: list[list[np.ndarray]], g: np.ndarray, cand: np.ndarray, cols: slice, goal: float
) -> list[np.ndarray] | None:
    """The new factor rows of group ``g`` in every frame, or None when a frame rejects it."""
    rows = []
    for S, w in zip(Ss, W):
        grown = extend_rows(S, w, g, cand, cols, goal)
        if grown is None:
            return None
        rows.append(grown[0])
    return rows


def frame_order(smallest: Sequence[float]) -> list[int]:
    """Frame indices, worst (smallest eigenvalue of the full basis) first; ties by frame."""
    return sorted(range(len(smallest)), key=lambda k: (smallest[k], k))
