"""Remedies a chemist can apply, ranked at one target: canonical orthogonalization at the
target, a pivoted-Cholesky subset of functions, a shell-pruned per-atom basis (keeping the
point group, and without that constraint when it costs functions), and dropping one
element's diffuse shells. Several frames of one geometry get one set of remedies that
meets the target in every frame."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from ..base.defaults import TRIAL_MAX_FUNCTIONS, TRIAL_TIME_LIMIT
from ..base.errors import UsageError
from ..numerics.cholesky import (
    CholeskyResult,
    FactorHandoff,
    end_loan,
    shared_core,
    smallest_eigenvalue,
    smallest_eigenvalue_cached,
    verify_mode,
)
from ..numerics.eigen import compute_spectrum
from ..numerics.memory import available_bytes
from ..numerics.overlap import FunctionTable
from ..numerics.spectrum import Spectrum
from .canonical import Recommendation
from .frames import frame_order, joint_select
from .ladder import named_basis_remedy
from .prepared import PreparedGeometry
from .pruned_basis import function_record, pruned_basis, shell_record
from .records import (
    Alternative,
    DiffuseOption,
    FrameFigures,
    FunctionSubset,
    NamedBasis,
    NamedRung,
    Remedies,
    ShellPruning,
    SymmetryInfo,
)
from .shells import (
    WHOLE_SHELL_RULE,
    SymmetryFound,
    find_frames_symmetry,
    full_point_group,
    pruned_point_group,
    whole_shell_selection,
)
from .subset import TARGET_SLACK, Selection, check_atoms_not_emptied, check_target
from .symmetry import SYMMETRY_TOLERANCE
from .trial_scf import Progress, check_method, trial_scf

__all__ = [
    "WHOLE_SHELL_RULE",
    "Alternative",
    "DiffuseOption",
    "FrameFigures",
    "FunctionSubset",
    "Remedies",
    "RemedyOptions",
    "RemedyPlan",
    "ShellPruning",
    "SymmetryInfo",
    "make_plan",
    "plan_frames",
    "plan_remedies",
    "rank_alternatives",
    "remedies_for",
]

#: Peak number of N x N arrays the remedies hold beside S, rounded up (measured: 2.07 at
#: N = 11960, audit with remedies on the large path: the pivoted factor, then the shifted
#: copy or the add-back factor, each released before the next is made). Several frames
#: hold one more factor per further frame during the joint add-back pass.
REMEDY_COPIES = 3


@dataclass
class RemedyPlan:
    """The working state of the remedies: the selections found, the pruned-basis document,
    the ranked alternatives; ``report`` turns it into the typed ``Remedies``.

    ``shells`` is the written shell-pruned basis (pruned alike on equivalent atoms when the
    geometry has symmetry); ``free_shells`` the pruning without that constraint, kept only
    when it keeps more functions."""

    target: float
    needed: bool
    lower_bound: int | None = None
    functions: Selection | None = None
    shells: Selection | None = None
    free_shells: Selection | None = None
    symmetry: SymmetryInfo | None = None
    named_basis: NamedBasis | None = None
    pruned: dict | None = None
    alternatives: list[Alternative] = field(default_factory=list)
    diffuse: list[DiffuseOption] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)
    frames: list[FrameFigures] | None = None
    deciding_frame: int | None = None
    trial_scf: dict | None = None

    def report(self, table: FunctionTable) -> Remedies:
        return Remedies(
            target=self.target,
            needed=self.needed,
            alternatives=list(self.alternatives),
            lower_bound=self.lower_bound,
            cholesky_functions=None if self.functions is None else _function_subset(self.functions, table),
            cholesky_shells=None if self.shells is None else _shell_pruning(self.shells, table),
            cholesky_shells_unconstrained=None if self.free_shells is None else _shell_pruning(self.free_shells, table),
            symmetry=self.symmetry,
            named_basis=self.named_basis,
            diffuse_by_element=list(self.diffuse),
            problems=list(self.problems),
            frames=self.frames,
            deciding_frame=self.deciding_frame,
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


def _dropped_shells(s: Selection, table: FunctionTable) -> np.ndarray:
    """The shells (not units) a whole-unit selection drops."""
    return np.setdiff1d(np.arange(table.n_shells), np.unique(table.func_shell[s.kept]))


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
        dropped_shells=[shell_record(table, int(i)) for i in _dropped_shells(s, table)],
    )


def diffuse_element_options(
    S: np.ndarray | Sequence[np.ndarray], table: FunctionTable, target: float, cache: dict | None = None
) -> list[DiffuseOption]:
    """For each element with diffuse shells: drop them on every atom of that element (in
    every frame of ``S``, a matrix or a list of one per frame: the worst frame's value;
    ``cache`` as for `smallest_eigenvalue_cached`)."""
    Ss = [S] if isinstance(S, np.ndarray) else list(S)
    out = []
    func_el = np.array([str(table.elements[a - 1]) for a in table.func_atom])
    func_dif = table.func_diffuse
    elements = sorted(set(func_el[func_dif]))
    if cache is not None and len(Ss) == 1:
        # every option (and a published relative without diffuse shells) keeps the
        # non-diffuse functions: factor them once (`SharedCore`), or use the spectrum's
        _share_core(cache, Ss[0], table.non_diffuse, len(elements) > 1)
    for el in elements:
        drop = func_dif & (func_el == el)
        kept = np.flatnonzero(~drop)
        try:
            check_atoms_not_emptied(kept, table.func_atom - 1)
        except UsageError:
            continue
        low = min(smallest_eigenvalue_cached(Sf, kept, cache) for Sf in Ss)
        shells = np.unique(table.func_shell[drop])
        names = sorted({table.shell_name[s][-1] + f" {table.shell_exponent[s]:.4g}" for s in shells})
        out.append(DiffuseOption(str(el), int(drop.sum()), len(shells), names, low, bool(low >= target)))
    return out


def _share_core(cache: dict, S: np.ndarray, core: np.ndarray, worth_it: bool) -> None:
    """Keep in ``cache`` the `SharedCore` of S for ``core``: the one already there if it is for
    those functions, else a new one when ``worth_it`` (several options) and S is large."""
    key = ("core", id(S))
    held = cache.get(key)
    if held is not None and np.array_equal(held.core, core):
        return
    cache.pop(key, None)
    if worth_it and verify_mode(S.shape[0]) == "lanczos":
        end_loan(cache, S)
        cache[key] = shared_core(S, core)


def alternative(
    kind: str,
    title: str,
    removed: int | None,
    unit: str,
    smallest: float | None,
    target: float,
    how: str,
    **extra: Any,
) -> Alternative:
    """One ranked option; it reaches the target with the searches' own rounding allowance."""
    reaches = bool(smallest is not None and smallest >= target * (1.0 - TARGET_SLACK))
    return Alternative(kind, title, removed, unit, smallest, reaches, how, **extra)


