"""Geometry files -> Molecule (atoms in ångström, ghost flags, charge, multiplicity)."""

from __future__ import annotations

import io
import json
import math
import re
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ..base.elements import BOHR_IN_ANGSTROM, ELEMENTS, atom_label, element_symbol
from ..base.errors import InputError, UsageError
from ..base.textio import plain_float
from .basis import FileBasis

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
    #: fragments as read from the file (0-based atom indices), for counterpoise
    fragments: tuple[tuple[int, ...], ...] = ()
    #: the basis the file carries (a QCSchema document's or a pyscf checkpoint's), if any
    basis: FileBasis | None = None
    #: the coordinates in bohr exactly as the file gave them (QCSchema, checkpoints), handed
    #: to pyscf as they are; None when the file is in ångström
    bohr: np.ndarray | None = None

    @property
    def n_atoms(self) -> int:
        return len(self.symbols)

    def subset(self, atoms: Sequence[int], ghost: Sequence[bool] | None = None) -> Molecule:
        """The molecule of the 0-based ``atoms`` only (in this order), with their basis data,
        and ``ghost`` flags if given (else their own); no fragments."""
        idx = [int(i) for i in atoms]
        flags = tuple(bool(g) for g in ghost) if ghost is not None else tuple(self.ghost[i] for i in idx)
        return replace(
            self,
            symbols=tuple(self.symbols[i] for i in idx),
            coords=np.asarray(self.coords, dtype=float)[idx],
            ghost=flags,
            fragments=(),
            basis=self.basis.subset(idx) if self.basis is not None else None,
            bohr=None if self.bohr is None else np.asarray(self.bohr, dtype=float)[idx],
        )

    @property
    def spin(self) -> int:
        """2S in pyscf's convention: from the multiplicity, else the lowest for the electron count."""
        if self.multiplicity:
            return int(self.multiplicity) - 1
        nelec = sum(ELEMENTS.index(s) + 1 for s, g in zip(self.symbols, self.ghost) if not g) - int(self.charge)
        return nelec % 2

    def with_ghosts(self, numbers: str | Sequence[int], option: str = "--ghost") -> Molecule:
        """Mark 1-based atom ``numbers`` ('4-6,9' or a list) as ghost atoms (``option`` names
        the setting in messages)."""
        ghost = list(self.ghost)
        for k in check_atom_numbers(numbers, self.n_atoms, self.source, option):
            ghost[k - 1] = True
        if all(ghost):
            raise UsageError(f"{option} leaves {self.source} with no real atom: every atom would be a ghost atom")
        return replace(self, ghost=tuple(ghost))


#: Largest atom number that --ghost may name when the atom count is not known yet (the
#: command line checks the syntax before any file is read). No geometry we can audit has
#: more atoms: S alone would need terabytes.
MAX_ATOM_NUMBER = 10**7

_RANGE = re.compile(r"([0-9]{1,18})(?:\s*-\s*([0-9]{1,18}))?")


def parse_atom_ranges(spec: str | None) -> list[tuple[int, int]]:
    """Parse '4-6,9' into [(4, 6), (9, 9)] (1-based, inclusive) without expanding the
    ranges: '1-999999999999' costs nothing until it is checked against a file."""
    if not spec:
        return []
    ranges: list[tuple[int, int]] = []
    for part in str(spec).split(","):
        part = part.strip()
        m = _RANGE.fullmatch(part)  # ASCII digits only: '٣' is not 3
        if not m:
            raise UsageError(f"--ghost: cannot read atom numbers {spec!r}: expected e.g. '4-6,9'")
        lo = int(m.group(1))
        hi = int(m.group(2) or lo)
        if lo < 1 or hi < lo:
            raise UsageError(f"--ghost: bad atom range {part!r} in {spec!r} (atoms are numbered from 1)")
        ranges.append((lo, hi))
    return ranges


