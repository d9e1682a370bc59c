"""QCSchema molecule documents and single-point inputs (JSON) -> Molecule.

Checked against auditor/schemas/qcschema-input.schema.json (our own text of the parts of
QCSchema that are read, validated with jsonschema), then in code for what a schema cannot
say: array lengths that depend on each other, finite numbers, fragments that cover every
atom once. Geometry is in bohr (QCSchema's unit); ``real: false`` atoms are ghost atoms.
"""

from __future__ import annotations

import hashlib
import json
import math
from functools import cache
from importlib import resources
from pathlib import Path
from typing import Any

import numpy as np

from ..base.elements import BOHR_IN_ANGSTROM, atom_label
from ..base.errors import InputError
from ..base.textio import plain_float
from .basis import FileBasis, check_basis_name, check_shells
from .geometry import Molecule, check_coordinates, header_integer

#: the schema_name values that mark a QCSchema document read here
QCSCHEMA_NAMES = ("qcschema_molecule", "qcschema_input")
ORIGIN = "QCSchema document"


@cache
def _validator() -> Any:
    import jsonschema  # a dependency; imported only when a QCSchema document is read

    text = (
        resources.files("auditor")
        .joinpath("schemas")
        .joinpath("qcschema-input.schema.json")
        .read_text(encoding="utf-8")
    )
    schema = json.loads(text)
    return jsonschema.validators.validator_for(schema)(schema)


def _not_finite(token: str) -> float:
    raise ValueError(f"{token} is not a finite number")


def parse_json(path: object, text: str) -> object:
    """JSON text as Python data; NaN and infinity are refused (InputError naming the file)."""
    try:
        return json.loads(text, parse_constant=_not_finite)
    except RecursionError:
        raise InputError(f"{path}: JSON nested too deeply") from None
    except ValueError as exc:
        raise InputError(f"{path}: not valid JSON ({str(exc)[:100]})") from None


def check_document(path: object, doc: object) -> None:
    """InputError naming the file and the first offending key unless ``doc`` is a QCSchema
    molecule or single-point input as far as the auditor reads it."""
    from jsonschema.exceptions import best_match

    error = best_match(_validator().iter_errors(doc))
    if error is not None:
        where = "/".join(str(p) for p in error.absolute_path) or "document"
        raise InputError(f"{path}: not a QCSchema molecule or input: {where}: {_schema_message(error)}")


def _schema_message(error: Any) -> str:
    """A short reason for a schema error (the validator's own text can quote a pattern)."""
    shown = json.dumps(error.instance)[:40] if not isinstance(error.instance, (dict, list)) else "this value"
    if error.validator == "pattern":
        return f"{shown} is not a plain number"
    if error.validator == "type":
        return f"{shown} should be of type {error.validator_value}"
    if error.validator in ("oneOf", "anyOf"):
        return f"{shown} is none of the forms QCSchema allows here"
    return str(error.message)[:120]


def _geometry(mol: dict, n: int, where: str) -> np.ndarray:
    geom = np.asarray(mol["geometry"], dtype=float).reshape(-1)
    if geom.size != 3 * n:
        raise InputError(f"{where}: geometry holds {geom.size} numbers for {n} symbols (expected {3 * n})")
    return geom.reshape(n, 3)


def _fragments(mol: dict, n: int, where: str) -> tuple[tuple[int, ...], ...]:
    frags = mol.get("fragments") or []
    seen = [i for f in frags for i in f]
    if seen and (sorted(seen) != list(range(n))):
        raise InputError(f"{where}: fragments must hold every atom (0 to {n - 1}) exactly once")
    for key in ("fragment_charges", "fragment_multiplicities"):
        if key in mol and len(mol[key]) != len(frags):
            raise InputError(f"{where}: {key} has {len(mol[key])} values for {len(frags)} fragments")
    return tuple(tuple(int(i) for i in f) for f in frags) if len(frags) > 1 else ()


def _number(value: object, where: str) -> float:
    x = plain_float(value) if isinstance(value, str) else float(value)  # type: ignore[arg-type]
    if not math.isfinite(x):
        raise InputError(f"{where}: basis data must be finite numbers, found {str(value)[:20]!r}")
    return x


