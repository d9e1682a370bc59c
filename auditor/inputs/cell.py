"""Periodic inputs: files with a cell (CIF, extended XYZ with a Lattice, and the other periodic
formats of the allow-list below, read by ASE) -> Crystal; the k-point mesh option.

pyscf.pbc wants the periodic directions first (``cell.dimension`` 1 or 2 sums over the
first one or two lattice vectors), so the lattice vectors are reordered when the file's
periodic directions are not the leading ones; ``axis_order`` records how.
"""

from __future__ import annotations

import math
import os
import re
import stat
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ..base.elements import BOHR_IN_ANGSTROM, element_symbol
from ..base.errors import InputError, UsageError
from ..base.textio import check_regular_file
from .geometry import Molecule, parse_atom_numbers

if TYPE_CHECKING:
    from ase import Atoms

#: File types read as periodic, by suffix or name, with the ASE format that reads them.
#: ``.xyz``/``.extxyz`` are periodic only when the comment line gives a Lattice (and pbc
#: is not all false); every other entry is periodic by its nature.
PERIODIC_SUFFIXES = {
    ".cif": "cif",
    ".extxyz": "extxyz",
    ".xyz": "extxyz",
    ".vasp": "vasp",
    ".poscar": "vasp",
    ".xsf": "xsf",
    ".cell": "castep-cell",
    ".gen": "gen",
    ".pwi": "espresso-in",
}
PERIODIC_NAMES = {"POSCAR": "vasp", "CONTCAR": "vasp", "geometry.in": "aims"}

#: Periodic geometry files above this size are refused (a cell of a few thousand atoms is far smaller).
MAX_CELL_FILE_BYTES = 64 << 20

#: A vacuum direction the file gives no usable lattice vector for gets one this much longer
#: than the atoms' extent along it (ångström): pyscf needs three vectors.
VACUUM_PADDING = 20.0

#: The default k-point mesh takes N_i = ceil(KMESH_LENGTH / |a_i|) points along each periodic
#: lattice vector (docs/periodic.md says why 12 Å).
KMESH_LENGTH = 12.0


@dataclass(frozen=True)
class Crystal:
    """Atoms in a cell. ``coords`` are Cartesian ångström; ``lattice`` rows are the lattice
    vectors in ångström in pyscf's order (periodic ones first); ``pbc`` the periodic flag of
    each row. ``axis_order[i]`` is the file's lattice vector that row i came from.
    ``ghost[i]`` marks atoms that carry basis functions but no nucleus."""

    symbols: tuple[str, ...]
    coords: np.ndarray
    lattice: np.ndarray
    pbc: tuple[bool, bool, bool]
    ghost: tuple[bool, ...]
    source: str = "<memory>"
    frame: int = 0
    n_frames: int = 1
    axis_order: tuple[int, int, int] = (0, 1, 2)
    vacuum_added: tuple[int, ...] = ()

    @property
    def n_atoms(self) -> int:
        return len(self.symbols)

    @property
    def dimension(self) -> int:
        return int(sum(self.pbc))

    def molecule(self) -> Molecule:
        """The home cell's atoms as a Molecule (for the function table and the basis)."""
        return Molecule(
            self.symbols, self.coords, self.ghost, source=self.source, frame=self.frame, n_frames=self.n_frames
        )

    def with_ghosts(self, numbers: list[int]) -> Crystal:
        """Mark 1-based atom ``numbers`` as ghost atoms."""
        return replace(self, ghost=self.molecule().with_ghosts(numbers).ghost)

    def file_axes(self, values: tuple[int, int, int] | list[int]) -> tuple[int, int, int]:
        """``values`` given per pyscf row, reordered to the file's lattice vectors."""
        out = [0, 0, 0]
        for row, axis in enumerate(self.axis_order):
            out[axis] = int(values[row])
        return (out[0], out[1], out[2])


def periodic_format(path: str | Path) -> str | None:
    """The ASE format a file is read with when it is periodic by its type, else None
    (``.xyz``/``.extxyz`` answer "extxyz"; whether they hold a cell is `has_cell`'s question)."""
    p = Path(path)
    return PERIODIC_NAMES.get(p.name) or PERIODIC_SUFFIXES.get(p.suffix.lower())