def check_atom_numbers(
    ghost: str | Sequence[int] | None, n_atoms: int, source: str, option: str = "--ghost"
) -> list[int]:
    """The 1-based atom numbers of ``ghost`` ('4-6,9' or a list), checked against the atom
    count of ``source`` before they are expanded (UsageError naming the file and ``option``)."""
    if isinstance(ghost, str):
        ranges = parse_atom_ranges(ghost)
    else:
        ranges = []
        for k in ghost or []:
            if isinstance(k, bool) or not isinstance(k, (int, np.integer)):
                raise UsageError(f"ghost atoms must be 1-based atom numbers, got {k!r}")
            ranges.append((int(k), int(k)))
    top = max((hi for _, hi in ranges), default=0)
    if top > n_atoms:
        raise UsageError(f"{option} names atom {top}, but {source} has {n_atoms} atoms")
    bad = next((lo for lo, _ in ranges if lo < 1), None)
    if bad is not None:
        raise UsageError(f"{option} names atom {bad}; atoms are numbered from 1")
    return sorted({k for lo, hi in ranges for k in range(lo, hi + 1)})


def parse_atom_numbers(spec: str | None, n_atoms: int = MAX_ATOM_NUMBER, source: str = "a geometry") -> list[int]:
    """Parse '4-6,9' into [4, 5, 6, 9] (1-based, sorted, unique); numbers above ``n_atoms``
    are a UsageError raised before anything is expanded."""
    return check_atom_numbers(spec, n_atoms, source)


#: Largest |coordinate| accepted, in ångström. Our own bound, not a law: 1e5 Å (10 µm) is
#: far beyond any molecule or cluster one would put in a Gaussian basis (the largest
#: crystal unit cells are ~1e3 Å), and below it double precision still resolves 1e-11 Å
#: and the squared distances of the integrals (in bohr) stay far from overflow. A larger
#: number is a typo, a unit mix-up or a hostile file.
MAX_COORDINATE = 1e5


def check_coordinates(coords: np.ndarray, where: str) -> None:
    """InputError unless every coordinate (ångström) is finite and within MAX_COORDINATE;
    names the first bad atom (``where``: the file or object)."""
    pos = np.asarray(coords, dtype=float)
    if pos.size == 0:
        return
    ok = np.isfinite(pos).all(axis=1) & (np.abs(np.nan_to_num(pos, nan=0.0, posinf=np.inf)) <= MAX_COORDINATE).all(
        axis=1
    )
    if not ok.all():
        i = int(np.flatnonzero(~ok)[0])
        raise InputError(f"{where}: atom {i + 1}: {_coordinate_problem(pos[i])}")


def _coordinate_problem(xyz: np.ndarray | list[float]) -> str:
    for v in xyz:
        if not math.isfinite(v):
            return f"coordinate {v} is not finite"
        if abs(v) > MAX_COORDINATE:
            return f"coordinate {v:g} Å is out of range (|x| ≤ {MAX_COORDINATE:g} Å)"
    return "bad coordinate"


_KEYVAL = re.compile(r"(?<![\w.-])(charge|multiplicity|mult)\s*=\s*(\"[^\"]*\"|'[^']*'|[^\s,;]*)", re.IGNORECASE)


def header_integer(key: str, value: object, where: str) -> int:
    """A charge or multiplicity from a header as an int; InputError naming ``where`` when
    it is not an integer, or a multiplicity below 1."""
    number: int | None = None
    if isinstance(value, (bool, np.bool_)):
        number = None
    elif isinstance(value, (int, np.integer)):
        number = int(value)
    elif isinstance(value, (float, np.floating)) and math.isfinite(value) and float(value).is_integer():
        number = int(value)
    elif isinstance(value, str):
        text = value.strip().strip("\"'")
        if re.fullmatch(r"[+-]?[0-9]{1,6}", text):
            number = int(text)
    if number is None:
        raise InputError(f"{where}: {key} must be an integer, found {str(value)[:40]!r}")
    if key == "multiplicity" and number < 1:
        raise InputError(f"{where}: multiplicity must be 1 or more (2S+1), found {number}")
    if abs(number) > 10**4:
        raise InputError(f"{where}: {key} {number} is out of range")
    return number


