"""Sentences and row records shared by several report formats (one wording, several renderings).

``remedies_view`` reads the ``remedies`` part of a JSON result into plain records; the
Markdown, HTML and terminal writers each render those records in their own layout (and
keep their own number formats), so that a remedy is worded the same way everywhere.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from ..base.elements import L_LETTERS


def vectors_note(d: dict) -> str:
    """Which eigenvectors the causes were summed over, in words."""
    c = d["causes"]
    k, level, below = c["n_vectors"], c["vectors_below"], c.get("n_below")
    if not below:
        group = (
            "the eigenvector of the smallest eigenvalue"
            if k == 1
            else (f"the {k} eigenvectors of the smallest eigenvalue, a degenerate group")
        )
        return f"{group} (none lies below {level:.0e})"
    if below > k:
        return f"the {k} smallest of the {below} eigenvectors with eigenvalue below {level:.0e}"
    text = f"the {below} eigenvector(s) with eigenvalue below {level:.0e}"
    if k > below:
        text += f" and {k - below} more completing a degenerate group (equal eigenvalues: only their span is defined)"
    return text


#: what "largest element of X" means (one wording for every format)
X_NOTE = (
    "The largest element of X is the largest |X_ij| over every valid choice of eigenvectors: inside a group "
    "of equal eigenvalues the eigenvectors are not unique, and the figure is the worst case, which one choice "
    "attains."
)


def advice_sentence(rec: dict, n_functions: int) -> str:
    """The advised threshold and what it removes, or why none is advised (plain text)."""
    if rec["threshold"] is None:
        return f"No threshold is advised: {rec['reason']}."

    def fmt(x: Any, spec: str) -> str:
        return "not computed" if x is None else format(x, spec)

    return (
        f"Suggested threshold {rec['threshold']:.1e}: {rec['reason']}. It removes {fmt(rec['n_removed'], 'd')} "
        f"of {n_functions} functions; the smallest kept eigenvalue is {fmt(rec['smallest_kept'], '.3e')} and the "
        f"largest element of the transformation X = U Λ^-1/2 is {fmt(rec['max_transform_element'], '.1f')}."
    )


def yes_no(flag: Any) -> str:
    """ "yes" or "no" for a JSON flag; a dash when it is missing."""
    return {True: "yes", False: "no"}.get(flag, "—")


def l_letter(l: object) -> str:
    """The letter of an angular momentum given as a number (s, p, d, ...); anything else as text."""
    return L_LETTERS[l] if isinstance(l, int) and 0 <= l < len(L_LETTERS) else str(l)


def _where(record: dict) -> str:
    ghost = " (ghost)" if record.get("ghost") else ""
    return f"{record['element']}{record['atom']}{ghost} {record['shell']}"


@dataclass(frozen=True)
class RemedyRow:
    """One ranked remedy; ``key`` is its place in the JSON report."""

    key: str
    rank: int | None
    title: str
    removed: int | None
    unit: str  # "functions" | "directions"
    smallest_after: float | None
    reaches_target: bool | None
    how: str

    @property
    def removed_text(self) -> str:
        """What it removes, e.g. "3 functions"; "?" when unknown."""
        return "?" if self.removed is None else f"{self.removed} {self.unit}"

    @property
    def reaches(self) -> str:
        return yes_no(self.reaches_target)


@dataclass(frozen=True)
class DroppedShellRow:
    """One shell the shell-pruned basis drops."""

    key: str
    where: str  # element, atom number, "(ghost)" and shell name, e.g. "H5 (ghost) 4s"
    l: Any  # angular momentum as in the JSON report (a number)
    exponent: float
    diffuse: bool
    functions: int

    @property
    def l_letter(self) -> str:
        return l_letter(self.l)

    @property
    def diffuse_mark(self) -> str:
        """ "yes" for a diffuse shell, else empty."""
        return "yes" if self.diffuse else ""


@dataclass(frozen=True)
class DroppedFunctionRow:
    """One function the pivoted-Cholesky subset drops."""

    key: str
    function: int  # 1-based
    where: str
    component: str
    l: Any
    exponent: float


@dataclass(frozen=True)
class ShellPruningView:
    """The shell-pruned basis: how its shells were chosen and which it drops."""

    key: str
    by_shell_pivoting: bool  # else: the shells the function subset leaves whole
    tolerance: float | None
    added_back: int | None
    kept: int | None
    smallest_kept: float | None
    dropped: list[DroppedShellRow]


@dataclass(frozen=True)
class FunctionSubsetView:
    """The pivoted-Cholesky subset of single functions and which functions it drops."""

    key: str
    tolerance: float | None
    added_back: int | None
    factorizations: int | None
    kept: int | None
    dropped: list[DroppedFunctionRow]


@dataclass(frozen=True)
class TrialRunRow:
    """One run of the trial SCF (full basis with canonical orthogonalization, or pruned)."""

    key: str
    basis: str
    n_functions: int | None
    directions_removed: int | None
    converged: bool | None
    cycles: int | None
    energy: float | None  # hartree
    seconds: float | None
    note: str

    @property
    def converged_text(self) -> str:
        return yes_no(self.converged)


@dataclass(frozen=True)
class TrialView:
    """The trial SCF: why it was skipped, or its runs and the energy difference."""

    key: str
    method: str
    skipped: str  # the reason, as one sentence without its full stop; empty when it ran
    runs: list[TrialRunRow]
    difference_microhartree: float | None
    reminder: str
    alerts: list[str]  # a plain line per run that stopped at its time limit, did not converge or failed


@dataclass(frozen=True)
class SymmetryView:
    """Point groups of the full and the pruned basis, and what keeping the group costs."""

    key: str
    tolerance: float | None
    point_group: str
    pruned_point_group: str
    keeps: bool
    equivalent_atoms: str  # e.g. "3=4, 5=6"
    note: str

    @property
    def sentence(self) -> str:
        """One plain sentence for every format."""
        atoms = f"; equivalent atoms pruned alike: {self.equivalent_atoms}" if self.equivalent_atoms else ""
        kept = "keeps" if self.keeps else "does not keep"
        tol = "" if self.tolerance is None else f" (positions matched within {self.tolerance:g} Å)"
        return (
            f"Point group of the full basis {self.point_group}{tol}; the shell-pruned basis {kept} it "
            f"(pyscf detects {self.pruned_point_group}){atoms}. {self.note[:1].upper()}{self.note[1:]}."
        )


def named_basis_lines(nb: dict | None) -> list[str]:
    """The published relatives the remedies evaluated, as plain sentences (every format)."""
    if not nb:
        return []
    rungs = "; ".join(
        f"{r['use_name']} {r['n_functions']} functions, smallest eigenvalue "
        + ("—" if r["smallest"] is None else f"{r['smallest']:.2e}")
        + (" (reaches the target)" if r["reaches_target"] else "")
        for r in nb.get("rungs") or []
        if r.get("error") is None
    )
    head = f"Published relatives of {nb['requested']}, largest first until one reaches the target: {rungs}."
    return [head, f"{nb['reason'][:1].upper()}{nb['reason'][1:]} (auditor ladder shows them all)."]


def lower_bound_sentence(lower: int | None, target: float | None) -> str:
    """What the interlacing bound says, in one sentence for every format."""
    at = "" if target is None else f" {target:.1e}"
    if lower is None:
        return (
            f"Lower bound: not counted (the large spectrum path did not count the eigenvalues below the target{at}). "
            "No remedy can remove fewer functions or directions than S has eigenvalues below the target "
            "(Cauchy interlacing)."
        )
    return (
        f"Lower bound: {lower}. No remedy can remove fewer functions or directions than the {lower} eigenvalue(s) "
        f"of S below the target{at} (Cauchy interlacing); canonical orthogonalization at the target removes "
        "exactly that many directions."
    )


@dataclass(frozen=True)
class FrameRowView:
    """One frame of a multi-frame input: its own figures and those under the one threshold
    and the one set of remedies."""

    key: str
    frame: int
    smallest: float | None
    verdict: str
    advised_threshold: float | None
    directions_removed: int | None
    smallest_kept: float | None
    below_target: int | None
    shells_smallest: float | None
    point_group: str
    pruned_point_group: str


@dataclass(frozen=True)
class FramesView:
    """One threshold and one set of remedies for every frame: who decides, each frame's figures."""

    n_frames: int
    threshold: float | None
    deciding_frame: int | None
    remedies_frame: int | None  # the worst frame, searched first by the remedies
    note: str
    rows: list[FrameRowView]

    @property
    def sentence(self) -> str:
        if self.threshold is None:
            return f"All {self.n_frames} frames of this input are audited as one job. {self.note}"
        rem = (
            ""
            if self.remedies_frame is None
            else f" The remedies hold for every frame; frame {self.remedies_frame}, the worst, was searched first."
        )
        return (
            f"All {self.n_frames} frames of this input are audited as one job: one threshold "
            f"{self.threshold:.1e} for every frame (frame {self.deciding_frame} decides: it needs the largest).{rem} "
            f"{self.note}"
        )