_LATTICE = re.compile(r'lattice\s*=\s*"', re.IGNORECASE)
_PBC_FALSE = re.compile(r'pbc\s*=\s*"\s*[fF]\w*\s+[fF]\w*\s+[fF]\w*\s*"', re.IGNORECASE)


def has_cell(path: str | Path) -> bool:
    """Whether the file is a periodic input: a periodic type, or an XYZ whose first comment
    line gives a Lattice without pbc="F F F"."""
    fmt = periodic_format(path)
    if fmt is None:
        return False
    if fmt != "extxyz":
        return True
    try:  # only a regular file is opened (a FIFO or device would block or never end)
        if not stat.S_ISREG(os.stat(path).st_mode):
            return False
        with open(path, encoding="utf-8", errors="replace") as fh:
            fh.readline(1 << 16)
            comment = fh.readline(1 << 16)
    except OSError:
        return False
    return bool(_LATTICE.search(comment)) and not _PBC_FALSE.search(comment)


def read_cells(path: str | Path, unit: str = "angstrom") -> list[Crystal]:
    """Every frame of a periodic file as a Crystal (coordinates and lattice in ångström)."""
    scale = _unit_scale(unit)
    path = Path(path)
    fmt = periodic_format(path)
    if fmt is None:
        names = ", ".join(sorted(PERIODIC_SUFFIXES) + sorted(PERIODIC_NAMES))
        raise InputError(f"{path}: not a periodic file type the auditor reads ({names})")
    st = check_regular_file(path, "geometry file")
    if st.st_size > MAX_CELL_FILE_BYTES:
        raise InputError(
            f"{path}: {st.st_size} bytes, more than the {MAX_CELL_FILE_BYTES >> 20} MB a cell file may have"
        )
    try:
        from ase.io import read  # ASE is slow to import: only for the files it reads

        images = read(str(path), index=":", format=fmt)
    except Exception as exc:  # ASE raises many types; the message is what matters
        msg = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise InputError(f"{path}: cannot read a periodic geometry ({msg})") from None
    images = images if isinstance(images, list) else [images]
    if not images:
        raise InputError(f"{path}: no atoms found")
    frames = [crystal_from_atoms(a, str(path), k, scale) for k, a in enumerate(images)]
    return [replace(f, n_frames=len(frames)) for f in frames]


def _unit_scale(unit: str) -> float:
    u = unit.lower()
    if u in ("angstrom", "ang", "a", "å"):
        return 1.0
    if u in ("bohr", "au", "a.u."):
        return BOHR_IN_ANGSTROM
    raise UsageError(f"unknown unit {unit!r}: use 'angstrom' or 'bohr'")


def crystal_from_atoms(atoms: Atoms, source: str = "<ase.Atoms>", frame: int = 0, scale: float = 1.0) -> Crystal:
    """Crystal from an ASE Atoms with a cell; InputError when it is periodic in no direction."""
    pos = np.asarray(atoms.get_positions(), dtype=float) * scale
    if pos.size == 0:
        raise InputError(f"{source}: no atoms found")
    if not np.all(np.isfinite(pos)):
        raise InputError(f"{source}: an atom has a coordinate that is not finite")
    cell = np.asarray(atoms.cell.array, dtype=float) * scale
    pbc = tuple(bool(x) for x in atoms.pbc)
    if not any(pbc):
        raise InputError(f"{source}: the file is periodic in no direction (pbc all false): audit it as a molecule")
    if not np.all(np.isfinite(cell)):
        raise InputError(f"{source}: a lattice vector is not finite")
    symbols = tuple(element_symbol(s, f"{source}: atom {i + 1}") for i, s in enumerate(atoms.get_chemical_symbols()))
    order = tuple(i for i in range(3) if pbc[i]) + tuple(i for i in range(3) if not pbc[i])
    lattice = cell[list(order)]
    flags = tuple(pbc[i] for i in order)
    lattice, added = _complete_lattice(lattice, flags, pos, source)
    return Crystal(
        symbols=symbols,
        coords=pos,
        lattice=lattice,
        pbc=(flags[0], flags[1], flags[2]),
        ghost=(False,) * len(symbols),
        source=source,
        frame=frame,
        axis_order=(order[0], order[1], order[2]),
        vacuum_added=added,
    )


