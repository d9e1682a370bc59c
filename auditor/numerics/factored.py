"""Large-system spectrum: factorizations of shifted S instead of a full eigendecomposition.

One N x N array is used throughout. LAPACK factorizations write into one triangle of S
while the mirror triangle keeps the overlap data, so S is restored afterwards without a
second copy:

* a Cholesky attempt of S - tau*I decides whether any eigenvalue lies below tau;
* if one does, a pivoted Cholesky of S - tau*I stopped at its first pivot that is not
  positive, and the LDL^T (Bunch-Kaufman) inertia of the small Schur complement of the
  functions it leaves, count them exactly (Sylvester's law of inertia, Haynsworth's
  additivity); that factorization is also the remedies' function subset at tau;
* restarted block Krylov iteration with Rayleigh-Ritz on (S - sigma*I)^-1, applied
  through a Cholesky factor (BLAS-3 solves), gives the smallest eigenpairs; when the
  remedies follow, the factor is made in blocks, non-diffuse functions first, in new
  arrays that the remedies' diffuse options reuse (`auditor.numerics.cholesky.SharedCore`);
* Lanczos (ARPACK) on S gives the largest eigenvalue.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import scipy.linalg

from ..base.errors import ResourceError
from .cholesky import FactorHandoff, SharedCore, core_solver, pstrf_until_nonpositive, shared_core, shifted_result
from .inplace import (
    _cholesky,
    _fortran_view,
    _ldl_negative_count,
    _Triangles,
    gather_symmetric,
    lower_copy,
    solve_lower_view,
)
from .krylov import InverseSolver, _largest_eigenvalue, _smallest_eigenpairs, factor_solver
from .memory import DEFAULT_MAX_VECTORS, _block_size
from .spectrum import (
    COUNT_LEVELS,
    Spectrum,
    column_growth,
    complete_groups,
    degeneracy_tolerance,
    gershgorin_radii,
    group_bounds,
    level_key,
)

#: eigenpairs computed past the wanted ones, to see where a degenerate group ends
GROUP_MARGIN = 4
#: Ritz values converge to about the square of the residual tolerance (1e-5): eigenvalues
#: closer than this relative margin count as one group on this path
RITZ_RTOL = 1e-8


def large_spectrum(
    S: np.ndarray,
    vector_level: float,
    min_vectors: int = 1,
    max_vectors: int = DEFAULT_MAX_VECTORS,
    exact_counts: bool = False,
    tol: float = 1e-5,
    maxiter: int = 200,
    seed: int = 0,
    info: dict[str, Any] | None = None,
    stage: Callable[[str], None] | None = None,
    handoff: FactorHandoff | None = None,
    core: np.ndarray | None = None,
) -> Spectrum:
    """Spectrum of unit-diagonal S without a full eigendecomposition.

    S is workspace, restored (from its mirror triangle) before returning, unless ``handoff``
    holds the pivoted factor lent in its lower triangle (`FactorHandoff.lend`; S is whole
    again when that is taken or released). Computes the max(m, min_vectors) smallest
    eigenpairs (`_krylov_step`), m the exact number below ``vector_level`` capped at
    ``max_vectors``. Counts at decades only when established (Cholesky success, inertia,
    all eigenvalues below computed), else None; ``exact_counts`` adds one LDL^T per missing
    one. ``tol``: relative residual of the Ritz pairs of (S - sigma I)^-1. ``info`` gets
    timings and counts, ``stage`` each step's name; ``handoff`` the pivoted factorization of
    S - vector_level*I and, with ``core`` (non-diffuse functions), its `SharedCore`.
    """
    info = {} if info is None else info
    stage = stage or _quiet
    n = S.shape[0]
    A, tau, t0 = _fortran_view(S), float(vector_level), time.perf_counter()
    radii = gershgorin_radii(S)  # their largest gives the Gershgorin bound; see _block_has_one_below
    stage("largest eigenvalue (Lanczos)")
    largest = _largest_eigenvalue(A)
    info["t_largest"] = time.perf_counter() - t0

    tri = _Triangles(A)
    try:
        widest = _block_size(min(n, max_vectors + GROUP_MARGIN), n)  # start block columns at most
        factored_at_tau = _attempt(tri, tau, info, stage, radii)
        shared, below_tau, start = None, 0, None
        if not factored_at_tau:
            shared, below_tau, start = _core_and_count(tri, tau, info, stage, handoff, core, widest, exact_counts)
        inverse = _inverse(tri, tau if factored_at_tau else None, largest, info, handoff, shared, stage)
        k = min(n, max(min(below_tau, max_vectors), min_vectors))
        values, vectors = _krylov_step(inverse, k, tau, below_tau, start, (tol, maxiter, seed), info, stage)
        counts = _established_counts(values, tau, below_tau, inverse.shift, all_below_tau=k >= below_tau)
        if exact_counts:
            _add_exact_counts(tri, counts, info)
    except BaseException:
        if handoff is not None:
            handoff.release()  # nothing will take what it holds; S whole again
        raise
    finally:
        if handoff is None or not handoff.lending:
            tri.restore()
    info["t_total"] = time.perf_counter() - t0
    wanted = max(min(below_tau, max_vectors), 1)  # the cause vectors: those below tau, else the smallest group
    spectrum = _assemble(values, vectors, largest, counts, 1.0 - float(radii.max(initial=0.0)), wanted)
    # exactly below_tau eigenvalues lie below tau, so the first one not computed is >= tau
    return replace(spectrum, beyond=tau if values.size >= below_tau else None)


def _krylov_step(
    inverse: _Inverse,
    k: int,
    tau: float,
    below_tau: int,
    start: np.ndarray | None,
    how: tuple[float, int, int],
    info: dict[str, Any],
    stage: Callable[[str], None],
) -> tuple[np.ndarray, np.ndarray]:
    """The k smallest eigenpairs and a few more, to see where the degenerate group at the cut
    ends (`_sorted_eigenpairs`; ``how``: its tol, maxiter and seed), from ``start`` first."""
    tol, maxiter, seed = how
    want = min(inverse.solver.size, k + GROUP_MARGIN)
    stage(f"{want} smallest eigenpairs (block Krylov)")
    values, vectors = _sorted_eigenpairs(inverse, want, tol, maxiter, seed, info, start)
    if start is not None and np.searchsorted(values, tau) < min(below_tau, want):
        # fewer Ritz values below tau than the inertia counts: start again at random
        values, vectors = _sorted_eigenpairs(inverse, want, tol, maxiter, seed, info, None)
    info["ritz_below_vector_level"] = int(np.searchsorted(values, tau))
    return values, vectors


def _assemble(values, vectors, largest: float, counts, bound: float, wanted: int) -> Spectrum:
    """The Spectrum of the computed pairs: cause vectors and growth figures over whole
    degenerate groups only."""
    n = vectors.shape[0]
    group_tol = degeneracy_tolerance(n, largest) + RITZ_RTOL * float(values[-1])
    formed = _confirmed_groups(values, group_tol, n)
    causes = min(formed, complete_groups(values[:formed], min(wanted, formed), group_tol))
    return Spectrum(
        n=n,
        values=values,
        vectors=np.ascontiguousarray(vectors[:, :causes]),
        smallest=float(values[0]),
        largest=largest,
        counts_below=counts,
        gershgorin_bound=bound,
        method="large",
        complete=False,
        growth_by_column=column_growth(vectors[:, :formed], values, group_tol),
        degeneracy_tol=group_tol,
    )


def _confirmed_groups(values: np.ndarray, tol: float, n: int) -> int:
    """How many of the computed eigenpairs form whole degenerate groups: up to the last gap
    seen among them (the last group may go on past what was computed), or all of them when
    they are the whole spectrum."""
    if values.size >= n:
        return values.size
    bounds = group_bounds(values, tol)
    return int(bounds[-2]) if bounds.size > 2 else values.size


def _quiet(_: str) -> None:
    pass


def _attempt(
    tri: _Triangles, tau: float, info: dict[str, Any], stage: Callable[[str], None], radii: np.ndarray
) -> bool:
    """Whether S - tau*I is positive definite: a Cholesky attempt (skipped when a block of the
    most overlapping functions already has an eigenvalue below tau, `_block_has_one_below`).
    When it is, the lower triangle of ``tri`` holds its Cholesky factor."""
    t1 = time.perf_counter()
    stage(f"Cholesky attempt of S - {tau:.0e} I")
    factored = not _block_has_one_below(tri.A, radii, tau) and _cholesky(tri.load(tau)) == 0
    info["t_cholesky_tau"] = time.perf_counter() - t1
    info["below_vector_level"] = 0
    return factored


def _core_and_count(
    tri: _Triangles,
    tau: float,
    info: dict[str, Any],
    stage: Callable[[str], None],
    handoff: FactorHandoff | None,
    core: np.ndarray | None,
    columns: int,
    exact_counts: bool,
) -> tuple[SharedCore | None, int, np.ndarray | None]:
    """The `SharedCore` of ``core`` when it will be handed on (`_early_core`), then
    `_pivoted_count`: (shared core or None, count below tau, start block or None).

    The core comes first, while S is whole, so that the pivoted factor can then stay lent in
    S's lower triangle (not with ``exact_counts``, whose factorizations need that triangle)."""
    t1 = time.perf_counter()
    shared = _early_core(tri, handoff, core, stage)
    info["t_core"] = time.perf_counter() - t1
    t1 = time.perf_counter()
    stage(f"pivoted Cholesky inertia of S - {tau:.0e} I")
    lend = shared is not None and not exact_counts
    below_tau, start = _pivoted_count(tri, tau, handoff, columns, lend)
    info["t_inertia_tau"] = time.perf_counter() - t1
    info["below_vector_level"] = below_tau
    return shared, below_tau, start


