"""Pivoted Cholesky of the normalized overlap matrix (Lehtola, J. Chem. Phys. 151, 241102 (2019)):
the pivot order picks a numerically independent subset of functions. Pure functions on numpy arrays;
``S`` is the overlap matrix scaled to unit diagonal."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg
import scipy.sparse.linalg
from scipy.linalg import lapack

from ..base.errors import InputError, UsageError
from .inplace import (
    _cholesky,
    _Triangles,
    column_major,
    gather_block,
    gather_triangle,
    lower_copy,
    mirror_triangle,
    roomy_zeros,
    solve_lower_view,
    tplqt_in_place,
    tpqrt_in_place,
)
from .krylov import InverseSolver, _smallest_eigenpairs, factor_solver

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
    ``factor`` is None once a caller has released it.
    """

    pivots: np.ndarray
    factor: np.ndarray | None
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


def shifted_pivoted_cholesky(S: np.ndarray, shift: float) -> CholeskyResult:
    """Pivoted Cholesky of ``S - shift*I`` (LAPACK dpstrf), stopped at the first pivot that
    is not positive; ``factor`` is that of the shifted matrix.

    Every pivot taken is positive, so the kept block's S - shift*I stays positive definite:
    its smallest eigenvalue exceeds ``shift``. Every function left has a Schur-complement
    diagonal of at most zero, so adding any one of them alone would break that. One
    factorization thus gives a kept set that meets the level and to which no single function
    can be added (a greedy set: not necessarily the largest one).
    """
    S = check_overlap(S)
    if not np.isfinite(shift) or not 0.0 <= shift < 1.0:
        raise UsageError(f"Cholesky shift must lie in [0, 1), got {shift!r}")
    # dpstrf works in place in Fortran order: the transpose of a plain copy is that, and it is
    # the same matrix, S being symmetric (a Fortran-ordered copy of a C-ordered S is far slower)
    A = S.copy().T
    A[np.diag_indices_from(A)] -= shift
    pivots, rank = pstrf_until_nonpositive(A)
    factor = A[:rank, :rank]
    for j in range(1, rank):  # zero the strict upper triangle in place (columns are contiguous)
        factor[:j, j] = 0.0
    return shifted_result(pivots, factor, S.shape[0], shift)


def pstrf_until_nonpositive(A: np.ndarray) -> tuple[np.ndarray, int]:
    """LAPACK dpstrf on the lower triangle of the Fortran-ordered ``A``, in place, stopped at
    the first pivot that is not positive: (0-based pivot order of all N rows, rank).

    ``A[:rank, :rank]`` (lower) is then the factor of the pivoted leading block and
    ``A[rank:, :rank]`` its rows for the functions left; the trailing block is not their
    Schur complement (dpstrf updates it a panel at a time). The strict upper triangle is
    not touched.
    """
    # tol: dpstrf stops when the largest remaining diagonal is <= tol; the smallest positive
    # number, as a non-positive tol would make LAPACK choose its own
    c, piv, rank, info = lapack.dpstrf(A, tol=np.finfo(np.float64).tiny, lower=1, overwrite_a=1)
    if info < 0:
        raise RuntimeError(f"dpstrf rejected argument {-info}")
    if not np.shares_memory(c, A):
        raise ValueError("dpstrf needs a Fortran-ordered float64 array to work in place")
    return np.asarray(piv, dtype=np.intp) - 1, int(rank) if info == 1 else A.shape[0]


def shifted_result(order: np.ndarray, factor: np.ndarray, n: int, shift: float) -> CholeskyResult:
    """The CholeskyResult of a shift-pivoted factorization: ``order`` the pivot order of all
    n functions, ``factor`` the lower factor of its leading block (its size is the rank)."""
    pivots = order[: factor.shape[0]]
    dropped = np.setdiff1d(np.arange(n), pivots)
    return CholeskyResult(pivots, factor, np.diagonal(factor) ** 2, dropped, float(shift))


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


