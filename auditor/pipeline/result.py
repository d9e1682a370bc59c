"""The one result object that every writer reads."""

from __future__ import annotations

from dataclasses import dataclass, field

from ..diagnosis.causes import Causes
from ..diagnosis.findings import Finding
from ..remedies.canonical import Recommendation

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
    n_atoms: int
    n_functions: int
    n_shells: int
    ghost_atoms: tuple[int, ...]
    charge: int
    multiplicity: int | None
    atoms: tuple[dict, ...]  # {"atom", "element", "ghost", "xyz"} with xyz in ångström

    def as_dict(self) -> dict:
        return {
            "path": self.path,
            "frame": self.frame,
            "n_frames": self.n_frames,
            "basis": self.basis,
            "basis_spec": self.basis_spec,
            "n_atoms": self.n_atoms,
            "n_functions": self.n_functions,
            "n_shells": self.n_shells,
            "ghost_atoms": list(self.ghost_atoms),
            "charge": self.charge,
            "multiplicity": self.multiplicity,
            "atoms": [dict(a) for a in self.atoms],
        }


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

    def as_dict(self) -> dict:
        return {
            "smallest": self.smallest,
            "largest": self.largest,
            "condition_number": self.condition_number,
            "log10_condition": self.log10_condition,
            "counts_below": dict(self.counts_below),
            "gershgorin_bound": self.gershgorin_bound,
            "method": self.method,
            "eigenvalues": list(self.eigenvalues),
        }


@dataclass(frozen=True)
class AuditResult:
    """Everything one audit found, for one geometry frame and one basis."""

    version: str
    input: InputInfo
    spectrum: SpectrumInfo
    verdict: str
    verdict_reason: str
    policy: dict
    findings: tuple[Finding, ...]
    causes: Causes
    recommendation: Recommendation
    remedies: dict | None = None
    caveats: tuple[str, ...] = CAVEATS
    extra: dict = field(default_factory=dict)

    def as_dict(self) -> dict:
        """JSON-ready dictionary (the documented schema)."""
        out = {
            "schema": SCHEMA,
            "version": self.version,
            "input": self.input.as_dict(),
            "verdict": self.verdict,
            "verdict_reason": self.verdict_reason,
            "policy": dict(self.policy),
            "spectrum": self.spectrum.as_dict(),
            "findings": [f.as_dict() for f in self.findings],
            "causes": self.causes.as_dict(),
            "recommendation": self.recommendation.as_dict(),
            "remedies": self.remedies,
            "caveats": list(self.caveats),
        }
        out.update(self.extra)
        return out
