"""Geometry files -> Molecules: the format of each file (by suffix, or forced with
``--input-format``) and its reader. Every file goes through auditor.base.textio first."""

from __future__ import annotations

import json
import os
import re
from collections.abc import Sequence
from dataclasses import replace
from pathlib import Path

from ..base.errors import InputError, UsageError
from ..base.textio import decode_text, read_bytes
from .checkpoint import read_checkpoint
from .geometry import Molecule, check_atom_numbers, is_extended, read_plain_xyz, read_with_ase, unit_scale
from .qcschema import QCSCHEMA_NAMES, read_qcschema
from .sdf import read_sdf

#: The formats ``--input-format`` can name, and what reads them.
INPUT_FORMATS = {
    "xyz": "XYZ (extended XYZ when the comment line has Properties= or Lattice=)",
    "extxyz": "extended XYZ (ASE)",
    "pdb": "Protein Data Bank (ASE)",
    "sdf": "MDL molfile / SD file, V2000",
    "qcschema": "QCSchema molecule or single-point input (JSON, bohr)",
    "chk": "pyscf checkpoint (HDF5)",
    "ase-json": "ASE JSON database",
}
#: Formats chosen by file name suffix (the periodic ones, CIF and friends, are
#: auditor.inputs.cell's). ".json" is QCSchema when its schema_name says so, else ASE JSON.
SUFFIXES = {
    ".xyz": "xyz",
    ".txt": "xyz",
    "": "xyz",
    ".extxyz": "extxyz",
    ".pdb": "pdb",
    ".ent": "pdb",
    ".sdf": "sdf",
    ".sd": "sdf",
    ".mol": "sdf",
    ".json": "json",
    ".chk": "chk",
    ".cif": "cif",
}
_QCSCHEMA_TAG = re.compile(r'"schema_name"\s*:\s*"qcschema_(?:molecule|input)"')
_ASE_NAMES = {"extxyz": "extxyz", "pdb": "proteindatabank", "ase-json": "json", "cif": "cif"}


def check_input_format(fmt: str | None) -> str | None:
    """``fmt`` if it is one of INPUT_FORMATS (or None), else UsageError."""
    if fmt is not None and fmt not in INPUT_FORMATS:
        raise UsageError(f"--input-format must be one of {', '.join(INPUT_FORMATS)}, got {fmt!r}")
    return fmt


def format_of(path: Path, forced: str | None = None) -> str:
    """The reader of ``path``: ``forced`` if given, else from the suffix (never the content,
    except that a .json file is a QCSchema document when its schema_name says so)."""
    if forced is not None:
        return check_input_format(forced) or "xyz"
    suffix = path.suffix.lower()
    if suffix in SUFFIXES:
        return SUFFIXES[suffix]
    known = ", ".join(sorted(s for s in SUFFIXES if s))
    raise InputError(
        f"{path}: unsupported geometry format {suffix!r} (known: {known}, or no suffix for XYZ; "
        "--input-format names one)"
    )


def _json_kind(text: str) -> str:
    """'qcschema' when the document's schema_name is a QCSchema molecule or input, else 'ase-json'."""
    try:
        doc = json.loads(text)
    except (ValueError, RecursionError):  # a broken document: QCSchema if it says so, for its message
        return "qcschema" if _QCSCHEMA_TAG.search(text[:100_000]) else "ase-json"
    return "qcschema" if isinstance(doc, dict) and doc.get("schema_name") in QCSCHEMA_NAMES else "ase-json"


def _read(path: Path, fmt: str, unit: str, max_bytes: int | None) -> list[Molecule]:
    scale = unit_scale(unit)
    data = read_bytes(path, "geometry file", max_bytes)
    if fmt == "chk":
        return read_checkpoint(path, data)
    text = decode_text(data, path)
    if not text.strip():
        raise InputError(f"{path}: file is empty")
    if fmt == "json":
        fmt = _json_kind(text)
    if fmt == "qcschema":
        return read_qcschema(path, text)
    if fmt == "sdf":
        return read_sdf(path, text, scale)
    lines = text.splitlines()
    if fmt == "xyz" and not is_extended(lines[1] if len(lines) > 1 else ""):
        return read_plain_xyz(path, text, scale)
    return read_with_ase(path, text, _ASE_NAMES.get(fmt, "extxyz"), scale)


def read_geometry(
    path: str | Path, unit: str = "angstrom", max_bytes: int | None = None, input_format: str | None = None
) -> list[Molecule]:
    """Read every frame of a geometry file: XYZ, multi-frame XYZ, extended XYZ, PDB,
    SDF/MOL, a QCSchema molecule or input, a pyscf checkpoint, an ASE JSON database or a
    CIF file, chosen by suffix or by ``input_format`` (one of INPUT_FORMATS).

    ``unit`` is the unit of the numbers in a text file ("angstrom" or "bohr"; QCSchema and
    checkpoints are in bohr by definition); the returned coordinates are always in
    ångström. Only regular files of at most ``max_bytes`` (default:
    ``auditor.base.textio.input_limit()``) are read.
    """
    if not isinstance(path, (str, os.PathLike)):
        raise UsageError(f"a geometry is a file path, an ASE Atoms, a pyscf Mole or a Molecule, got {path!r:.60}")
    path = Path(path)
    frames = _read(path, format_of(path, input_format), unit, max_bytes)
    if not frames:
        raise InputError(f"{path}: no atoms found")
    n = len(frames)
    return [replace(f, n_frames=n) for f in frames]


def load_molecules(
    path: str | Path,
    unit: str = "angstrom",
    ghost: str | Sequence[int] | None = None,
    max_bytes: int | None = None,
    input_format: str | None = None,
) -> list[Molecule]:
    """Every frame of a geometry file, with ghost atoms marked: those the file marks and
    ``ghost`` (1-based numbers or '4-6,9', checked against each frame's atom count before
    they are expanded) together."""
    frames = read_geometry(path, unit=unit, max_bytes=max_bytes, input_format=input_format)
    if not ghost:
        return frames
    return [f.with_ghosts(check_atom_numbers(ghost, f.n_atoms, str(path))) for f in frames]
