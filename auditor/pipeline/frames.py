"""Every frame of a scan or trajectory as one job: one threshold and one set of remedies for
all frames (the worst frame decides), each frame's own figures kept.

A threshold or a basis chosen frame by frame makes an energy curve jump wherever two
neighbouring frames remove different directions; one threshold and one pruned basis for
every frame avoid that (the pruned basis entirely: it is the same functions everywhere).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import replace

from ..base.errors import ResourceError, UsageError
from ..diagnosis.verdict import Policy
from ..inputs.basis import BasisSpec
from ..inputs.geometry import Molecule
from ..numerics.memory import available_bytes
from ..remedies.canonical import Recommendation, deciding_frame, frames_reason, recommendation_at
from ..remedies.plan import REMEDY_COPIES, Remedies, RemedyOptions, RemedyPlan, make_plan
from .result import AuditResult, FrameRow, FramesInfo
from .run import (
    Audited,
    Prepared,
    audit_core,
    check_pruned,
    no_remedies,
    prepare,
    prune_options,
    prune_prepared,
    refuse_broken,
    remedies_of,
)


def same_atoms(molecules: Sequence[Molecule]) -> bool:
    """Whether every frame has the same atoms (elements and ghost flags, in order)."""
    first = molecules[0]
    return all(m.symbols == first.symbols and m.ghost == first.ghost for m in molecules[1:])


def joint_recommendations(cores: Sequence[Audited], cartesian: bool) -> tuple[list[Recommendation], int | None]:
    """Each frame's advice at the one threshold for all frames (the largest any frame is
    advised), and the frame (0-based) that decides it. Broken frames keep their no-advice."""
    own = [c.result.recommendation for c in cores]
    k = deciding_frame(own, [c.spectrum.smallest for c in cores])
    if k is None or len(cores) == 1:
        return own, k
    tau = own[k].threshold or 0.0
    out = []
    for core, rec in zip(cores, own):
        if rec.threshold is None:
            out.append(rec)
            continue
        reason = frames_reason(rec, k, len(cores), own[k])
        out.append(recommendation_at(core.spectrum, tau, reason, cartesian))
    return out, k


def frames_info(cores: Sequence[Audited], recs: Sequence[Recommendation], k: int | None) -> FramesInfo:
    """The frames part of every frame's report."""
    rows = tuple(
        FrameRow(
            frame=c.result.input.frame,
            smallest=c.spectrum.smallest,
            verdict=c.result.verdict,
            advised_threshold=c.result.recommendation.threshold,
            directions_removed=r.n_removed,
            smallest_kept=r.smallest_kept,
        )
        for c, r in zip(cores, recs)
    )
    counts = [r.directions_removed for r in rows if r.advised_threshold is not None]
    known = sorted({c for c in counts if c is not None})
    tau = None if k is None else recs[k].threshold
    if tau is None:
        note = "No threshold: every frame is broken."
    elif len(known) < len(set(counts)):
        note = f"At {tau:.1e} the count of removed directions was not established for every frame."
    elif len(known) > 1:
        note = (
            f"Even at the one threshold {tau:.1e} the frames remove {known[0]} to {known[-1]} directions "
            "(see the table): canonical orthogonalization still changes the basis between frames, and the energy "
            "curve can jump where the count changes. The pruned basis, the same functions in every frame, does not."
        )
    else:
        note = f"At the one threshold {tau:.1e} every frame removes the same number of directions ({known[0]})."
    return FramesInfo(len(cores), tau, None if k is None else k + 1, rows, note)


def _frames_fit(n_functions: int, n_frames: int) -> bool:
    """Whether one S per frame plus the remedies' arrays fit in the available memory."""
    return (n_frames + REMEDY_COPIES + n_frames - 1) * 8 * n_functions**2 <= available_bytes()


def prepare_frames(molecules: Sequence[Molecule], spec: BasisSpec) -> list[Prepared]:
    """Prepare every frame for a job that needs all of them at once (`prune_frames`);
    ResourceError when one overlap matrix per frame plus the remedies' arrays do not fit."""
    first = prepare(molecules[0], spec)
    n = first.table.n_functions
    if len(molecules) > 1 and not _frames_fit(n, len(molecules)):
        need = (2 * len(molecules) - 1 + REMEDY_COPIES) * 8 * n * n / 1024**3
        raise ResourceError(
            f"{molecules[0].source}: one basis for all {len(molecules)} frames needs about {need:.1f} GiB "
            f"({n} basis functions, one overlap matrix per frame); prune one frame with --frame"
        )
    return [first, *(prepare(m, spec) for m in molecules[1:])]


