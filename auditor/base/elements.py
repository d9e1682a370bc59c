"""Element symbols, covalent radii, angular-momentum letters and unit conversion."""

from __future__ import annotations

import re
from collections.abc import Iterable

import numpy as np

from .errors import InputError

BOHR_IN_ANGSTROM = 0.529177210903  # CODATA 2018 Bohr radius in ångström


#: Chemical symbols Z = 1..118 (IUPAC), index = Z - 1.
ELEMENTS = (
    "H He Li Be B C N O F Ne Na Mg Al Si P S Cl Ar K Ca Sc Ti V Cr Mn Fe Co Ni Cu Zn "
    "Ga Ge As Se Br Kr Rb Sr Y Zr Nb Mo Tc Ru Rh Pd Ag Cd In Sn Sb Te I Xe Cs Ba La Ce "
    "Pr Nd Pm Sm Eu Gd Tb Dy Ho Er Tm Yb Lu Hf Ta W Re Os Ir Pt Au Hg Tl Pb Bi Po At Rn "
    "Fr Ra Ac Th Pa U Np Pu Am Cm Bk Cf Es Fm Md No Lr Rf Db Sg Bh Hs Mt Ds Rg Cn Nh Fl "
    "Mc Lv Ts Og"
).split()


_SYMBOL = {s.lower(): s for s in ELEMENTS}


def element_symbol(token: str, where: str) -> str:
    """Normalize an element symbol ('h' -> 'H', 'CL' -> 'Cl', '8' -> 'O'); labels such as
    'C1' are not guessed."""
    token = token.strip()
    # ASCII digits only: str.isdigit() also takes '²' (int() fails) and '٣' (read as 3, Li)
    if token.isascii() and token.isdigit() and len(token) <= 3 and 1 <= int(token) <= len(ELEMENTS):
        return ELEMENTS[int(token) - 1]
    sym = _SYMBOL.get(token.lower())
    if sym is None:
        raise InputError(f"{where}: unknown element symbol {token!r}")
    return sym


L_LETTERS = "spdfghiklm"


NOBLE = {"He", "Ne", "Ar", "Kr", "Xe", "Rn", "Og"}


def covalent_radii(symbols: Iterable[str]) -> np.ndarray:
    """Covalent radii in ångström (Cordero et al., Dalton Trans. 2008, 2832, as tabulated by ASE)."""
    from ase.data import covalent_radii as table  # ASE is slow to import: only when radii are needed

    return np.array([table[ELEMENTS.index(s) + 1] for s in symbols])


#: Ghost-atom spellings read in geometry files (docs/cli.md, "Ghost atoms in the file"):
#: a prefix or a suffix around an element symbol. The case of the marker does not matter.
#: A separator is required after X so that "Xe" stays xenon.
_GHOST_FORMS = (
    re.compile(r"(?i:ghost)[-_]([A-Za-z]{1,2})"),  # ghost-H, ghost_H (pyscf)
    re.compile(r"(?i:x)[-_]([A-Za-z]{1,2})"),  # X-H, X_H (pyscf)
    re.compile(r"(?i:gh)\(([A-Za-z]{1,2})\)"),  # Gh(H)
    re.compile(r"@([A-Za-z]{1,2})"),  # @H
    re.compile(r"([A-Za-z]{1,2}):"),  # H:
    re.compile(r"([A-Za-z]{1,2})-(?i:bq)"),  # H-Bq
)
#: Markers of a dummy atom that names no element (and so carries no basis function).
_DUMMIES = {"x", "bq", "gh", "ghost", "q"}


def atom_label(token: str, where: str) -> tuple[str, bool]:
    """(element symbol, ghost flag) of an atom label as geometry files write it: an element
    ('H', 'cl', '8') or a ghost spelling of one (see _GHOST_FORMS). InputError otherwise,
    with a hint for a dummy atom that names no element."""
    token = token.strip()
    for form in _GHOST_FORMS:
        m = form.fullmatch(token)
        if m and m.group(1).lower() in _SYMBOL:
            return _SYMBOL[m.group(1).lower()], True
    if token.lower() in _DUMMIES:
        raise InputError(
            f"{where}: {token!r} names no element, so it carries no basis function; "
            "write a ghost atom as X-H, ghost-H, Gh(H), @H, H: or H-Bq"
        )
    return element_symbol(token, where), False
