"""Element symbols, covalent radii, angular-momentum letters and unit conversion."""

from __future__ import annotations

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