def _block_has_one_below(A: np.ndarray, radii: np.ndarray, tau: float) -> bool:
    """Whether the block of S of the quarter of functions with the largest Gershgorin radii
    has an eigenvalue below ``tau`` (its Cholesky of S - tau*I fails). Then so has S (Cauchy
    interlacing), at about 1/64 of the cost of the attempt on all of S."""
    n = A.shape[0]
    if n < 256:
        return False
    idx = np.sort(np.argsort(-radii, kind="stable")[: n // 4])
    block = gather_symmetric(A, idx, idx).T  # A is intact here: S itself; Fortran-ordered for dpotrf
    block[np.diag_indices_from(block)] -= tau
    return scipy.linalg.lapack.dpotrf(block, lower=1, overwrite_a=1, clean=0)[1] != 0


def _pivoted_count(
    tri: _Triangles, tau: float, handoff: FactorHandoff | None, columns: int, lend: bool = False
) -> tuple[int, np.ndarray | None]:
    """Number of eigenvalues of S below ``tau`` from one pivoted Cholesky of S - tau*I, and
    up to ``columns`` Ritz vectors of S for a start block (`_ritz_start`; None when no
    function is left, or too many for the start block to be worth its memory).

    It stops at its first pivot that is not positive, so its leading block is positive
    definite and, by Haynsworth's inertia additivity, S - tau*I has as many negative
    eigenvalues as the Schur complement of the functions left (few), counted by LDL^T
    inertia. ``handoff`` (when given) receives the factorization: with a copy of its factor,
    or with ``lend`` the factor left where it is (`FactorHandoff.lend`; S is then not whole).
    """
    A = tri.load(tau)
    n = A.shape[0]
    order, rank = pstrf_until_nonpositive(A)
    if handoff is not None and lend:
        handoff.lend(tri, order, rank, tau)
    elif handoff is not None:
        # the leading block of an N x N array (its untouched pages cost nothing): room for the
        # remedies to work in it (`auditor.numerics.cholesky.delete_in_place`, add-back)
        handoff.give(shifted_result(order, lower_copy(A[:rank, :rank], n), n, tau))
    rest = order[rank:]
    if rest.size == 0:
        return 0, None
    C = np.empty((rest.size, rest.size))
    for r0 in range(0, rest.size, 512):  # S[rest, rest] from the strict upper triangle (intact)
        rows = rest[r0 : r0 + 512]
        C[r0 : r0 + 512] = A[np.minimum.outer(rows, rest), np.maximum.outer(rows, rest)]
    C[np.diag_indices_from(C)] = tri.diag[rest] - tau
    L21 = A[rank:, :rank]
    C -= L21 @ L21.T
    count = _ldl_negative_count(np.asfortranarray(C))
    # a start block of at most ``columns`` vectors, when the span is not much wider than that
    return count, _ritz_start(A, order, rank, C, columns) if rest.size <= 4 * columns else None


def _ritz_start(A: np.ndarray, order: np.ndarray, rank: int, C: np.ndarray, columns: int) -> np.ndarray:
    """The ``columns`` lowest Ritz vectors of S on the span of Z = P [-L11^-T L21^T; I].

    Z is the part of each function left that the kept ones do not reach in the metric of
    S - tau*I, so Z^T (S - tau*I) Z = C (the Schur complement) and the near-null space of S
    lies close to span(Z): a start block that saves the Krylov iteration a restart.
    """
    n = A.shape[0]
    X = np.asfortranarray(A[rank:, :rank].T)
    solve_lower_view(A[:rank, :rank], X, transpose=True)  # X = L11^-T L21^T
    gram = X.T @ X
    gram[np.diag_indices_from(gram)] += 1.0  # Z^T Z
    Y = scipy.linalg.eigh(C, gram)[1][:, :columns]
    R = np.empty((n, Y.shape[1]))  # Z Y, without forming Z
    R[order[:rank]] = -(X @ Y)
    R[order[rank:]] = Y
    return R


@dataclass(frozen=True)
class _Inverse:
    """(S - shift*I)^-1 applied by ``solver``, in S's own order, or in ``order`` (a
    symmetric permutation of S) when given."""

    shift: float
    solver: InverseSolver
    order: np.ndarray | None = None


def _early_core(
    tri: _Triangles, handoff: FactorHandoff | None, core: np.ndarray | None, stage: Callable[[str], None]
) -> SharedCore | None:
    """The `SharedCore` of ``core``, gathered from S made whole; None without a handoff to
    take it, when ``core`` is empty or everything, or when S[core, core] is not positive
    definite to rounding."""
    n = tri.A.shape[0]
    if handoff is None or core is None or not 0 < np.unique(core).size < n:
        return None
    stage("Cholesky factor of S in blocks, non-diffuse first")
    tri.restore()  # S whole again: the core's blocks are gathered from it
    return shared_core(tri.A.T, core)  # C-ordered S: its rows are gathered whole


def _inverse(
    tri: _Triangles,
    factored: float | None,
    largest: float,
    info: dict[str, Any],
    handoff: FactorHandoff | None,
    shared: SharedCore | None,
    stage: Callable[[str], None],
) -> _Inverse:
    """The inverse of S - shift*I for the Krylov iteration: through the factor of S - tau*I
    already in ``tri`` (``factored`` = tau), through ``shared`` (then given to ``handoff``),
    or through the Cholesky factor of S below its spectrum (made in ``tri``, the factor
    ``handoff`` holds there copied out first)."""
    t1 = time.perf_counter()
    solver = None if factored is not None or shared is None else core_solver(shared)
    if factored is not None:
        inverse = _Inverse(factored, factor_solver(tri.A))
    elif shared is not None and solver is not None and handoff is not None:
        handoff.give_core(shared)
        inverse = _Inverse(0.0, solver, np.concatenate((shared.core, shared.rest)))
    else:
        if handoff is not None:
            handoff.whole()  # the triangle is needed for the factor of S
        stage("Cholesky factor of S below its spectrum")
        inverse = _Inverse(_factor_below_spectrum(tri, largest), factor_solver(tri.A))
    info["t_cholesky_shift"] = time.perf_counter() - t1
    info["shift"] = inverse.shift
    info["inverse"] = "core blocks" if inverse.order is not None else "cholesky"
    return inverse


def _sorted_eigenpairs(
    inverse: _Inverse,
    k: int,
    tol: float,
    maxiter: int,
    seed: int,
    info: dict[str, Any],
    start: np.ndarray | None,
) -> tuple[np.ndarray, np.ndarray]:
    """The k smallest eigenpairs, ascending, through ``inverse`` (``start``: approximate
    eigenvectors for the start block, or None).

    Raises ResourceError when the Ritz pairs did not converge to ``tol``.
    """
    t1 = time.perf_counter()
    perm = inverse.order
    if perm is not None and start is not None:
        start = start[perm]
    values, vectors = _smallest_eigenpairs(inverse.solver, inverse.shift, k, tol, maxiter, seed, info, start)
    info["t_eigenpairs"] = time.perf_counter() - t1
    if not info["residual"] <= tol:  # unconverged Ritz pairs would be reported as eigenpairs
        n = inverse.solver.size
        raise ResourceError(
            f"the large spectrum path did not converge in {maxiter} iterations for {n} basis functions "
            f"(residual {info['residual']:.1e} > {tol:.0e}); --spectrum full computes every eigenvalue if S fits"
        )
    order = np.argsort(values, kind="stable")
    if perm is not None:  # rows back to S's own order, columns sorted
        unpermuted = np.empty_like(vectors)
        unpermuted[perm] = vectors[:, order]
        return values[order], unpermuted
    if np.any(order != np.arange(order.size)):  # usually sorted already: no copy then
        values, vectors = values[order], vectors[:, order]
    return values, vectors


def _established_counts(
    values: np.ndarray, tau: float, below_tau: int, factored_shift: float, all_below_tau: bool
) -> dict[str, int | None]:
    """Eigenvalue counts below each decade that are established; the rest stay None.

    ``values`` are the computed smallest eigenvalues (ascending) and ``all_below_tau``
    tells whether they include every eigenvalue below ``tau``.
    """
    counts: dict[str, int | None] = {level_key(t): None for t in COUNT_LEVELS}
    for t in COUNT_LEVELS:
        key = level_key(t)
        if t <= tau and factored_shift == tau and below_tau == 0:
            counts[key] = 0  # Cholesky of S - tau I succeeded
        elif t == tau:
            counts[key] = below_tau  # Sylvester's law of inertia
        elif (t < tau and all_below_tau) or (values.size and values[-1] >= t):
            counts[key] = int(np.searchsorted(values, t, side="left"))
    return counts


def _add_exact_counts(tri: _Triangles, counts: dict[str, int | None], info: dict[str, Any]) -> None:
    """Fill each missing count by the inertia of one LDL^T factorization of S - t*I."""
    t1 = time.perf_counter()
    for t in COUNT_LEVELS:
        if counts[level_key(t)] is None:
            counts[level_key(t)] = _ldl_negative_count(tri.load(t))
    info["t_exact_counts"] = time.perf_counter() - t1


def _factor_below_spectrum(tri: _Triangles, largest: float) -> float:
    """Cholesky of S - sigma I with sigma <= 0; returns sigma.

    sigma = 0 first; S that is singular to rounding needs a small negative shift,
    raised until the factorization succeeds.
    """
    shift = 0.0
    step = 64.0 * np.finfo(float).eps * max(1.0, largest) * np.sqrt(tri.A.shape[0])
    while True:
        if _cholesky(tri.load(shift)) == 0:
            return shift
        shift = -step if shift == 0.0 else 100.0 * shift
        if -shift > max(1.0, largest):
            raise RuntimeError("no positive definite shift of S found")
