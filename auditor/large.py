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

import ctypes
import os
import time
from typing import Any

import numpy as np
import scipy.linalg
from scipy.linalg import blas, lapack
from scipy.sparse.linalg import LinearOperator, eigsh

from .errors import ResourceError, UsageError
from .spectrum import (
    COUNT_LEVELS,
    SCAN_BYTES,
    Spectrum,
    gershgorin_lower_bound,
    level_key,
)

#: method="auto" uses the large path from this many basis functions on. Measured on this
#: 2-core machine (water clusters in aug-cc-pVTZ, spectrum step only, 2 December 2026):
#:   N       1012  1564  2024  2576  3036
#:   full s  0.12  0.63  0.84  1.95  2.93
#:   large s 0.12  0.21  0.41  0.62  1.01
#: The large path is faster from ~1500 on, but below ~3000 functions the full path costs
#: seconds and gives the complete spectrum (every count, gap and growth for the advice).
CROSSOVER_N = 3000

#: Default cap on the number of eigenpairs the large path computes.
DEFAULT_MAX_VECTORS = 400

METHODS = ("full", "large", "auto")

_GIB = 1024.0 ** 3
#: Headroom kept free for Python, pyscf and the rest of the audit.
_HEADROOM_BYTES = 512 * 1024 ** 2
#: audits estimated below this size skip the memory check (it reads /proc/meminfo)
_SMALL_BYTES = 64 * 1024 ** 2
#: Temporary share of S the findings step takes on top (they read S in SCAN_BYTES row
#: blocks; what they keep grows with the number of functions, not its square).
_FINDINGS_FRACTION = 0.05


# --------------------------------------------------------------------------- memory


#: Blocks in the Krylov basis built from each restart block.
KRYLOV_DEPTH = 4