def _complete_lattice(
    lattice: np.ndarray, pbc: tuple[bool, ...], pos: np.ndarray, source: str
) -> tuple[np.ndarray, tuple[int, ...]]:
    """Check the periodic vectors; give each vacuum direction without a usable vector one
    perpendicular to the others; keep the set right-handed (by the sign of a vacuum vector
    where the reordering flipped it)."""
    dim = int(sum(pbc))
    lat = lattice.copy()
    periodic = lat[:dim]
    if dim and np.linalg.matrix_rank(periodic, tol=1e-6) < dim:
        raise InputError(f"{source}: the periodic lattice vectors are zero or linearly dependent")
    added: list[int] = []
    for row in range(dim, 3):
        if np.linalg.matrix_rank(lat[: row + 1], tol=1e-6) <= row:
            lat[row] = _perpendicular(lat[:row], pos)
            added.append(row)
    det = float(np.linalg.det(lat))
    if abs(det) < 1e-6:
        raise InputError(f"{source}: the lattice vectors span no volume")
    if det < 0:
        if dim == 3:
            raise InputError(f"{source}: the lattice vectors are left-handed")
        lat[2] = -lat[2]
    return lat, tuple(added)


def _perpendicular(rows: np.ndarray, pos: np.ndarray) -> np.ndarray:
    """A vector perpendicular to ``rows`` (and to any earlier choice), as long as the atoms'
    extent along it plus VACUUM_PADDING."""
    basis = np.eye(3)
    if rows.shape[0]:
        q, _ = np.linalg.qr(np.vstack([rows, np.eye(3)]).T)
        basis = q.T[rows.shape[0] :]
    u = basis[0] / np.linalg.norm(basis[0])
    extent = float(np.ptp(pos @ u)) if pos.shape[0] > 1 else 0.0
    return u * (extent + VACUUM_PADDING)


def load_cells(path: str | Path, unit: str = "angstrom", ghost: str | list[int] | None = None) -> list[Crystal]:
    """Every frame of a periodic file, with ghost atoms marked (1-based numbers or '4-6,9')."""
    frames = read_cells(path, unit=unit)
    numbers = parse_atom_numbers(ghost) if isinstance(ghost, str) else list(ghost or [])
    return [f.with_ghosts(numbers) if numbers else f for f in frames]


def parse_kmesh(text: str | None) -> tuple[int, int, int] | None:
    """'4,4,4' (or '4x4x4', '4 4 4') -> (4, 4, 4); None for None or ''."""
    if text is None or not str(text).strip():
        return None
    parts = [p for p in re.split(r"[,x×\s]+", str(text).strip()) if p]
    if len(parts) != 3 or not all(p.isdigit() for p in parts):
        raise UsageError(f"--kmesh expects three positive integers such as 4,4,4; got {text!r}")
    n = tuple(int(p) for p in parts)
    if min(n) < 1 or max(n) > 64:
        raise UsageError(f"--kmesh counts must lie between 1 and 64; got {text!r}")
    return (n[0], n[1], n[2])


def default_kmesh(crystal: Crystal) -> tuple[int, int, int]:
    """N_i = ceil(KMESH_LENGTH / |a_i|) along each periodic lattice vector, rounded up to an
    even number when above 1 (the Γ-centred mesh then holds the zone-boundary point b_i / 2);
    1 along vacuum; in the file's axis order (as ``--kmesh`` is given)."""
    rows = []
    for a, p in zip(crystal.lattice, crystal.pbc):
        n = max(1, math.ceil(KMESH_LENGTH / float(np.linalg.norm(a)) - 1e-9)) if p else 1
        rows.append(n + n % 2 if n > 1 else n)
    return crystal.file_axes(rows)


def mesh_rows(crystal: Crystal, kmesh: tuple[int, int, int]) -> tuple[int, int, int]:
    """A mesh given along the file's lattice vectors, in pyscf's row order; UsageError when a
    vacuum direction asks for more than one point."""
    rows = tuple(int(kmesh[axis]) for axis in crystal.axis_order)
    for row, (n, p) in enumerate(zip(rows, crystal.pbc)):
        if not p and n != 1:
            axis = crystal.axis_order[row] + 1
            raise UsageError(
                f"--kmesh asks for {n} k-points along lattice vector a{axis}, which {crystal.source} "
                "marks as non-periodic (vacuum): use 1 there"
            )
    return (rows[0], rows[1], rows[2])
