"""pyscf checkpoint files (HDF5, ``chkfile=`` of an SCF run) -> Molecule with the run's basis.

pyscf's own readers (``lib.chkfile.load_mol``, ``gto.loads``) evaluate parts of the stored
molecule text as Python; they are never called. The ``mol`` string is parsed here with
json only, and only these keys are read: ``_atom`` (labels and bohr coordinates), ``_basis``
(pyscf's internal basis lists, every number checked), ``_atm`` (nuclear charges: 0 marks a
ghost atom), ``cart``, ``charge`` and ``spin`` (pyscf's defaults 0 when absent).
"""

from __future__ import annotations

import hashlib
import io
import re
from pathlib import Path
from typing import Any

import numpy as np

from ..base.elements import atom_label, element_symbol
from ..base.errors import InputError
from .basis import FileBasis, check_shells
from .geometry import Molecule, check_coordinates, header_integer

ORIGIN = "checkpoint"
#: HDF5 files start with this signature at offset 0, 512, 1024, 2048, ... (a user block
#: may come first)
HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"
#: the molecule text of a checkpoint is refused above this size (a molecule of 10^4 atoms
#: in a large basis takes a few MB)
MAX_MOL_TEXT = 64 << 20
#: pyscf's ångström per bohr (pyscf.lib.param.BOHR), the factor its own runs used
PYSCF_BOHR = 0.52917721092
_PYSCF_GHOST = re.compile(r"(?i:ghost)[-_]?|(?i:x)[-_]")


def is_hdf5(data: bytes) -> bool:
    """Whether ``data`` carries the HDF5 signature where HDF5 allows it."""
    offset = 0
    while offset + 8 <= len(data) and offset <= 1 << 20:
        if data[offset : offset + 8] == HDF5_SIGNATURE:
            return True
        offset = 512 if offset == 0 else offset * 2
    return False


def _mol_text(path: object, data: bytes) -> str:
    """The ``mol`` string of a pyscf checkpoint, read with h5py from the bytes in memory."""
    import h5py  # comes with pyscf; imported only when a checkpoint is read

    if not is_hdf5(data):
        raise InputError(f"{path}: not an HDF5 file, so not a pyscf checkpoint")
    try:
        with h5py.File(io.BytesIO(data), "r") as fh:
            node = fh.get("mol")
            if not isinstance(node, h5py.Dataset):
                raise InputError(f"{path}: an HDF5 file without a molecule ('mol'): not a pyscf checkpoint")
            if node.shape != () or node.dtype.kind not in "OS" or (node.dtype.itemsize or 0) > MAX_MOL_TEXT:
                raise InputError(f"{path}: the 'mol' entry is not a text: not a pyscf checkpoint")
            value = node[()]
    except InputError:
        raise
    except Exception as exc:  # h5py raises OSError, KeyError, ValueError, ... on damaged files
        raise InputError(f"{path}: cannot read the HDF5 file ({type(exc).__name__})") from None
    if isinstance(value, bytes):
        if len(value) > MAX_MOL_TEXT:
            raise InputError(f"{path}: the stored molecule is larger than {MAX_MOL_TEXT >> 20} MiB")
        try:
            return value.decode("utf-8")
        except UnicodeDecodeError:
            raise InputError(f"{path}: the stored molecule is not UTF-8 text") from None
    if isinstance(value, str):
        return value
    raise InputError(f"{path}: the 'mol' entry is not a text: not a pyscf checkpoint")


def _label(label: object, where: str) -> tuple[str, bool]:
    """(element, ghost) of a pyscf atom label: 'H', 'H1', 'GHOST-H', 'X-H2', ..."""
    if not isinstance(label, str) or not 0 < len(label) <= 32:
        raise InputError(f"{where}: the atom label must be a short text, found {str(label)[:20]!r}")
    m = _PYSCF_GHOST.match(label)
    if m and label[m.end() :].rstrip("0123456789").isalpha():
        return element_symbol(label[m.end() :].rstrip("0123456789"), where), True
    stripped = label.rstrip("0123456789")
    if stripped.isalpha() and stripped.lower() not in ("x", "ghost"):
        return element_symbol(stripped, where), False
    return atom_label(label, where)


def _atoms(path: object, doc: dict) -> tuple[list[str], list[tuple[str, bool]], np.ndarray]:
    atoms = doc.get("_atom")
    if not isinstance(atoms, list) or not atoms:
        raise InputError(f"{path}: the stored molecule has no atoms ('_atom')")
    labels, parsed, rows = [], [], []
    for i, entry in enumerate(atoms):
        where = f"{path}: atom {i + 1}"
        ok = isinstance(entry, list) and len(entry) == 2 and isinstance(entry[1], list) and len(entry[1]) == 3
        if not ok or not all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in entry[1]):
            raise InputError(f"{where}: expected [label, [x, y, z]] in bohr")
        labels.append(entry[0])
        parsed.append(_label(entry[0], where))
        rows.append([float(x) for x in entry[1]])
    return labels, parsed, np.asarray(rows, dtype=float)


