"""Canonical-orthogonalization advice from the spectrum of the normalized S."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..numerics.spectrum import Spectrum
from .prepared import PreparedGeometry

CANDIDATES: tuple[float, ...] = tuple(10.0**-k for k in range(4, 10))  # 1e-4 ... 1e-9
MIN_GAP_DECADES = 1.0  # a gap this wide in log10(lambda) is a natural cut
GAP_WINDOW = (1e-9, 1e-4)


@dataclass(frozen=True)
class Candidate:
    threshold: float
    n_removed: int | None
    smallest_kept: float | None
    max_transform_element: float | None


@dataclass(frozen=True)
class Recommendation:
    """The advised threshold tau for X = U_k Lambda_k^-1/2 (eigenvalues >= tau kept); None
    when the geometry is broken (the file must be fixed first). ``versus_library`` says
    what following the advice changes against pyscf's own default threshold."""

    threshold: float | None
    reason: str
    n_removed: int | None
    smallest_kept: float | None
    max_transform_element: float | None
    candidates: list[Candidate]
    how_to: str
    library_default: float
    same_as_library_default: bool
    versus_library: str


def find_gap(
    values: np.ndarray,
    window: tuple[float, float] = GAP_WINDOW,
    min_decades: float = MIN_GAP_DECADES,
    min_kept: float = 0.0,
) -> tuple[float, float, float, float] | None:
    """Widest gap in log10 of the ascending ``values`` whose midpoint lies in ``window``
    and whose upper edge (the smallest eigenvalue kept) is at least ``min_kept``.

    Returns (threshold at the geometric midpoint, lower edge, upper edge, width in
    decades) or None when no gap is at least ``min_decades`` wide.
    """
    v = values[values < window[1] * 10.0]
    if v.size == 0:
        return None
    logs = np.log10(np.clip(v, 1e-300, None))
    upper_edge = values[v.size] if v.size < values.size else None
    edges = list(zip(logs[:-1], logs[1:]))
    if upper_edge is not None:
        edges.append((logs[-1], float(np.log10(upper_edge))))
    best = None
    lo_w, hi_w = np.log10(window[0]), np.log10(window[1])
    for lo, hi in edges:
        width = hi - lo
        mid = 0.5 * (lo + hi)
        ok = width >= min_decades and lo_w <= mid <= hi_w and hi >= np.log10(max(min_kept, 1e-300))
        if ok and (best is None or width > best[3]):
            best = (10.0**mid, 10.0**lo, 10.0**hi, width)
    return best


def candidate(spec: Spectrum, threshold: float) -> Candidate:
    """What canonical orthogonalization at ``threshold`` removes and keeps."""
    n_removed = spec.count_below(threshold)
    smallest_kept = None
    growth = None
    if n_removed is not None and n_removed < spec.values.size:
        smallest_kept = float(spec.values[n_removed])
        growth = spec.growth(n_removed)
    return Candidate(threshold, n_removed, smallest_kept, growth)


def library_default_threshold() -> float:
    """The threshold below which pyscf drops eigenvectors of its S by default
    (``pyscf.scf.hf.overlap_zero_eigenvalue_threshold``, 1e-6 in pyscf 2.x), as installed."""
    from pyscf.scf import hf  # read from the installed pyscf (a user's configuration can change it)

    return float(getattr(hf, "overlap_zero_eigenvalue_threshold", 1e-6))


def advise(spec: Spectrum, default_threshold: float, min_kept: float = 0.0, cartesian: bool = False) -> Recommendation:
    """Recommend a canonical-orthogonalization threshold.

    A gap of at least MIN_GAP_DECADES in the log-spectrum inside GAP_WINDOW, above
    which the kept eigenvalues are at least ``min_kept`` (the policy's fail level),
    is the natural place; otherwise ``default_threshold``. Candidates
    1e-4 ... 1e-9 are tabulated so that the user can judge; the advice is compared with
    what pyscf does by default.
    """
    gap = find_gap(spec.values, min_kept=min_kept)
    if gap is not None:
        tau = float(f"{gap[0]:.1e}")
        reason = (
            f"the spectrum has a gap of {gap[3]:.1f} decades between {gap[1]:.2e} and "
            f"{gap[2]:.2e}; the threshold sits in its middle"
        )
    else:
        tau = default_threshold
        reason = (
            f"no clear gap in the spectrum between {GAP_WINDOW[0]:.0e} and {GAP_WINDOW[1]:.0e}; "
            f"the policy default {default_threshold:.0e} is used"
        )
    return recommendation_at(spec, tau, reason, cartesian)


