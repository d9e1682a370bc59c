"""Eigen analysis of the normalized overlap matrix.

`compute_spectrum` is the single entry point; the full path diagonalizes S, and a
large-system path (``auditor.large``) can replace it without changing callers.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: size of the row blocks in which scans over S (bounds, findings) read it: a small,
#: fixed extra beside S whatever its size
SCAN_BYTES = 8 << 20

#: Decades at which eigenvalues are counted ("1e-03" ... "1e-10").
COUNT_LEVELS: tuple[float, ...] = tuple(10.0 ** -k for k in range(3, 11))


def level_key(level: float) -> str:
    """Stable JSON key for a decade level, e.g. 1e-5 -> "1e-05"."""
    return f"{level:.0e}"


@dataclass(frozen=True)
class Spectrum:
    """What the rest of the audit needs to know about the eigenvalues of S.

    ``values`` are ascending. On the full path they are all N eigenvalues; on the
    large path only the smallest ones that were computed. ``vectors`` holds the
    eigenvectors (columns) of ``values[:vectors.shape[1]]`` that span the
    near-null space used to attribute causes.
    """

    n: int
    values: np.ndarray
    vectors: np.ndarray
    smallest: float
    largest: float
    counts_below: dict[str, int | None]
    gershgorin_bound: float
    method: str
    complete: bool
    #: max_i |U_ij| for the eigenvector columns j that were formed (the smallest ones;
    #: all of them on the dense path); see ``max_transform_element``
    column_max: np.ndarray | None = None
    #: a lower bound on the first eigenvalue past ``values`` when they are not all known
    beyond: float | None = None

    def growth(self, n_removed: int) -> float | None:
        """max |X| of canonical orthogonalization that removes ``n_removed`` directions,
        when the computed eigenvectors certify it."""
        return max_transform_element(self.values, self.column_max, n_removed, self.n, self.beyond)

    @property
    def condition_number(self) -> float | None:
        """lambda_max / lambda_min, or None when S is singular to rounding (lambda_min <= 0)."""
        if self.smallest <= 0.0:
            return None
        return self.largest / self.smallest

    def count_below(self, level: float) -> int | None:
        """Exact number of eigenvalues below ``level``, or None when not computed."""
        if self.complete or (self.values.size and self.values[-1] >= level):
            return int(np.searchsorted(self.values, level, side="left"))
        return self.counts_below.get(level_key(level))


def gershgorin_lower_bound(S: np.ndarray) -> float:
    """Gershgorin bound lambda_min >= 1 - max_i sum_{j!=i} |S_ij| for unit-diagonal S
    (read in row blocks of about SCAN_BYTES)."""
    n = S.shape[0]
    block = max(16, SCAN_BYTES // max(1, 8 * n))
    worst = 0.0
    for start in range(0, n, block):
        rows = np.abs(S[start:start + block])
        off = rows.sum(axis=1) - np.abs(np.diagonal(S)[start:start + block])
        worst = max(worst, float(off.max(initial=0.0)))
    return 1.0 - worst


def select_null_vectors(values: np.ndarray, level: float, min_vectors: int) -> int:
    """How many of the smallest eigenvectors span the near-null space.

    Those below ``level``; if there are none, the ``min_vectors`` smallest.
    """
    k = int(np.searchsorted(values, level, side="left"))
    return max(k, min(min_vectors, values.size))


#: thresholds up to this one get an exact max |X| (the candidates and the advice use 1e-4 ... 1e-9)
GROWTH_LEVEL = 1e-4
#: below this size one dense eigendecomposition costs no more than the selective path
_SELECTIVE_FROM = 160


def max_transform_element(values: np.ndarray, column_max: np.ndarray | None, n_removed: int,
                          n_total: int | None = None, beyond: float | None = None) -> float | None:
    """max |X_ij| of X = U_kept diag(lambda_kept)^-1/2 when the ``n_removed`` smallest
    directions go, or None when the computed columns cannot certify it.

    ``column_max`` holds max_i |U_ij| for the m smallest eigenvectors; ``values`` the
    smallest eigenvalues (at least those m), of ``n_total`` in all (default: all of them
    are in ``values``). A column j >= m contributes at most 1/sqrt(lambda_m) (unit
    eigenvectors), so the maximum over the computed kept columns is exact once it
    reaches that bound. ``beyond`` is a lower bound on lambda_m when ``values`` stops at m.
    """
    n_total = values.size if n_total is None else n_total
    if column_max is None or n_removed >= n_total:
        return None
    m = column_max.size
    if n_removed >= m:
        return None
    kept = values[n_removed:m]
    if kept[0] <= 0.0:
        return None
    g = float(np.max(column_max[n_removed:] / np.sqrt(kept)))
    if m < n_total:
        following = values[m] if m < values.size else beyond
        if following is None or following <= 0.0 or g < 1.0 / np.sqrt(following):
            return None
    return g


def _selective(S: np.ndarray, vector_level: float, min_vectors: int):
    """All eigenvalues and the smallest eigenvectors from one tridiagonal reduction
    (LAPACK dsytrd; dsterf for the values; dstemr and the Householder back-transform
    dormqr for the vectors), with as many vectors as the growth figures need.
    None when that would be most of them (the dense path is then cheaper)."""
    from scipy.linalg import eigh_tridiagonal, eigvalsh_tridiagonal, lapack

    n = S.shape[0]
    lwork = int(lapack.dsytrd_lwork(n, lower=1)[0])
    # S is symmetric: hand LAPACK its Fortran-ordered view, which it copies without transposing
    a, d, e, tau, info = lapack.dsytrd(S.T if S.flags.c_contiguous else S, lower=1, lwork=lwork)
    if info != 0:
        return None
    values = eigvalsh_tridiagonal(d, e, lapack_driver="sterf")
    # the most directions that any threshold up to GROWTH_LEVEL (or the vector level) removes;
    # a growth figure certified there is certified for every smaller threshold too
    r_max = int(np.searchsorted(values, max(GROWTH_LEVEL, vector_level), side="left"))
    need = max(select_null_vectors(values, vector_level, min_vectors), r_max + 1)
    reflectors = np.asfortranarray(a[1:, : n - 1])  # one copy, not one per dormqr call
    blocks: list[np.ndarray] = []
    m, target = 0, min(n, need)
    while True:
        if target > n // 3:
            return None
        _, z = eigh_tridiagonal(d, e, select="i", select_range=(m, target - 1), lapack_driver="stemr")
        lw = 64 * z.shape[1] + 65 * 64  # blocked dormqr's optimum (block 64); a query would copy the reflectors
        zq, _, info = lapack.dormqr("L", "N", reflectors, tau, z[1:], lwork=lw, overwrite_c=1)
        if info != 0:
            return None
        z[1:] = zq
        blocks.append(z)
        m = target
        colmax = np.concatenate([np.abs(b).max(axis=0) for b in blocks])
        if m == n or max_transform_element(values, colmax, r_max) is not None:
            return values, np.concatenate(blocks, axis=1), colmax
        # columns past m add at most 1/sqrt(lambda_j) each: those with lambda_j below 1/g^2
        # could still beat the maximum g found so far, so form exactly those
        g = float(np.max(colmax[r_max:] / np.sqrt(values[r_max:m])))
        target = max(m + 1, min(n, int(np.searchsorted(values, 1.0 / g**2, side="left"))))


def full_spectrum(S: np.ndarray, vector_level: float, min_vectors: int = 3) -> Spectrum:
    """Every eigenvalue, and the eigenvectors that the causes and the growth figures need.

    Small S: one dense eigendecomposition (LAPACK syevd through numpy). Otherwise one
    tridiagonal reduction gives all eigenvalues, and only the smallest eigenvectors are
    formed (about half the time of the dense path at a few hundred functions).
    """
    n = S.shape[0]
    bound = gershgorin_lower_bound(S)
    picked = _selective(S, vector_level, min_vectors) if n >= _SELECTIVE_FROM else None
    if picked is None:
        values, vectors = np.linalg.eigh(S)
        colmax = np.abs(vectors).max(axis=0)
    else:
        values, vectors, colmax = picked
    k = select_null_vectors(values, vector_level, min_vectors)
    counts = {level_key(t): int(np.searchsorted(values, t, side="left")) for t in COUNT_LEVELS}
    return Spectrum(
        n=n,
        values=values,
        vectors=np.ascontiguousarray(vectors[:, :k]),
        smallest=float(values[0]),
        largest=float(values[-1]),
        counts_below=counts,
        gershgorin_bound=bound,
        method="full",
        complete=True,
        column_max=colmax,
    )


def compute_spectrum(
    S: np.ndarray, vector_level: float, min_vectors: int = 3, method: str = "full"
) -> Spectrum:
    """Spectrum of the unit-diagonal overlap matrix ``S``.

    ``method``: "full" (dense eigendecomposition), "large" (factorizations and
    subspace iteration, ``auditor.large``; S is used as workspace and restored), or
    "auto" (large from ``auditor.large.CROSSOVER_N`` functions on, or when the full
    path would not fit in memory).
    """
    from .large import check_memory, large_spectrum, resolve_method

    method = resolve_method(S.shape[0], method, s_built=True)
    check_memory(S.shape[0], method, s_built=True)  # ResourceError instead of being killed
    if method == "large":
        return large_spectrum(S, vector_level, min_vectors)
    return full_spectrum(S, vector_level, min_vectors)
