"""Geometry files -> Molecule (atoms in ångström, ghost flags, charge, multiplicity)."""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ..base.elements import BOHR_IN_ANGSTROM, ELEMENTS, element_symbol
from ..base.errors import InputError, UsageError

if TYPE_CHECKING:
    from ase import Atoms


@dataclass(frozen=True)
class Molecule:
    """Atoms of one geometry. Coordinates are in ångström; ``ghost[i]`` marks atoms that
    carry basis functions but no nucleus or electrons."""

    symbols: tuple[str, ...]
    coords: np.ndarray
    ghost: tuple[bool, ...]
    charge: int = 0
    multiplicity: int | None = None
    source: str = "<memory>"
    frame: int = 0
    n_frames: int = 1
    comment: str = ""
    extras: dict = field(default_factory=dict)

    @property
    def n_atoms(self) -> int:
        return len(self.symbols)

    @property
    def spin(self) -> int:
        """2S in pyscf's convention: from the multiplicity, else the lowest for the electron count."""
        if self.multiplicity:
            return int(self.multiplicity) - 1
        nelec = sum(ELEMENTS.index(s) + 1 for s, g in zip(self.symbols, self.ghost) if not g) - int(self.charge)
        return nelec % 2

    def with_ghosts(self, numbers: list[int], option: str = "--ghost") -> Molecule:
        """Mark 1-based atom ``numbers`` as ghost atoms (``option`` names the setting in messages)."""
        ghost = list(self.ghost)
        for k in numbers:
            if not 1 <= k <= self.n_atoms:
                raise UsageError(f"{option} names atom {k}, but {self.source} has {self.n_atoms} atoms")
            ghost[k - 1] = True
        if all(ghost):
            raise UsageError(f"{option} leaves {self.source} with no real atom: every atom would be a ghost atom")
        return replace(self, ghost=tuple(ghost))


def parse_atom_numbers(spec: str | None) -> list[int]:
    """Parse '4-6,9' into [4, 5, 6, 9] (1-based, sorted, unique)."""
    if not spec:
        return []
    out: set[int] = set()
    for part in spec.split(","):
        part = part.strip()
        m = re.fullmatch(r"(\d+)(?:\s*-\s*(\d+))?", part)
        if not m:
            raise UsageError(f"cannot read atom numbers {spec!r}: expected e.g. '4-6,9'")
        lo = int(m.group(1))
        hi = int(m.group(2) or lo)
        if lo < 1 or hi < lo:
            raise UsageError(f"bad atom range {part!r} in {spec!r} (atoms are numbered from 1)")
        out.update(range(lo, hi + 1))
    return sorted(out)


_KEYVAL = re.compile(r"\b(charge|multiplicity|mult|spin)\s*=\s*(-?\d+)", re.IGNORECASE)


def _comment_charge(comment: str) -> tuple[int, int | None]:
    charge, mult = 0, None
    for key, value in _KEYVAL.findall(comment):
        key = key.lower()
        if key == "charge":
            charge = int(value)
        elif key in ("multiplicity", "mult"):
            mult = int(value)
    return charge, mult


def _is_extended(comment: str) -> bool:
    return "properties=" in comment.lower() or "lattice=" in comment.lower()


def _read_plain_xyz(path: Path, text: str, scale: float) -> list[Molecule]:
    lines = text.splitlines()
    frames: list[Molecule] = []
    i = 0
    name = str(path)
    while i < len(lines):
        if not lines[i].strip():
            i += 1
            continue
        head = lines[i].split()
        try:
            n = int(head[0])
            if n < 1 or len(head) > 1:
                raise ValueError
        except ValueError:
            raise InputError(f"{name}:{i + 1}: expected an atom count, found {lines[i].strip()[:40]!r}") from None
        if i + 2 + n > len(lines):
            raise InputError(
                f"{name}:{i + 1}: the header announces {n} atoms but only "
                f"{max(0, len(lines) - i - 2)} atom lines follow"
            )
        comment = lines[i + 1]
        symbols, coords = [], []
        for j in range(i + 2, i + 2 + n):
            where = f"{name}:{j + 1}"
            parts = lines[j].split()
            if len(parts) < 4:
                raise InputError(f"{where}: expected 'element x y z', found {lines[j].strip()[:60]!r}")
            sym = element_symbol(parts[0], where)
            try:
                xyz = [float(v) for v in parts[1:4]]
            except ValueError:
                raise InputError(f"{where}: coordinates are not numbers: {' '.join(parts[1:4])!r}") from None
            if not all(math.isfinite(v) for v in xyz):
                raise InputError(f"{where}: coordinate is not finite (NaN or infinity)")
            symbols.append(sym)
            coords.append(xyz)
        charge, mult = _comment_charge(comment)
        frames.append(
            Molecule(
                symbols=tuple(symbols),
                coords=np.asarray(coords, dtype=float) * scale,
                ghost=(False,) * n,
                charge=charge,
                multiplicity=mult,
                source=name,
                frame=len(frames),
                comment=comment.strip(),
            )
        )
        i += 2 + n
    return frames


