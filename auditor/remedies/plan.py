"""Remedies a chemist can apply, ranked: canonical orthogonalization, a pivoted-Cholesky
subset of functions, a shell-pruned per-atom basis, and dropping one element's diffuse shells."""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from ..base.errors import UsageError
from ..base.jsonio import OMIT_NONE
from ..numerics.cholesky import smallest_eigenvalue, verify_mode
from ..numerics.memory import available_bytes
from ..numerics.overlap import FunctionTable
from .canonical import Recommendation
from .prepared import PreparedGeometry
from .pruned_basis import function_record, pruned_basis, shell_record
from .subset import Selection, check_atoms_not_emptied, check_target, select_for_target, shells_from_functions
from .trial_scf import check_method, trial_scf

#: Peak number of N x N arrays the remedies hold beside S, rounded up (measured: 2.07 at
#: N = 11960, audit with remedies on the large path: the pivoted factor, then the shifted
#: copy or the add-back factor, each released before the next is made).
REMEDY_COPIES = 3


@dataclass(frozen=True)
class Alternative:
    """One ranked remedy: what it removes (functions or directions) and what it leaves."""

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
    """The shell-pruned basis: whole shells kept or dropped."""

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
class Remedies:
    """The remedies part of an audit result (``remedies`` in the JSON report)."""

    target: float
    needed: bool
    alternatives: list[Alternative]
    cholesky_functions: FunctionSubset | None = field(default=None, metadata={OMIT_NONE: True})
    cholesky_shells: ShellPruning | None = field(default=None, metadata={OMIT_NONE: True})
    diffuse_by_element: list[DiffuseOption] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)
    trial_scf: dict | None = None


def diffuse_element_options(S: np.ndarray, table: FunctionTable, target: float) -> list[DiffuseOption]:
    """For each element with diffuse shells: drop them on every atom of that element."""
    out = []
    func_el = np.array([str(table.elements[a - 1]) for a in table.func_atom])
    func_dif = table.shell_diffuse[table.func_shell]
    for el in sorted(set(func_el[func_dif])):
        drop = func_dif & (func_el == el)
        kept = np.flatnonzero(~drop)
        try:
            check_atoms_not_emptied(kept, table.func_atom - 1)
        except UsageError:
            continue
        low = smallest_eigenvalue(S, kept)
        shells = np.unique(table.func_shell[drop])
        names = sorted({table.shell_name[s][-1] + f" {table.shell_exponent[s]:.4g}" for s in shells})
        out.append(DiffuseOption(str(el), int(drop.sum()), len(shells), names, low, bool(low >= target)))
    return out


@dataclass
class RemedyPlan:
    """The working state of the remedies: the selections found, the pruned-basis document,
    the ranked alternatives; ``report`` turns it into the typed ``Remedies``."""

    target: float
    needed: bool
    functions: Selection | None = None
    shells: Selection | None = None
    pruned: dict | None = None
    alternatives: list[Alternative] = field(default_factory=list)
    diffuse: list[DiffuseOption] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)
    trial_scf: dict | None = None

    def report(self, table: FunctionTable) -> Remedies:
        return Remedies(
            target=self.target,
            needed=self.needed,
            alternatives=list(self.alternatives),
            cholesky_functions=None if self.functions is None else _function_subset(self.functions, table),
            cholesky_shells=None if self.shells is None else _shell_pruning(self.shells, table),
            diffuse_by_element=list(self.diffuse),
            problems=list(self.problems),
            trial_scf=self.trial_scf,
        )


def _function_subset(f: Selection, table: FunctionTable) -> FunctionSubset:
    return FunctionSubset(
        tolerance=f.tolerance,
        smallest_kept=f.smallest_kept,
        factorizations=f.factorizations,
        kept=int(f.kept.size),
        kept_by_pivoting=f.prefix,
        added_back=f.added_back,
        dropped=[function_record(table, int(i)) for i in f.dropped],
        kept_functions_in_order=[int(i) + 1 for i in f.order],
    )


def _shell_pruning(s: Selection, table: FunctionTable) -> ShellPruning:
    chosen = "shell pivoting" if s.search != "from-functions" else "shells the function-level subset leaves whole"
    return ShellPruning(
        chosen_by=chosen,
        tolerance=s.tolerance,
        smallest_kept=s.smallest_kept,
        factorizations=s.factorizations,
        kept=int(s.kept.size),
        kept_by_pivoting=s.prefix,
        added_back=s.added_back,
        dropped_shells=[shell_record(table, int(i)) for i in _shell_sets(s)[1]],
    )


