"""What the audit knows about the eigenvalues of the normalized S, whichever path computed them."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: size of the row blocks in which scans over S (bounds, findings) read it: a small,
#: fixed extra beside S whatever its size
SCAN_BYTES = 8 << 20


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
        rows = np.abs(S[start : start + block])
        off = rows.sum(axis=1) - np.abs(np.diagonal(S)[start : start + block])
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


def max_transform_element(
    values: np.ndarray,
    column_max: np.ndarray | None,
    n_removed: int,
    n_total: int | None = None,
    beyond: float | None = None,
) -> float | None:
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