def frames_view(d: dict) -> FramesView | None:
    """The ``frames`` part of a JSON result joined with the remedies' per-frame figures."""
    fr = d.get("frames")
    if not fr:
        return None
    rem = d.get("remedies") or {}
    by_frame = {r["frame"]: r for r in rem.get("frames") or []}
    rows = []
    for i, r in enumerate(fr["per_frame"]):
        extra = by_frame.get(r["frame"], {})
        rows.append(
            FrameRowView(
                key=f"frames.per_frame.{i}",
                frame=r["frame"],
                smallest=r["smallest"],
                verdict=str(r["verdict"]),
                advised_threshold=r["advised_threshold"],
                directions_removed=r["directions_removed"],
                smallest_kept=r["smallest_kept"],
                below_target=extra.get("below_target"),
                shells_smallest=extra.get("shells_smallest"),
                point_group=str(extra.get("point_group") or "—"),
                pruned_point_group=str(extra.get("pruned_point_group") or "—"),
            )
        )
    return FramesView(
        fr["n_frames"], fr["threshold"], fr["deciding_frame"], rem.get("deciding_frame"), fr["note"], rows
    )


#: the parts of the remedies that the records below cover (the HTML report shows any other as it is)
KNOWN_REMEDY_KEYS = (
    "target",
    "needed",
    "alternatives",
    "lower_bound",
    "problems",
    "cholesky_shells",
    "cholesky_shells_unconstrained",
    "symmetry",
    "named_basis",
    "cholesky_functions",
    "diffuse_by_element",
    "frames",
    "deciding_frame",
    "trial_scf",
)