def _shell_sets(s: Selection) -> tuple[np.ndarray, np.ndarray]:
    """The shells a whole-shell selection keeps and those it drops."""
    if s.kept_shells is None or s.dropped_shells is None:
        raise ValueError("not a whole-shell selection")
    return s.kept_shells, s.dropped_shells


#: The one rule for a whole-shell set, the same in `check`, `prune`, the gate and the API:
#: the shells the function-level subset leaves whole, then the other shells offered back;
#: shell pivoting only when that yields nothing (no shell left whole, or an atom emptied).
#: Measured against the better of both sets (docs/numerics.md, "Whole shells"): as good in
#: most cases, never more than a few functions worse, and shell pivoting's per-shell Python
#: loop made `check` 1.2-7.7 times slower.
WHOLE_SHELL_RULE = "shells the function-level subset leaves whole; shell pivoting when that yields nothing"


def whole_shell_selection(
    S: np.ndarray,
    target: float,
    functions: Selection | None,
    units: np.ndarray,
    atoms: np.ndarray,
    mode: str,
    problems: list[str],
    what: str = "shell-pruned basis",
) -> Selection | None:
    """The whole-shell kept set by `WHOLE_SHELL_RULE` (``units`` numbers the shell, or the
    set of symmetry-equivalent shells, of each function)."""
    if functions is not None:
        seeded = shells_from_functions(S, functions, units, verify=mode)
        if seeded is not None:
            try:
                check_atoms_not_emptied(seeded.kept, atoms, what=f"target {target:g}")
                return seeded
            except UsageError:
                pass
    try:
        return select_for_target(S, target, units, atoms, verify=mode)
    except UsageError as exc:
        problems.append(f"{what}: {exc.message}")
        return None


def _alt(
    kind: str,
    title: str,
    removed: int | None,
    unit: str,
    smallest: float | None,
    target: float,
    how: str,
    **extra: Any,
) -> Alternative:
    reaches = bool(smallest is not None and smallest >= target)
    return Alternative(kind, title, removed, unit, smallest, reaches, how, **extra)


def _memory_problem(n: int) -> str | None:
    need = REMEDY_COPIES * 8 * n * n
    free = available_bytes()
    if need <= free:
        return None
    return (
        f"remedies skipped: about {need / 1024**3:.1f} GiB would be needed beside S, "
        f"{free / 1024**3:.1f} GiB is available"
    )


def _canonical(rec: Recommendation, target: float) -> Alternative:
    how = "keep the basis; drop eigenvectors of S below the threshold (canonical orthogonalization section)"
    title = f"canonical orthogonalization at {rec.threshold:.1e}"
    return _alt(
        "canonical_orthogonalization",
        title,
        rec.n_removed,
        "directions",
        rec.smallest_kept,
        target,
        how,
        threshold=rec.threshold,
    )


def _add_function_subset(plan: RemedyPlan, S: np.ndarray, atoms: np.ndarray, mode: str) -> None:
    try:
        f = plan.functions = select_for_target(S, plan.target, atom_of_function=atoms, verify=mode)
    except UsageError as exc:
        plan.problems.append(f"pivoted-Cholesky subset: {exc.message}")
        return
    plan.alternatives.append(
        _alt(
            "cholesky_functions",
            "pivoted-Cholesky subset of functions",
            f.n_dropped,
            "functions",
            f.smallest_kept,
            plan.target,
            "drop single functions (not rotationally invariant)",
            tolerance=f.tolerance,
        )
    )


def _add_shell_pruning(plan: RemedyPlan, prep: PreparedGeometry, atoms: np.ndarray, mode: str) -> None:
    s = plan.shells = whole_shell_selection(
        prep.S, plan.target, plan.functions, prep.table.func_shell, atoms, mode, plan.problems
    )
    if s is None:
        return
    try:
        plan.pruned = pruned_basis(prep, _shell_sets(s)[0], plan.target, s.smallest_kept)
    except UsageError as exc:
        plan.problems.append(f"shell-pruned basis: {exc.message}")
        return
    plan.alternatives.append(
        _alt(
            "cholesky_shells",
            "shell-pruned basis (whole shells, pivoted Cholesky)",
            s.n_dropped,
            "functions",
            s.smallest_kept,
            plan.target,
            "auditor prune writes it as a pyscf basis (JSON)",
            tolerance=s.tolerance,
            shells_removed=len(_shell_sets(s)[1]),
        )
    )


