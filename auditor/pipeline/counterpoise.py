"""Counterpoise audits: the complex, and every fragment in the complex basis (the other
fragments' atoms as ghost atoms) and in its own basis (the other atoms left out), each an
ordinary audit, so that each spectrum is the one a separate run of that combination gives.

The overlap matrix does not see nuclei: a fragment in the complex basis has the complex's
functions at the same places, so its S and spectrum are the complex's. Its verdict can still
differ (contacts and the electron count are judged among real atoms only).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace

from ..diagnosis.verdict import Policy
from ..inputs.basis import BasisSpec
from ..inputs.fragments import Fragments
from ..inputs.geometry import Molecule
from ..remedies.plan import RemedyOptions
from .result import AuditResult
from .run import audit_prepared, prepare


@dataclass(frozen=True)
class Combination:
    """One audited combination: ``fragment`` is 1-based (None for the complex), ``basis``
    "complex" or "own"; atom numbers are the complex's (1-based)."""

    key: str
    fragment: int | None
    basis: str
    real_atoms: tuple[int, ...]
    ghost_atoms: tuple[int, ...]
    result: AuditResult


def combination_molecules(mol: Molecule, fragments: Fragments) -> list[tuple[str, int, str, Molecule, list[int]]]:
    """(key, fragment, basis, molecule, its atoms in the complex, 0-based) of every fragment
    combination: in the complex basis, then in its own basis, fragment by fragment."""
    out = []
    for k, frag in enumerate(fragments, 1):
        inside = set(frag)
        ghosts = tuple(g or i not in inside for i, g in enumerate(mol.ghost))
        label = mol.source
        full = replace(mol, ghost=ghosts, fragments=(), source=label)
        out.append((f"fragment_{k}_complex_basis", k, "complex", full, list(range(mol.n_atoms))))
        own = mol.subset(sorted(inside))
        out.append((f"fragment_{k}_own_basis", k, "own", own, sorted(inside)))
    return out


def audit_counterpoise(
    mol: Molecule,
    fragments: Fragments,
    spec: BasisSpec,
    policy: Policy | None = None,
    spectrum_method: str = "auto",
    remedies: bool | RemedyOptions = True,
    stage: Callable[[str], None] | None = None,
) -> tuple[AuditResult, list[Combination]]:
    """The complex's result, with the ``counterpoise`` table in it, and every combination
    (the complex first). Remedies are worked out for the complex only."""
    policy = policy or Policy()
    complex_result = audit_prepared(
        prepare(mol, spec, spectrum_method, stage), policy, spectrum_method, remedies, stage
    )
    combos = [Combination("complex", None, "complex", _real(mol, range(mol.n_atoms)), _ghosts(mol), complex_result)]
    for key, k, basis, sub, atoms in combination_molecules(mol, fragments):
        if stage:
            stage(f"counterpoise: fragment {k}, {basis} basis")
        result = audit_prepared(prepare(sub, spec, spectrum_method), policy, spectrum_method, False)
        real = tuple(a + 1 for j, a in enumerate(atoms) if not sub.ghost[j])
        ghost = tuple(a + 1 for j, a in enumerate(atoms) if sub.ghost[j])
        combos.append(Combination(key, k, basis, real, ghost, result))
    table = counterpoise_table(combos, fragments, policy)
    extra = {**complex_result.extra, "counterpoise": table}
    return replace(complex_result, extra=extra), combos


def _real(mol: Molecule, atoms: Sequence[int]) -> tuple[int, ...]:
    return tuple(i + 1 for i in atoms if not mol.ghost[i])


def _ghosts(mol: Molecule) -> tuple[int, ...]:
    return tuple(i + 1 for i, g in enumerate(mol.ghost) if g)


def _row(c: Combination, policy: Policy) -> dict:
    s = c.result.spectrum
    return {
        "key": c.key,
        "fragment": c.fragment,
        "basis": c.basis,
        "real_atoms": list(c.real_atoms),
        "ghost_atoms": list(c.ghost_atoms),
        "n_functions": c.result.input.n_functions,
        "smallest": s.smallest,
        "condition_number": s.condition_number,
        "log10_condition": s.log10_condition,
        "below_caution": _count(c.result, policy.caution),
        "below_fail": _count(c.result, policy.fail),
        "verdict": c.result.verdict,
        "verdict_reason": c.result.verdict_reason,
        "eigenvalues": list(s.eigenvalues),
    }


def _count(result: AuditResult, level: float) -> int | None:
    """Eigenvalues below ``level``: from the spectrum's table, else from all eigenvalues
    (full path), else unknown (None)."""
    s = result.spectrum
    known = s.counts_below.get(f"{level:.0e}")
    if known is not None or len(s.eigenvalues) < result.input.n_functions:
        return known
    return sum(v < level for v in s.eigenvalues)


def _shares(complex_result: AuditResult, fragments: Fragments) -> list[float]:
    """Each fragment's share of the complex's near-null space (the causes' atom weights)."""
    weights = {a["atom"]: a["weight"] for a in complex_result.causes.atoms}
    return [round(sum(weights.get(i + 1, 0.0) for i in frag), 6) for frag in fragments]


def counterpoise_table(combos: list[Combination], fragments: Fragments, policy: Policy) -> dict:
    """The report's ``counterpoise`` part: the fragments, one row per combination, the
    fragment that limits the smallest eigenvalue and why."""
    complex_result = combos[0].result
    own = {c.fragment: c.result.spectrum.smallest for c in combos if c.basis == "own"}
    limiting = min(own, key=lambda k: (own[k], k or 0))
    smallest = complex_result.spectrum.smallest
    cost = math.log10(own[limiting] / smallest) if smallest > 0 and own[limiting] > 0 else None
    shares = _shares(complex_result, fragments)
    reason = (
        f"Fragment {limiting} has the lowest smallest eigenvalue in its own basis ({own[limiting]:.2e}); "
        f"the complex basis brings it to {smallest:.2e}"
        + (f" ({cost:.1f} decades lower: the functions the fragments lend each other)." if cost is not None else ".")
    )
    return {
        "fragments": [{"fragment": k, "atoms": [i + 1 for i in f]} for k, f in enumerate(fragments, 1)],
        "near_null_share": shares,
        "limiting_fragment": limiting,
        "limiting_reason": reason,
        "complex_basis_decades": cost,
        "combinations": [_row(c, policy) for c in combos],
    }