def audit_frames(
    molecules: Sequence[Molecule],
    spec: BasisSpec,
    policy: Policy | None = None,
    spectrum_method: str = "auto",
    remedies: bool | RemedyOptions = True,
    stage: Callable[[str], None] | None = None,
) -> list[AuditResult]:
    """Audit every frame of one input as one job: each frame's spectrum, findings and
    causes; one threshold and one set of remedies for all frames; the frames' figures in
    every report. Frames with different atoms are audited one by one (with a note); when
    one overlap matrix per frame does not fit in memory the remedies are skipped (noted).
    ``stage`` (optional) is told the name of each step as it starts."""
    policy = policy or Policy()
    if len(molecules) == 1:
        prep = prepare(molecules[0], spec, spectrum_method, stage)
        core = audit_core(prep, policy, spectrum_method, stage, for_remedies=remedies is not False)
        return [replace(core.result, remedies=remedies_of([prep], [core], policy, remedies, stage=stage))]
    if not same_atoms(molecules):
        return _frame_by_frame(molecules, spec, policy, spectrum_method, remedies)
    preps: list[Prepared] = []
    cores: list[Audited] = []
    keep = remedies is not False
    for mol in molecules:
        prep = prepare(mol, spec, spectrum_method, stage)
        keep = keep and _frames_fit(prep.table.n_functions, len(molecules))
        cores.append(audit_core(prep, policy, spectrum_method, stage))
        preps = [*preps, prep] if keep else []  # without the remedies, each S is released after its frame
    recs, k = joint_recommendations(cores, spec.cartesian)
    if keep:
        rem = remedies_of(preps, cores, policy, remedies, None if k is None else recs[k], stage)
    else:
        rem = None if remedies is False else _skipped(cores, policy, remedies)
    info = frames_info(cores, recs, k)
    return [replace(c.result, recommendation=r, remedies=rem, frames=info) for c, r in zip(cores, recs)]


def _skipped(cores: Sequence[Audited], policy: Policy, remedies: bool | RemedyOptions) -> Remedies:
    """Remedies that could not be worked out for all frames at once (memory)."""
    options = remedies if isinstance(remedies, RemedyOptions) else RemedyOptions()
    target = policy.caution if options.target is None else options.target
    why = "remedies skipped: one overlap matrix per frame does not fit in the available memory"
    return no_remedies(list(cores), target, why)


def _frame_by_frame(
    molecules: Sequence[Molecule],
    spec: BasisSpec,
    policy: Policy,
    spectrum_method: str,
    remedies: bool | RemedyOptions,
) -> list[AuditResult]:
    """Frames with different atoms: each audited on its own, with a note under the remedies."""
    note = "the frames of this file differ in their atoms: no one basis serves them all, so each frame has its own"
    out = []
    for mol in molecules:
        prep = prepare(mol, spec, spectrum_method)
        core = audit_core(prep, policy, spectrum_method, for_remedies=remedies is not False)
        rem = remedies_of([prep], [core], policy, remedies)
        if rem is not None:
            rem = replace(rem, problems=[*rem.problems, note])
        out.append(replace(core.result, remedies=rem))
    return out


def prune_frames(
    preps: Sequence[Prepared], policy: Policy | None = None, options: RemedyOptions | None = None
) -> tuple[list[AuditResult], RemedyPlan]:
    """`prune_prepared` for every frame of a scan: one pruned basis whose overlap meets the
    target in every frame (the worst frame decides). Returns (one AuditResult per frame,
    the RemedyPlan). Raises UsageError for a broken frame, for frames with different atoms
    or when no shell-pruned basis reaches the target; ResourceError when the remedies do
    not fit in memory."""
    if len(preps) == 1:
        result, plan = prune_prepared(preps[0], policy, options)
        return [result], plan
    policy = policy or Policy()
    options = prune_options(options, policy)
    if not same_atoms([p.molecule for p in preps]):
        raise UsageError(f"{preps[0].molecule.source}: the frames differ in their atoms; prune one with --frame")
    cores = [audit_core(p, policy) for p in preps]
    for core in cores:
        refuse_broken(core)
    recs, k = joint_recommendations(cores, preps[0].spec.cartesian)
    plan = make_plan(list(preps), recs[k or 0], [c.spectrum for c in cores], options, policy.caution)
    check_pruned(plan)
    rem = plan.report(preps[0].table)
    info = frames_info(cores, recs, k)
    results = [replace(c.result, recommendation=r, remedies=rem, frames=info) for c, r in zip(cores, recs)]
    return results, plan
