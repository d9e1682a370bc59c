"""Large-system spectrum: factorizations of shifted S instead of a full eigendecomposition.

One N x N array is used throughout. LAPACK factorizations write into one triangle of S
while the mirror triangle keeps the overlap data, so S is restored afterwards without a
second copy:

* a Cholesky attempt of S - tau*I decides whether any eigenvalue lies below tau;
* if one does, the inertia of an LDL^T (Bunch-Kaufman) factorization of S - tau*I counts
  them exactly (Sylvester's law of inertia);
* restarted block Krylov iteration with Rayleigh-Ritz on (S - sigma*I)^-1, applied
  through a Cholesky factor (BLAS-3 solves), gives the smallest eigenpairs;
* Lanczos (ARPACK) on S gives the largest eigenvalue.
"""

from __future__ import annotations

import time
from typing import Any

import numpy as np

from ..base.errors import ResourceError
from .inplace import _cholesky, _fortran_view, _ldl_negative_count, _Triangles
from .krylov import _largest_eigenvalue, _smallest_eigenpairs
from .memory import DEFAULT_MAX_VECTORS
from .spectrum import COUNT_LEVELS, Spectrum, gershgorin_lower_bound, level_key


def large_spectrum(
    S: np.ndarray,
    vector_level: float,
    min_vectors: int = 3,
    max_vectors: int = DEFAULT_MAX_VECTORS,
    exact_counts: bool = False,
    tol: float = 1e-5,
    maxiter: int = 200,
    seed: int = 0,
    info: dict[str, Any] | None = None,
) -> Spectrum:
    """Spectrum of unit-diagonal S without a full eigendecomposition.

    S is used as workspace and restored (symmetric, from its mirror triangle) before
    returning. Computes the max(m, min_vectors) smallest eigenpairs, where m is the
    exact number below ``vector_level``, capped at ``max_vectors``. A count at a decade is
    reported only when established (Cholesky success, LDL^T inertia, or all eigenvalues
    below that decade computed); otherwise None. ``exact_counts`` adds one LDL^T per
    missing decade. ``tol`` bounds the relative residual of the Ritz pairs of
    (S - sigma I)^-1 (eigenvalue errors are about its square); ``info`` receives
    timings and iteration counts.
    """

    info = {} if info is None else info
    n = S.shape[0]
    A = _fortran_view(S)
    tau = float(vector_level)
    t0 = time.perf_counter()
    bound = gershgorin_lower_bound(S)
    largest = _largest_eigenvalue(A)
    info["t_largest"] = time.perf_counter() - t0

    tri = _Triangles(A)
    counts: dict[str, int | None] = {level_key(t): None for t in COUNT_LEVELS}
    try:
        # 1. Decision: is any eigenvalue below tau?
        t1 = time.perf_counter()
        below_tau = None
        factored_shift = None
        if _cholesky(tri.load(tau)) == 0:
            below_tau = 0
            factored_shift = tau
        info["t_cholesky_tau"] = time.perf_counter() - t1
        # 2. How many: inertia of S - tau I.
        if below_tau is None:
            t1 = time.perf_counter()
            below_tau = _ldl_negative_count(tri.load(tau))
            info["t_ldl_tau"] = time.perf_counter() - t1
        info["below_vector_level"] = below_tau
        # 3. Smallest eigenpairs from a positive definite shift below the spectrum.
        t1 = time.perf_counter()
        if factored_shift is None:
            factored_shift = _factor_below_spectrum(tri, largest)
        info["t_cholesky_shift"] = time.perf_counter() - t1
        info["shift"] = factored_shift
        k = min(n, max(min(below_tau, max_vectors), min_vectors))
        t1 = time.perf_counter()
        values, vectors = _smallest_eigenpairs(tri.A, factored_shift, k, tol, maxiter, seed, info)
        info["t_eigenpairs"] = time.perf_counter() - t1
        if not info["residual"] <= tol:  # unconverged Ritz pairs would be reported as eigenpairs
            raise ResourceError(
                f"the large spectrum path did not converge in {maxiter} iterations for {n} basis functions "
                f"(residual {info['residual']:.1e} > {tol:.0e}); --spectrum full computes every eigenvalue if S fits"
            )
        order = np.argsort(values, kind="stable")
        if np.any(order != np.arange(order.size)):  # usually sorted already: no copy then
            values, vectors = values[order], vectors[:, order]
        info["ritz_below_vector_level"] = int(np.searchsorted(values, tau))

        # 4. Counts that are established; the rest stay None.
        all_below_tau = k >= below_tau
        for t in COUNT_LEVELS:
            key = level_key(t)
            if t <= tau and factored_shift == tau and below_tau == 0:
                counts[key] = 0  # Cholesky of S - tau I succeeded
            elif t == tau:
                counts[key] = below_tau  # Sylvester's law of inertia
            elif (t < tau and all_below_tau) or (values.size and values[-1] >= t):
                counts[key] = int(np.searchsorted(values, t, side="left"))
        if exact_counts:
            t1 = time.perf_counter()
            for t in COUNT_LEVELS:
                if counts[level_key(t)] is None:
                    counts[level_key(t)] = _ldl_negative_count(tri.load(t))
            info["t_exact_counts"] = time.perf_counter() - t1
    finally:
        tri.restore()
    info["t_total"] = time.perf_counter() - t0
    return Spectrum(
        n=n,
        values=values,
        vectors=vectors,
        smallest=float(values[0]),
        largest=largest,
        counts_below=counts,
        gershgorin_bound=bound,
        method="large",
        complete=False,
        column_max=np.abs(vectors).max(axis=0),
        # exactly below_tau eigenvalues lie below tau, so the first one not computed is >= tau
        beyond=tau if values.size >= below_tau else None,
    )


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
