"""Extreme eigenpairs without a full eigendecomposition: block Krylov on the inverse, Lanczos for the largest."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import scipy.linalg
from scipy.linalg import blas, lapack
from scipy.sparse.linalg import LinearOperator, eigsh

from .inplace import solve_lower_view
from .memory import KRYLOV_DEPTH, KRYLOV_MAX_DEPTH, _block_size


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
        X[r0 : r0 + rows, :c] = X[r0 : r0 + rows] @ Uf


def _smallest_eigenpairs(
    L: np.ndarray | InverseSolver,
    shift: float,
    k: int,
    tol: float,
    maxiter: int,
    seed: int,
    info: dict,
    start: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """k smallest eigenpairs of S from the Cholesky factor L of S - shift*I (lower triangle),
    or from an `InverseSolver` that applies (S - shift*I)^-1; ``start``: approximate
    eigenvectors, best first, for the start block (`_start_block`).

    Restarted block Krylov iteration on A = (S - shift*I)^-1: from a block X of p > k
    columns the basis Q = [X, AX, A^2 X, ...] (``KRYLOV_DEPTH`` blocks, orthonormalized
    against each other) gives Rayleigh-Ritz pairs of A; the p leading Ritz vectors
    restart it (the first pass first grows up to ``KRYLOV_MAX_DEPTH`` blocks). Each
    application of A is one BLAS-3 solve with p right-hand sides.

    Only Q and the image W = A Q_last of its last block are stored: A Q_j for an earlier
    block lies in span(Q) (the next block was made from it), so H = Q^T A Q is filled
    block column by block column as the images appear, and the residual of a Ritz pair
    (theta, u) is (W - Q Q^T W) u_last, with u_last its last-block components.
    """
    solve = L if isinstance(L, InverseSolver) else factor_solver(L)
    n, p = solve.size, _block_size(k, solve.size)
    depth = KRYLOV_DEPTH if KRYLOV_DEPTH * p <= n // 2 else 1
    # the first pass may go deeper instead of restarting
    deepest = KRYLOV_MAX_DEPTH if KRYLOV_MAX_DEPTH * p <= n // 2 else depth
    rng = np.random.default_rng(seed)
    Q = np.empty((n, deepest * p), order="F")  # orthonormal Krylov basis
    W = np.empty((n, p), order="F")  # A applied to the newest block
    H = np.zeros((deepest * p, deepest * p), order="F")  # Q^T A Q, upper block triangle as computed
    _start_block(Q[:, :p], rng, start)
    solves = 0
    for it in range(1, maxiter + 1):
        solves += _build_krylov_basis(solve, Q, W, H, p, depth)
        j = depth
        theta, U, worst = _ritz(Q, W, H, p, j, k)
        while worst > tol and it == 1 and j < deepest:
            solves += _build_krylov_basis(solve, Q, W, H, p, j + 1, first=j)
            j += 1
            theta, U, worst = _ritz(Q, W, H, p, j, k)
        m = j * p
        if worst <= tol or it == maxiter or m >= n:
            vectors = blas.dgemm(1.0, Q[:, :m], U[:, :k])
            break
        if depth > 1:  # restart from the leading Ritz vectors Q U
            _times_in_place(Q[:, :m], U[:, :p])
        else:  # small N: plain subspace iteration, restart from A X = W
            Q[:, :p] = blas.dgemm(1.0, W, U[:, :p])
            _orthonormalize(Q[:, :p])
    info["iterations"] = it
    info["block"] = p
    info["krylov_depth"] = j
    info["column_solves"] = solves
    info["residual"] = worst
    values = 1.0 / theta[:k] + shift
    return values, vectors


@dataclass(frozen=True)
class InverseSolver:
    """``apply(W)`` overwrites a Fortran-ordered block W (``size`` rows) with (S - shift*I)^-1 W."""

    apply: Callable[[np.ndarray], None]
    size: int


def factor_solver(L: np.ndarray) -> InverseSolver:
    """The `InverseSolver` of a lower Cholesky factor L (read in place: it may be a block of a
    larger column-major array), two triangular solves."""

    def apply(W: np.ndarray) -> None:
        solve_lower_view(L, W)
        solve_lower_view(L, W, transpose=True)

    return InverseSolver(apply, int(L.shape[0]))


def _start_block(X: np.ndarray, rng: np.random.Generator, start: np.ndarray | None) -> None:
    """Fill the block X with orthonormal start vectors: the columns of ``start`` (if any) with
    a little random added, random columns after them."""
    n, p = X.shape
    X[...] = rng.standard_normal((n, p))
    if start is not None:
        c = min(p, start.shape[1])
        X[:, :c] = start[:, :c] / np.linalg.norm(start[:, :c], axis=0) + (1e-3 / np.sqrt(n)) * X[:, :c]
    _orthonormalize(X)


def _build_krylov_basis(
    solve: InverseSolver, Q: np.ndarray, W: np.ndarray, H: np.ndarray, p: int, depth: int, first: int = 0
) -> int:
    """Extend the start block Q[:, :p] to the Krylov basis Q[:, :depth*p], in place.

    A = (S - shift*I)^-1 is applied by ``solve`` (in place); the block
    columns of H = Q^T A Q are filled as the images appear, and W ends as A times the
    last block. From ``first`` > 0 on it extends a basis of ``first`` blocks (W then holds
    A times its last block). Returns the number of column solves.
    """
    solves = 0
    for j in range(first, depth):
        if j > 0:  # the next block: A times the last one, orthonormalized against the basis
            nxt = Q[:, j * p : (j + 1) * p]
            nxt[...] = W
            _project_out(Q[:, : j * p], nxt)
            _orthonormalize(nxt)
        blk = slice(j * p, (j + 1) * p)
        W[...] = Q[:, blk]
        solve.apply(W)
        solves += p
        H[: (j + 1) * p, blk] = blas.dgemm(1.0, Q[:, : (j + 1) * p], W, trans_a=1)
    return solves


def _ritz(
    Q: np.ndarray, W: np.ndarray, H: np.ndarray, p: int, blocks: int, k: int
) -> tuple[np.ndarray, np.ndarray, float]:
    """Rayleigh-Ritz on the first ``blocks`` blocks of the basis: the p leading Ritz values of
    A and their coefficient vectors, and the worst relative residual of the first k."""
    m = blocks * p
    last = slice(m - p, m)
    theta, U = _leading_ritz_pairs(H[:m, :m].copy(order="F"), p)  # H itself may grow further
    worst = _worst_residual(Q[:, :m], W, H[:m, last].copy(order="F"), U[last, :k], theta[:k])
    return theta, U, worst


def _project_out(done: np.ndarray, nxt: np.ndarray) -> None:
    """Remove from the block ``nxt`` its components along the orthonormal columns of ``done``.

    Classical Gram-Schmidt, twice, in place.
    """
    for _ in range(2):
        out = blas.dgemm(-1.0, done, blas.dgemm(1.0, done, nxt, trans_a=1), beta=1.0, c=nxt, overwrite_c=1)
        if not np.shares_memory(out, nxt):
            nxt[...] = out


def _leading_ritz_pairs(H: np.ndarray, p: int) -> tuple[np.ndarray, np.ndarray]:
    """The p largest eigenpairs of H (its upper triangle), largest first; H is overwritten.

    They are the p largest Ritz values of A, i.e. the smallest eigenvalues of S.
    """
    m = H.shape[0]
    theta, U = scipy.linalg.eigh(
        H, lower=False, overwrite_a=True, check_finite=False, subset_by_index=[m - p, m - 1], driver="evr"
    )
    return theta[::-1], np.asfortranarray(U[:, ::-1])


def _worst_residual(Q: np.ndarray, W: np.ndarray, HW: np.ndarray, U_last: np.ndarray, theta: np.ndarray) -> float:
    """max_i ||(W - Q HW) u_i|| / theta_i with HW = Q^T W, in column chunks (bounded memory)."""
    worst = 0.0
    for c0 in range(0, U_last.shape[1], 64):
        Uc = np.asfortranarray(U_last[:, c0 : c0 + 64])
        R = blas.dgemm(1.0, W, Uc)
        R = blas.dgemm(-1.0, Q, HW @ Uc, beta=1.0, c=R, overwrite_c=1)
        worst = max(worst, float((np.linalg.norm(R, axis=0) / theta[c0 : c0 + 64]).max()))
    return worst