def _center_shells(center: dict, where: str) -> tuple[list, set[str]]:
    """pyscf shells of one QCSchema basis center and the harmonic types of its l ≥ 2 shells."""
    shells: list = []
    kinds: set[str] = set()
    for k, sh in enumerate(center["electron_shells"]):
        at = f"{where}: electron_shells/{k}"
        try:
            exps = [_number(e, at) for e in sh["exponents"]]
            rows = [[_number(c, at) for c in row] for row in sh["coefficients"]]
        except ValueError:
            raise InputError(f"{at}: exponents and coefficients must be plain numbers") from None
        if any(len(row) != len(exps) for row in rows):
            raise InputError(f"{at}: every coefficient row needs one value per exponent ({len(exps)})")
        moments = sh["angular_momentum"]
        if len(moments) > 1 and len(moments) != len(rows):
            raise InputError(f"{at}: {len(moments)} angular momenta need as many coefficient rows")
        if max(moments) >= 2:
            kinds.add(sh.get("harmonic_type", "spherical"))
        if len(moments) == 1:  # general contraction: every row is one contraction
            shells.append([moments[0], *[[e, *(row[p] for row in rows)] for p, e in enumerate(exps)]])
        else:  # an SP-type shell: one row per angular momentum
            shells += [[l, *[[e, row[p]] for p, e in enumerate(exps)]] for l, row in zip(moments, rows)]
    return shells, kinds


def _explicit_basis(basis: dict, n: int, where: str, digest: str) -> FileBasis:
    amap = basis["atom_map"]
    if len(amap) != n:
        raise InputError(f"{where}: atom_map has {len(amap)} entries for {n} atoms")
    centers: dict[str, tuple] = {}
    kinds: set[str] = set()
    for key, center in basis["center_data"].items():
        shells, k = _center_shells(center, f"{where}: center_data/{key[:20]}")
        centers[key] = check_shells(shells, f"{where}: center_data/{key[:20]}")
        kinds |= k
    missing = next((k for k in amap if k not in centers), None)
    if missing is not None:
        raise InputError(f"{where}: atom_map names {missing[:20]!r}, which center_data lacks")
    if len(kinds) > 1:
        raise InputError(f"{where}: spherical and cartesian shells mixed; pyscf needs one kind for the molecule")
    name = _plain_name(basis.get("name")) or "custom"
    return FileBasis(ORIGIN, name, tuple(centers[k] for k in amap), kinds == {"cartesian"}, digest)


def _plain_name(name: object) -> str:
    text = str(name or "").strip()
    return text if text and text.isprintable() and len(text) <= 80 else ""


def _named_basis(name: str, where: str, digest: str) -> FileBasis:
    try:
        name = check_basis_name(name, where)
    except Exception:  # a usage error for an option is an input error for a file's content
        raise InputError(f"{where}: a basis name is one line of printable text") from None
    if Path(name).expanduser().exists():
        raise InputError(f"{where}: {name[:60]!r} names a file; a document's basis must be a basis name")
    return FileBasis(ORIGIN, name, (), False, digest)


def _molecule(path: object, mol: dict, where: str, basis: object, digest: str) -> Molecule:
    n = len(mol["symbols"])
    labels = [atom_label(s, f"{where}: symbols/{i}") for i, s in enumerate(mol["symbols"])]
    real = mol.get("real")
    if real is not None and len(real) != n:
        raise InputError(f"{where}: real has {len(real)} values for {n} symbols")
    bohr = _geometry(mol, n, where)
    coords = bohr * BOHR_IN_ANGSTROM
    check_coordinates(coords, str(path))
    ghost = tuple(g or (real is not None and not real[i]) for i, (_, g) in enumerate(labels))
    charge = header_integer("charge", mol.get("molecular_charge", 0), f"{where}: molecular_charge")
    mult = mol.get("molecular_multiplicity")
    basis_field = f"{path}: model/basis"
    file_basis = None
    if isinstance(basis, str):
        file_basis = _named_basis(basis, basis_field, digest)
    elif isinstance(basis, dict):
        file_basis = _explicit_basis(basis, n, basis_field, digest)
    return Molecule(
        symbols=tuple(s for s, _ in labels),
        coords=coords,
        ghost=ghost,
        charge=charge,
        multiplicity=None if mult is None else header_integer("multiplicity", mult, f"{where}: molecular_multiplicity"),
        source=str(path),
        comment=_plain_name(mol.get("name")),
        fragments=_fragments(mol, n, where),
        basis=file_basis,
        bohr=bohr,
    )


def read_qcschema(path: object, text: str) -> list[Molecule]:
    """The molecule of a QCSchema molecule document or single-point input, with the input's
    ``model.basis`` (a name, or basis data) as the molecule's basis."""
    doc = parse_json(path, text)
    if isinstance(doc, dict) and "schema_name" not in doc and "symbols" in doc:
        doc = {**doc, "schema_name": "qcschema_molecule"}  # a bare molecule, named by --input-format
    check_document(path, doc)
    assert isinstance(doc, dict)  # the schema requires an object
    digest = hashlib.sha256(text.encode("utf-8")).hexdigest()
    if doc["schema_name"] == "qcschema_input":
        basis = (doc.get("model") or {}).get("basis")
        return [_molecule(path, doc["molecule"], f"{path}: molecule", basis, digest)]
    return [_molecule(path, doc, str(path), None, digest)]
