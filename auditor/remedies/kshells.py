"""The whole-shell subset for periodic systems: the largest set of shells found by pivoted
Cholesky of S(k) - target*I over whole shells, at several k-points at once, with which every
k-point of the mesh meets the target.

Why not the molecular routines (auditor.numerics.cholesky, auditor.remedies.subset): they
take a real matrix with unit diagonal and choose a shell by its Schur block relative to the
shell's own overlap. S(k) is complex Hermitian and its diagonal is the norm of a Bloch sum,
which can nearly vanish at some k: relative to its own (tiny) overlap such a shell looks
independent, yet it is what makes S(k) near-singular. So shells are chosen here by the
smallest eigenvalue of their absolute Schur block of S(k) - target*I, the worst over the
k-points considered. Every chosen prefix keeps S(k) - target*I positive definite at those
k-points (its Cholesky factor exists), so its smallest eigenvalue is at least the target
there; a shell is refused once its Schur block is not positive definite at one of them, and
since adding shells only shrinks Schur complements it could never be added later: the set
is maximal. The other k-points of the mesh are then checked, and a failing one joins."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np

from ..numerics.cholesky import TIE_RTOL
from .subset import TARGET_SLACK

#: at most this many k-points join the pivoting before the search gives up
MAX_KPOINTS = 6


@dataclass(frozen=True)
class KShellSelection:
    """Shells kept (0-based, in pivot order), those dropped, the k-points the pivoting used,
    the smallest eigenvalue over the mesh of the kept set and where it lies."""

    order: list[int]
    dropped: list[int]
    kpoints: list[int]
    smallest_kept: float
    worst_k: int
    factorizations: int
    notes: list[str] = field(default_factory=list)


def _block_minima(A: np.ndarray, groups: list[np.ndarray], open_: list[int]) -> np.ndarray:
    """Smallest eigenvalue of A[f, f] for each open shell f, batched by shell size."""
    out = np.empty(len(open_))
    by_size: dict[int, list[int]] = {}
    for pos, s in enumerate(open_):
        by_size.setdefault(groups[s].size, []).append(pos)
    for size, positions in by_size.items():
        idx = np.array([groups[open_[p]] for p in positions])  # (m, size)
        blocks = A[idx[:, :, None], idx[:, None, :]]
        out[positions] = np.linalg.eigvalsh(blocks)[:, 0] if size > 1 else np.real(blocks[:, 0, 0])
    return out


def _best(values: np.ndarray, open_: list[int]) -> int:
    """Position of the largest value; values within TIE_RTOL of it go to the lower shell."""
    top = float(values.max())
    near = np.flatnonzero(values >= top - TIE_RTOL * abs(top))
    return int(near[np.argmin(np.asarray(open_)[near])])


def pivot_shells(mats: Sequence[np.ndarray], groups: list[np.ndarray], target: float) -> list[int]:
    """Shells in pivot order: each step takes the open shell whose Schur block of
    S(k) - goal*I has the largest smallest eigenvalue (the worst over ``mats``), until none is
    positive definite at every k."""
    goal = target * (1.0 - TARGET_SLACK)
    A = [np.array(S, dtype=complex) for S in mats]
    for M in A:
        M[np.diag_indices_from(M)] -= goal
    open_ = list(range(len(groups)))
    order: list[int] = []
    while open_:
        values = np.min([_block_minima(M, groups, open_) for M in A], axis=0)
        pos = _best(values, open_)
        if not values[pos] > 0.0:
            break
        s = open_.pop(pos)
        order.append(s)
        f = groups[s]
        for M in A:
            cols = M[:, f]
            M -= cols @ np.linalg.solve(M[np.ix_(f, f)], M[f, :])
    return order


def _kept_functions(groups: list[np.ndarray], shells: list[int]) -> np.ndarray:
    return np.sort(np.concatenate([groups[s] for s in shells])) if shells else np.zeros(0, dtype=int)


def select_shells(
    overlap_at: Callable[[int], np.ndarray],
    worst: int,
    groups: list[np.ndarray],
    target: float,
    smallest_at: Callable[[np.ndarray], tuple[float, int]],
) -> KShellSelection | None:
    """The whole-shell set for every k-point: pivot at the worst k (``overlap_at(k)`` gives
    S(k)); ``smallest_at(kept_functions)`` returns (smallest eigenvalue over the mesh, its k);
    while some k-point fails, it joins the pivoting. None when no set was found."""
    goal = target * (1.0 - TARGET_SLACK)
    kpoints = [worst]
    notes: list[str] = []
    while len(kpoints) <= MAX_KPOINTS:
        order = pivot_shells([overlap_at(k) for k in kpoints], groups, target)
        kept = _kept_functions(groups, order)
        if kept.size == 0:
            return None
        low, where = smallest_at(kept)
        if low >= goal:
            dropped = sorted(set(range(len(groups))) - set(order))
            return KShellSelection(order, dropped, kpoints, low, where, len(kpoints) * len(order), notes)
        if where in kpoints:  # rounding at the target: no progress possible
            notes.append("the check on the whole mesh failed at a k-point already used")
            return None
        notes.append(f"k-point {where + 1} failed the check on the whole mesh and joined the pivoting")
        kpoints.append(where)
    return None