def _block_size(k: int, n: int) -> int:
    """Columns of the restart block for k wanted eigenpairs."""
    return min(n, k + max(8, k // 8))


def estimate_bytes(
    n_functions: int, method: str, max_vectors: int = DEFAULT_MAX_VECTORS, min_vectors: int = 3
) -> int:
    """Bytes an audit of ``n_functions`` needs for S plus its spectrum step.

    "full": S, the copy LAPACK overwrites, the divide-and-conquer workspace of about
    2 N^2 and the returned eigenvectors (measured peak: 5.1 copies of S at N = 11960).
    "large": S, the Krylov basis (4 blocks of N x p), the image of its newest block,
    the returned vectors, the m x m Ritz problem (m = 4p) and small workspaces
    (measured peak: 1.20 copies of S at N = 11960, 293 eigenpairs).
    Both: plus the temporaries of the findings step (see _FINDINGS_FRACTION).
    """
    n = int(n_functions)
    s = 8 * n * n
    findings = int(_FINDINGS_FRACTION * s) + 8 * SCAN_BYTES
    if method == "full":
        return max(5 * s, s + findings) + 64 * n
    if method == "large":
        k = min(n, max(max_vectors, min_vectors))
        p = _block_size(k, n)
        basis = 8 * n * ((KRYLOV_DEPTH + 2) * p + k + 64) + 2 * 8 * (KRYLOV_DEPTH * p) ** 2
        return s + max(basis, findings)  # the findings run after the spectrum step
    if method == "auto":
        return estimate_bytes(n, resolve_method(n, "auto"), max_vectors, min_vectors)
    raise UsageError(f"unknown spectrum method {method!r}; choose one of {', '.join(METHODS)}")


def available_bytes() -> int:
    """Memory the kernel reports as available (MemAvailable), else free physical pages."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")


def _extra_bytes(n_functions: int, method: str, max_vectors: int, s_built: bool) -> int:
    """Bytes still to be allocated: all of the estimate, or all but S once S exists."""
    need = estimate_bytes(n_functions, method, max_vectors)
    return need - 8 * n_functions * n_functions if s_built else need


def resolve_method(
    n_functions: int, method: str, available: int | None = None, s_built: bool = False
) -> str:
    """Turn "auto" into "full" or "large": large from CROSSOVER_N on or when full does not fit."""
    if method not in METHODS:
        raise UsageError(f"unknown spectrum method {method!r}; choose one of {', '.join(METHODS)}")
    if method != "auto":
        return method
    if n_functions >= CROSSOVER_N:
        return "large"
    if available is None and estimate_bytes(n_functions, "full", DEFAULT_MAX_VECTORS) < _SMALL_BYTES:
        return "full"
    if available is None:
        available = available_bytes()
    if _extra_bytes(n_functions, "full", DEFAULT_MAX_VECTORS, s_built) + _HEADROOM_BYTES > available:
        return "large"
    return "full"


def check_memory(
    n_functions: int,
    method: str,
    available: int | None = None,
    max_vectors: int = DEFAULT_MAX_VECTORS,
    s_built: bool = False,
) -> int:
    """Raise ResourceError unless the audit fits; return the estimated bytes still needed.

    Call before S is built so that an impossible size ends with a message instead of
    the process being killed; with ``s_built`` the memory S already holds is not counted
    again (``available`` is then what is left beside S).
    """
    if available is None and estimate_bytes(n_functions, method, max_vectors) < _SMALL_BYTES:
        # a few tens of MB at most: not worth reading /proc/meminfo for every small molecule
        return _extra_bytes(n_functions, resolve_method(n_functions, method, None, s_built), max_vectors, s_built)
    if available is None:
        available = available_bytes()
    resolved = resolve_method(n_functions, method, available, s_built)
    needed = _extra_bytes(n_functions, resolved, max_vectors, s_built)
    if needed + _HEADROOM_BYTES > available:
        hint = ""
        if resolved == "full":
            large = _extra_bytes(n_functions, "large", max_vectors, s_built)
            if large + _HEADROOM_BYTES <= available:
                hint = f"; the large spectrum path needs about {large / _GIB:.1f} GB and would fit"
        what = "more" if s_built else ""
        raise ResourceError(
            f"overlap audit of {n_functions} basis functions ({resolved} spectrum) needs about "
            f"{needed / _GIB:.1f} GB of {what + ' ' if what else ''}memory but only "
            f"{available / _GIB:.1f} GB is available{hint}"
        )
    return needed


# --------------------------------------------------------------------------- triangles


def _fortran_view(S: np.ndarray) -> np.ndarray:
    """S itself as a Fortran-ordered array (its transpose when S is C-ordered)."""
    if S.dtype != np.float64 or S.ndim != 2 or S.shape[0] != S.shape[1]:
        raise ValueError("S must be a square float64 array")
    if not S.flags.writeable:
        raise ValueError("the large path works in place and needs a writeable S")
    if S.flags.f_contiguous:
        return S
    if S.flags.c_contiguous:
        return S.T  # same memory; S is symmetric
    raise ValueError("the large path needs a contiguous S (C or Fortran order)")


def _restore_lower(A: np.ndarray, diag: np.ndarray, shift: float = 0.0, block: int = 64) -> None:
    """Overwrite the lower triangle of A with the mirror of its strict upper triangle.

    The diagonal becomes ``diag - shift``; no N x N temporary is made.
    """
    n = A.shape[0]
    for j0 in range(0, n, block):
        j1 = min(n, j0 + block)
        A[j1:, j0:j1] = A[j0:j1, j1:].T
        d = A[j0:j1, j0:j1]
        il = np.tril_indices(j1 - j0, -1)
        d[il] = d.T[il]
    np.fill_diagonal(A, diag - shift)


def _fortran_routine(module, name: str, n_args: int):
    """A BLAS/LAPACK routine of scipy's own library, callable with raw pointers."""
    capsule = module.__pyx_capi__[name]
    api = ctypes.pythonapi
    api.PyCapsule_GetName.restype = ctypes.c_char_p
    api.PyCapsule_GetName.argtypes = [ctypes.py_object]
    api.PyCapsule_GetPointer.restype = ctypes.c_void_p
    api.PyCapsule_GetPointer.argtypes = [ctypes.py_object, ctypes.c_char_p]
    address = api.PyCapsule_GetPointer(capsule, api.PyCapsule_GetName(capsule))
    return ctypes.CFUNCTYPE(None, *([ctypes.c_void_p] * n_args))(address)


_ROUTINES: dict[str, Any] = {}


def _routine(name: str):
    if not _ROUTINES:
        from scipy.linalg import cython_blas, cython_lapack

        _ROUTINES.update(
            dgemm=_fortran_routine(cython_blas, "dgemm", 13),
            dsyrk=_fortran_routine(cython_blas, "dsyrk", 10),
            dtrsm=_fortran_routine(cython_blas, "dtrsm", 11),
            dpotrf=_fortran_routine(cython_lapack, "dpotrf", 5),
        )
    return _ROUTINES[name]


def _cholesky(A: np.ndarray, block: int = 384) -> int:
    """In-place Cholesky of the lower triangle of Fortran-ordered A; returns the LAPACK
    convention info (0 = success, j = the leading minor of order j is not positive).

    Left-looking and blocked, calling BLAS-3 on sub-blocks of A in place: a failure at
    column j costs about the work up to column j (LAPACK's right-looking dpotrf does
    most of the trailing updates first), and it avoids the dpotrf of scipy's bundled
    OpenBLAS, which crashed (segmentation fault) at N = 35000 on this machine.
    """
    n = A.shape[0]
    if not A.flags.f_contiguous:
        raise ValueError("Cholesky needs a Fortran-ordered array")
    c = ctypes
    ld = c.c_int(n)
    base = A.ctypes.data
    one, minus = c.c_double(1.0), c.c_double(-1.0)
    L, R, N, T = c.c_char(b"L"), c.c_char(b"R"), c.c_char(b"N"), c.c_char(b"T")
    info = c.c_int(0)
    ref = c.byref

    def at(i: int, j: int):
        return c.c_void_p(base + 8 * (i + j * n))

    gemm, syrk, trsm, potrf = (_routine(x) for x in ("dgemm", "dsyrk", "dtrsm", "dpotrf"))
    for k0 in range(0, n, block):
        k1 = min(n, k0 + block)
        kb, below = c.c_int(k1 - k0), c.c_int(n - k1)
        if k0 > 0:
            done = c.c_int(k0)
            # A11 -= L10 L10^T ; A21 -= L20 L10^T (columns left of the panel)
            syrk(ref(L), ref(N), ref(kb), ref(done), ref(minus), at(k0, 0), ref(ld),
                 ref(one), at(k0, k0), ref(ld))
            if n > k1:
                gemm(ref(N), ref(T), ref(below), ref(kb), ref(done), ref(minus), at(k1, 0),
                     ref(ld), at(k0, 0), ref(ld), ref(one), at(k1, k0), ref(ld))
        potrf(ref(L), ref(kb), at(k0, k0), ref(ld), ref(info))
        if info.value != 0:
            if info.value < 0:
                raise RuntimeError(f"dpotrf argument error {info.value}")
            return k0 + info.value
        if n > k1:  # L21 = A21 L11^-T
            trsm(ref(R), ref(L), ref(T), ref(N), ref(below), ref(kb), ref(one), at(k0, k0),
                 ref(ld), at(k1, k0), ref(ld))
    return 0


def _ldl_negative_count(A: np.ndarray) -> int:
    """Number of negative eigenvalues of the lower triangle of A, via LDL^T inertia.

    Sylvester's law of inertia: A = L D L^T has as many negative eigenvalues as D.
    D has 1x1 blocks and 2x2 blocks (marked by negative pivots in IPIV).
    """
    n = A.shape[0]
    lwork = int(lapack.dsytrf_lwork(n, lower=1)[0])
    _, ipiv, info = lapack.dsytrf(A, lower=1, lwork=max(lwork, 1), overwrite_a=1)
    if info < 0:
        raise RuntimeError(f"dsytrf argument error {info}")
    d = np.diagonal(A)
    two = np.flatnonzero(ipiv < 0)
    one = np.ones(n, dtype=bool)
    one[two] = False
    negative = int(np.count_nonzero(d[one] < 0.0))
    # With UPLO='L' a 2x2 block at (k, k+1) has ipiv[k] == ipiv[k+1] < 0.
    for k in two[::2].tolist():
        a, b, c = A[k, k], A[k + 1, k], A[k + 1, k + 1]
        det = a * c - b * b
        if det < 0.0:
            negative += 1
        elif det > 0.0:
            negative += 2 if a + c < 0.0 else 0
        else:
            negative += 1 if a + c < 0.0 else 0
    return negative


class _Triangles:
    """Holds S in the strict upper triangle of A (plus its diagonal) while the lower
    triangle is used for factorizations."""

    def __init__(self, A: np.ndarray):
        self.A = A
        self.diag = np.diagonal(A).copy()
        self.dirty = False

    def load(self, shift: float) -> np.ndarray:
        """Put S - shift*I into the lower triangle and return A for factorization."""
        if self.dirty or shift != 0.0:
            _restore_lower(self.A, self.diag, shift)
        self.dirty = True
        return self.A

    def restore(self) -> None:
        if self.dirty:
            _restore_lower(self.A, self.diag, 0.0)
            self.dirty = False


# --------------------------------------------------------------------------- eigenpairs


def _largest_eigenvalue(A: np.ndarray, tol: float = 1e-8) -> float:
    """Largest eigenvalue of the intact symmetric A by Lanczos (ARPACK)."""
    n = A.shape[0]
    if n <= 64:
        return float(np.linalg.eigvalsh(A)[-1])
    op = LinearOperator((n, n), matvec=lambda x: A @ x, dtype=np.float64)
    v0 = np.full(n, 1.0 / np.sqrt(n))  # S has mostly positive entries: a good start
    return float(eigsh(op, k=1, which="LA", tol=tol, v0=v0, return_eigenvectors=False)[0])


def _orthonormalize(X: np.ndarray) -> None:
    """Orthonormalize the columns of the Fortran-ordered block X in place.

    Cholesky QR twice (BLAS-3; tall thin Householder QR was the bottleneck here);
    Householder QR when the block is too ill-conditioned for it.
    """
    for _ in range(2):
        G = blas.dsyrk(1.0, X, trans=1, lower=0)
        R, info = lapack.dpotrf(G, lower=0, clean=1, overwrite_a=1)
        d = np.abs(np.diagonal(R))
        if info != 0 or d.min() <= 1e-6 * d.max():
            _householder(X)
            return
        blas.dtrsm(1.0, R, X, side=1, lower=0, overwrite_b=1)


def _householder(X: np.ndarray) -> None:
    """Householder QR of the Fortran-ordered block X, in place (X becomes Q)."""
    qr, tau, _, info = lapack.dgeqrf(X, overwrite_a=1)
    if info != 0:
        raise RuntimeError(f"dgeqrf failed ({info})")
    q, _, info = lapack.dorgqr(qr, tau, overwrite_a=1)
    if info != 0:
        raise RuntimeError(f"dorgqr failed ({info})")
    if q is not X:
        X[...] = q


def _times_in_place(X: np.ndarray, U: np.ndarray, rows: int = 4096) -> None:
    """X[:, :c] = X @ U for U with c columns, by row blocks (no N x c temporary)."""
    c = U.shape[1]
    Uf = np.asfortranarray(U)
    for r0 in range(0, X.shape[0], rows):
        X[r0:r0 + rows, :c] = X[r0:r0 + rows] @ Uf


def _smallest_eigenpairs(
    L: np.ndarray, shift: float, k: int, tol: float, maxiter: int, seed: int, info: dict
) -> tuple[np.ndarray, np.ndarray]:
    """k smallest eigenpairs of S from the Cholesky factor L of S - shift*I (lower triangle).

    Restarted block Krylov iteration on A = (S - shift*I)^-1: from a block X of p > k
    columns the basis Q = [X, AX, A^2 X, ...] (``KRYLOV_DEPTH`` blocks, orthonormalized
    against each other) gives Rayleigh-Ritz pairs of A; the p leading Ritz vectors
    restart it. Each application of A is one BLAS-3 solve with p right-hand sides.

    Only Q and the image W = A Q_last of its last block are stored: A Q_j for an earlier
    block lies in span(Q) (the next block was made from it), so H = Q^T A Q is filled
    block column by block column as the images appear, and the residual of a Ritz pair
    (theta, u) is (W - Q Q^T W) u_last, with u_last its last-block components.
    """
    n = L.shape[0]
    p = _block_size(k, n)
    depth = KRYLOV_DEPTH if KRYLOV_DEPTH * p <= n // 2 else 1
    m = depth * p
    rng = np.random.default_rng(seed)
    Q = np.empty((n, m), order="F")   # orthonormal Krylov basis
    W = np.empty((n, p), order="F")   # A applied to the newest block
    H = np.zeros((m, m), order="F")   # Q^T A Q, upper block triangle as computed
    Q[:, :p] = rng.standard_normal((n, p))
    _orthonormalize(Q[:, :p])
    worst = np.inf
    solves = 0
    for it in range(1, maxiter + 1):
        for j in range(depth):
            blk = slice(j * p, (j + 1) * p)
            W[...] = Q[:, blk]
            _, status = lapack.dpotrs(L, W, lower=1, overwrite_b=1)
            if status != 0:
                raise RuntimeError(f"dpotrs failed ({status})")
            solves += p
            done = Q[:, :(j + 1) * p]
            H[:(j + 1) * p, blk] = blas.dgemm(1.0, done, W, trans_a=1)
            if j + 1 < depth:
                nxt = Q[:, (j + 1) * p:(j + 2) * p]
                nxt[...] = W
                for _ in range(2):  # classical Gram-Schmidt, twice, in place
                    out = blas.dgemm(-1.0, done, blas.dgemm(1.0, done, nxt, trans_a=1), beta=1.0, c=nxt,
                                     overwrite_c=1)
                    if not np.shares_memory(out, nxt):
                        nxt[...] = out
                _orthonormalize(nxt)
        last = slice(m - p, m)
        HW = H[:, last].copy()  # Q^T W, for the residuals
        # the p largest Ritz values of A (the smallest eigenvalues of S), in place on H,
        # whose upper triangle is complete
        theta, U = scipy.linalg.eigh(H, lower=False, overwrite_a=True, check_finite=False,
                                     subset_by_index=[m - p, m - 1], driver="evr")
        theta, U = theta[::-1], np.asfortranarray(U[:, ::-1])
        worst = _worst_residual(Q, W, HW, U[last, :k], theta[:k])
        if worst <= tol or it == maxiter or m >= n:
            vectors = blas.dgemm(1.0, Q, U[:, :k])
            break
        if depth > 1:  # restart from the leading Ritz vectors Q U
            _times_in_place(Q, U[:, :p])
        else:  # small N: plain subspace iteration, restart from A X = W
            Q[:, :p] = blas.dgemm(1.0, W, U[:, :p])
            _orthonormalize(Q[:, :p])
    info["iterations"] = it
    info["block"] = p
    info["krylov_depth"] = depth
    info["column_solves"] = solves
    info["residual"] = worst
    values = 1.0 / theta[:k] + shift
    return values, vectors


def _worst_residual(Q: np.ndarray, W: np.ndarray, HW: np.ndarray, U_last: np.ndarray,
                    theta: np.ndarray) -> float:
    """max_i ||(W - Q HW) u_i|| / theta_i with HW = Q^T W, in column chunks (bounded memory)."""
    worst = 0.0
    for c0 in range(0, U_last.shape[1], 64):
        Uc = np.asfortranarray(U_last[:, c0:c0 + 64])
        R = blas.dgemm(1.0, W, Uc)
        R = blas.dgemm(-1.0, Q, HW @ Uc, beta=1.0, c=R, overwrite_c=1)
        worst = max(worst, float((np.linalg.norm(R, axis=0) / theta[c0:c0 + 64]).max()))
    return worst


# --------------------------------------------------------------------------- spectrum


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
        values, vectors = _smallest_eigenpairs(
            tri.A, factored_shift, k, tol, maxiter, seed, info
        )
        info["t_eigenpairs"] = time.perf_counter() - t1
        if not info["residual"] <= tol:  # unconverged Ritz pairs would be reported as eigenpairs
            raise ResourceError(
                f"the large spectrum path did not converge in {maxiter} iterations for {n} basis functions "
                f"(residual {info['residual']:.1e} > {tol:.0e}); --spectrum full computes every eigenvalue if S fits")
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
