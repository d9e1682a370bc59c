"""Symmetry-aware pruning: equivalent atoms found within the stated tolerance, pruned alike,
and the pruned basis keeps the point group pyscf detects for the full basis."""

from __future__ import annotations

import ase.build
import numpy as np
import pytest
from pyscf import gto

import auditor
from auditor.inputs.geometry import molecule_from_atoms
from auditor.inputs.pruned import load_pruned_doc
from auditor.pipeline.run import make_spec, prepare, prune_prepared
from auditor.remedies.symmetry import SYMMETRY_TOLERANCE, find_symmetry, orbits, point_group
from helpers import make_molecule


def _orbits(name, kinds=None):
    a = ase.build.molecule(name)
    sym = find_symmetry(a.positions, kinds or a.get_chemical_symbols())
    return sym, orbits(sym, len(a))


@pytest.mark.parametrize(
    "name, sizes, group",
    [("CH4", [1, 4], "Td"), ("C6H6", [6, 6], "D6h"), ("NH3", [1, 3], "C3v"), ("C5H5N", [1, 1, 2, 2, 1, 2, 2], "C2v")],
)
def test_equivalent_atoms_and_point_group(name, sizes, group):
    # Reference: the textbook point groups of these molecules and their sets of equivalent atoms.
    sym, sets = _orbits(name)
    assert [len(s) for s in sets] == sizes
    a = ase.build.molecule(name)
    labels = a.get_chemical_symbols()
    assert point_group(labels, a.positions, {e: e for e in labels}, sym) == group


def test_tolerance_is_a_distance():
    a = ase.build.molecule("H2O")
    moved = a.positions.copy()
    moved[1, 2] += 0.5 * SYMMETRY_TOLERANCE
    assert find_symmetry(moved, a.get_chemical_symbols()).order == 2
    moved[1, 2] += 2 * SYMMETRY_TOLERANCE
    assert find_symmetry(moved, a.get_chemical_symbols()).order == 1


def test_ghost_and_real_atoms_are_different_kinds():
    # Two waters related by inversion; one of them ghost functions only: no operation may
    # swap a ghost atom with a real one.
    w = np.array([[0.0, 0.0, 1.5], [0.0, 0.75, 2.1], [0.0, -0.75, 2.1]])
    coords = np.vstack([w, -w])
    kinds = [("O", False), ("H", False), ("H", False), ("O", True), ("H", True), ("H", True)]
    sets = orbits(find_symmetry(coords, kinds), 6)
    assert sets == [[0], [1, 2], [3], [4, 5]]
    assert orbits(find_symmetry(coords, [k[0] for k in kinds]), 6) == [[0, 3], [1, 2, 4, 5]]


@pytest.fixture(scope="module")
def pyridine():
    return prepare(molecule_from_atoms(ase.build.molecule("C5H5N")), make_spec("aug-cc-pvtz"))


def test_pyridine_pruned_basis_keeps_c2v(pyridine):
    # Reference: pyscf's own detection on Moles built with symmetry=True from the full
    # basis and from the written pruned basis (its per-basis atom labels).
    _, plan = prune_prepared(pyridine, options=auditor.RemedyOptions(target=1e-5))
    assert plan.pruned["dropped_shells"]
    mol = pyridine.molecule
    full = gto.M(atom=list(zip(mol.symbols, mol.coords)), basis="aug-cc-pvtz", symmetry=True, verbose=0)
    pruned = load_pruned_doc(plan.pruned, symmetry=True)
    assert full.topgroup == "C2v" and pruned.topgroup == full.topgroup
    info = plan.symmetry
    assert info.point_group == "C2v" and info.pruned_point_group == "C2v" and info.keeps_point_group
    assert [3, 4] in info.equivalent_atoms
    S = pruned.intor_symmetric("int1e_ovlp")
    d = 1 / np.sqrt(np.diag(S))
    assert np.linalg.eigvalsh(S * d[:, None] * d[None, :])[0] >= 1e-5


def test_both_prunings_shown_when_symmetry_costs_functions(pyridine):
    # At 1e-3 the pruning that ignores symmetry keeps one more function but breaks C2v.
    r = auditor.audit_prepared(pyridine, remedies=auditor.RemedyOptions(target=1e-3)).as_dict()
    rem = r["remedies"]
    free, kept = rem["cholesky_shells_unconstrained"], rem["cholesky_shells"]
    assert free["kept"] > kept["kept"]
    sym = rem["symmetry"]
    assert sym["extra_functions_dropped"] == free["kept"] - kept["kept"]
    assert sym["pruned_point_group"] == "C2v" and sym["unconstrained_point_group"] != "C2v"
    kinds = {a["kind"] for a in rem["alternatives"]}
    assert {"cholesky_shells", "cholesky_shells_unconstrained"} <= kinds
    text = auditor.render_markdown(r)
    assert "ignoring symmetry" in text and f"costs {sym['extra_functions_dropped']} function" in text


def test_pruned_labels_share_a_label_per_basis():
    # Two hydrogens that lose the same shells share one label; pyscf then sees them as one kind.
    w = make_molecule(["O", "H", "H"], [[0.0, 0.0, 0.1173], [0.0, 0.7572, -0.4692], [0.0, -0.7572, -0.4692]])
    _, plan = prune_prepared(prepare(w, make_spec("aug-cc-pvdz")), options=auditor.RemedyOptions(target=0.2))
    labels = [a[0] for a in plan.pruned["atoms"]]
    assert labels[1] == labels[2]
