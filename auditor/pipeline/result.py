"""The one result object that every writer reads."""

from __future__ import annotations

from dataclasses import dataclass, field

from ..base.jsonio import to_jsonable
from ..diagnosis.causes import Causes
from ..diagnosis.findings import Finding
from ..remedies.canonical import Recommendation
from ..remedies.plan import Remedies

SCHEMA = "auditor-report/1"

#: Plain warnings that every report carries: numbers cannot say these.
CAVEATS = (
    "Removing directions from the basis (canonical orthogonalization, pruning) changes "
    "total energies; compare energies only between calculations that removed the same directions.",
    "Thresholds are judgement calls: the levels used here are common practice, not laws; "
    "check that a removed direction is not one your property needs (diffuse functions for "
    "anions, polarizabilities and Rydberg states).",
)


def frames_caveat(n_frames: int) -> str:
    """The warning every report of a multi-frame input carries."""
    return (
        f"This input has {n_frames} frames (a scan or a trajectory). Per-frame thresholds and per-frame pruned "
        "bases make energy curves discontinuous: wherever one frame removes a direction or a function that the "
        "next frame keeps, the energy jumps there. Use one threshold and one basis for every frame: auditor check "
        "reports one threshold and one pruned basis that hold for every frame of the file (the worst frame "
        "decides), and auditor prune writes that basis."
    )


def caveats_for(n_frames: int) -> tuple[str, ...]:
    """The caveats of a report of one frame of an input with ``n_frames`` frames."""
    return CAVEATS + ((frames_caveat(n_frames),) if n_frames > 1 else ())


@dataclass(frozen=True)
class FrameRow:
    """One frame of a multi-frame input: its own figures, and those at the one threshold."""

    frame: int  # 1-based
    smallest: float
    verdict: str
    advised_threshold: float | None  # what this frame alone would be advised
    directions_removed: int | None  # at the one threshold for all frames
    smallest_kept: float | None  # at the one threshold for all frames


@dataclass(frozen=True)
class FramesInfo:
    """One threshold for every frame of a multi-frame input: the frame that decides it, each
    frame's figures, and whether the count of removed directions changes between frames."""

    n_frames: int
    threshold: float | None
    deciding_frame: int | None  # 1-based; None when every frame is broken
    per_frame: tuple[FrameRow, ...]
    note: str


@dataclass(frozen=True)
class InputInfo:
    path: str
    frame: int  # 1-based
    n_frames: int
    basis: str  # BasisSpec.describe()
    basis_spec: dict  # BasisSpec.as_dict()
    #: where each element's shells came from and their digests ({"digest", "elements": [...]})
    basis_data: dict
    n_atoms: int
    n_functions: int
    n_shells: int
    ghost_atoms: tuple[int, ...]
    charge: int
    multiplicity: int | None
    atoms: tuple[dict, ...]  # {"atom", "element", "ghost", "xyz"} with xyz in ångström


@dataclass(frozen=True)
class SpectrumInfo:
    smallest: float
    largest: float
    condition_number: float | None
    log10_condition: float | None
    counts_below: dict
    gershgorin_bound: float
    method: str
    eigenvalues: tuple[float, ...]  # ascending; all on the full path


@dataclass(frozen=True)
class AuditResult:
    """Everything one audit found, for one geometry frame and one basis. Its JSON form
    (``as_dict``) has the fields in this order, after ``schema``."""

    version: str
    input: InputInfo
    verdict: str
    verdict_reason: str
    verdict_finding: str | None
    policy: dict
    spectrum: SpectrumInfo
    findings: tuple[Finding, ...]
    causes: Causes
    recommendation: Recommendation
    remedies: Remedies | None = None
    #: None for a single frame, or for a frame audited on its own (the gate's items)
    frames: FramesInfo | None = None
    caveats: tuple[str, ...] = CAVEATS
    extra: dict = field(default_factory=dict)

    def as_dict(self) -> dict:
        """JSON-ready dictionary (the documented schema)."""
        out = {"schema": SCHEMA, **to_jsonable(self)}
        del out["extra"]
        out.update(self.extra)
        return out
