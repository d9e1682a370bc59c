"""Remedies a chemist can apply, ranked: canonical orthogonalization, a pivoted-Cholesky
subset of functions, a shell-pruned per-atom basis, and dropping one element's diffuse shells."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..base.errors import UsageError
from ..numerics.cholesky import smallest_eigenvalue, verify_mode
from ..numerics.memory import available_bytes
from .pruned_basis import function_record, pruned_basis, shell_record
from .subset import Selection, check_atoms_not_emptied, check_target, select_for_target, shells_from_functions
from .trial_scf import check_method, trial_scf

#: Peak number of N x N arrays the remedies hold beside S, rounded up (measured: 2.07 at
#: N = 11960, audit with remedies on the large path: the pivoted factor, then the shifted
#: copy or the add-back factor, each released before the next is made).
REMEDY_COPIES = 3


def diffuse_element_options(S: np.ndarray, table, target: float) -> list[dict]:
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
        out.append(
            {
                "element": str(el),
                "removed": int(drop.sum()),
                "shells": len(shells),
                "shell_names": sorted({table.shell_name[s][-1] + f" {table.shell_exponent[s]:.4g}" for s in shells}),
                "smallest_after": low,
                "reaches_target": bool(low >= target),
            }
        )
    return out


@dataclass
class RemedyPlan:
    """What each remedy removes and leaves; ``alternatives`` ranked, best first."""

    target: float
    needed: bool
    functions: Selection | None = None
    shells: Selection | None = None
    pruned: dict | None = None
    alternatives: list[dict] = field(default_factory=list)
    diffuse: list[dict] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)
    trial_scf: dict | None = None

    def as_dict(self, table=None) -> dict:
        out = {
            "target": self.target,
            "needed": self.needed,
            "alternatives": self.alternatives,
        }
        if self.functions is not None and table is not None:
            f = self.functions
            out["cholesky_functions"] = {
                "tolerance": f.tolerance,
                "smallest_kept": f.smallest_kept,
                "factorizations": f.factorizations,
                "kept": int(f.kept.size),
                "kept_by_pivoting": f.prefix,
                "added_back": f.added_back,
                "dropped": [function_record(table, int(i)) for i in f.dropped],
                "kept_functions_in_order": [int(i) + 1 for i in f.order],
            }
        if self.shells is not None and table is not None:
            s = self.shells
            out["cholesky_shells"] = {
                "chosen_by": (
                    "shell pivoting"
                    if s.search != "from-functions"
                    else "shells the function-level subset leaves whole"
                ),
                "tolerance": s.tolerance,
                "smallest_kept": s.smallest_kept,
                "factorizations": s.factorizations,
                "kept": int(s.kept.size),
                "kept_by_pivoting": s.prefix,
                "added_back": s.added_back,
                "dropped_shells": [shell_record(table, int(i)) for i in s.dropped_shells],
            }
        out["diffuse_by_element"] = self.diffuse
        out["problems"] = self.problems
        out["trial_scf"] = self.trial_scf
        return out


def _best_shell_selection(
    S, table, target, functions, atoms, mode, problems, shell_pivoting: bool = True
) -> Selection | None:
    """The whole-shell kept set that drops fewer functions: shell pivoting, or the shells the
    function-level subset leaves untouched (both followed by the add-back pass).

    Without ``shell_pivoting`` only the cheap function-seeded set is tried (shell pivoting
    then runs only when that fails): its per-shell Python loop costs several
    eigendecompositions of S on a thousand functions."""
    found, why = [], None
    if shell_pivoting or functions is None:
        try:
            found.append(select_for_target(S, target, table.func_shell, atoms, verify=mode))
        except UsageError as exc:
            why = exc.message
    if functions is not None:
        seeded = shells_from_functions(S, functions, table.func_shell, verify=mode)
        if seeded is not None:
            try:
                check_atoms_not_emptied(seeded.kept, atoms, what=f"target {target:g}")
                found.append(seeded)
            except UsageError as exc:
                why = why or exc.message
    if not found and not shell_pivoting and functions is not None:
        return _best_shell_selection(S, table, target, None, atoms, mode, problems)
    if not found:
        problems.append(f"shell-pruned basis: {why or 'no whole-shell set reaches the target'}")
        return None
    return min(found, key=lambda s: s.n_dropped)  # ties: shell pivoting (listed first)


def _alt(kind, title, removed, unit, smallest, target, how, **extra) -> dict:
    return {
        "kind": kind,
        "title": title,
        "removed": removed,
        "unit": unit,
        "smallest_after": smallest,
        "reaches_target": bool(smallest is not None and smallest >= target),
        "how": how,
        **extra,
    }


def plan_remedies(
    prep, recommendation, smallest: float, target: float, force: bool = False, shell_pivoting: bool = True
) -> RemedyPlan:
    """Work out every remedy for a prepared geometry and rank them.

    ``smallest`` is the full basis's smallest eigenvalue; when it already meets the
    target (and not ``force``) nothing is computed. Ranking: remedies that reach the
    target first, then fewest functions (or directions) removed, then the larger
    smallest eigenvalue.
    """
    target = check_target(target)
    S, table = prep.S, prep.table
    plan = RemedyPlan(target=target, needed=bool(smallest < target))
    if not plan.needed and not force:
        return plan
    n = table.n_functions
    need = REMEDY_COPIES * 8 * n * n
    free = available_bytes()
    if need > free:
        plan.problems.append(
            f"remedies skipped: about {need / 1024**3:.1f} GiB would be needed beside S, "
            f"{free / 1024**3:.1f} GiB is available"
        )
        return plan
    mode = verify_mode(n)
    atoms = table.func_atom - 1

    rec = recommendation
    plan.alternatives.append(
        _alt(
            "canonical_orthogonalization",
            f"canonical orthogonalization at {rec.threshold:.1e}",
            rec.n_removed,
            "directions",
            rec.smallest_kept,
            target,
            "keep the basis; drop eigenvectors of S below the threshold (canonical orthogonalization section)",
            threshold=rec.threshold,
        )
    )
    try:
        plan.functions = select_for_target(S, target, atom_of_function=atoms, verify=mode)
        f = plan.functions
        plan.alternatives.append(
            _alt(
                "cholesky_functions",
                "pivoted-Cholesky subset of functions",
                f.n_dropped,
                "functions",
                f.smallest_kept,
                target,
                "drop single functions (not rotationally invariant)",
                tolerance=f.tolerance,
            )
        )
    except UsageError as exc:
        plan.problems.append(f"pivoted-Cholesky subset: {exc.message}")
    plan.shells = _best_shell_selection(S, table, target, plan.functions, atoms, mode, plan.problems, shell_pivoting)
    if plan.shells is not None:
        s = plan.shells
        try:
            plan.pruned = pruned_basis(prep, s.kept_shells, target, s.smallest_kept)
            plan.alternatives.append(
                _alt(
                    "cholesky_shells",
                    "shell-pruned basis (whole shells, pivoted Cholesky)",
                    s.n_dropped,
                    "functions",
                    s.smallest_kept,
                    target,
                    "auditor prune writes it as a pyscf basis (JSON)",
                    tolerance=s.tolerance,
                    shells_removed=len(s.dropped_shells),
                )
            )
        except UsageError as exc:
            plan.problems.append(f"shell-pruned basis: {exc.message}")
    plan.diffuse = diffuse_element_options(S, table, target)
    for opt in plan.diffuse:
        if opt["reaches_target"]:
            plan.alternatives.append(
                _alt(
                    "drop_diffuse_element",
                    f"drop the diffuse shells of {opt['element']} everywhere",
                    opt["removed"],
                    "functions",
                    opt["smallest_after"],
                    target,
                    f"use the parent basis without augmentation for {opt['element']} (e.g. --basis-for)",
                    element=opt["element"],
                )
            )
    # Ties: the larger smallest eigenvalue (to 3 digits), then whole-shell remedies first.
    prefer = {
        "cholesky_shells": 0,
        "drop_diffuse_element": 1,
        "cholesky_functions": 2,
        "canonical_orthogonalization": 3,
    }
    plan.alternatives.sort(
        key=lambda a: (
            not a["reaches_target"],
            a["removed"] if a["removed"] is not None else n,
            -float(f"{a['smallest_after'] or 0.0:.2e}"),
            prefer[a["kind"]],
        )
    )
    for k, a in enumerate(plan.alternatives, 1):
        a["rank"] = k
    return plan


@dataclass(frozen=True)
class RemedyOptions:
    """How remedies are worked out: ``target`` smallest eigenvalue (None: the policy's
    caution level), an opt-in trial SCF (``trial_scf`` "hf" or a functional name) with
    its size and time limits, ``force`` to compute even when nothing needs removing, and
    ``shell_pivoting`` for the thorough (slower) whole-shell search that `prune` uses."""

    target: float | None = None
    trial_scf: str | None = None
    trial_max_functions: int = 400
    trial_time_limit: float = 120.0
    force: bool = False
    shell_pivoting: bool = False


def make_plan(prep, recommendation, smallest: float, options: RemedyOptions, caution: float) -> RemedyPlan:
    """`plan_remedies` plus the opt-in trial SCF."""
    target = caution if options.target is None else options.target
    plan = plan_remedies(
        prep, recommendation, smallest, target, force=options.force, shell_pivoting=options.shell_pivoting
    )
    if options.trial_scf:
        if plan.needed or options.force:
            plan.trial_scf = trial_scf(
                prep,
                options.trial_scf,
                recommendation.threshold,
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


def remedies_for(prep, recommendation, smallest: float, options: RemedyOptions | None, caution: float) -> dict:
    """The ``remedies`` part of an audit result (JSON-ready)."""
    plan = make_plan(prep, recommendation, smallest, options or RemedyOptions(), caution)
    return plan.as_dict(prep.table)
