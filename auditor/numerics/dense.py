"""The full spectrum: every eigenvalue, and only the eigenvectors the audit needs."""

from __future__ import annotations

import numpy as np
from scipy.linalg import eigh_tridiagonal, eigvalsh_tridiagonal, lapack

from .spectrum import (
    COUNT_LEVELS,
    GROWTH_LEVEL,
    Spectrum,
    cause_count,
    column_growth,
    complete_groups,
    degeneracy_tolerance,
    gershgorin_lower_bound,
    level_key,
    max_transform_element,
)

#: below this size one dense eigendecomposition costs no more than the selective path
_SELECTIVE_FROM = 160


def _selective(S: np.ndarray, vector_level: float):
    """All eigenvalues and the smallest eigenvectors from one tridiagonal reduction
    (LAPACK dsytrd; dsterf for the values; dstemr and the Householder back-transform
    dormqr for the vectors), with as many vectors as the causes and the growth figures
    need, always whole degenerate groups. None when that would be most of them (the
    dense path is then cheaper)."""
    n = S.shape[0]
    lwork = int(lapack.dsytrd_lwork(n, lower=1)[0])
    # S is symmetric: hand LAPACK its Fortran-ordered view, which it copies without transposing
    a, d, e, tau, info = lapack.dsytrd(S.T if S.flags.c_contiguous else S, lower=1, lwork=lwork)
    if info != 0:
        return None
    values = eigvalsh_tridiagonal(d, e, lapack_driver="sterf")
    tol = degeneracy_tolerance(n, values[-1])
    # the most directions that any threshold up to GROWTH_LEVEL (or the vector level) removes;
    # a growth figure certified there is certified for every smaller threshold too
    r_max = int(np.searchsorted(values, max(GROWTH_LEVEL, vector_level), side="left"))
    need = max(cause_count(values, vector_level, tol), r_max + 1)
    reflectors = np.asfortranarray(a[1:, : n - 1])  # one copy, not one per dormqr call
    blocks: list[np.ndarray] = []
    m, target = 0, complete_groups(values, min(n, need), tol)
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
        vectors = np.concatenate(blocks, axis=1) if len(blocks) > 1 else blocks[0]
        growth = column_growth(vectors, values, tol)
        if m == n or max_transform_element(values, growth, r_max) is not None:
            return values, vectors, growth, tol
        # columns past m add at most 1/sqrt(lambda_j) each: those with lambda_j below 1/g^2
        # could still beat the maximum g found so far, so form exactly those (whole groups)
        g = float(np.max(growth[r_max:]))
        more = max(m + 1, min(n, int(np.searchsorted(values, 1.0 / g**2, side="left"))))
        target = complete_groups(values, more, tol)


def full_spectrum(S: np.ndarray, vector_level: float) -> Spectrum:
    """Every eigenvalue, and the eigenvectors that the causes and the growth figures need.

    Small S: one dense eigendecomposition (LAPACK syevd through numpy). Otherwise one
    tridiagonal reduction gives all eigenvalues, and only the smallest eigenvectors are
    formed (about half the time of the dense path at a few hundred functions). The cause
    vectors are those below ``vector_level`` (else the smallest group), whole degenerate
    groups.
    """
    n = S.shape[0]
    bound = gershgorin_lower_bound(S)
    picked = _selective(S, vector_level) if n >= _SELECTIVE_FROM else None
    if picked is None:
        values, vectors = np.linalg.eigh(S)
        tol = degeneracy_tolerance(n, values[-1])
        growth = column_growth(vectors, values, tol)
    else:
        values, vectors, growth, tol = picked
    k = cause_count(values, vector_level, tol)
    counts: dict[str, int | None] = {level_key(t): int(np.searchsorted(values, t, side="left")) for t in COUNT_LEVELS}
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
        growth_by_column=growth,
        degeneracy_tol=tol,
    )
