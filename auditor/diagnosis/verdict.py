"""The policy: levels on the smallest eigenvalue and on contacts -> the verdict and its one reason."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Protocol

from ..base.errors import UsageError
from ..base.jsonio import to_jsonable

VERDICTS = ("pass", "caution", "fail")
#: finding kinds that say the geometry itself is broken: the file must be fixed, no basis
#: advice applies (in the order in which they are named as the reason)
BROKEN_KINDS = ("coincident_atoms", "impossible_contact", "suspect_units")
#: finding kinds that earn a caution whatever the spectrum says (geometry before basis)
CAUTION_KINDS = ("short_contact", "spin_parity")


@dataclass(frozen=True)
class Policy:
    """``caution``: smallest eigenvalue (of the unit-diagonal S) below which the basis is
    flagged; ``fail``: below which it fails. ``contact_caution`` and ``contact_fail``:
    distance over the sum of covalent radii below which a contact earns a caution or a
    fail (see `auditor.diagnosis.findings.CONTACT_CAUTION`)."""

    caution: float = 1e-5
    fail: float = 1e-7
    contact_caution: float = 0.7
    contact_fail: float = 0.5

    def __post_init__(self) -> None:
        for name in ("caution", "fail"):
            v = getattr(self, name)
            if not (0.0 < v < 1.0):
                raise UsageError(f"the {name} level must lie between 0 and 1, got {v:g}")
        if self.fail > self.caution:
            raise UsageError(f"the fail level ({self.fail:g}) must not exceed the caution level ({self.caution:g})")
        if not 0.0 < self.contact_fail <= self.contact_caution <= 1.5:
            raise UsageError(
                "contact ratios must satisfy 0 < contact_fail <= contact_caution <= 1.5, "
                f"got {self.contact_fail:g} and {self.contact_caution:g}"
            )

    def as_dict(self) -> dict:
        return to_jsonable(self)


class _Finding(Protocol):
    @property
    def kind(self) -> str: ...

    @property
    def severity(self) -> str: ...

    @property
    def message(self) -> str: ...


@dataclass(frozen=True)
class Decision:
    """The verdict, its one-line reason, and the kind of the finding that decided it (None
    when the spectrum passes)."""

    verdict: str
    reason: str
    finding: str | None


def decide(policy: Policy, smallest: float, findings: Sequence[_Finding]) -> Decision:
    """A broken geometry fails first; then the spectrum below the fail level; then a
    geometry caution; then the spectrum below the caution level; else pass. The reason is
    the deciding finding's own sentence, so every output gives the same one."""
    by_kind = {f.kind: f for f in findings if f.severity != "info"}
    spectrum = by_kind.get("near_singular")
    for kind in BROKEN_KINDS:
        if kind in by_kind:
            return Decision("fail", by_kind[kind].message, kind)
    if spectrum is not None and smallest < policy.fail:
        return Decision("fail", spectrum.message, "near_singular")
    for kind in CAUTION_KINDS:
        if kind in by_kind:
            return Decision("caution", by_kind[kind].message, kind)
    if spectrum is not None and smallest < policy.caution:
        return Decision("caution", spectrum.message, "near_singular")
    return Decision(
        "pass", f"Smallest overlap eigenvalue {smallest:.2e} is above the caution level {policy.caution:.0e}.", None
    )
