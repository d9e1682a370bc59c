"""The smaller published relatives of a named basis set, for the ladder.

* Correlation-consistent sets, aug-cc-pVXZ and aug-cc-pV(X+d)Z: the reduced-augmentation
  "calendar" sets (Papajak, Zheng, Xu, Leverentz & Truhlar, J. Chem. Theory Comput. 7, 3027
  (2011); basis_set_exchange cites Papajak & Truhlar, J. Chem. Theory Comput. 7, 10 (2011)),
  built here by the rule basis_set_exchange's notes on the family state: jul removes the
  diffuse functions of H and He from the aug set; jun also removes the diffuse shell of the
  highest angular momentum from every heavier atom, may the two highest, apr the three
  highest; at least the diffuse s and p shells are always kept (so DZ stops at jun, TZ at
  may, QZ at apr). Then the set without augmentation, cc-pVXZ.
* d-aug-X: aug-X, then as above.
* def2 with diffuse functions (def2-SVPD, def2-TZVPPD, ...): the minimally augmented
  ma-def2 set (Zheng, Xu & Truhlar 2011; pyscf carries them), then the set without diffuse
  functions; ma-def2-X: def2-X.
* Pople sets: ++ then + then none (6-311++G** -> 6-311+G** -> 6-311G**).

basis_set_exchange publishes the calendar sets only on the cc-pV(X+d)Z sets
(jun-cc-pV(T+d)Z, ...); for H-Ne and Na-Mg those have the same shells as cc-pVXZ, for
Al-Ar they add one tight d shell. `published_check` compares the rule-built shells with the
published copy element by element.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from ..base.errors import InputError
from .basis import is_diffuse, load_shells, thaw

#: the month names basis_set_exchange's notes define, in the order the rule takes them
MONTHS = ("jul", "jun", "may", "apr")
CALENDAR_REFERENCE = (
    "Papajak, Zheng, Xu, Leverentz & Truhlar, J. Chem. Theory Comput. 7, 3027 (2011); "
    "Papajak & Truhlar, J. Chem. Theory Comput. 7, 10 (2011)"
)
MA_REFERENCE = "Zheng, Xu & Truhlar (2011)"

_CC = re.compile(r"^(d-)?aug-cc-pv(\(([dtq5])\+d\)|([dtq5]))z$")
_DEF2_D = re.compile(r"^def2-(svp|tzvp|tzvpp|qzvp|qzvpp)d$")
_MA = re.compile(r"^ma-def2-(svp|tzvp|tzvpp|qzvp|qzvpp)$")
_POPLE = re.compile(r"^(\d-\d+)(\+{1,2})(g.*)$")
_ZETA = {"d": 2, "t": 3, "q": 4, "5": 5}


@dataclass(frozen=True)
class Rung:
    """One basis of the ladder. ``name`` is what the report calls it; ``source_name`` the
    named basis whose shells it uses (all of them, or the calendar rule's subset, ``month``);
    ``published`` the name basis_set_exchange carries for it (None when it is the named basis
    itself); ``how`` one sentence."""

    name: str
    kind: str  # "requested" | "calendar" | "named" | "user"
    source_name: str
    how: str
    month: str | None = None
    published: str | None = None
    reference: str | None = None


def _cc_ladder(low: str, m: re.Match) -> list[Rung]:
    zeta = m.group(3) or m.group(4)
    tight = m.group(3) is not None
    core = f"cc-pv({zeta}+d)z" if tight else f"cc-pv{zeta}z"
    aug = f"aug-{core}"
    out = []
    if m.group(1):
        out.append(Rung(aug, "named", aug, "d-aug without its second set of diffuse shells: the aug set"))
    steps = 1 + max(0, _ZETA[zeta] - 1)  # jul, then one month per diffuse l above p
    for month in MONTHS[: min(len(MONTHS), steps)]:
        name = f"{month}-{core}"
        out.append(
            Rung(
                name,
                "calendar",
                aug,
                _month_sentence(month, aug),
                month=month,
                published=f"{month}-cc-pV({zeta.upper()}+d)Z",
                reference=CALENDAR_REFERENCE,
            )
        )
    out.append(Rung(core, "named", core, f"{aug} without any diffuse shell"))
    return out


def _month_sentence(month: str, aug: str) -> str:
    k = MONTHS.index(month)
    heavy = {
        0: "keeps every diffuse shell of the heavier atoms",
        1: "also removes the diffuse shell of the highest angular momentum from every heavier atom",
        2: "also removes the diffuse shells of the two highest angular momenta from every heavier atom",
        3: "also removes the diffuse shells of the three highest angular momenta from every heavier atom",
    }[k]
    return f"calendar rule on {aug}: no diffuse shells on H and He; {heavy} (diffuse s and p always kept)"


def relatives(name: str) -> list[Rung]:
    """The smaller published relatives of basis ``name``, largest first by construction (the
    requested basis itself not included); empty when the auditor knows none."""
    low = name.strip().lower()
    m = _CC.match(low)
    if m:
        return _cc_ladder(low, m)
    m = _DEF2_D.match(low)
    if m:
        base = f"def2-{m.group(1)}"
        return [
            Rung(f"ma-{base}", "named", f"ma-{base}", f"minimally augmented {base}", reference=MA_REFERENCE),
            Rung(base, "named", base, f"{name} without its diffuse functions"),
        ]
    m = _MA.match(low)
    if m:
        base = f"def2-{m.group(1)}"
        return [Rung(base, "named", base, f"{name} without its diffuse functions")]
    m = _POPLE.match(low)
    if m:
        stem, plus, rest = m.groups()
        out = []
        if plus == "++":
            out.append(Rung(f"{stem}+{rest}", "named", f"{stem}+{rest}", "no diffuse functions on hydrogen"))
        out.append(Rung(f"{stem}{rest}", "named", f"{stem}{rest}", "no diffuse functions"))
        return out
    return []


def _columns(shell: list) -> list[list]:
    """One pyscf shell entry as single-contraction entries [l, [e, c], ...] (zero coefficients dropped)."""
    l = shell[0]
    prims = shell[2:] if isinstance(shell[1], int) else shell[1:]
    n_col = len(prims[0]) - 1
    out = []
    for c in range(n_col):
        col = [[p[0], p[1 + c]] for p in prims if p[1 + c] != 0.0]
        if col:
            out.append([l, *col])
    return out


def _smallest_used(entry: list) -> float:
    coeffs = [abs(p[1]) for p in entry[1:]]
    top = max(coeffs)
    return min(p[0] for p in entry[1:] if abs(p[1]) > 1e-8 * top)


def calendar_shells(aug: str, element: str, month: str, source: str = "pyscf") -> list:
    """The shells of ``element`` in the calendar set ``month`` built from the aug set ``aug``
    (pyscf's list format, one contraction per entry)."""
    entries = [e for sh in thaw(load_shells(aug, element, source)) for e in _columns(sh)]
    diffuse = [is_diffuse(aug, element, e[0], _smallest_used(e), source) for e in entries]
    if element in ("H", "He"):
        return [e for e, d in zip(entries, diffuse) if not d]
    drop_top = MONTHS.index(month)  # jul 0, jun 1, may 2, apr 3
    ls = sorted({e[0] for e, d in zip(entries, diffuse) if d}, reverse=True)
    removed = {l for l in ls[:drop_top] if l > 1}
    return [e for e, d in zip(entries, diffuse) if not (d and e[0] in removed)]


def rung_shells(rung: Rung, element: str, source: str = "pyscf") -> list:
    """The shells of ``element`` in ``rung`` (pyscf's list format)."""
    if rung.month is not None:
        return calendar_shells(rung.source_name, element, rung.month, source)
    return thaw(load_shells(rung.source_name, element, source))


def n_functions(shells: list, cartesian: bool = False) -> int:
    """Basis functions of an element's shells (each contraction column counts)."""
    total = 0
    for sh in shells:
        l = sh[0]
        per = (l + 1) * (l + 2) // 2 if cartesian else 2 * l + 1
        total += per * len(_columns(sh))
    return total


def shells_per_l(shells: list) -> dict[int, int]:
    """Contracted shells (columns) per angular momentum."""
    out: dict[int, int] = {}
    for sh in shells:
        out[sh[0]] = out.get(sh[0], 0) + len(_columns(sh))
    return dict(sorted(out.items()))


def published_check(rung: Rung, elements: list[str], source: str = "pyscf") -> list[dict] | None:
    """For a rule-built calendar rung: per element, its function count and shells per l
    against basis_set_exchange's published set. None for a rung that is a named basis."""
    if rung.published is None:
        return None
    out = []
    for el in elements:
        mine = rung_shells(rung, el, source)
        try:
            theirs = thaw(load_shells(rung.published, el, "bse"))
        except InputError:
            out.append(
                {"element": el, "functions": n_functions(mine), "published_functions": None, "same_shells": False}
            )
            continue
        out.append(
            {
                "element": el,
                "functions": n_functions(mine),
                "published_functions": n_functions(theirs),
                "same_shells": shells_per_l(mine) == shells_per_l(theirs),
            }
        )
    return out
