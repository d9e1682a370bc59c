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
    caveats: tuple[str, ...] = CAVEATS
    extra: dict = field(default_factory=dict)

    def as_dict(self) -> dict:
        """JSON-ready dictionary (the documented schema)."""
        out = {"schema": SCHEMA, **to_jsonable(self)}
        del out["extra"]
        out.update(self.extra)
        return out