@dataclass(frozen=True)
class RemediesView:
    """The remedies of one result as plain records, in the order the reports show them."""

    target: float | None
    needed: bool
    alternatives: list[RemedyRow]
    lower_bound: int | None
    problems: list[str]  # "Not available: <why>." sentences
    shells: ShellPruningView | None
    unconstrained: ShellPruningView | None  # the pruning that ignores symmetry, when it keeps more
    symmetry: SymmetryView | None
    functions: FunctionSubsetView | None
    diffuse_by_element: list[dict]  # as in the JSON report
    trial: TrialView | None
    others: dict[str, Any]  # keys not in KNOWN_REMEDY_KEYS that hold something

    @property
    def nothing_needed(self) -> bool:
        """The basis already meets the target and no remedy was worked out."""
        return not self.needed and not self.alternatives


def remedies_view(rem: dict | None) -> RemediesView | None:
    """The ``remedies`` dictionary of a JSON result as row records; None when it is empty."""
    if not rem:
        return None
    return RemediesView(
        target=rem.get("target"),
        needed=bool(rem.get("needed")),
        alternatives=[_remedy_row(i, a) for i, a in enumerate(rem.get("alternatives") or [])],
        lower_bound=rem.get("lower_bound"),
        problems=[f"Not available: {p}." for p in rem.get("problems") or []],
        shells=_shell_pruning(rem.get("cholesky_shells")),
        unconstrained=_shell_pruning(
            rem.get("cholesky_shells_unconstrained"), "remedies.cholesky_shells_unconstrained"
        ),
        symmetry=_symmetry(rem.get("symmetry")),
        functions=_function_subset(rem.get("cholesky_functions")),
        diffuse_by_element=list(rem.get("diffuse_by_element") or []),
        trial=_trial(rem.get("trial_scf")),
        others={k: v for k, v in rem.items() if k not in KNOWN_REMEDY_KEYS and v not in (None, [], {})},
    )