def shell_pivoted_cholesky(
    S: np.ndarray, shell_of_function: np.ndarray | Sequence[int], tol: float, panel: int = 192
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
    shells = _shell_data(S, shell_of_function)
    state = _ShellPivoting.start(S, len(shells.groups))
    G = np.zeros((n, n))  # factor columns, rows by global function index
    k = 0
    stop = False
    while not stop and k < n:
        P = np.zeros((state.rem.size, panel + shells.widest))
        done = np.zeros(state.rem.size, dtype=bool)
        j, stop = _fill_panel(state, shells, P, done, min(panel, n - k), tol)
        G[state.rem, k : k + j] = P[:, :j]
        k += j
        if stop or k >= n:
            break
        state.apply_panel(P, done, j)

    pivots = np.concatenate(state.pivots) if state.pivots else np.zeros(0, dtype=np.intp)
    factor = G[pivots, :k]
    dropped = np.setdiff1d(np.arange(n), pivots)
    return CholeskyResult(
        pivots,
        factor,
        np.diagonal(factor) ** 2,
        dropped,
        float(tol),
        shell_pivots=np.asarray(state.chosen, dtype=np.intp),
        shell_values=np.asarray(state.values),
    )


@dataclass(frozen=True)
class _Shells:
    """What shell pivoting needs to know about the shells (fixed during the factorization)."""

    groups: list[np.ndarray]  # function indices of each shell
    inv_own: list[np.ndarray]  # inverse Cholesky factor of each shell's own overlap block
    by_shell: np.ndarray  # function indices, shell after shell
    starts: np.ndarray  # where each shell begins in by_shell
    widest: int  # most functions in one shell
    ids: np.ndarray  # rank of each shell among ties (lower wins): the shell index


def _shell_data(S: np.ndarray, shell_of_function: np.ndarray | Sequence[int]) -> _Shells:
    """The shells of ``S`` with the inverse factors of their own overlap blocks."""
    shells = _shell_index_lists(np.asarray(shell_of_function), S.shape[0])
    # Inverse Cholesky factor of each shell's own overlap block, for the relative criterion.
    inv_own = []
    for f in shells:
        own = scipy.linalg.cholesky(S[np.ix_(f, f)], lower=True)
        inv_own.append(scipy.linalg.solve_triangular(own, np.eye(f.size), lower=True))
    return _Shells(
        groups=shells,
        inv_own=inv_own,
        by_shell=np.concatenate(shells),
        starts=np.cumsum([0] + [f.size for f in shells[:-1]]),
        widest=max(f.size for f in shells),
        ids=np.arange(len(shells)),  # ties go to the lower shell index
    )


@dataclass
class _ShellPivoting:
    """The state of shell pivoting between panels, and the pivots chosen so far."""

    A: np.ndarray  # Schur complement of the remaining functions at panel start
    rem: np.ndarray  # functions left in the Schur complement A
    loc: np.ndarray  # global index -> row of A (valid for remaining functions)
    diag: np.ndarray  # current Schur diagonal of the remaining functions
    cached: np.ndarray  # Schur blocks only shrink, so old values are upper bounds
    taken: np.ndarray  # shells chosen
    pivots: list[np.ndarray] = field(default_factory=list)  # function indices of the chosen shells
    chosen: list[int] = field(default_factory=list)  # the chosen shells, in order
    values: list[float] = field(default_factory=list)  # the criterion of each when chosen

    @classmethod
    def start(cls, S: np.ndarray, m: int) -> _ShellPivoting:
        """Nothing chosen yet: the Schur complement is a copy of S, every shell's bound 1."""
        n = S.shape[0]
        A = S.copy()
        return cls(A, np.arange(n), np.arange(n), np.diagonal(A).copy(), np.ones(m), np.zeros(m, dtype=bool))

    def apply_panel(self, P: np.ndarray, done: np.ndarray, j: int) -> None:
        """Drop the functions of the panel's shells and subtract its j columns from A."""
        keep = ~done
        Pk = P[keep, :j]
        self.A = self.A[np.ix_(keep, keep)]
        self.A -= Pk @ Pk.T
        self.rem = self.rem[keep]
        self.diag = self.diag[keep]
        self.loc[self.rem] = np.arange(self.rem.size)


def _schur_block(A: np.ndarray, P: np.ndarray, j: int, f: np.ndarray) -> np.ndarray:
    """Current Schur-complement block of rows/columns ``f`` (panel ``P`` not yet applied to ``A``)."""
    return A[np.ix_(f, f)] - P[f, :j] @ P[f, :j].T


def _fill_panel(
    state: _ShellPivoting, shells: _Shells, P: np.ndarray, done: np.ndarray, width: int, tol: float
) -> tuple[int, bool]:
    """Choose shells into the panel ``P`` until it holds at least ``width`` columns.

    Returns the number of columns filled and whether pivoting stops (no shell left at or
    above ``tol``, or none positive definite to rounding).
    """
    j = 0
    while j < width:
        best, best_val = _best_shell(state, shells, P, j)
        if best < 0 or not best_val > 0.0 or best_val < tol:
            return j, True
        f = state.loc[shells.groups[best]]
        try:
            C = scipy.linalg.cholesky(_schur_block(state.A, P, j, f), lower=True)
        except np.linalg.LinAlgError:  # positive only to rounding: nothing independent left
            return j, True
        _add_columns(state, P, done, j, f, C)
        state.taken[best] = True
        state.pivots.append(shells.groups[best])
        state.chosen.append(best)
        state.values.append(best_val)
        j += f.size
    return j, False


def _add_columns(state: _ShellPivoting, P: np.ndarray, done: np.ndarray, j: int, f: np.ndarray, C: np.ndarray) -> None:
    """Write the factor columns of the shell at rows ``f`` of A (``C`` the Cholesky factor of
    its Schur block) into P from column j, and update the Schur diagonal."""
    rhs = state.A[:, f] - P[:, :j] @ P[f, :j].T
    new = scipy.linalg.solve_triangular(C, rhs.T, lower=True).T
    done[f] = True
    new[done] = 0.0
    new[f] = C
    P[:, j : j + f.size] = new
    state.diag -= np.einsum("ij,ij->i", new, new)
    state.diag[done] = np.inf  # never a candidate again; keeps min_diag honest


def _best_shell(state: _ShellPivoting, shells: _Shells, P: np.ndarray, j: int) -> tuple[int, float]:
    """The shell with the largest criterion and that value; (-1, -inf) when none is left.

    Branch and bound: exact values only for shells whose bound can still win. Values
    within TIE_RTOL count as equal and go to the lower shell index, so that rounding
    (BLAS, panel width) does not decide between equivalent shells. Exact values are
    cached in ``state.cached`` as bounds for later steps.
    """
    full = np.full(shells.by_shell.size, np.inf)
    full[state.rem] = state.diag
    min_diag = np.minimum.reduceat(full[shells.by_shell], shells.starts)
    bound = np.where(state.taken, -np.inf, np.minimum(state.cached, min_diag))
    evaluated = np.zeros(len(shells.groups), dtype=bool)
    ids = shells.ids
    best, best_val = -1, -np.inf
    while True:
        s = _next_candidate(bound, state.taken | evaluated, ids, best, best_val)
        if s < 0:
            break
        evaluated[s] = True
        f = state.loc[shells.groups[s]]
        rel = shells.inv_own[s] @ _schur_block(state.A, P, j, f) @ shells.inv_own[s].T
        val = float(np.linalg.eigvalsh(rel)[0])
        state.cached[s] = bound[s] = val
        w = TIE_RTOL * abs(best_val) if best >= 0 else 0.0
        if best < 0 or val > best_val + w or (val >= best_val - w and ids[s] < ids[best]):
            best, best_val = s, val
    return best, best_val


def _next_candidate(bound: np.ndarray, closed: np.ndarray, ids: np.ndarray, best: int, best_val: float) -> int:
    """The open shell with the highest bound that could still beat ``best``; -1 when none."""
    open_ = ~closed & (bound > -np.inf)
    if best >= 0:
        w = TIE_RTOL * abs(best_val)
        open_ &= (bound > best_val + w) | ((bound >= best_val - w) & (ids < ids[best]))
    cand = np.flatnonzero(open_)
    if cand.size == 0:
        return -1
    top = bound[cand].max()
    near = cand[bound[cand] >= top - TIE_RTOL * abs(top)]
    return int(near[np.argmin(ids[near])])


def _smallest(S: np.ndarray, idx: np.ndarray) -> float:
    if idx.size == 0:
        return np.inf
    return float(np.linalg.eigvalsh(S[np.ix_(idx, idx)])[0])


def smallest_from_factor(factor: np.ndarray, rtol: float = 1e-10) -> float:
    """Smallest eigenvalue of ``factor @ factor.T`` without forming or diagonalizing it
    (`smallest_from_solver` with two triangular solves that read the factor in place)."""
    k = factor.shape[0]
    if k == 0:
        return np.inf
    if k <= 200:
        return float(np.linalg.eigvalsh(factor @ factor.T)[0])
    if not column_major(factor):  # BLAS reads a column-major factor, or a block of one, in place
        factor = np.asfortranarray(factor)
    return smallest_from_solver(factor_solver(factor), rtol)


def smallest_from_solver(solve: InverseSolver, rtol: float = 1e-10) -> float:
    """Smallest eigenvalue of a positive definite matrix M from ``solve`` (W -> M^-1 W).

    Block Krylov iteration on M^-1 (`auditor.numerics.krylov`, BLAS-3 solves) to a residual
    of sqrt(rtol): its Ritz value approaches the eigenvalue from above, within about
    ``rtol`` relative. Lanczos (ARPACK) on the same operator if that does not converge.
    """
    info: dict = {}
    tol = float(np.sqrt(rtol))
    values, _ = _smallest_eigenpairs(solve, 0.0, 1, tol, 10, 0, info)
    if info["residual"] <= tol:
        return float(values[0])
    k = solve.size

    def apply(v):
        y = np.array(v, dtype=np.float64, order="F").reshape(k, 1)
        solve.apply(y)
        return y[:, 0]

    op = scipy.sparse.linalg.LinearOperator((k, k), matvec=apply, dtype=np.float64)
    top = scipy.sparse.linalg.eigsh(op, k=1, which="LA", tol=rtol, v0=np.ones(k), return_eigenvectors=False)[0]
    return float(1.0 / top)


#: Above this many functions, kept sets are checked by Lanczos on their Cholesky factor
#: instead of a dense eigvalsh (same number to ~1e-10 relative, several times faster).
EIGVALSH_LIMIT = 1000


def verify_mode(n: int) -> str:
    return "eigvalsh" if n <= EIGVALSH_LIMIT else "lanczos"


def smallest_eigenvalue_cached(S: np.ndarray, idx: np.ndarray, cache: dict | None) -> float:
    """`smallest_eigenvalue`, remembered in ``cache`` (keyed by S's identity and the index
    set) so that remedies that keep the same functions share one computation; through the
    `SharedCore` of S in the cache (``cache[("core", id(S))]``) when ``idx`` contains it;
    S is made whole first (`end_loan`) when it is read itself."""
    if cache is None:
        return smallest_eigenvalue(S, idx)
    key = (id(S), np.asarray(idx, dtype=np.int64).tobytes())
    if key not in cache:
        shared = cache.get(("core", id(S)))
        value = None if shared is None else smallest_with_core(np.asarray(idx), shared)
        if value is None:
            end_loan(cache, S)
            value = smallest_eigenvalue(S, idx)
        cache[key] = value
    return cache[key]


def end_loan(cache: dict | None, S: np.ndarray) -> None:
    """Make S whole when ``cache`` holds the `FactorHandoff` that lends S's lower triangle
    (under ("lender", id(S))): before anything reads S other than through the shared core."""
    lender = None if cache is None else cache.pop(("lender", id(S)), None)
    if lender is not None:
        lender.whole()


@dataclass(frozen=True)
class SharedCore:
    """The Cholesky factor of S[core, core] and the Schur complement of every other function,
    shared by index sets that contain the core: the smallest eigenvalue of S[idx, idx] then
    costs a factorization of the Schur block of idx's other functions, not of all of idx."""

    core: np.ndarray  # ascending
    rest: np.ndarray  # every other function, ascending
    L: np.ndarray  # lower factor of S[core, core] (upper triangle zero), column-major
    W: np.ndarray  # L^-1 S[core, rest]
    schur: np.ndarray  # S[rest, rest] - W^T W, its lower triangle (the upper one is zero)


def shared_core(S: np.ndarray, core: np.ndarray) -> SharedCore | None:
    """The `SharedCore` of ``S`` for ``core``; None when S[core, core] is not positive definite."""
    core = np.unique(core)
    rest = np.setdiff1d(np.arange(S.shape[0]), core)
    S = S if S.flags.c_contiguous else S.T  # symmetric: its row-major form, read by whole rows
    L = gather_triangle(S, core)  # the lower triangle only: all that Cholesky touches
    if _cholesky(L) != 0:
        return None
    W = gather_block(S, rest, core).T  # S[core, rest], Fortran-ordered
    solve_lower_view(L, W)
    # S[rest, rest] - W^T W: dsyrk forms the lower triangle only (half a product's flops),
    # all that the Cholesky of a Schur block reads
    schur = gather_triangle(S, rest)
    schur = scipy.linalg.blas.dsyrk(-1.0, W, beta=1.0, c=schur, trans=1, lower=1, overwrite_c=1)
    return SharedCore(core, rest, L, W, schur)


def core_solver(shared: SharedCore, extra: np.ndarray | None = None) -> InverseSolver | None:
    """The `InverseSolver` of S[idx, idx] in the order (core, the others ``extra`` picks from
    ``shared.rest``; all of them when None, that is all of S): the shared factor completed by
    the Cholesky factor of that block of the Schur complement. None when that block is not
    positive definite to rounding."""
    if extra is None:  # a copy of its lower triangle (the shared Schur complement stays as it is)
        WE, T = shared.W, lower_copy(shared.schur)
    else:  # a new Fortran-ordered block with schur's lower triangle (extra ascending)
        WE, T = np.asfortranarray(shared.W[:, extra]), gather_block(shared.schur.T, extra, extra).T
    if _cholesky(T) != 0:
        return None
    return _core_solver(shared.L, WE, T)


def smallest_with_core(idx: np.ndarray, shared: SharedCore) -> float | None:
    """Smallest eigenvalue of S[idx, idx] through ``shared``: its factor is [[L, 0], [W_E^T,
    T]] in the order (core, idx's other functions E), a symmetric permutation (the same
    eigenvalues), with T the factor of the Schur block of E; applied by block solves, never
    formed. None when idx does not contain the core or that block is not positive definite
    to rounding."""
    if not np.isin(shared.core, idx).all():
        return None
    solver = core_solver(shared, np.flatnonzero(np.isin(shared.rest, idx)))
    return None if solver is None else smallest_from_solver(solver)


def _core_solver(L: np.ndarray, WE: np.ndarray, T: np.ndarray) -> InverseSolver:
    """W -> (F F^T)^-1 W for F = [[L, 0], [WE^T, T]] (L, T lower), by block substitution."""
    c, T = L.shape[0], np.asfortranarray(T)

    def apply(B: np.ndarray) -> None:
        top, bottom = np.asfortranarray(B[:c]), np.asfortranarray(B[c:])
        solve_lower_view(L, top)  # F y = b
        bottom -= WE.T @ top
        solve_lower_view(T, bottom)
        solve_lower_view(T, bottom, transpose=True)  # F^T x = y
        top -= WE @ bottom
        solve_lower_view(L, top, transpose=True)
        B[:c], B[c:] = top, bottom

    return InverseSolver(apply, c + T.shape[0])


def smallest_eigenvalue(S: np.ndarray, idx: np.ndarray) -> float:
    """Smallest eigenvalue of ``S[idx, idx]`` (dense for small sets, block Krylov otherwise)."""
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


def delete_from_factor(L: np.ndarray, drop: np.ndarray, room: int = 0) -> np.ndarray:
    """The factor `delete_in_place` makes (see there), built in a new zeroed column-major
    array with ``room`` more rows and columns, for `add_back` to grow it in place; L is left
    as it was (F is written where it goes: no moves)."""
    drop = np.unique(np.asarray(drop, dtype=np.int64))
    keep = np.setdiff1d(np.arange(L.shape[0]), drop)
    m = keep.size
    F = roomy_zeros(m + room)[:m, :m]
    j0 = int(drop[0]) if drop.size else m  # keep[:j0] is 0..j0-1: those rows stay as they are
    F[:j0, :j0] = L[:j0, :j0]
    if j0 == m:
        return F
    tail = keep[j0:]
    F[j0:, :j0] = L[tail, :j0]
    upper = L[np.ix_(tail, tail)].T  # Fortran-ordered: the R form LAPACK works on, in place
    tpqrt_in_place(upper, np.asfortranarray(L[np.ix_(tail, drop)].T))
    F[j0:, j0:] = np.triu(upper).T
    return F


def delete_in_place(L: np.ndarray, drop: np.ndarray, chunk: int = 256) -> np.ndarray:
    """A lower triangular F with F F^T = A[keep, keep] from the lower Cholesky factor L of
    A = L L^T (``keep``: every position not in ``drop``; F's diagonal signs are arbitrary),
    made in L's own memory, which is lost: no new N x N array. L must be column-major (or a
    leading block of a column-major array); F is its leading m x m block, m the number kept;
    its strict upper triangle is zero when L's is (it is not written where it can be avoided).

    Only the rows from the first dropped position j0 on change. The kept rows and columns
    move up and left; with P the kept positions after j0 and D the dropped ones, A[P, P] =
    L[P, :] L[P, :]^T less the dropped columns' part, so F's trailing block is the L of the
    LQ factorization of the triangular-pentagonal [L[P, P], L[P, D]] (LAPACK dtplqt, in the
    lower triangle; where that routine is missing, the R^T of dtpqrt's QR factorization of
    the transpose, on the block's mirror image): about 2 |P|^2 |D| flops against m^3 / 3."""
    drop = np.unique(np.asarray(drop, dtype=np.int64))
    if drop.size == 0:
        return L
    if not column_major(L):
        raise ValueError("in-place deletion needs a column-major factor")
    keep = np.setdiff1d(np.arange(L.shape[0]), drop)
    m, j0 = keep.size, int(drop[0])
    tail = keep[j0:]  # keep[:j0] is 0..j0-1: those rows and columns stay where they are
    # Every gather reads whole columns of L, the rows of its row-major view L.T (`gather_block`;
    # element-wise np.ix_ gathers on a column-major array were the slow part).
    LT = L.T
    Y = gather_block(LT, drop, tail).T  # L[tail, drop], Fortran-ordered
    # Rows move up and columns left: column c of the result is column source[c] at the rows
    # ``tail``. A chunk is gathered before it is written, and a later chunk's sources lie
    # beyond all rows written. Only the lower triangle is written (the upper one, zero, keeps
    # its pages untouched: new memory on this path costs more than the arithmetic).
    source = np.concatenate((np.arange(j0), tail))
    for c0 in range(0, m, chunk):
        c1 = min(m, c0 + chunk)
        moved = gather_block(LT, source[c0:c1], tail)
        LT[c0 : min(c1, j0), j0:m] = moved[: max(0, j0 - c0)]  # columns left of j0: rows j0.. all lower
        for c in range(max(c0, j0), c1):
            LT[c, c:m] = moved[c - c0, c - j0 :]
    block = L[j0:m, j0:m]
    if not tplqt_in_place(block, Y):  # the LQ form needs no upper triangle (new memory)
        X = np.asfortranarray(Y.T)
        mirror_triangle(block, upward=True)  # R form: the upper triangle LAPACK works on
        tpqrt_in_place(block, X)
        mirror_triangle(block, upward=False)
    return L[:m, :m]


def deletion_is_cheaper(m: int, drop: np.ndarray) -> bool:
    """Whether `delete_from_factor` of the positions ``drop`` from a factor of order m costs
    fewer flops than factorizing the kept block anew."""
    if drop.size == 0:
        return True
    tail = m - int(np.min(drop))
    return 2.0 * tail * tail * drop.size < (m - drop.size) ** 3 / 3.0


class FactorHandoff:
    """Factorizations made by one step (the large spectrum) for a later one (the remedies),
    which takes each once: the shift-pivoted factorization of S - level*I
    (`shifted_pivoted_cholesky`, the function subset at that level; its factor is one N x N
    array) and the `SharedCore` of the non-diffuse functions (the diffuse options).

    The pivoted factor may be *lent*: left in the lower triangle of S's own array (whose
    strict upper triangle and saved diagonal still hold S), to be copied out only when it is
    taken, once the shared core has been released, so that the copy reuses the core's memory
    instead of new memory. While it is lent S must not be read below its diagonal: `whole`
    makes S whole first (the factor is then copied out at once); `take` and `release` end
    the loan."""

    def __init__(self) -> None:
        self._result: CholeskyResult | None = None
        self._core: SharedCore | None = None
        self._lent: tuple[_Triangles, np.ndarray, int, float] | None = None

    def give(self, result: CholeskyResult) -> None:
        self._result = result

    def lend(self, tri: _Triangles, order: np.ndarray, rank: int, shift: float) -> None:
        """Hold the factor of rank ``rank`` that the pivoted factorization left in ``tri``'s
        lower triangle (pivot ``order``, of S - shift*I) without copying it."""
        self._lent = (tri, order, rank, shift)

    @property
    def lending(self) -> bool:
        """Whether S's lower triangle holds the factor (S not whole)."""
        return self._lent is not None

    def whole(self) -> None:
        """End the loan: copy the factor out, then put S back in its lower triangle."""
        if self._lent is None:
            return
        tri, order, rank, shift = self._lent
        n = tri.A.shape[0]
        self._result = shifted_result(order, lower_copy(tri.A[:rank, :rank], n), n, shift)
        tri.restore()
        self._lent = None

    def take(self) -> CholeskyResult | None:
        """The factorization (its shift is its ``tol``), if any; the handoff is empty afterwards."""
        self.whole()
        result, self._result = self._result, None
        return result

    def give_core(self, shared: SharedCore) -> None:
        self._core = shared

    def take_core(self) -> SharedCore | None:
        """The `SharedCore`, if any; it is no longer held here afterwards."""
        shared, self._core = self._core, None
        return shared

    def release(self) -> None:
        """Drop whatever is still held (when no remedy will take it), S whole again."""
        if self._lent is not None:
            self._lent[0].restore()
        self._result, self._core, self._lent = None, None, None
