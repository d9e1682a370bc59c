"""Pivoted Cholesky of the normalized overlap matrix (Lehtola, J. Chem. Phys. 151, 241102 (2019)):
the pivot order picks a numerically independent subset of functions. Pure functions on numpy arrays;
``S`` is the overlap matrix scaled to unit diagonal."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg
import scipy.sparse.linalg
from scipy.linalg import lapack

from ..base.errors import InputError, UsageError

#: Largest deviation of a diagonal element from 1 that is accepted as "unit diagonal".
UNIT_DIAGONAL_SLACK = 1e-8


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
        raise InputError(f"overlap matrix must be normalized to unit diagonal (largest deviation {worst:.1e})")
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
        factor[:j, j] = 0.0  # columns are contiguous in LAPACK's Fortran order
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


def _schur_block(A: np.ndarray, P: np.ndarray, j: int, f: np.ndarray) -> np.ndarray:
    """Current Schur-complement block of rows/columns ``f`` (panel ``P`` not yet applied to ``A``)."""
    return A[np.ix_(f, f)] - P[f, :j] @ P[f, :j].T


def shell_pivoted_cholesky(S: np.ndarray, shell_of_function, tol: float, panel: int = 192) -> CholeskyResult:
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

    G = np.zeros((n, n))  # factor columns, rows by global function index
    rem = np.arange(n)  # functions left in the Schur complement A
    loc = np.arange(n)  # global index -> row of A (valid for remaining functions)
    A = S.copy()  # Schur complement of the remaining functions at panel start
    diag = np.diagonal(A).copy()  # current Schur diagonal of the remaining functions
    cached = np.ones(m)  # Schur blocks only shrink, so old values are upper bounds
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
    top = scipy.sparse.linalg.eigsh(op, k=1, which="LA", tol=rtol, v0=np.ones(k), return_eigenvectors=False)[0]
    return float(1.0 / top)


#: Above this many functions, kept sets are checked by Lanczos on their Cholesky factor
#: instead of a dense eigvalsh (same number to ~1e-10 relative, several times faster).
EIGVALSH_LIMIT = 1000


def verify_mode(n: int) -> str:
    return "eigvalsh" if n <= EIGVALSH_LIMIT else "lanczos"


def smallest_eigenvalue(S: np.ndarray, idx: np.ndarray) -> float:
    """Smallest eigenvalue of ``S[idx, idx]`` (dense for small sets, Lanczos otherwise)."""
    idx = np.asarray(idx)
    if idx.size == 0:
        return float("inf")
    sub = S[np.ix_(idx, idx)]
    if idx.size <= EIGVALSH_LIMIT:
        return float(np.linalg.eigvalsh(sub)[0])
    try:  # sub is symmetric: factor its Fortran-ordered transpose in place
        factor = scipy.linalg.cholesky(sub.T, lower=True, overwrite_a=True, check_finite=False)
    except np.linalg.LinAlgError:
        del sub  # overwritten by the failed factorization
        return float(np.linalg.eigvalsh(S[np.ix_(idx, idx)])[0])
    return smallest_from_factor(factor)
