"""Property-based tests of the new readers: mutated SDF text, mutated QCSchema documents,
random checkpoint molecule texts and basis data, random atom labels. Only InputError or
UsageError may come out (one line), and what is read is sane."""

from __future__ import annotations

import json
import math

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from auditor.base.elements import ELEMENTS, atom_label
from auditor.base.errors import InputError, UsageError
from auditor.inputs.basis import check_shells
from auditor.inputs.checkpoint import read_checkpoint
from auditor.inputs.geometry import MAX_COORDINATE
from auditor.inputs.qcschema import read_qcschema
from auditor.inputs.sdf import read_sdf

SETTINGS = settings(
    max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture]
)
ODD = ["nan", "1e400", "-", "", "٣", "１", "Qq", "X", "Gh(", "@", ":", "1_0", "[/]", "\x00", "99999", "-1", "V3000"]

SDF = """water
  sketch

  3  2  0  0  0  0  0  0  0  0999 V2000
    0.0000    0.0000    0.1173 O   0  0  0  0  0  0  0  0  0  0  0  0
    0.0000    0.7572   -0.4692 H   0  0  0  0  0  0  0  0  0  0  0  0
    0.0000   -0.7572   -0.4692 H   0  0  0  0  0  0  0  0  0  0  0  0
  1  2  1  0
  1  3  1  0
M  CHG  1   1  0
M  END
$$$$
"""


def _sane(frames) -> None:
    for mol in frames:
        coords = np.asarray(mol.coords)
        assert coords.shape == (mol.n_atoms, 3) and mol.n_atoms >= 1
        assert np.isfinite(coords).all() and (np.abs(coords) <= MAX_COORDINATE * 1.0001).all()
        assert all(s in ELEMENTS for s in mol.symbols) and len(mol.ghost) == mol.n_atoms
        assert isinstance(mol.charge, int) and (mol.multiplicity is None or mol.multiplicity >= 1)


def _only_errors(fn, *args) -> None:
    try:
        frames = fn(*args)
    except (InputError, UsageError) as exc:
        assert "\n" not in exc.message
        return
    _sane(frames)


@st.composite
def mutated_sdf(draw):
    lines = SDF.splitlines()
    for _ in range(draw(st.integers(1, 4))):
        k = draw(st.integers(0, len(lines) - 1))
        how = draw(st.sampled_from(["token", "drop", "cut", "chars"]))
        if how == "token":
            parts = lines[k].split() or [""]
            parts[draw(st.integers(0, len(parts) - 1))] = draw(st.sampled_from(ODD))
            lines[k] = " ".join(parts)
        elif how == "drop":
            lines.pop(k)
        elif how == "cut":
            lines[k] = lines[k][: draw(st.integers(0, len(lines[k])))]
        else:
            lines[k] += draw(st.text(max_size=4))
        if not lines:
            lines = [""]
    return "\n".join(lines) + "\n"


@SETTINGS
@given(text=mutated_sdf())
def test_mutated_sdf(text):
    _only_errors(read_sdf, "m.sdf", text)


def _qc_doc() -> dict:
    mol = {
        "schema_name": "qcschema_molecule",
        "symbols": ["O", "H", "H"],
        "geometry": [0.0, 0.0, 0.22, 0.0, 1.43, -0.89, 0.0, -1.43, -0.89],
        "real": [True, True, False],
        "fragments": [[0], [1, 2]],
        "molecular_charge": 0,
        "molecular_multiplicity": 1,
    }
    shell = {"harmonic_type": "spherical", "angular_momentum": [0], "exponents": ["1.0"], "coefficients": [["1.0"]]}
    basis = {"center_data": {"A": {"electron_shells": [shell]}}, "atom_map": ["A", "A", "A"]}
    return {"schema_name": "qcschema_input", "molecule": mol, "model": {"method": "hf", "basis": basis}}


VALUES = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(-(10**20), 10**20),
    st.floats(allow_nan=False),
    st.text(max_size=6),
    st.sampled_from(ODD),
    st.lists(st.integers(-2, 5), max_size=4),
    st.lists(st.floats(allow_nan=False, allow_infinity=False), max_size=10),
)


def _paths(node, prefix=()):
    yield prefix
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _paths(v, (*prefix, k))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _paths(v, (*prefix, i))


@st.composite
def mutated_qcschema(draw):
    doc = _qc_doc()
    paths = [p for p in _paths(doc) if p]
    for _ in range(draw(st.integers(1, 3))):
        path = draw(st.sampled_from(paths))
        node = doc
        try:
            for key in path[:-1]:
                node = node[key]
            if draw(st.booleans()):
                node[path[-1]] = draw(VALUES)
            elif isinstance(node, dict):
                node.pop(path[-1], None)
        except (KeyError, IndexError, TypeError):
            pass
    try:
        text = json.dumps(doc, allow_nan=False) if draw(st.booleans()) else json.dumps(doc)
    except ValueError:  # a drawn NaN or infinity: strict JSON cannot hold it, so write the tokens
        text = json.dumps(doc)
    cut = draw(st.one_of(st.none(), st.integers(0, len(text))))
    return text if cut is None else text[:cut]


@SETTINGS
@given(text=mutated_qcschema())
def test_mutated_qcschema(text):
    _only_errors(read_qcschema, "q.json", text)


SHELLS = st.recursive(
    st.one_of(st.integers(-3, 9), st.floats(), st.text(max_size=3), st.booleans(), st.none()),
    lambda inner: st.lists(inner, max_size=5),
    max_leaves=25,
)


@SETTINGS
@given(shells=SHELLS)
def test_random_basis_data_gives_frozen_finite_shells_or_an_input_error(shells):
    try:
        frozen = check_shells(shells, "f")
    except InputError as exc:
        assert "\n" not in exc.message
        return
    for sh in frozen:
        prims = sh[2:] if len(sh) > 2 and isinstance(sh[1], int) else sh[1:]
        assert all(math.isfinite(x) for p in prims for x in p) and all(p[0] > 0 for p in prims)


def _h5_bytes(mol_text: str) -> bytes:
    import io

    import h5py

    buf = io.BytesIO()
    with h5py.File(buf, "w") as fh:
        fh["mol"] = mol_text
    return buf.getvalue()


ATOMS = st.lists(
    st.tuples(st.sampled_from(["H", "O", "GHOST-H", "X-O", "H1", "Xe", "X", "ghost", "Qq", "", "h2o"]), VALUES),
    min_size=0,
    max_size=4,
)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(atoms=ATOMS, basis=SHELLS, extra=st.dictionaries(st.sampled_from(["cart", "charge", "spin", "_atm"]), VALUES))
def test_random_checkpoint_molecules(atoms, basis, extra):
    doc = {"_atom": [[lab, xyz] for lab, xyz in atoms], "_basis": {"H": basis, "O": basis, "Xe": basis}, **extra}
    _only_errors(read_checkpoint, "r.chk", _h5_bytes(json.dumps(doc)))


@settings(max_examples=300, deadline=None)
@given(token=st.one_of(st.text(max_size=8), st.sampled_from(["X-H", "Gh(He)", "@C", "N:", "O-Bq", "ghost_Cl"])))
def test_atom_labels(token):
    try:
        symbol, ghost = atom_label(token, "f")
    except InputError as exc:
        assert "\n" not in exc.message
        return
    assert symbol in ELEMENTS and isinstance(ghost, bool)
