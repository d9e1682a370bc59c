"""Eigen analysis of the normalized overlap matrix.

`compute_spectrum` is the single entry point; the full path diagonalizes S, and a
large-system path (``auditor.large``) can replace it without changing callers.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

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
    #: max_i |U_ij| per computed eigenvector column j (growth of the transformation X)
    column_max: np.ndarray | None = None

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


def gershgorin_lower_bound(S: np.ndarray, block: int = 2048) -> float:
    """Gershgorin bound lambda_min >= 1 - max_i sum_{j!=i} |S_ij| for unit-diagonal S."""
    n = S.shape[0]
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


def full_spectrum(S: np.ndarray, vector_level: float, min_vectors: int = 3) -> Spectrum:
    """Dense symmetric eigendecomposition (LAPACK syevd through numpy)."""
    n = S.shape[0]
    bound = gershgorin_lower_bound(S)
    values, vectors = np.linalg.eigh(S)
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
        column_max=np.abs(vectors).max(axis=0),
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