def check_molecule(mol: Molecule) -> None:
    """InputError (UsageError for a wrong ghost list) unless ``mol``, however it was made,
    has known elements, one finite x, y, z within MAX_COORDINATE per atom and integer
    charge and multiplicity: what the integrals need before pyscf sees the molecule."""
    where = mol.source
    n = len(mol.symbols)
    if n == 0:
        raise InputError(f"{where}: no atoms")
    for i, s in enumerate(mol.symbols):
        if s not in ELEMENTS:
            raise InputError(f"{where}: atom {i + 1}: unknown element symbol {str(s)[:20]!r}")
    try:
        coords = np.asarray(mol.coords, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"{where}: coordinates are not numbers") from None
    if coords.shape != (n, 3):
        raise InputError(f"{where}: expected {n} rows of x, y, z, got coordinates of shape {coords.shape}")
    if len(mol.ghost) != n:
        raise UsageError(f"{where}: {len(mol.ghost)} ghost flags for {n} atoms")
    check_coordinates(coords, where)
    if mol.bohr is not None:
        bohr = np.asarray(mol.bohr, dtype=float)
        if bohr.shape != (n, 3) or not np.isfinite(bohr).all():
            raise InputError(f"{where}: the bohr coordinates must be {n} rows of three finite numbers")
    header_integer("charge", mol.charge, where)
    if mol.multiplicity is not None:
        header_integer("multiplicity", mol.multiplicity, where)


def _comment_charge(comment: str, where: str) -> tuple[int, int | None]:
    charge, mult = 0, None
    for key, value in _KEYVAL.findall(comment):
        key = key.lower()
        if key == "charge":
            charge = header_integer("charge", value, where)
        else:
            mult = header_integer("multiplicity", value, where)
    return charge, mult


def is_extended(comment: str) -> bool:
    return "properties=" in comment.lower() or "lattice=" in comment.lower()


def _atom_count(line: str, where: str) -> int:
    head = line.split()
    if len(head) != 1 or not re.fullmatch(r"[0-9]{1,9}", head[0]) or int(head[0]) < 1:
        raise InputError(f"{where}: expected an atom count, found {line.strip()[:40]!r}")
    return int(head[0])


def _atom_line(line: str, where: str, scale: float) -> tuple[str, bool, list[float]]:
    parts = line.split()
    if len(parts) < 4:
        raise InputError(f"{where}: expected 'element x y z', found {line.strip()[:60]!r}")
    sym, ghost = atom_label(parts[0], where)
    try:
        xyz = [plain_float(v) * scale for v in parts[1:4]]
    except ValueError:
        shown = " ".join(parts[1:4])[:60]
        if any(v.strip("+-").lower() in ("nan", "inf", "infinity") for v in parts[1:4]):
            raise InputError(f"{where}: coordinate is not finite (NaN or infinity): {shown!r}") from None
        raise InputError(f"{where}: coordinates are not numbers: {shown!r}") from None
    if not all(math.isfinite(v) and abs(v) <= MAX_COORDINATE for v in xyz):
        raise InputError(f"{where}: {_coordinate_problem(xyz)}")
    return sym, ghost, xyz


