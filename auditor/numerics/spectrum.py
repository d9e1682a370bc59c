"""What the audit knows about the eigenvalues of the normalized S, whichever path computed them."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .cholesky import FactorHandoff
from .memory import SCAN_BYTES

#: Decades at which eigenvalues are counted ("1e-03" ... "1e-10").
COUNT_LEVELS: tuple[float, ...] = tuple(10.0**-k for k in range(3, 11))


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
    #: `column_growth` of the eigenvector columns that were formed (the smallest ones, whole
    #: degenerate groups; all of them on the dense path); see ``max_transform_element``
    growth_by_column: np.ndarray | None = None
    #: eigenvalues closer than this are one degenerate group (`degeneracy_tolerance`)
    degeneracy_tol: float = 0.0
    #: a lower bound on the first eigenvalue past ``values`` when they are not all known
    beyond: float | None = None
    #: the pivoted factorization of S - level*I that counted the eigenvalues below the level,
    #: kept for the remedies when asked for (`auditor.numerics.eigen.compute_spectrum`)
    handoff: FactorHandoff | None = field(default=None, compare=False, repr=False)

    def growth(self, n_removed: int) -> float | None:
        """max |X| of canonical orthogonalization that removes ``n_removed`` directions,
        when the computed eigenvectors certify it."""
        return max_transform_element(self.values, self.growth_by_column, n_removed, self.n, self.beyond)

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
    """Gershgorin bound lambda_min >= 1 - max_i sum_{j!=i} |S_ij| for unit-diagonal S."""
    radii = gershgorin_radii(S)
    return 1.0 - float(radii.max(initial=0.0))


def gershgorin_radii(S: np.ndarray) -> np.ndarray:
    """sum_{j!=i} |S_ij| for every row i (read in row blocks of about SCAN_BYTES)."""
    n = S.shape[0]
    block = max(16, SCAN_BYTES // max(1, 8 * n))
    radii = np.empty(n)
    for start in range(0, n, block):
        rows = np.abs(S[start : start + block])
        radii[start : start + block] = rows.sum(axis=1) - np.abs(np.diagonal(S)[start : start + block])
    return radii


def degeneracy_tolerance(n: int, largest: float) -> float:
    """Eigenvalues closer than this count as one degenerate group.

    Computed eigenvalues of a symmetric matrix carry rounding errors of about eps * ||S||
    times a slowly growing function of N (here 32 sqrt(N), a margin of common practice);
    eigenvectors whose eigenvalues differ by less are not determined one by one (their
    error is about the perturbation over the gap, Davis-Kahan), only their span is.
    """
    return 32.0 * np.sqrt(max(n, 1)) * np.finfo(float).eps * max(1.0, float(largest))


def group_bounds(values: np.ndarray, tol: float) -> np.ndarray:
    """Start of each group of (near-)equal ascending ``values``, then ``values.size``."""
    cuts = np.flatnonzero(np.diff(values) > tol) + 1
    return np.concatenate([[0], cuts, [values.size]]).astype(np.intp)


def complete_groups(values: np.ndarray, k: int, tol: float) -> int:
    """The smallest count >= k that does not split a group of ``values`` (at most their number)."""
    bounds = group_bounds(values, tol)
    return int(bounds[np.searchsorted(bounds, k)])


def cause_count(values: np.ndarray, level: float, tol: float) -> int:
    """How many of the smallest eigenvectors span the near-null space: those below ``level``,
    else the smallest eigenvalue's group, extended to whole degenerate groups, so that any
    figure summed over them does not depend on the choice of vectors inside a group."""
    k = max(int(np.searchsorted(values, level, side="left")), min(1, values.size))
    return complete_groups(values, k, tol)


def column_growth(vectors: np.ndarray, values: np.ndarray, tol: float) -> np.ndarray:
    """For each eigenvector column j (ascending, ending at a group boundary): the largest
    element of X = U diag(lambda)^-1/2 that its group can give, max_i sqrt(sum over the
    group g of U_ig^2 / lambda_g). Within a degenerate group the eigenvectors are any
    orthonormal basis of one space; this value is the largest |X_ij| over all those
    choices (one of them attains it), and it is the plain max_i |U_ij| / sqrt(lambda_j) for
    a group of one. Infinite for a non-positive eigenvalue."""
    m = vectors.shape[1]
    lam = values[:m]
    out = np.full(m, np.inf)
    ok = lam > 0.0
    out[ok] = np.abs(vectors[:, ok]).max(axis=0) / np.sqrt(lam[ok])
    bounds = group_bounds(lam, tol)
    for lo, hi in zip(bounds[:-1], bounds[1:]):
        if hi - lo > 1 and lam[lo] > 0.0:
            out[lo:hi] = np.sqrt(float(((vectors[:, lo:hi] ** 2) @ (1.0 / lam[lo:hi])).max()))
    return out


#: thresholds up to this one get an exact max |X| (the candidates and the advice use 1e-4 ... 1e-9)
GROWTH_LEVEL = 1e-4


def max_transform_element(
    values: np.ndarray,
    growth: np.ndarray | None,
    n_removed: int,
    n_total: int | None = None,
    beyond: float | None = None,
) -> float | None:
    """The largest |X_ij| of X = U_kept diag(lambda_kept)^-1/2 when the ``n_removed``
    smallest directions go (over every valid choice of eigenvectors inside degenerate
    groups), or None when the computed columns cannot certify it.

    ``growth`` is `column_growth` of the m smallest eigenvectors; ``values`` the smallest
    eigenvalues (at least those m), of ``n_total`` in all (default: all of them are in
    ``values``). A column j >= m contributes at most 1/sqrt(lambda_m) (unit eigenvectors),
    so the maximum over the computed kept columns is exact once it reaches that bound.
    ``beyond`` is a lower bound on lambda_m when ``values`` stops at m.
    """
    n_total = values.size if n_total is None else n_total
    if growth is None or n_removed >= n_total:
        return None
    m = growth.size
    if n_removed >= m or values[n_removed] <= 0.0:
        return None
    g = float(np.max(growth[n_removed:]))
    if m < n_total:
        following = values[m] if m < values.size else beyond
        if following is None or following <= 0.0 or g < 1.0 / np.sqrt(following):
            return None
    return g