def _remedy_row(i: int, a: dict) -> RemedyRow:
    return RemedyRow(
        key=f"remedies.alternatives.{i}",
        rank=a.get("rank"),
        title=str(a.get("title", a.get("kind", ""))),
        removed=a.get("removed"),
        unit=str(a.get("unit", "")),
        smallest_after=a.get("smallest_after"),
        reaches_target=a.get("reaches_target"),
        how=str(a.get("how", "")),
    )


def _symmetry(sy: dict | None) -> SymmetryView | None:
    if not sy:
        return None
    return SymmetryView(
        key="remedies.symmetry",
        tolerance=sy.get("tolerance_angstrom"),
        point_group=str(sy.get("point_group")),
        pruned_point_group=str(sy.get("pruned_point_group")),
        keeps=bool(sy.get("keeps_point_group")),
        equivalent_atoms=", ".join("=".join(str(a) for a in group) for group in sy.get("equivalent_atoms") or []),
        note=str(sy.get("note") or ""),
    )


def _shell_pruning(sh: dict | None, key: str = "remedies.cholesky_shells") -> ShellPruningView | None:
    if not sh:
        return None
    dropped = [
        DroppedShellRow(
            f"{key}.dropped_shells.{i}", _where(s), s["l"], s["exponent"], bool(s.get("diffuse")), s["functions"]
        )
        for i, s in enumerate(sh.get("dropped_shells") or [])
    ]
    return ShellPruningView(
        key=key,
        by_shell_pivoting=sh.get("chosen_by") == "shell pivoting",
        tolerance=sh.get("tolerance"),
        added_back=sh.get("added_back"),
        kept=sh.get("kept"),
        smallest_kept=sh.get("smallest_kept"),
        dropped=dropped,
    )


def _function_subset(fn: dict | None) -> FunctionSubsetView | None:
    if not fn:
        return None
    key = "remedies.cholesky_functions"
    dropped = [
        DroppedFunctionRow(f"{key}.dropped.{i}", f["function"], _where(f), str(f["component"]), f["l"], f["exponent"])
        for i, f in enumerate(fn.get("dropped") or [])
    ]
    return FunctionSubsetView(
        key=key,
        tolerance=fn.get("tolerance"),
        added_back=fn.get("added_back"),
        factorizations=fn.get("factorizations"),
        kept=fn.get("kept"),
        dropped=dropped,
    )


def _trial(tri: dict | None) -> TrialView | None:
    if not tri:
        return None
    key = "remedies.trial_scf"
    runs = [
        TrialRunRow(
            key=f"{key}.runs.{i}",
            basis=str(r.get("basis", "")),
            n_functions=r.get("n_functions"),
            directions_removed=r.get("directions_removed"),
            converged=r.get("converged"),
            cycles=r.get("cycles"),
            energy=r.get("energy"),
            seconds=r.get("seconds"),
            note=str(r.get("note") or ""),
        )
        for i, r in enumerate(tri.get("runs") or [])
    ]
    return TrialView(
        key=key,
        method=str(tri.get("method", "")),
        skipped=str(tri["skipped"]) if tri.get("skipped") else "",
        runs=runs,
        difference_microhartree=tri.get("difference_microhartree"),
        reminder=str(tri.get("reminder") or ""),
        alerts=[str(a) for a in tri.get("alerts") or []],
    )