def read_plain_xyz(path: Path, text: str, scale: float) -> list[Molecule]:
    lines = text.splitlines()
    frames: list[Molecule] = []
    i = 0
    name = str(path)
    while i < len(lines):
        if not lines[i].strip():
            i += 1
            continue
        n = _atom_count(lines[i], f"{name}:{i + 1}")
        if i + 2 + n > len(lines):
            raise InputError(
                f"{name}:{i + 1}: the header announces {n} atoms but only "
                f"{max(0, len(lines) - i - 2)} atom lines follow"
            )
        comment = lines[i + 1]
        atoms = [_atom_line(lines[j], f"{name}:{j + 1}", scale) for j in range(i + 2, i + 2 + n)]
        charge, mult = _comment_charge(comment, f"{name}:{i + 2}")
        frames.append(
            Molecule(
                symbols=tuple(s for s, _, _ in atoms),
                coords=np.asarray([xyz for _, _, xyz in atoms], dtype=float),
                ghost=tuple(g for _, g, _ in atoms),
                charge=charge,
                multiplicity=mult,
                source=name,
                frame=len(frames),
                comment=comment.strip(),
            )
        )
        i += 2 + n
    return frames


_PROPERTIES = re.compile(r"properties\s*=\s*(\"[^\"]*\"|'[^']*'|\S+)", re.IGNORECASE)


def _species_column(comment: str) -> int:
    """The column of the species in the atom lines of an extended XYZ frame (from its
    Properties=, ASE's default when absent), or -1."""
    m = _PROPERTIES.search(comment)
    fields = m.group(1).strip("\"'").split(":") if m else ["species", "S", "1"]
    column = 0
    for name, count in zip(fields[0::3], fields[2::3]):
        if name.lower() == "species":
            return column
        column += int(count) if count.isascii() and count.isdigit() and len(count) < 4 else 1
    return -1


def _extxyz_prepare(path: Path, text: str) -> tuple[str, list[tuple[bool, ...]]]:
    """Every frame's atom count of an extended XYZ text, checked before ASE reads it (ASE's
    reader takes any integer Python reads, '1_0' or '999999999999', and skips that many
    lines, which for a huge number never ends); ghost labels in the species column read
    (X-H, Gh(H), ...) and replaced by their element, since ASE knows elements only.
    Returns the text for ASE and the ghost flags of each frame."""
    lines = text.splitlines()
    ghosts: list[tuple[bool, ...]] = []
    i = 0
    while i < len(lines) and lines[i].strip():
        n = _atom_count(lines[i], f"{path}:{i + 1}")
        if i + 2 + n > len(lines):
            have = max(0, len(lines) - i - 2)
            raise InputError(f"{path}:{i + 1}: the header announces {n} atoms but only {have} atom lines follow")
        column = _species_column(lines[i + 1])
        flags = []
        for j in range(i + 2, i + 2 + n):
            parts = lines[j].split()
            ghost = False
            if 0 <= column < len(parts) and not parts[column].isalpha():
                parts[column], ghost = atom_label(parts[column], f"{path}:{j + 1}")
                lines[j] = " ".join(parts) if ghost else lines[j]
            flags.append(ghost)
        ghosts.append(tuple(flags))
        i += 2 + n
        while i < len(lines) and lines[i].lstrip().upper().startswith("VEC"):
            i += 1  # lattice vectors after the atoms
    return "\n".join(lines) + "\n", ghosts


def _ase_images(path: Path, text: str, fmt: str) -> list[Atoms]:
    from ase.io import read  # ASE is slow to import: only for the formats it reads

    try:
        images = read(io.StringIO(text), index=":", format=fmt)
    except Exception as exc:  # ASE raises many types; the message is what matters
        msg = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise InputError(f"{path}: cannot read geometry ({msg[:120]})") from None
    return images if isinstance(images, list) else [images]


def _json_pairs(text: str) -> list[dict]:
    """The key-value pairs of each row of an ASE JSON database (ASE's reader drops them)."""
    try:
        doc = json.loads(text)
        return [dict(doc[str(i)].get("key_value_pairs") or {}) for i in doc.get("ids", [])]
    except (ValueError, TypeError, KeyError, AttributeError):
        return []