def remedies_fit(n: int, n_frames: int = 1) -> bool:
    """Whether the remedies of n functions (over ``n_frames`` frames) fit in free memory."""
    return _memory_problem(n, n_frames) is None


def _memory_problem(n: int, n_frames: int = 1) -> str | None:
    need = (REMEDY_COPIES + max(0, n_frames - 1)) * 8 * n * n
    free = available_bytes()
    if need <= free:
        return None
    return (
        f"remedies skipped: about {need / 1024**3:.1f} GiB would be needed beside S, "
        f"{free / 1024**3:.1f} GiB is available"
    )


@dataclass(frozen=True)
class _AtTarget:
    """Canonical orthogonalization at the target in every frame (file order)."""

    counts: list[int | None]
    kept: list[float | None]

    @property
    def removed(self) -> int | None:
        return None if any(c is None for c in self.counts) else max(c for c in self.counts if c is not None)

    @property
    def smallest_after(self) -> float | None:
        return None if any(v is None for v in self.kept) else min(v for v in self.kept if v is not None)


def _at_target(spectra: Sequence[Spectrum], target: float) -> _AtTarget:
    counts, kept = [], []
    for spec in spectra:
        c = spec.count_below(target)
        counts.append(c)
        kept.append(float(spec.values[c]) if c is not None and c < spec.values.size else None)
    return _AtTarget(counts, kept)


