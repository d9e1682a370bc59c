"""The policy: levels on the smallest eigenvalue and broken-geometry findings -> verdict."""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass

from ..base.errors import UsageError
from ..base.jsonio import to_jsonable

VERDICTS = ("pass", "caution", "fail")
#: finding kinds that fail a geometry whatever the spectrum says
FATAL_KINDS = ("coincident_atoms", "suspect_units")


@dataclass(frozen=True)
class Policy:
    """``caution``: smallest eigenvalue below which the basis is flagged;
    ``fail``: below which it fails. Both act on the unit-diagonal S."""

    caution: float = 1e-5
    fail: float = 1e-7

    def __post_init__(self) -> None:
        for name in ("caution", "fail"):
            v = getattr(self, name)
            if not (0.0 < v < 1.0):
                raise UsageError(f"the {name} level must lie between 0 and 1, got {v:g}")
        if self.fail > self.caution:
            raise UsageError(f"the fail level ({self.fail:g}) must not exceed the caution level ({self.caution:g})")

    def as_dict(self) -> dict:
        return to_jsonable(self)


def decide(policy: Policy, smallest: float, finding_kinds: Iterable[str]) -> tuple[str, str]:
    """(verdict, one-line reason)."""
    fatal = sorted(set(finding_kinds) & set(FATAL_KINDS))
    if fatal:
        return "fail", "the geometry is broken (" + ", ".join(fatal) + ")"
    if smallest < policy.fail:
        return "fail", f"smallest eigenvalue {smallest:.2e} is below the fail level {policy.fail:.0e}"
    if smallest < policy.caution:
        return "caution", f"smallest eigenvalue {smallest:.2e} is below the caution level {policy.caution:.0e}"
    return "pass", f"smallest eigenvalue {smallest:.2e} is above the caution level {policy.caution:.0e}"