def _add_diffuse_options(plan: RemedyPlan, S: np.ndarray, table: FunctionTable) -> None:
    plan.diffuse = diffuse_element_options(S, table, plan.target)
    for opt in plan.diffuse:
        if opt.reaches_target:
            how = f"use the parent basis without augmentation for {opt.element} (e.g. --basis-for)"
            plan.alternatives.append(
                _alt(
                    "drop_diffuse_element",
                    f"drop the diffuse shells of {opt.element} everywhere",
                    opt.removed,
                    "functions",
                    opt.smallest_after,
                    plan.target,
                    how,
                    element=opt.element,
                )
            )


#: Ties: the larger smallest eigenvalue (to 3 digits), then whole-shell remedies first.
_PREFER = {"cholesky_shells": 0, "drop_diffuse_element": 1, "cholesky_functions": 2, "canonical_orthogonalization": 3}


def rank_alternatives(alternatives: list[Alternative], n: int) -> list[Alternative]:
    """Those that reach the target first, then fewest removed, then the larger smallest eigenvalue."""
    ordered = sorted(
        alternatives,
        key=lambda a: (
            not a.reaches_target,
            a.removed if a.removed is not None else n,
            -float(f"{a.smallest_after or 0.0:.2e}"),
            _PREFER[a.kind],
        ),
    )
    return [replace(a, rank=k) for k, a in enumerate(ordered, 1)]


def plan_remedies(
    prep: PreparedGeometry,
    recommendation: Recommendation,
    smallest: float,
    target: float,
    force: bool = False,
) -> RemedyPlan:
    """Work out every remedy for a prepared geometry and rank them.

    ``smallest`` is the full basis's smallest eigenvalue; when it already meets the
    target (and not ``force``) nothing is computed.
    """
    target = check_target(target)
    S, table = prep.S, prep.table
    plan = RemedyPlan(target=target, needed=bool(smallest < target))
    if not plan.needed and not force:
        return plan
    problem = _memory_problem(table.n_functions)
    if problem:
        plan.problems.append(problem)
        return plan
    mode = verify_mode(table.n_functions)
    atoms = table.func_atom - 1
    if recommendation.threshold is not None:  # none is advised for a broken geometry
        plan.alternatives.append(_canonical(recommendation, target))
    _add_function_subset(plan, S, atoms, mode)
    _add_shell_pruning(plan, prep, atoms, mode)
    _add_diffuse_options(plan, S, table)
    plan.alternatives = rank_alternatives(plan.alternatives, table.n_functions)
    return plan


@dataclass(frozen=True)
class RemedyOptions:
    """How remedies are worked out: ``target`` smallest eigenvalue (None: the policy's
    caution level), an opt-in trial SCF (``trial_scf`` "hf" or a functional name) with
    its size and time limits, and ``force`` to compute even when nothing needs removing.
    The whole-shell set follows one rule everywhere (`WHOLE_SHELL_RULE`)."""

    target: float | None = None
    trial_scf: str | None = None
    trial_max_functions: int = 400
    trial_time_limit: float = 120.0
    force: bool = False


def make_plan(
    prep: PreparedGeometry, recommendation: Recommendation, smallest: float, options: RemedyOptions, caution: float
) -> RemedyPlan:
    """`plan_remedies` plus the opt-in trial SCF."""
    target = caution if options.target is None else options.target
    plan = plan_remedies(prep, recommendation, smallest, target, force=options.force)
    if options.trial_scf:
        if plan.needed or options.force:
            plan.trial_scf = trial_scf(
                prep,
                options.trial_scf,
                target if recommendation.threshold is None else recommendation.threshold,
                plan.pruned,
                options.trial_max_functions,
                options.trial_time_limit,
            )
        else:
            plan.trial_scf = {
                "method": check_method(options.trial_scf),
                "runs": [],
                "skipped": "trial SCF skipped: the basis already meets the target, no remedy to compare",
            }
    return plan


def remedies_for(
    prep: PreparedGeometry,
    recommendation: Recommendation,
    smallest: float,
    options: RemedyOptions | None,
    caution: float,
) -> Remedies:
    """The ``remedies`` part of an audit result."""
    plan = make_plan(prep, recommendation, smallest, options or RemedyOptions(), caution)
    return plan.report(prep.table)