def _read_with_ase(path: Path, scale: float) -> list[Molecule]:
    """Extended XYZ and other formats that ASE reads."""
    try:
        from ase.io import read  # ASE is slow to import: only for the formats it reads

        images = read(str(path), index=":")
    except Exception as exc:  # ASE raises many types; the message is what matters
        msg = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise InputError(f"{path}: cannot read geometry ({msg})") from None
    if not isinstance(images, list):
        images = [images]
    frames = []
    for k, atoms in enumerate(images):
        mol = molecule_from_atoms(atoms, source=str(path), frame=k)
        frames.append(replace(mol, coords=mol.coords * scale))
    return frames


def molecule_from_atoms(atoms: Atoms, source: str = "<ase.Atoms>", frame: int = 0) -> Molecule:
    """Molecule from an ASE Atoms object (positions are ångström in ASE)."""
    pos = np.asarray(atoms.get_positions(), dtype=float)
    if not np.all(np.isfinite(pos)):
        bad = int(np.where(~np.isfinite(pos).all(axis=1))[0][0]) + 1
        raise InputError(f"{source}: atom {bad} has a coordinate that is not finite")
    symbols = tuple(element_symbol(s, f"{source}: atom {i + 1}") for i, s in enumerate(atoms.get_chemical_symbols()))
    info = getattr(atoms, "info", {}) or {}
    charge = int(info.get("charge", 0))
    mult = info.get("multiplicity", info.get("mult"))
    return Molecule(
        symbols=symbols,
        coords=pos,
        ghost=(False,) * len(symbols),
        charge=charge,
        multiplicity=int(mult) if mult is not None else None,
        source=source,
        frame=frame,
    )


def read_geometry(path: str | Path, unit: str = "angstrom") -> list[Molecule]:
    """Read every frame of an XYZ, multi-frame XYZ or extended XYZ file.

    ``unit`` is the unit of the numbers in the file ("angstrom" or "bohr"); the
    returned coordinates are always in ångström.
    """
    unit = unit.lower()
    if unit in ("angstrom", "ang", "a", "å"):
        scale = 1.0
    elif unit in ("bohr", "au", "a.u."):
        scale = BOHR_IN_ANGSTROM
    else:
        raise UsageError(f"unknown unit {unit!r}: use 'angstrom' or 'bohr'")
    path = Path(path)
    if not path.exists():
        raise InputError(f"{path}: no such file")
    if path.is_dir():
        raise InputError(f"{path}: is a directory, expected a geometry file")
    try:
        text = path.read_text(encoding="utf-8", errors="strict")
    except UnicodeDecodeError:
        raise InputError(f"{path}: not a text file") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror})") from None
    if not text.strip():
        raise InputError(f"{path}: file is empty")
    lines = text.splitlines()
    second = lines[1] if len(lines) > 1 else ""
    if path.suffix.lower() in (".xyz", ".txt", "") and not _is_extended(second):
        frames = _read_plain_xyz(path, text, scale)
    else:
        frames = _read_with_ase(path, scale)
    if not frames:
        raise InputError(f"{path}: no atoms found")
    n = len(frames)
    return [replace(f, n_frames=n) for f in frames]


def load_molecules(path: str | Path, unit: str = "angstrom", ghost: str | list[int] | None = None) -> list[Molecule]:
    """Every frame of a geometry file, with ghost atoms marked (1-based numbers or '4-6,9')."""
    frames = read_geometry(path, unit=unit)
    numbers = parse_atom_numbers(ghost) if isinstance(ghost, str) else list(ghost or [])
    return [f.with_ghosts(numbers) if numbers else f for f in frames]