def _canonical(at: _AtTarget, target: float) -> Alternative:
    how = (
        "keep the basis; drop the eigenvectors of S below the target "
        f"(in pyscf: scf.hf.overlap_zero_eigenvalue_threshold = {target:.1e}); removes exactly the "
        "eigenvalues below the target, the fewest any remedy can"
    )
    known = [c for c in at.counts if c is not None]
    if len(at.counts) > 1 and known and min(known) != max(known):
        how += f"; {min(known)} to {max(known)} directions depending on the frame"
    return alternative(
        "canonical_orthogonalization",
        f"canonical orthogonalization at the target {target:.1e}",
        at.removed,
        "directions",
        at.smallest_after,
        target,
        how,
        threshold=target,
    )


def _add_function_subset(
    plan: RemedyPlan, Ss: list[np.ndarray], atoms: np.ndarray, mode: str, pivoted: CholeskyResult | None
) -> None:
    try:
        f = plan.functions = joint_select(Ss, plan.target, None, atoms, verify=mode, pivoted=pivoted)
    except UsageError as exc:
        plan.problems.append(f"pivoted-Cholesky subset: {exc.message}")
        return
    plan.alternatives.append(
        alternative(
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


def _add_diffuse_options(plan: RemedyPlan, Ss: list[np.ndarray], table: FunctionTable, cache: dict) -> None:
    plan.diffuse = diffuse_element_options(Ss, table, plan.target, cache)
    for opt in plan.diffuse:
        if opt.reaches_target:
            how = f"use the parent basis without augmentation for {opt.element} (e.g. --basis-for)"
            plan.alternatives.append(
                alternative(
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


def _add_named_basis(plan: RemedyPlan, fr: _Frames, n: int, cache: dict) -> None:
    """The largest smaller published relative of the requested basis that meets the target."""
    prep = fr.worst
    ladder = named_basis_remedy(fr.preps, prep.spec, plan.target, (plan.target, 0.0), cache)
    if ladder is None:
        return
    rungs = [
        NamedRung(r.basis, r.use_name, r.matches_published, r.n_functions, r.smallest, r.reaches_target, r.error)
        for r in ladder.rungs
    ]
    plan.named_basis = NamedBasis(ladder.requested, ladder.chosen, ladder.reason, rungs)
    best = next((r for r in ladder.rungs if r.reaches_target and r.n_functions is not None), None)
    if best is None or best.n_functions is None:
        return
    cite = f"; cite {best.reference}" if best.reference else ""
    rule = "" if best.published is None else f" ({best.how})"
    plan.alternatives.append(
        alternative(
            "named_basis",
            f"use the published basis {best.use_name}",
            n - best.n_functions,
            "functions",
            best.smallest,
            plan.target,
            f"a named, citable basis{rule}{cite}; auditor ladder compares every relative",
            basis=best.use_name,
        )
    )


@dataclass
class _Frames:
    """The frames of one geometry as the remedies see them: file order and worst first."""

    preps: list[PreparedGeometry]
    spectra: list[Spectrum]
    order: list[int]  # frame indices, worst (smallest eigenvalue) first
    sym: SymmetryFound | None = None  # found by the whole-shell step

    @property
    def worst(self) -> PreparedGeometry:
        return self.preps[self.order[0]]

    @property
    def worst_first(self) -> list[np.ndarray]:
        return [self.preps[k].S for k in self.order]


def _add_shell_prunings(plan: RemedyPlan, fr: _Frames, atoms: np.ndarray, mode: str) -> None:
    """The shell-pruned basis (equivalent atoms pruned alike), and the one that ignores
    symmetry when it keeps more functions; point groups of the full and pruned bases."""
    table, Ss = fr.worst.table, fr.worst_first
    sym = fr.sym = find_frames_symmetry(fr.preps)
    # the last search seeded by the function-level factor may work in its memory
    free = whole_shell_selection(
        Ss, plan.target, plan.functions, table.func_shell, atoms, mode, plan.problems, consume=sym.trivial
    )
    kept = free
    if not sym.trivial:
        problems: list[str] = []
        what = "shell-pruned basis keeping the point group"
        kept = whole_shell_selection(Ss, plan.target, plan.functions, sym.units, atoms, mode, problems, what, True)
        if kept is None:
            plan.problems += problems
            kept = free
    plan.shells = kept
    if kept is not None and free is not None and kept is not free and free.kept.size > kept.kept.size:
        plan.free_shells = free
    if kept is None:
        return
    plan.symmetry = _symmetry_info(plan, fr, sym)
    try:
        plan.pruned = pruned_basis(fr.worst, np.unique(table.func_shell[kept.kept]), plan.target, kept.smallest_kept)
    except UsageError as exc:
        plan.problems.append(f"shell-pruned basis: {exc.message}")
        return
    if len(fr.preps) > 1:  # one basis for every frame: the document carries every frame's coordinates
        plan.pruned["frame"] = fr.worst.molecule.frame + 1
        plan.pruned["frames"] = [[[round(float(x), 10) for x in xyz] for xyz in p.molecule.coords] for p in fr.preps]
    for s, kind in ((kept, "cholesky_shells"), (plan.free_shells, "cholesky_shells_unconstrained")):
        if s is not None:
            plan.alternatives.append(_shell_alternative(plan, s, kind, table))


def _shell_alternative(plan: RemedyPlan, s: Selection, kind: str, table: FunctionTable) -> Alternative:
    info = plan.symmetry
    if kind == "cholesky_shells_unconstrained" and info is not None:
        title = f"shell-pruned basis ignoring symmetry (point group {info.unconstrained_point_group})"
        how = "drop whole shells without regard to equivalent atoms; the pruned basis lowers the point group"
    else:
        group = f", point group {info.pruned_point_group}" if info is not None and info.point_group != "C1" else ""
        title = f"shell-pruned basis (whole shells, pivoted Cholesky{group})"
        how = "auditor prune writes it as a pyscf basis (JSON) and in other programs' formats"
    return alternative(
        kind,
        title,
        s.n_dropped,
        "functions",
        s.smallest_kept,
        plan.target,
        how,
        tolerance=s.tolerance,
        shells_removed=int(_dropped_shells(s, table).size),
    )


def _symmetry_info(plan: RemedyPlan, fr: _Frames, sym: SymmetryFound) -> SymmetryInfo:
    k = fr.order[0]
    prep, own = fr.preps[k], sym.per_frame[k]
    kept = plan.shells
    full = full_point_group(prep, own)
    pruned = None if kept is None else pruned_point_group(prep, kept.kept, own)
    free = plan.free_shells
    free_group = None if free is None else pruned_point_group(prep, free.kept, own)
    extra = 0 if free is None or kept is None else int(free.kept.size - kept.kept.size)
    if sym.trivial:
        note = "no two atoms are equivalent: every shell is pruned on its own"
    elif free is None:
        note = "pruning equivalent atoms alike cost no functions against the pruning that ignores symmetry"
    else:
        note = (
            f"keeping point group {full} costs {extra} function(s): the pruning that ignores symmetry keeps "
            f"{free.kept.size} functions but lowers the point group to {free_group}"
        )
    return SymmetryInfo(
        tolerance_angstrom=SYMMETRY_TOLERANCE,
        point_group=full,
        pruned_point_group=pruned,
        keeps_point_group=pruned == full,
        equivalent_atoms=[[a + 1 for a in s] for s in sym.atom_sets if len(s) > 1],
        unconstrained_point_group=free_group,
        extra_functions_dropped=extra,
        note=note,
    )


def _frame_figures(plan: RemedyPlan, fr: _Frames, at: _AtTarget) -> list[FrameFigures]:
    """Each frame (file order) under the remedies computed for all of them."""
    sym = fr.sym if plan.shells is not None else None
    out = []
    for k, (prep, spec) in enumerate(zip(fr.preps, fr.spectra)):
        f, s = plan.functions, plan.shells
        own = None if sym is None else sym.per_frame[k]
        out.append(
            FrameFigures(
                frame=prep.molecule.frame + 1,
                smallest=spec.smallest,
                below_target=at.counts[k],
                functions_smallest=None if f is None else smallest_eigenvalue(prep.S, f.kept),
                shells_smallest=None if s is None else smallest_eigenvalue(prep.S, s.kept),
                point_group=None if own is None else full_point_group(prep, own),
                pruned_point_group=None if own is None or s is None else pruned_point_group(prep, s.kept, own),
            )
        )
    return out


#: Ties: the larger smallest eigenvalue (to 3 digits), then whole-shell remedies first.
_PREFER = {
    "named_basis": 0,
    "exponent_cutoff": 1,
    "cholesky_shells": 2,
    "drop_diffuse_element": 3,
    "cholesky_shells_unconstrained": 4,
    "cholesky_functions": 5,
    "canonical_orthogonalization": 6,
}


def rank_alternatives(alternatives: list[Alternative], n: int) -> list[Alternative]:
    """Those that reach the target first, a published named basis first among them (chemists
    prefer a citable basis to a custom one), then fewest removed, then the larger smallest
    eigenvalue."""
    ordered = sorted(
        alternatives,
        key=lambda a: (
            not a.reaches_target,
            not (a.reaches_target and a.kind == "named_basis"),
            a.removed if a.removed is not None else n,
            -float(f"{a.smallest_after or 0.0:.2e}"),
            _PREFER.get(a.kind, len(_PREFER)),
        ),
    )
    return [replace(a, rank=k) for k, a in enumerate(ordered, 1)]


def plan_frames(
    preps: Sequence[PreparedGeometry],
    spectra: Sequence[Spectrum],
    recommendation: Recommendation,
    target: float,
    force: bool = False,
) -> RemedyPlan:
    """Work out every remedy, at ``target``, for the frames of one geometry (one frame, or
    several with the same atoms and basis: one set of remedies for all), and rank them.

    Nothing is computed when every frame already meets the target (and not ``force``).
    """
    fr = _Frames(list(preps), list(spectra), frame_order([s.smallest for s in spectra]))
    # the spectrum's factorization of S - target*I and shared core, when it made them (one frame)
    handoff = fr.spectra[0].handoff if len(fr.spectra) == 1 else None
    try:
        return _plan(fr, recommendation, check_target(target), force, handoff)
    finally:
        if handoff is not None:
            handoff.release()  # whatever was not taken is dropped; S whole again


def _plan(
    fr: _Frames, recommendation: Recommendation, target: float, force: bool, handoff: FactorHandoff | None
) -> RemedyPlan:
    """`plan_frames` once the frames are sorted (``handoff``: the spectrum's, or None)."""
    table = fr.worst.table
    at = _at_target(fr.spectra, target)
    plan = RemedyPlan(target=target, needed=bool(min(s.smallest for s in fr.spectra) < target), lower_bound=at.removed)
    if len(fr.preps) > 1:
        plan.deciding_frame = fr.worst.molecule.frame + 1
    if not plan.needed and not force:
        return plan
    problem = _memory_problem(table.n_functions, len(fr.preps))
    if problem:
        plan.problems.append(problem)
        return plan
    mode = verify_mode(table.n_functions)
    atoms = table.func_atom - 1
    if recommendation.threshold is not None:  # none is advised for a broken geometry
        plan.alternatives.append(_canonical(at, target))
    # The diffuse options and the named basis go first, through the shared core, while the
    # pivoted factor may still be lent in S's lower triangle; the function subset then takes
    # the factor, copied into the memory the core has just freed. They are listed after it.
    first = len(plan.alternatives)
    shared = handoff.take_core() if handoff is not None else None
    S = fr.worst_first[0]
    cache: dict = {} if shared is None else {("core", id(S)): shared}
    if handoff is not None:
        cache[("lender", id(S))] = handoff  # a read of S beyond the core ends the loan first
    del shared
    _add_diffuse_options(plan, fr.worst_first, table, cache)
    _add_named_basis(plan, fr, table.n_functions, cache)
    del cache
    later = plan.alternatives[first:]
    del plan.alternatives[first:]
    _add_function_subset(plan, fr.worst_first, atoms, mode, handoff.take() if handoff is not None else None)
    _add_shell_prunings(plan, fr, atoms, mode)
    if plan.functions is not None:  # its factor served the shell prunings: release it
        plan.functions = replace(plan.functions, factor=None)
    plan.alternatives += later
    if len(fr.preps) > 1:
        plan.frames = _frame_figures(plan, fr, at)
    plan.alternatives = rank_alternatives(plan.alternatives, table.n_functions)
    return plan


def plan_remedies(
    prep: PreparedGeometry,
    recommendation: Recommendation,
    smallest: float,
    target: float,
    force: bool = False,
    spectrum: Spectrum | None = None,
) -> RemedyPlan:
    """`plan_frames` for one frame. ``smallest`` is the full basis's smallest eigenvalue;
    without ``spectrum`` the spectrum of ``prep.S`` is computed here (dense)."""
    if spectrum is None:
        spectrum = compute_spectrum(prep.S, vector_level=min(target, 1.0), method="full")
    return plan_frames([prep], [spectrum], recommendation, target, force)


@dataclass(frozen=True)
class RemedyOptions:
    """How remedies are worked out: ``target`` smallest eigenvalue (None: the policy's
    caution level), an opt-in trial SCF (``trial_scf`` "hf" or a functional name) with
    its size and time limits and an optional per-cycle ``progress`` callback, and ``force``
    to compute even when nothing needs removing.
    The whole-shell set follows one rule everywhere (`WHOLE_SHELL_RULE`)."""

    target: float | None = None
    trial_scf: str | None = None
    trial_max_functions: int = TRIAL_MAX_FUNCTIONS
    trial_time_limit: float = TRIAL_TIME_LIMIT
    force: bool = False
    #: called after every trial-SCF cycle with {basis, cycle, energy, seconds} (the command
    #: line prints it on a terminal); not part of the options' identity
    progress: Progress | None = field(default=None, compare=False, repr=False)


def make_plan(
    preps: PreparedGeometry | Sequence[PreparedGeometry],
    recommendation: Recommendation,
    spectra: Spectrum | Sequence[Spectrum],
    options: RemedyOptions,
    caution: float,
) -> RemedyPlan:
    """`plan_frames` plus the opt-in trial SCF (on the worst frame; canonical orthogonalization
    at the target against the shell-pruned basis)."""
    preps = [preps] if not isinstance(preps, Sequence) else list(preps)
    spectra = [spectra] if isinstance(spectra, Spectrum) else list(spectra)
    target = caution if options.target is None else options.target
    plan = plan_frames(preps, spectra, recommendation, target, force=options.force)
    if options.trial_scf:
        worst = preps[frame_order([s.smallest for s in spectra])[0]]
        if plan.needed or options.force:
            plan.trial_scf = trial_scf(
                worst,
                options.trial_scf,
                plan.target,
                plan.pruned,
                options.trial_max_functions,
                options.trial_time_limit,
                options.progress,
            )
        else:
            plan.trial_scf = {
                "method": check_method(options.trial_scf),
                "runs": [],
                "skipped": "trial SCF skipped: the basis already meets the target, no remedy to compare",
            }
    return plan


def remedies_for(
    preps: PreparedGeometry | Sequence[PreparedGeometry],
    recommendation: Recommendation,
    spectra: Spectrum | Sequence[Spectrum],
    options: RemedyOptions | None,
    caution: float,
) -> Remedies:
    """The ``remedies`` part of an audit result (the same object for every frame)."""
    plan = make_plan(preps, recommendation, spectra, options or RemedyOptions(), caution)
    table = preps.table if not isinstance(preps, Sequence) else preps[0].table
    return plan.report(table)
