"""The gate's policy file (TOML).

Policy file layout (every key optional)::

    caution = 1e-5          # levels for every basis ...
    fail = 1e-7
    drop_decades = 1.0      # baseline mode: a drop of the smallest eigenvalue beyond this regresses
    contact_caution = 0.7   # distance / covalent-radius sum below which a contact earns a caution
    contact_fail = 0.5      # ... and below which the geometry fails

    [basis."aug-cc-pvtz"]   # ... unless the basis has its own
    caution = 1e-6
    fail = 1e-8

    [[allow]]               # items that may fail, with the reason why
    path = "legacy/*.xyz"   # glob on the item's path as shown in the summary
    frame = 3               # optional: only this frame
    reason = "tracked in issue 12"
"""

from __future__ import annotations

import fnmatch
import json
import sys
from dataclasses import dataclass, field
from pathlib import Path

from ..base.errors import InputError, UsageError
from ..base.textio import read_text
from ..diagnosis.verdict import Policy

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib


DEFAULT_DROP_DECADES = 1.0


@dataclass(frozen=True)
class Allowance:
    pattern: str
    frame: int | None
    reason: str

    def matches(self, path: str, frame: int | None) -> bool:
        if self.frame is not None and frame != self.frame:
            return False
        return fnmatch.fnmatchcase(path, self.pattern)


#: contact ratios a policy file may set (see auditor.diagnosis.verdict.Policy)
CONTACT_KEYS = ("contact_caution", "contact_fail")


@dataclass(frozen=True)
class GatePolicy:
    caution: float | None = None
    fail: float | None = None
    per_basis: dict = field(default_factory=dict)  # lower-case basis name -> {"caution", "fail"}
    allowed: tuple[Allowance, ...] = ()
    drop_decades: float = DEFAULT_DROP_DECADES
    contacts: dict = field(default_factory=dict)  # contact_caution / contact_fail ratios, when set

    def levels_for(self, basis: str, caution: float | None = None, fail: float | None = None) -> Policy:
        """Levels for ``basis``: explicit arguments, then the basis table, then the file, then defaults."""
        own = self.per_basis.get(_basis_name(basis), {})
        default = Policy()
        return Policy(
            caution=_first(caution, own.get("caution"), self.caution, default.caution),
            fail=_first(fail, own.get("fail"), self.fail, default.fail),
            contact_caution=self.contacts.get("contact_caution", default.contact_caution),
            contact_fail=self.contacts.get("contact_fail", default.contact_fail),
        )

    def allowance(self, path: str, frame: int | None) -> Allowance | None:
        return next((a for a in self.allowed if a.matches(path, frame)), None)


def _first(*values):
    return next(v for v in values if v is not None)


def _toml_key(name: str) -> str:
    """``name`` as a quoted TOML key, as the file would write it: [basis."aug-cc-pvtz"]."""
    return json.dumps(name, ensure_ascii=False)


def _basis_name(name: str) -> str:
    return "".join(name.lower().split())


def _level(where: str, value) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise UsageError(f"{where} must be a number, got {value!r}")
    return float(value)


def _check_keys(where: str, table: dict, allowed: set[str]) -> None:
    unknown = sorted(set(table) - allowed)
    if unknown:
        raise UsageError(f"{where}: unknown key(s) {', '.join(unknown)} (known: {', '.join(sorted(allowed))})")


def load_gate_policy(path: str | Path) -> GatePolicy:
    """Read and check a policy file; any problem is a one-line UsageError naming the file."""
    path = Path(path)
    try:
        data = tomllib.loads(read_text(path, "policy file"))
    except InputError as exc:
        raise UsageError(exc.message) from None
    except tomllib.TOMLDecodeError as exc:
        raise UsageError(f"{path}: not valid TOML ({exc})") from None
    _check_keys(str(path), data, {"caution", "fail", "drop_decades", "basis", "allow", *CONTACT_KEYS})
    levels = {k: _level(f"{path}: {k}", data[k]) for k in ("caution", "fail") if k in data}
    contacts = {k: _level(f"{path}: {k}", data[k]) for k in CONTACT_KEYS if k in data}
    per_basis = {}
    basis_table = data.get("basis", {})
    if not isinstance(basis_table, dict):
        raise UsageError(f"{path}: [basis] must be a table of basis names")
    for name, table in basis_table.items():
        where = f"{path}: [basis.{_toml_key(name)}]"
        if not isinstance(table, dict):
            raise UsageError(f"{where} must be a table with caution and/or fail")
        _check_keys(where, table, {"caution", "fail"})
        per_basis[_basis_name(name)] = {k: _level(f"{where} {k}", v) for k, v in table.items()}
    allowed = []
    entries = data.get("allow", [])
    if not isinstance(entries, list):
        raise UsageError(f"{path}: allow must be an array of tables ([[allow]])")
    for k, entry in enumerate(entries, 1):
        where = f"{path}: allow entry {k}"
        if not isinstance(entry, dict):
            raise UsageError(f"{where} must be a table")
        _check_keys(where, entry, {"path", "frame", "reason"})
        if not isinstance(entry.get("path"), str) or not entry["path"]:
            raise UsageError(f"{where} needs a path (a file name or glob)")
        if not isinstance(entry.get("reason"), str) or not entry["reason"].strip():
            raise UsageError(f"{where} needs a reason")
        frame = entry.get("frame")
        if frame is not None and (isinstance(frame, bool) or not isinstance(frame, int) or frame < 1):
            raise UsageError(f"{where}: frame must be a positive integer")
        allowed.append(Allowance(entry["path"], frame, entry["reason"].strip()))
    drop = _level(f"{path}: drop_decades", data.get("drop_decades", DEFAULT_DROP_DECADES))
    if drop < 0:
        raise UsageError(f"{path}: drop_decades must not be negative")
    policy = GatePolicy(levels.get("caution"), levels.get("fail"), per_basis, tuple(allowed), drop, contacts)
    for name in ["", *per_basis]:  # fail early on levels that contradict each other
        try:
            policy.levels_for(name)
        except UsageError as exc:
            where = f"[basis.{_toml_key(name)}]" if name else "levels"
            raise UsageError(f"{path}: {where}: {exc.message}") from None
    return policy
