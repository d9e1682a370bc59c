"""Pivoted Cholesky of the normalized overlap and target-driven selection of functions.

Everything here is a pure function on numpy arrays. ``S`` is the overlap matrix scaled to
unit diagonal. Pivoted Cholesky follows Lehtola, J. Chem. Phys. 151, 241102 (2019): the
pivot order picks a numerically independent subset of functions.

Two facts drive the target search:

* The pivot order does not depend on the tolerance; a lower tolerance only extends the
  order. So every kept set a tolerance can produce is a prefix of one pivot order.
* Adding a function to a set can only lower the smallest eigenvalue of its overlap (Cauchy
  interlacing). So the prefixes that meet a target form an initial run, and the longest
  one is the leading block of ``S[p, p] - target * I`` that is positive definite, which one
  ordinary Cholesky factorization finds (LAPACK reports the first leading minor that fails).
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg
import scipy.sparse.linalg
from scipy.linalg import lapack

from auditor.errors import InputError, UsageError

#: Largest deviation of a diagonal element from 1 that is accepted as "unit diagonal".
UNIT_DIAGONAL_SLACK = 1e-8
#: Relative rounding allowance at the target: lambda_min >= target * (1 - slack) passes.
#: Without it a target of exactly 1 would fail on diagonals of 1 - 1e-16.
TARGET_SLACK = 1e-12
#: Shell criteria this close (relative) are ties, broken by the lower shell index.
TIE_RTOL = 1e-9


@dataclass(frozen=True)
class CholeskyResult:
    """A (possibly partial) pivoted Cholesky factorization ``factor @ factor.T == S[p][:, p]``.

    ``pivots`` are 0-based function indices in the order chosen; ``pivot_values`` the
    Schur-complement diagonal of each pivot when it was chosen (``diag(factor) ** 2``);
    ``dropped`` the functions never chosen, ascending. With shell pivoting,
    ``shell_pivots`` lists the chosen shells in order and ``shell_values`` the criterion
    of each (the smallest eigenvalue of its Schur block relative to its own overlap).
    """

    pivots: np.ndarray
    factor: np.ndarray
    pivot_values: np.ndarray
    dropped: np.ndarray
    tol: float
    shell_pivots: np.ndarray | None = None
    shell_values: np.ndarray | None = None

    @property
    def rank(self) -> int:
        return int(self.pivots.size)


@dataclass(frozen=True)
class Selection:
    """A kept set of functions meeting a target smallest eigenvalue.

    ``kept`` and ``dropped`` are ascending 0-based function indices; ``order`` is the
    kept set in pivot order, its first ``prefix`` entries the pivoted-Cholesky prefix and
    the last ``added_back`` those offered back afterwards. ``tolerance`` is a
    pivoted-Cholesky tolerance that yields exactly the prefix. ``factorizations`` counts
    Cholesky factorizations (pivoted, plain or incremental) and ``eigen_checks`` the
    eigenvalue computations the search used.
    """

    kept: np.ndarray
    dropped: np.ndarray
    order: np.ndarray
    smallest_kept: float
    target: float
    tolerance: float
    factorizations: int
    eigen_checks: int
    search: str
    kept_shells: np.ndarray | None = None
    dropped_shells: np.ndarray | None = None
    notes: list[str] = field(default_factory=list)
    prefix: int = 0
    added_back: int = 0

    @property
    def n_dropped(self) -> int:
        return int(self.dropped.size)


# ----------------------------------------------------------------------------- checks


def check_target(target: float) -> float:
    """Return ``target`` as float, or raise UsageError unless 0 < target <= 1."""
    try:
        value = float(target)
    except (TypeError, ValueError):
        raise UsageError(f"target smallest eigenvalue must be a number, got {target!r}") from None
    if not np.isfinite(value) or value <= 0.0 or value > 1.0:
        raise UsageError(
            f"target smallest eigenvalue must lie in (0, 1] for a unit-diagonal overlap, got {target!r}"
        )
    return value


def check_overlap(S: np.ndarray) -> np.ndarray:
    """Return ``S`` as a float64 array, or raise InputError unless square with unit diagonal."""
    S = np.asarray(S, dtype=np.float64)
    if S.ndim != 2 or S.shape[0] != S.shape[1] or S.shape[0] == 0:
        raise InputError(f"overlap matrix must be square and non-empty, got shape {S.shape}")
    with np.errstate(invalid="ignore", over="ignore"):
        total = S.sum()  # one pass, no N x N mask: any NaN or infinity spoils the sum
    if not np.isfinite(total):
        raise InputError("overlap matrix contains NaN or infinite elements")
    worst = float(np.max(np.abs(np.diagonal(S) - 1.0)))
    if worst > UNIT_DIAGONAL_SLACK:
        raise InputError(
            f"overlap matrix must be normalized to unit diagonal (largest deviation {worst:.1e})"
        )
    return S


def _shell_index_lists(shell_of_function: np.ndarray, n: int) -> list[np.ndarray]:
    """Function indices of each shell, shells numbered 0..max; every shell non-empty."""
    sof = np.asarray(shell_of_function)
    if sof.shape != (n,) or not np.issubdtype(sof.dtype, np.integer) or (n and sof.min() < 0):
        raise InputError("shell_of_function must be a non-negative integer array, one entry per function")
    order = np.argsort(sof, kind="stable")
    bounds = np.flatnonzero(np.diff(sof[order])) + 1
    groups = np.split(order, bounds)
    if len(groups) != int(sof.max()) + 1:
        raise InputError("shell_of_function must number shells 0, 1, 2, ... without gaps")
    return groups


def check_atoms_not_emptied(
    kept: np.ndarray, atom_of_function: np.ndarray, exempt_atoms=(), what: str = "this selection"
) -> None:
    """Raise UsageError if ``kept`` holds no function of an atom that had some.

    Atoms are 0-based in ``atom_of_function`` and named 1-based in the message;
    ``exempt_atoms`` (0-based, e.g. ghost atoms) may be emptied.
    """
    atoms = np.asarray(atom_of_function)
    had = set(np.unique(atoms).tolist())
    has = set(np.unique(atoms[np.asarray(kept, dtype=int)]).tolist())
    emptied = sorted(had - has - {int(a) for a in exempt_atoms})
    if emptied:
        names = ", ".join(str(a + 1) for a in emptied)
        raise UsageError(
            f"{what} would remove every basis function of atom {names}; "
            "lower the target or fix the geometry (coincident or duplicated atoms?)"
        )


# ------------------------------------------------------------ function-level pivoting


def pivoted_cholesky(S: np.ndarray, tol: float, method: str = "lapack") -> CholeskyResult:
    """Pivoted Cholesky of unit-diagonal ``S`` with full diagonal pivoting.

    Stops when the largest remaining Schur-complement diagonal is below ``tol``.
    ``method`` is "lapack" (dpstrf, blocked) or "loop" (a plain left-looking loop,
    kept as an independent reference).
    """
    S = check_overlap(S)
    if not np.isfinite(tol) or tol < 0.0:
        raise UsageError(f"Cholesky tolerance must be a non-negative number, got {tol!r}")
    if method == "lapack":
        piv, factor = _pstrf(S, tol)
    elif method == "loop":
        piv, factor = _pivoted_loop(S, tol)
    else:
        raise ValueError(f"unknown pivoted Cholesky method {method!r}")
    dropped = np.setdiff1d(np.arange(S.shape[0]), piv)
    return CholeskyResult(piv, factor, np.diagonal(factor) ** 2, dropped, float(tol))


def _pstrf(S: np.ndarray, tol: float) -> tuple[np.ndarray, np.ndarray]:
    n = S.shape[0]
    # dpstrf stops when the largest remaining diagonal is <= tol; nudge so that "< tol" holds.
    # S is symmetric, so its transpose is the same matrix in Fortran order (no copy).
    c, piv, rank, info = lapack.dpstrf(S.T, tol=np.nextafter(tol, 0.0) if tol > 0 else 0.0, lower=1)
    if info < 0:
        raise RuntimeError(f"dpstrf rejected argument {-info}")
    rank = int(rank) if info == 1 else n
    factor = c[:rank, :rank]
    for j in range(1, rank):  # zero the strict upper triangle in place (np.tril would copy);
        factor[:j, j] = 0.0   # columns are contiguous in LAPACK's Fortran order
    return (np.asarray(piv[:rank], dtype=np.intp) - 1), factor


def _pivoted_loop(S: np.ndarray, tol: float) -> tuple[np.ndarray, np.ndarray]:
    n = S.shape[0]
    L = np.zeros((n, n))
    diag = np.diagonal(S).copy()
    active = np.ones(n, dtype=bool)
    piv: list[int] = []
    for k in range(n):
        cand = np.where(active, diag, -np.inf)
        p = int(np.argmax(cand))
        if not cand[p] > 0.0 or cand[p] < tol:
            break
        active[p] = False
        piv.append(p)
        col = (S[:, p] - L[:, :k] @ L[p, :k]) / np.sqrt(cand[p])
        col[~active] = 0.0
        col[p] = np.sqrt(cand[p])
        L[:, k] = col
        diag -= col * col
    pivots = np.asarray(piv, dtype=np.intp)
    return pivots, L[pivots, : pivots.size]


# --------------------------------------------------------------- shell-level pivoting


def _schur_block(A: np.ndarray, P: np.ndarray, j: int, f: np.ndarray) -> np.ndarray:
    """Current Schur-complement block of rows/columns ``f`` (panel ``P`` not yet applied to ``A``)."""
    return A[np.ix_(f, f)] - P[f, :j] @ P[f, :j].T


def shell_pivoted_cholesky(
    S: np.ndarray, shell_of_function, tol: float, panel: int = 192
) -> CholeskyResult:
    """Pivoted Cholesky that keeps or drops whole shells.

    At each step it takes the shell whose smallest "new fraction" is largest: the least
    eigenvalue of the shell's Schur-complement block relative to the shell's own overlap
    block. That number does not change when the shell's functions are rotated or
    recombined, so the choice is rotationally invariant; for a one-function shell it is
    the ordinary Schur diagonal. Stops when the best shell's value is below ``tol``.
    The trailing Schur complement is updated once per ``panel`` columns (BLAS-3).
    """
    S = check_overlap(S)
    if not np.isfinite(tol) or tol < 0.0:
        raise UsageError(f"Cholesky tolerance must be a non-negative number, got {tol!r}")
    n = S.shape[0]
    shells = _shell_index_lists(shell_of_function, n)
    m = len(shells)
    # Inverse Cholesky factor of each shell's own overlap block, for the relative criterion.
    inv_own = []
    for f in shells:
        own = scipy.linalg.cholesky(S[np.ix_(f, f)], lower=True)
        inv_own.append(scipy.linalg.solve_triangular(own, np.eye(f.size), lower=True))
    by_shell = np.concatenate(shells)
    starts = np.cumsum([0] + [f.size for f in shells[:-1]])
    widest = max(f.size for f in shells)

    G = np.zeros((n, n))          # factor columns, rows by global function index
    rem = np.arange(n)            # functions left in the Schur complement A
    loc = np.arange(n)            # global index -> row of A (valid for remaining functions)
    A = S.copy()                  # Schur complement of the remaining functions at panel start
    diag = np.diagonal(A).copy()  # current Schur diagonal of the remaining functions
    cached = np.ones(m)           # Schur blocks only shrink, so old values are upper bounds
    # Rank of each shell among ties (lower wins); by default the shell index.
    ids = np.arange(m)  # ties go to the lower shell index
    taken = np.zeros(m, dtype=bool)
    piv: list[np.ndarray] = []
    chosen: list[int] = []
    values: list[float] = []
    k = 0
    stop = False
    while not stop and k < n:
        P = np.zeros((rem.size, panel + widest))
        done = np.zeros(rem.size, dtype=bool)
        j = 0

        while j < panel and k + j < n:
            full = np.full(n, np.inf)
            full[rem] = diag
            min_diag = np.minimum.reduceat(full[by_shell], starts)
            bound = np.where(taken, -np.inf, np.minimum(cached, min_diag))
            # Branch and bound: exact values only for shells whose bound can still win.
            # Values within TIE_RTOL count as equal and go to the lower shell index, so that
            # rounding (BLAS, panel width) does not decide between equivalent shells.
            evaluated = np.zeros(m, dtype=bool)
            best, best_val = -1, -np.inf
            while True:
                open_ = ~taken & ~evaluated & (bound > -np.inf)
                if best >= 0:
                    w = TIE_RTOL * abs(best_val)
                    open_ &= (bound > best_val + w) | ((bound >= best_val - w) & (ids < ids[best]))
                cand = np.flatnonzero(open_)
                if cand.size == 0:
                    break
                top = bound[cand].max()
                near = cand[bound[cand] >= top - TIE_RTOL * abs(top)]
                s = int(near[np.argmin(ids[near])])
                evaluated[s] = True
                rel = inv_own[s] @ _schur_block(A, P, j, loc[shells[s]]) @ inv_own[s].T
                val = float(np.linalg.eigvalsh(rel)[0])
                cached[s] = bound[s] = val
                w = TIE_RTOL * abs(best_val) if best >= 0 else 0.0
                if best < 0 or val > best_val + w or (val >= best_val - w and ids[s] < ids[best]):
                    best, best_val = s, val
            if best < 0 or not best_val > 0.0 or best_val < tol:
                stop = True
                break
            f = loc[shells[best]]
            try:
                C = scipy.linalg.cholesky(_schur_block(A, P, j, f), lower=True)
            except np.linalg.LinAlgError:  # positive only to rounding: nothing independent left
                stop = True
                break
            rhs = A[:, f] - P[:, :j] @ P[f, :j].T
            new = scipy.linalg.solve_triangular(C, rhs.T, lower=True).T
            done[f] = True
            new[done] = 0.0
            new[f] = C
            P[:, j : j + f.size] = new
            diag -= np.einsum("ij,ij->i", new, new)
            diag[done] = np.inf  # never a candidate again; keeps min_diag honest
            taken[best] = True
            piv.append(shells[best])
            chosen.append(best)
            values.append(best_val)
            j += f.size
        G[rem, k : k + j] = P[:, :j]
        k += j
        if stop or k >= n:
            break
        keep = ~done
        Pk = P[keep, :j]
        A = A[np.ix_(keep, keep)]
        A -= Pk @ Pk.T
        rem = rem[keep]
        diag = diag[keep]
        loc[rem] = np.arange(rem.size)

    pivots = np.concatenate(piv) if piv else np.zeros(0, dtype=np.intp)
    factor = G[pivots, :k]
    dropped = np.setdiff1d(np.arange(n), pivots)
    return CholeskyResult(
        pivots,
        factor,
        np.diagonal(factor) ** 2,
        dropped,
        float(tol),
        shell_pivots=np.asarray(chosen, dtype=np.intp),
        shell_values=np.asarray(values),
    )


# --------------------------------------------------------------------- target search


def _factorize(S, tol, shells) -> CholeskyResult:
    if shells is None:
        return pivoted_cholesky(S, tol)
    return shell_pivoted_cholesky(S, shells, tol)


def _prefix_ends(res: CholeskyResult, shells) -> np.ndarray:
    """Allowed kept-set sizes along the pivot order (0 and every shell boundary)."""
    if shells is None:
        return np.arange(res.rank + 1)
    sizes = np.bincount(np.asarray(shells))[res.shell_pivots]
    return np.concatenate([[0], np.cumsum(sizes)])


def _smallest(S: np.ndarray, idx: np.ndarray) -> float:
    if idx.size == 0:
        return np.inf
    return float(np.linalg.eigvalsh(S[np.ix_(idx, idx)])[0])


def smallest_from_factor(factor: np.ndarray, rtol: float = 1e-10) -> float:
    """Smallest eigenvalue of ``factor @ factor.T`` without forming or diagonalizing it.

    Lanczos for the largest eigenvalue of the inverse, applied by two triangular solves
    per step. Lanczos approaches that eigenvalue from below, so the result can exceed the
    true smallest eigenvalue by about ``rtol`` relative.
    """
    k = factor.shape[0]
    if k == 0:
        return np.inf
    if k <= 200:
        return float(np.linalg.eigvalsh(factor @ factor.T)[0])
    # LAPACK wants a Fortran-ordered triangle: the factor itself (lower) when it is one,
    # its transpose (upper) when it is C-ordered, else one copy (never one per solve).
    if factor.flags.f_contiguous:
        T, lower = factor, True
    elif factor.flags.c_contiguous:
        T, lower = factor.T, False
    else:
        T, lower = np.asfortranarray(factor), True

    def apply(v):  # (L L^T)^-1 v
        y = scipy.linalg.solve_triangular(T, v, lower=lower, trans="N" if lower else "T", check_finite=False)
        return scipy.linalg.solve_triangular(T, y, lower=lower, trans="T" if lower else "N", check_finite=False)

    op = scipy.sparse.linalg.LinearOperator((k, k), matvec=apply, dtype=np.float64)
    top = scipy.sparse.linalg.eigsh(
        op, k=1, which="LA", tol=rtol, v0=np.ones(k), return_eigenvectors=False
    )[0]
    return float(1.0 / top)


def _reproducing_tol(res: CholeskyResult, k: int, shells) -> float:
    """A tolerance at which the same pivoting stops after exactly ``k`` kept functions."""
    vals = res.pivot_values if shells is None else res.shell_values
    j = int(np.searchsorted(_prefix_ends(res, shells), k))  # pivots (functions or shells) kept
    if j >= vals.size:
        return res.tol
    if j == 0:
        return float(np.nextafter(vals[0], np.inf))
    if vals[j] < vals[j - 1]:
        return float(np.sqrt(vals[j - 1] * vals[j])) if vals[j] > 0 else float(vals[j - 1])
    return float(vals[j - 1])  # a tie: no tolerance separates the two pivots


def select_for_target(
    S: np.ndarray,
    target: float,
    shell_of_function=None,
    atom_of_function=None,
    exempt_atoms=(),
    search: str = "shifted",
    verify: bool | str = "eigvalsh",
    refine: bool = True,
) -> Selection:
    """Keep as many functions as possible while the kept overlap has lambda_min >= target.

    The kept set starts as the longest prefix of the pivot order (shell by shell when
    ``shell_of_function`` is given) that meets the target; ``search`` finds it:

    * "shifted": one pivoted factorization at tol=target (every longer prefix has a pivot
      below target and so lambda_min below target), then one Cholesky of
      ``S[p, p] - target*I`` whose first failing leading minor marks the longest prefix.
    * "prefix": the same pivot order, bisection over prefix length with eigvalsh checks.
    * "tolerance": bisection on log10(tol), one pivoted factorization per trial.

    ``verify`` ("eigvalsh" or True, "lanczos", "none" or False) checks the kept set's
    smallest eigenvalue, with ``numpy.linalg.eigvalsh`` on the kept block or with
    `smallest_from_factor` on its Cholesky factor, and shortens the set if rounding let
    it slip below target. With ``refine`` the units (functions or shells) left out of the
    prefix are then offered back one by one, in pivot order, and kept whenever the set
    still meets the target (one incremental factorization; ``added_back`` counts them), so
    that no dropped unit could be added. With ``atom_of_function`` a selection that would
    leave a non-exempt atom without functions raises UsageError. Ties in shell pivoting go
    to the lower shell index.
    """
    target = check_target(target)
    goal = target * (1.0 - TARGET_SLACK)
    mode = {True: "eigvalsh", False: "none"}.get(verify, verify)
    if mode not in ("eigvalsh", "lanczos", "none"):
        raise ValueError(f"unknown verify mode {verify!r}")
    S = check_overlap(S)
    n = S.shape[0]
    shells = None if shell_of_function is None else np.asarray(shell_of_function)
    if shells is not None:
        _shell_index_lists(shells, n)
    if search == "tolerance":
        res, k, facts, eigs, smallest = _search_tolerance(S, goal, shells)
        ends = _prefix_ends(res, shells)
        checked = True  # every trial already ran eigvalsh on its kept set
    elif search in ("shifted", "prefix"):
        checked = False
        smallest = np.nan
        res = _factorize(S, goal, shells)
        facts, eigs = 1, 0
        ends = _prefix_ends(res, shells)
        p = res.pivots
        if search == "shifted":
            shifted = S[np.ix_(p, p)]
            shifted[np.diag_indices_from(shifted)] -= goal
            info = lapack.dpotrf(shifted.T, lower=1, overwrite_a=1, clean=0)[1]
            facts += 1
            good = p.size if info == 0 else int(info) - 1
            k = int(ends[np.searchsorted(ends, good, side="right") - 1])
            if refine and 0 < k < n:
                # the leading k x k block of this factor is the factor of S[p[:k], p[:k]] - goal*I
                # that the add-back pass extends: keep it (one N x N array at a time)
                res = dataclasses.replace(res, factor=None)
                prefix_factor = np.asfortranarray(shifted.T[:k, :k])
                del shifted
                for j in range(1, k):  # LAPACK left the upper triangle as it was
                    prefix_factor[:j, j] = 0.0
            else:
                del shifted
        else:
            lo, hi = 0, ends.size - 1  # ends[lo] passes (empty set); find the last passing index
            while lo < hi:
                mid = (lo + hi + 1) // 2
                eigs += 1
                if _smallest(S, p[: ends[mid]]) >= goal:
                    lo = mid
                else:
                    hi = mid - 1
            k = int(ends[lo])
    else:
        raise ValueError(f"unknown search {search!r}")

    notes: list[str] = []
    order = res.pivots[:k].copy()
    blocks: list[int] = []
    factor = None
    if refine and 0 < k < n:
        # The add-back pass works on the factor of S[order, order] - goal*I, and a prefix of
        # its result serves every check below: release the N x N pivoted factor first.
        res = dataclasses.replace(res, factor=None)
        order, blocks, factor = _add_back(S, order, _leftover_groups(res, k, shells, n), goal,
                                          prefix_factor if search == "shifted" else None)
        facts += 1
    pivoted = res.factor
    if mode != "none" and not (checked and not blocks):
        while order.size:
            if mode == "lanczos" and factor is not None:
                # order is a prefix of the factor's order. The factor of S[order, order] - goal*I
                # exists, so this value is at least goal: here it is reported, not checked
                # (only the dense eigvalsh check can shorten the set).
                smallest = goal + smallest_from_factor(factor[: order.size, : order.size])
            elif mode == "lanczos" and pivoted is not None:
                smallest = smallest_from_factor(pivoted[:k, :k])
            else:
                smallest = _smallest(S, order)
            eigs += 1
            if smallest >= goal:
                break
            # Rounding in a positive-definiteness test can admit a set a hair below target.
            if blocks:
                order = order[: order.size - blocks.pop()]
            else:
                k = int(ends[np.searchsorted(ends, k, side="left") - 1])
                order = res.pivots[:k].copy()
            notes.append("shortened after the eigenvalue check (rounding at the target)")
    if order.size == 0:
        raise UsageError(f"no kept set reaches target {target:g}")
    added = order.size - k
    kept = np.sort(order)
    dropped = np.setdiff1d(np.arange(n), kept)
    if atom_of_function is not None:
        check_atoms_not_emptied(kept, atom_of_function, exempt_atoms, f"target {target:g}")
    kept_shells = dropped_shells = None
    if shells is not None:
        kept_shells = np.unique(shells[kept])
        dropped_shells = np.setdiff1d(np.arange(int(shells.max()) + 1), kept_shells)
    return Selection(
        kept=kept,
        dropped=dropped,
        order=order,
        smallest_kept=float(smallest),
        target=target,
        tolerance=_reproducing_tol(res, k, shells),
        factorizations=facts,
        eigen_checks=eigs,
        search=search,
        kept_shells=kept_shells,
        dropped_shells=dropped_shells,
        notes=notes,
        prefix=k,
        added_back=added,
    )


def shells_from_functions(
    S: np.ndarray, functions: Selection, shell_of_function, verify: bool | str = "eigvalsh"
) -> Selection | None:
    """A whole-shell kept set seeded by a function-level selection.

    Keeps the shells none of whose functions ``functions`` drops (a subset of its kept
    set, so still at or above its target by Cauchy interlacing), then offers the other
    shells back as `select_for_target` does. None when no shell is clean.
    """
    S = check_overlap(S)
    n = S.shape[0]
    shells = np.asarray(shell_of_function)
    groups = _shell_index_lists(shells, n)
    target = functions.target
    goal = target * (1.0 - TARGET_SLACK)
    mode = {True: "eigvalsh", False: "none"}.get(verify, verify)
    bad = set(shells[functions.dropped].tolist())
    seed = [s for s in dict.fromkeys(shells[functions.order].tolist()) if s not in bad]
    if not seed:
        return None
    order = np.concatenate([groups[s] for s in seed])
    k = order.size
    order, blocks, factor = _add_back(S, order, [groups[s] for s in sorted(bad)], goal)
    smallest, eigs, notes = np.nan, 0, []
    while mode != "none":
        if mode == "lanczos" and factor is not None:
            smallest = goal + smallest_from_factor(factor[: order.size, : order.size])
        else:
            smallest = _smallest(S, order)
        eigs += 1
        if smallest >= goal or not blocks:
            break
        order = order[: order.size - blocks.pop()]
        notes.append("shortened after the eigenvalue check (rounding at the target)")
    if mode != "none" and smallest < goal:
        return None
    kept = np.sort(order)
    kept_shells = np.unique(shells[kept])
    return Selection(
        kept=kept,
        dropped=np.setdiff1d(np.arange(n), kept),
        order=order,
        smallest_kept=float(smallest),
        target=target,
        tolerance=functions.tolerance,
        factorizations=functions.factorizations + 1,
        eigen_checks=functions.eigen_checks + eigs,
        search="from-functions",
        kept_shells=kept_shells,
        dropped_shells=np.setdiff1d(np.arange(len(groups)), kept_shells),
        notes=notes,
        prefix=k,
        added_back=order.size - k,
    )


def _leftover_groups(res: CholeskyResult, k: int, shells, n: int) -> list[np.ndarray]:
    """Units not in the kept prefix: the rest of the pivot order, then those never pivoted."""
    if shells is None:
        rest = np.concatenate([res.pivots[k:], res.dropped])
        return [np.array([i]) for i in rest]
    groups = _shell_index_lists(shells, n)
    j = int(np.searchsorted(_prefix_ends(res, shells), k))
    later = [int(s) for s in res.shell_pivots[j:]]
    never = sorted(set(range(len(groups))) - {int(s) for s in res.shell_pivots})
    return [groups[s] for s in later + never]


def _add_back(S: np.ndarray, order: np.ndarray, groups: list[np.ndarray], goal: float,
              L: np.ndarray | None = None):
    """Greedily append each group (in turn) while ``S[kept, kept] - goal*I`` stays positive
    definite, by extending its Cholesky factor (``L``, lower, when the caller has it). A
    group that fails once can never fit later (adding functions only lowers the smallest
    eigenvalue), so one pass leaves no dropped group that could be added. Returns (order,
    sizes of the added groups, factor of ``S[order, order] - goal*I``)."""
    if not groups:
        return order, [], L
    A = None
    if L is None:
        A = S[np.ix_(order, order)]
        A[np.diag_indices_from(A)] -= goal
        try:  # A is symmetric: its transpose is the Fortran-ordered array LAPACK factors in place
            L = scipy.linalg.cholesky(A.T, lower=True, overwrite_a=True, check_finite=False)
        except np.linalg.LinAlgError:
            return order, [], None
    cand = np.concatenate(groups)
    starts = np.cumsum([0] + [g.size for g in groups])
    # Rows of the growing factor for every candidate column, block by block.
    W = [scipy.linalg.solve_triangular(L, S[np.ix_(order, cand)], lower=True, check_finite=False)]
    kept, sizes, tails = [order], [], []
    for gi, g in enumerate(groups):
        cols = slice(starts[gi], starts[gi + 1])
        Wg = np.vstack([w[:, cols] for w in W])
        C = S[np.ix_(g, g)] - Wg.T @ Wg
        C[np.diag_indices_from(C)] -= goal
        try:
            Cc = scipy.linalg.cholesky(C, lower=True, check_finite=False)
        except np.linalg.LinAlgError:
            continue
        rhs = S[np.ix_(g, cand)] - Wg.T @ np.vstack(W)
        W.append(scipy.linalg.solve_triangular(Cc, rhs, lower=True, check_finite=False))
        kept.append(g)
        sizes.append(g.size)
        tails.append((Wg, Cc))
    order = np.concatenate(kept)
    if not tails:
        return order, sizes, L
    factor = np.zeros((order.size, order.size))
    k = L.shape[0]
    factor[:k, :k] = L
    del L, A  # the same memory (L is A's transpose, factored in place)
    for Wg, Cc in tails:
        d = Cc.shape[0]
        factor[k : k + d, : Wg.shape[0]] = Wg.T
        factor[k : k + d, k : k + d] = Cc
        k += d
    return order, sizes, factor


def _search_tolerance(S, target, shells, max_steps: int = 60):
    """Bisection on log10(tol) in [target, first pivot]; each trial factorizes and checks."""
    facts = eigs = 0

    def trial(tol):
        nonlocal facts, eigs
        res = _factorize(S, tol, shells)
        facts += 1
        eigs += 1
        return res, _smallest(S, res.pivots)

    res_lo, low = trial(target)
    if low >= target:
        return res_lo, res_lo.rank, facts, eigs, low
    first = (res_lo.pivot_values if shells is None else res_lo.shell_values)[0]
    ends = _prefix_ends(res_lo, shells)
    lo, hi = np.log10(target), np.log10(first)
    res_hi, high = trial(first)
    if high < target:  # a lone first shell below target (e.g. a Cartesian shell and target near 1)
        return res_hi, 0, facts, eigs, np.inf
    for _ in range(max_steps):
        gap = np.searchsorted(ends, res_lo.rank) - np.searchsorted(ends, res_hi.rank)
        if gap <= 1 or hi - lo < 1e-12:
            break
        mid = 0.5 * (lo + hi)
        res_mid, val = trial(10.0**mid)
        if val >= target:
            hi, res_hi, high = mid, res_mid, val
        else:
            lo, res_lo = mid, res_mid
    return res_hi, res_hi.rank, facts, eigs, high
