"""MDL molfiles and SD files (V2000) -> Molecules, read by a parser of our own: every
record of an SD file is a frame; coordinates, element symbols and formal charges are read,
bonds and data items are not (they do not enter the overlap)."""

from __future__ import annotations

import math

import numpy as np

from ..base.elements import atom_label
from ..base.errors import InputError
from ..base.textio import plain_float
from .geometry import MAX_COORDINATE, Molecule

#: the charge codes of the atom block (column 37-39); 4 is a doublet radical, no charge
_CHARGE_CODES = {0: 0, 1: 3, 2: 2, 3: 1, 4: 0, 5: -1, 6: -2, 7: -3}
#: more atoms than a V2000 counts line can hold (three digits) cannot occur
MAX_SDF_ATOMS = 999


def _counts(line: str, where: str) -> tuple[int, int]:
    """(atoms, bonds) from a V2000 counts line (fixed columns 1-3 and 4-6)."""
    if "V3000" in line.upper():
        raise InputError(f"{where}: V3000 molfiles are not read; save the file as V2000")
    head = (line[0:3].strip(), line[3:6].strip())
    if not all(h.isascii() and h.isdigit() for h in head):
        raise InputError(f"{where}: expected a V2000 counts line (atoms in columns 1-3), found {line.strip()[:40]!r}")
    atoms, bonds = int(head[0]), int(head[1])
    if not 1 <= atoms <= MAX_SDF_ATOMS:
        raise InputError(f"{where}: a molfile record needs 1 to {MAX_SDF_ATOMS} atoms, the counts line says {atoms}")
    return atoms, bonds


def _atom(line: str, where: str) -> tuple[str, bool, list[float], int]:
    """(element, ghost, [x, y, z] in the file's unit, charge code) of an atom-block line."""
    parts = line.split()
    if len(parts) < 4:
        raise InputError(f"{where}: expected 'x y z element' of an atom, found {line.strip()[:60]!r}")
    try:
        xyz = [plain_float(v) for v in parts[:3]]
    except ValueError:
        raise InputError(f"{where}: coordinates are not numbers: {' '.join(parts[:3])[:60]!r}") from None
    if not all(math.isfinite(v) and abs(v) <= MAX_COORDINATE for v in xyz):
        raise InputError(f"{where}: coordinate out of range (|x| ≤ {MAX_COORDINATE:g} Å)")
    symbol, ghost = atom_label(parts[3], where)
    code = parts[5] if len(parts) > 5 else "0"
    charge = int(code) if code.isascii() and code.isdigit() and int(code) in _CHARGE_CODES else 0
    return symbol, ghost, xyz, _CHARGE_CODES[charge]


def _property_charges(lines: list[str], first: int, where: str) -> dict[int, int] | None:
    """Formal charges of the 'M  CHG' lines after the bond block (1-based atom -> charge),
    None when there are none; reading stops at 'M  END'."""
    charges: dict[int, int] | None = None
    for k in range(first, len(lines)):
        line = lines[k]
        if line.startswith("M  END") or line.startswith("$$$$"):
            break
        if line.startswith("M  CHG"):
            fields = line[6:].split()
            try:
                values = [int(v) for v in fields[1:] if v.lstrip("+-").isascii() and v.lstrip("+-").isdigit()]
            except ValueError:
                values = []
            if len(values) != len(fields) - 1 or len(values) % 2 or not values:
                raise InputError(f"{where}:{k + 1}: cannot read the charges of {line.strip()[:60]!r}")
            charges = charges or {}
            charges.update(zip(values[0::2], values[1::2]))
    return charges


def _record(lines: list[str], start: int, path: str, scale: float, frame: int) -> tuple[Molecule, int]:
    """The record whose header starts at ``start``; returns it and the line after it."""
    if start + 3 >= len(lines):
        raise InputError(f"{path}:{start + 1}: a molfile record needs a three-line header and a counts line")
    n_atoms, n_bonds = _counts(lines[start + 3], f"{path}:{start + 4}")
    first = start + 4
    if first + n_atoms + n_bonds > len(lines):
        raise InputError(f"{path}:{start + 4}: the counts line announces {n_atoms} atoms and {n_bonds} bonds")
    atoms = [_atom(lines[j], f"{path}:{j + 1}") for j in range(first, first + n_atoms)]
    props = _property_charges(lines, first + n_atoms + n_bonds, path)
    charge = sum(props.values()) if props is not None else sum(a[3] for a in atoms)
    end = first + n_atoms + n_bonds
    while end < len(lines) and not lines[end].startswith("$$$$"):
        end += 1
    mol = Molecule(
        symbols=tuple(a[0] for a in atoms),
        coords=np.asarray([a[2] for a in atoms], dtype=float) * scale,
        ghost=tuple(a[1] for a in atoms),
        charge=int(charge),
        source=path,
        frame=frame,
        comment=lines[start].strip(),
    )
    return mol, end + 1


def read_sdf(path: object, text: str, scale: float = 1.0) -> list[Molecule]:
    """Every record of a V2000 molfile or SD file ("$$$$" between records); coordinates
    times ``scale`` are ångström. Charge: the sum of the 'M  CHG' charges, else of the
    atom block's charge codes."""
    lines = text.splitlines()
    frames: list[Molecule] = []
    k = 0
    while k < len(lines):
        if not any(ln.strip() for ln in lines[k : k + 4]) and all(not ln.strip() for ln in lines[k:]):
            break  # blank lines after the last record
        mol, k = _record(lines, k, str(path), scale, len(frames))
        frames.append(mol)
    return frames