def recommendation_at(spec: Spectrum, tau: float, reason: str, cartesian: bool = False) -> Recommendation:
    """The advice for threshold ``tau`` (chosen for ``reason``): what it removes and keeps,
    the candidates, how to apply it and what it changes against pyscf's default."""
    chosen = candidate(spec, tau)
    nothing = "; nothing falls below it, so no function needs removing"
    if chosen.n_removed == 0 and nothing not in reason:
        reason += nothing
    how_to = (
        "from pyscf import scf; scf.hf.overlap_zero_eigenvalue_threshold = "
        f"{tau:.1e}  # before building the SCF object; pyscf applies it to its own S, which has "
        "unit diagonal for spherical basis sets (for Cartesian d/f shells use the normalized-S "
        "transformation X instead)"
    )
    library = library_default_threshold()
    return Recommendation(
        threshold=tau,
        reason=reason,
        n_removed=chosen.n_removed,
        smallest_kept=chosen.smallest_kept,
        max_transform_element=chosen.max_transform_element,
        candidates=[candidate(spec, t) for t in CANDIDATES],
        how_to=how_to,
        library_default=library,
        same_as_library_default=_same(tau, library),
        versus_library=_versus_library(chosen, candidate(spec, library), cartesian),
    )


def deciding_frame(recommendations: list[Recommendation], smallest: list[float]) -> int | None:
    """The frame (0-based) whose advised threshold is the largest: one threshold for every
    frame of a scan. Ties go to the frame with the smaller smallest eigenvalue, then the
    first. None when no frame has a threshold (every frame is broken)."""
    usable = [k for k, r in enumerate(recommendations) if r.threshold is not None]
    if not usable:
        return None
    return max(usable, key=lambda k: (recommendations[k].threshold, -smallest[k], -k))


def frames_reason(own: Recommendation, k: int, n_frames: int, decider: Recommendation) -> str:
    """Why a frame gets the threshold of frame ``k`` (0-based) of ``n_frames``."""
    mine = "" if own.threshold is None else f"; this frame alone would get {own.threshold:.1e}"
    why = decider.reason.split("; nothing falls below it")[0]
    return (
        f"one threshold for all {n_frames} frames: frame {k + 1} needs the largest ({why}){mine}. "
        "Every frame keeps only eigenvalues at or above it, which its own advice keeps as well"
    )


def _same(a: float, b: float) -> bool:
    return abs(a - b) <= 1e-12 * max(abs(a), abs(b))


def _versus_library(chosen: Candidate, library: Candidate, cartesian: bool) -> str:
    """What following the advice changes against pyscf's default, in one or two sentences."""
    name = f"pyscf's default (pyscf.scf.hf.overlap_zero_eigenvalue_threshold = {library.threshold:.0e})"
    if cartesian:
        caveat = (
            " For this Cartesian basis pyscf applies its threshold to its own S, which is not unit-diagonal,"
            " so the directions it removes can differ from these."
        )
    else:
        caveat = ""
    if _same(chosen.threshold, library.threshold):
        return (
            f"This is {name}: an SCF in pyscf already removes these directions, so following the advice "
            f"changes nothing there.{caveat}"
        )

    def what(c: Candidate) -> str:
        kept = "not computed" if c.smallest_kept is None else f"{c.smallest_kept:.2e}"
        growth = "not computed" if c.max_transform_element is None else f"{c.max_transform_element:.1f}"
        removed = "an unknown number of" if c.n_removed is None else str(c.n_removed)
        return f"removes {removed} direction(s), smallest kept eigenvalue {kept}, largest element of X {growth}"

    return (
        f"Against {name}, which {what(library)}, the advised {chosen.threshold:.1e} {what(chosen)}: "
        f"set it as shown to change pyscf's behaviour.{caveat}"
    )


def broken_geometry_advice(spec: Spectrum, finding: str) -> Recommendation:
    """No threshold for a broken geometry (coincident atoms, an impossible contact, a unit
    mix-up): the file must be fixed first. The candidates stay, for reference only."""
    return Recommendation(
        threshold=None,
        reason=(
            f"the geometry is broken ({finding}): fix the geometry first; no threshold is advised, and the "
            "table only shows what each threshold would remove"
        ),
        n_removed=None,
        smallest_kept=None,
        max_transform_element=None,
        candidates=[candidate(spec, t) for t in CANDIDATES],
        how_to="",
        library_default=library_default_threshold(),
        same_as_library_default=False,
        versus_library="",
    )


def orthogonalizer(S_raw: np.ndarray, threshold: float) -> np.ndarray:
    """X with X^T S X = 1 over the eigenvectors of the unit-diagonal S with eigenvalue >= threshold."""
    d = 1.0 / np.sqrt(np.diagonal(S_raw))
    w, U = np.linalg.eigh(S_raw * d[:, None] * d[None, :])
    keep = w >= threshold
    return d[:, None] * (U[:, keep] / np.sqrt(w[keep]))


def canonical_transform(prep: PreparedGeometry, threshold: float) -> np.ndarray:
    """X with X^T S X = 1 in pyscf's AO basis, from the unit-diagonal S's eigenvectors
    with eigenvalue >= ``threshold`` (canonical orthogonalization)."""
    return orthogonalizer(prep.mole.intor_symmetric("int1e_ovlp"), threshold)
