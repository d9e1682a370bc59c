"""The typed records of the remedies part of an audit result (``remedies`` in the JSON report)."""

from __future__ import annotations

from dataclasses import dataclass, field

from ..base.jsonio import OMIT_NONE


@dataclass(frozen=True)
class Alternative:
    """One ranked remedy: what it removes (functions or directions) and what it leaves, at
    the target. For several frames: the most it removes in any frame and the smallest
    eigenvalue it leaves in any frame."""

    kind: str
    title: str
    removed: int | None
    unit: str  # "functions" | "directions"
    smallest_after: float | None
    reaches_target: bool
    how: str
    threshold: float | None = field(default=None, metadata={OMIT_NONE: True})
    tolerance: float | None = field(default=None, metadata={OMIT_NONE: True})
    shells_removed: int | None = field(default=None, metadata={OMIT_NONE: True})
    element: str | None = field(default=None, metadata={OMIT_NONE: True})
    basis: str | None = field(default=None, metadata={OMIT_NONE: True})
    rank: int = 0


@dataclass(frozen=True)
class FunctionSubset:
    """The pivoted-Cholesky subset of single functions (records are 1-based)."""

    tolerance: float
    smallest_kept: float
    factorizations: int
    kept: int
    kept_by_pivoting: int
    added_back: int
    dropped: list[dict]
    kept_functions_in_order: list[int]


@dataclass(frozen=True)
class ShellPruning:
    """A shell-pruned basis: whole shells kept or dropped."""

    chosen_by: str
    tolerance: float
    smallest_kept: float
    factorizations: int
    kept: int
    kept_by_pivoting: int
    added_back: int
    dropped_shells: list[dict]


@dataclass(frozen=True)
class DiffuseOption:
    """Dropping the diffuse shells of one element on every atom of it."""

    element: str
    removed: int
    shells: int
    shell_names: list[str]
    smallest_after: float
    reaches_target: bool


@dataclass(frozen=True)
class SymmetryInfo:
    """The point groups pyscf detects (full basis; the written pruned basis; the pruning that
    ignores symmetry, when it keeps more functions) and the sets of equivalent atoms
    (1-based; only sets of more than one atom) that were pruned alike."""

    tolerance_angstrom: float
    point_group: str
    pruned_point_group: str | None
    keeps_point_group: bool
    equivalent_atoms: list[list[int]]
    unconstrained_point_group: str | None
    extra_functions_dropped: int
    note: str


@dataclass(frozen=True)
class FrameFigures:
    """One frame of a multi-frame input under the remedies computed for all frames."""

    frame: int  # 1-based
    smallest: float  # full basis
    below_target: int | None  # directions canonical orthogonalization at the target removes
    functions_smallest: float | None  # the pivoted-Cholesky subset of functions
    shells_smallest: float | None  # the shell-pruned basis
    point_group: str | None
    pruned_point_group: str | None


@dataclass(frozen=True)
class NamedRung:
    """A smaller published relative of the requested basis at this geometry (worst frame)."""

    basis: str  # as the ladder names it (a rule-built calendar set: its rule name)
    use_name: str  # the name to use it by: the published one when the rule-built shells match it
    matches_published: bool | None  # rule-built sets only
    n_functions: int | None
    smallest: float | None
    reaches_target: bool
    error: str | None


@dataclass(frozen=True)
class NamedBasis:
    """The relatives evaluated, largest first, until one meets the target; the one chosen."""

    requested: str
    chosen: str | None
    reason: str
    rungs: list[NamedRung]


@dataclass(frozen=True)
class Remedies:
    """The remedies part of an audit result (``remedies`` in the JSON report)."""

    target: float
    needed: bool
    alternatives: list[Alternative]
    #: no remedy can remove fewer functions or directions than S has eigenvalues below the
    #: target (Cauchy interlacing); None when the large spectrum path did not count them
    lower_bound: int | None = None
    cholesky_functions: FunctionSubset | None = field(default=None, metadata={OMIT_NONE: True})
    cholesky_shells: ShellPruning | None = field(default=None, metadata={OMIT_NONE: True})
    cholesky_shells_unconstrained: ShellPruning | None = field(default=None, metadata={OMIT_NONE: True})
    symmetry: SymmetryInfo | None = field(default=None, metadata={OMIT_NONE: True})
    named_basis: NamedBasis | None = field(default=None, metadata={OMIT_NONE: True})
    diffuse_by_element: list[DiffuseOption] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)
    frames: list[FrameFigures] | None = field(default=None, metadata={OMIT_NONE: True})
    deciding_frame: int | None = field(default=None, metadata={OMIT_NONE: True})
    trial_scf: dict | None = None