def read_with_ase(path: Path, text: str, fmt: str, scale: float) -> list[Molecule]:
    """Extended XYZ and the other formats ASE reads for us, with the same checks as plain XYZ."""
    ghosts: list[tuple[bool, ...]] = []
    if fmt == "extxyz":
        text, ghosts = _extxyz_prepare(path, text)
    images = _ase_images(path, text, fmt)
    pairs = _json_pairs(text) if fmt == "json" else []
    frames = []
    line = 2  # the comment line of the first extended XYZ frame
    for k, atoms in enumerate(images):
        where = f"{path}:{line}" if fmt == "extxyz" else (f"{path}: frame {k + 1}" if len(images) > 1 else str(path))
        info = {**(pairs[k] if k < len(pairs) else {}), **(getattr(atoms, "info", None) or {})}
        mol = molecule_from_atoms(atoms, source=str(path), frame=k, info=info, where=where, scale=scale)
        if k < len(ghosts) and len(ghosts[k]) == mol.n_atoms:
            mol = replace(mol, ghost=tuple(a or b for a, b in zip(mol.ghost, ghosts[k])))
        frames.append(mol)
        line += len(atoms) + 2
    return frames


def _array_flags(atoms: Atoms, where: str) -> tuple[tuple[bool, ...] | None, tuple[tuple[int, ...], ...]]:
    """The per-atom ``ghost`` (logical) and ``fragment`` (integer) columns of an ASE Atoms
    (extended XYZ Properties), checked: (ghost flags or None, fragments in label order)."""
    arrays = getattr(atoms, "arrays", None) or {}
    ghost = None
    if "ghost" in arrays:
        col = np.asarray(arrays["ghost"])
        if col.dtype != bool or col.shape != (len(atoms),):
            raise InputError(f"{where}: the ghost column must be logical (ghost:L:1), one value per atom")
        ghost = tuple(bool(g) for g in col)
    fragments: tuple[tuple[int, ...], ...] = ()
    if "fragment" in arrays:
        col = np.asarray(arrays["fragment"])
        if col.dtype.kind not in "iu" or col.shape != (len(atoms),):
            raise InputError(f"{where}: the fragment column must be integers (fragment:I:1), one per atom")
        fragments = tuple(tuple(int(i) for i in np.flatnonzero(col == v)) for v in sorted(set(col.tolist())))
    return ghost, fragments


def molecule_from_atoms(
    atoms: Atoms,
    source: str = "<ase.Atoms>",
    frame: int = 0,
    info: dict | None = None,
    where: str | None = None,
    scale: float = 1.0,
) -> Molecule:
    """Molecule from an ASE Atoms object (positions are ångström in ASE, times ``scale``):
    finite positions within MAX_COORDINATE, integer charge and multiplicity; a logical
    ``ghost`` and an integer ``fragment`` per-atom array are read when present."""
    where = where or source
    pos = np.asarray(atoms.get_positions(), dtype=float) * scale
    check_coordinates(pos, where)
    symbols = tuple(element_symbol(s, f"{where}: atom {i + 1}") for i, s in enumerate(atoms.get_chemical_symbols()))
    if not symbols:
        raise InputError(f"{where}: no atoms")
    info = info if info is not None else (getattr(atoms, "info", None) or {})
    charge = header_integer("charge", info["charge"], where) if "charge" in info else 0
    key = next((k for k in ("multiplicity", "mult") if k in info), None)
    mult = header_integer("multiplicity", info[key], where) if key else None
    ghost, fragments = _array_flags(atoms, where)
    return Molecule(
        symbols=symbols,
        coords=pos,
        ghost=ghost or (False,) * len(symbols),
        charge=charge,
        multiplicity=mult,
        source=source,
        frame=frame,
        fragments=fragments if len(fragments) > 1 else (),
    )


def unit_scale(unit: str) -> float:
    """Ångström per unit of the numbers in a file (UsageError for an unknown unit)."""
    unit = str(unit).lower()
    if unit in ("angstrom", "ang", "a", "å"):
        return 1.0
    if unit in ("bohr", "au", "a.u."):
        return BOHR_IN_ANGSTROM
    raise UsageError(f"unknown unit {unit!r}: use 'angstrom' or 'bohr'")
