"""The ladder of named bases as a document of its own (``auditor-ladder/1``): the requested
basis, its smaller published relatives and any the user lists, at one geometry (every frame
of a scan: the worst frame decides), and the largest relative that meets the target."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from .. import __version__
from ..base.errors import UsageError
from ..base.jsonio import to_jsonable
from ..diagnosis.verdict import Policy
from ..inputs.basis import BasisSpec
from ..inputs.geometry import Molecule
from ..remedies.ladder import RungResult, run_ladder
from ..remedies.subset import check_target

LADDER_SCHEMA = "auditor-ladder/1"

LADDER_CAVEATS = (
    "A smaller basis meets the target by having fewer functions: it changes total energies and properties "
    "more than removing the few directions below the target would; compare energies only within one basis.",
    "The calendar sets are built here by basis_set_exchange's stated rule from the augmented basis the audit "
    "read; 'matches published' says whether their shells equal basis_set_exchange's published copy for every "
    "element of this geometry.",
)


@dataclass(frozen=True)
class LadderReport:
    """Everything the ladder command writes (``as_dict``: the JSON document)."""

    version: str
    input: dict
    policy: dict
    target: float
    requested: str
    chosen: str | None
    reason: str
    rungs: list[RungResult]
    caveats: tuple[str, ...] = LADDER_CAVEATS

    def as_dict(self) -> dict:
        return {"schema": LADDER_SCHEMA, **to_jsonable(self)}


def ladder(
    molecules: Sequence[Molecule],
    spec: BasisSpec,
    policy: Policy | None = None,
    target: float | None = None,
    bases: Sequence[str] = (),
) -> LadderReport:
    """Evaluate the ladder of ``spec``'s default basis for ``molecules`` (the frames of one
    geometry). ``target`` defaults to the policy's caution level."""
    policy = policy or Policy()
    target = check_target(policy.caution if target is None else target)
    if not molecules:
        raise UsageError("the ladder needs a geometry")
    if any(m.symbols != molecules[0].symbols or m.ghost != molecules[0].ghost for m in molecules[1:]):
        raise UsageError(f"{molecules[0].source}: the frames differ in their atoms; pick one with --frame")
    result = run_ladder(molecules, spec, target, (policy.caution, policy.fail), bases)
    first = molecules[0]
    info = {
        "path": first.source,
        "frames": [m.frame + 1 for m in molecules],
        "n_frames": first.n_frames,
        "n_atoms": first.n_atoms,
        "elements": sorted(set(first.symbols)),
        "ghost_atoms": [i + 1 for i, g in enumerate(first.ghost) if g],
        "basis_spec": spec.as_dict(),
    }
    return LadderReport(
        version=__version__,
        input=info,
        policy={"caution": policy.caution, "fail": policy.fail},
        target=target,
        requested=result.requested,
        chosen=result.chosen,
        reason=result.reason,
        rungs=result.rungs,
    )