def _nuclear_charges(path: object, doc: dict, n: int) -> list[int] | None:
    atm = doc.get("_atm")
    if atm is None:
        return None
    if not isinstance(atm, list) or len(atm) != n or not all(isinstance(r, list) and r for r in atm):
        raise InputError(f"{path}: '_atm' does not hold one row per atom")
    charges = [r[0] for r in atm]
    if not all(isinstance(z, int) and not isinstance(z, bool) and 0 <= z <= 200 for z in charges):
        raise InputError(f"{path}: '_atm' nuclear charges must be small non-negative integers")
    return charges


def _basis_of(label: str, basis: dict) -> Any:
    """The ``_basis`` entry pyscf uses for an atom label (its own look-up order: the label,
    without digits, then without a ghost prefix)."""
    bare = "".join(c for c in label if c.isalpha())
    candidates = [label, bare]
    m = _PYSCF_GHOST.match(label)
    if m:
        rest = label[m.end() :]
        candidates += [rest, "".join(c for c in rest if c.isalpha())]
    return next((basis[c] for c in candidates if c in basis), None)


def _file_basis(path: object, doc: dict, labels: list[str], digest: str) -> FileBasis:
    basis = doc.get("_basis")
    if not isinstance(basis, dict) or not basis:
        raise InputError(f"{path}: the stored molecule has no basis data ('_basis')")
    frozen: dict[str, tuple] = {}
    per_atom = []
    for i, label in enumerate(labels):
        shells = _basis_of(label, basis)
        if shells is None:
            raise InputError(f"{path}: atom {i + 1} ({label[:20]}) has no basis data in '_basis'")
        key = label if label in basis else str(id(shells))
        if key not in frozen:
            frozen[key] = check_shells(shells, f"{path}: basis of {label[:20]}")
        per_atom.append(frozen[key])
    cart = doc.get("cart", False)
    if not isinstance(cart, bool):
        raise InputError(f"{path}: 'cart' must be true or false")
    return FileBasis(ORIGIN, _basis_name(doc.get("basis")), tuple(per_atom), cart, digest)


_QUOTED = re.compile(r"'([^'\\]{1,40})'|\"([^\"\\]{1,40})\"")


def _basis_name(text: object) -> str:
    """A name for the run's basis from pyscf's repr of ``mol.basis`` (display only, read
    with a pattern, never evaluated): 'cc-pvdz', or 'O=cc-pvdz, H=sto-3g' for a dict of
    names; 'custom' for anything else."""
    if not isinstance(text, str) or not text.isprintable() or len(text) > 2000:
        return "custom"
    words = [a or b for a, b in _QUOTED.findall(text)]
    if text.startswith("{") and len(words) % 2 == 0 and words:
        shown = ", ".join(f"{k}={v}" for k, v in zip(words[0::2], words[1::2]))
        return shown if len(shown) <= 120 and "[" not in text else "custom"
    return words[0] if len(words) == 1 and text.strip("'\"") == words[0] else "custom"


def read_checkpoint(path: str | Path, data: bytes) -> list[Molecule]:
    """The molecule of a pyscf checkpoint (its bytes ``data``, already read through
    auditor.base.textio): atoms, ghost atoms, the run's exact basis data, Cartesian flag,
    charge and spin. InputError naming the file for anything else."""
    import json

    text = _mol_text(path, data)
    try:
        doc = json.loads(text, parse_constant=lambda c: (_ for _ in ()).throw(ValueError(c)))
    except (ValueError, RecursionError):
        raise InputError(f"{path}: the stored molecule is not JSON (pyscf's mol.dumps)") from None
    if not isinstance(doc, dict):
        raise InputError(f"{path}: the stored molecule is not a JSON object")
    labels, parsed, bohr = _atoms(path, doc)
    charges = _nuclear_charges(path, doc, len(labels))
    ghost = tuple(g or (charges is not None and charges[i] == 0) for i, (_, g) in enumerate(parsed))
    coords = bohr * PYSCF_BOHR
    check_coordinates(coords, str(path))
    charge = header_integer("charge", doc.get("charge", 0), f"{path}: charge")
    spin = header_integer("spin", doc.get("spin", 0), f"{path}: spin")
    if spin < 0:
        raise InputError(f"{path}: spin (2S) must not be negative, found {spin}")
    return [
        Molecule(
            symbols=tuple(s for s, _ in parsed),
            coords=coords,
            ghost=ghost,
            charge=charge,
            multiplicity=spin + 1,
            source=str(path),
            basis=_file_basis(path, doc, labels, hashlib.sha256(data).hexdigest()),
            bohr=bohr,
        )
    ]
