"""The readers of what chemists have: PDB, SDF/MOL, QCSchema, pyscf checkpoints, ghost atoms
written in the file; each compared with the XYZ route it must equal."""

from __future__ import annotations

import json

import numpy as np
import pytest

import auditor
from auditor.base.elements import BOHR_IN_ANGSTROM, atom_label
from auditor.base.errors import InputError, UsageError
from auditor.inputs.checkpoint import PYSCF_BOHR
from auditor.inputs.pruned import load_pruned_doc
from auditor.inputs.readers import read_geometry
from auditor.pipeline.run import make_spec, prepare
from helpers import WATER, write_xyz

# An acetate anion of our own (coordinates from a quick sketch, not a database entry)
ACETATE_SDF = """acetate
  sketch

  7  6  0  0  0  0  0  0  0  0999 V2000
    0.0000    0.0000    0.0000 C   0  0  0  0  0  0  0  0  0  0  0  0
    1.5200    0.0000    0.0000 C   0  0  0  0  0  0  0  0  0  0  0  0
    2.1500    1.0800    0.0000 O   0  0  0  0  0  0  0  0  0  0  0  0
    2.1500   -1.0800    0.0000 O   0  5  0  0  0  0  0  0  0  0  0  0
   -0.3600    1.0200    0.0000 H   0  0  0  0  0  0  0  0  0  0  0  0
   -0.3600   -0.5100    0.8800 H   0  0  0  0  0  0  0  0  0  0  0  0
   -0.3600   -0.5100   -0.8800 H   0  0  0  0  0  0  0  0  0  0  0  0
  1  2  1  0
  2  3  2  0
  2  4  1  0
  1  5  1  0
  1  6  1  0
  1  7  1  0
M  CHG  1   4  -1
M  END
$$$$
"""

WATER_PDB = """HEADER    WATER OF OUR OWN
HETATM    1  O   HOH A   1       0.000   0.000   0.117  1.00  0.00           O
HETATM    2  H1  HOH A   1       0.000   0.757  -0.469  1.00  0.00           H
HETATM    3  H2  HOH A   1       0.000  -0.757  -0.469  1.00  0.00           H
END
"""


def _smallest(path, basis="sto-3g", **kw):
    return auditor.audit(path, basis, remedies=False, **kw).spectrum


def test_pdb_reads_like_the_same_xyz(tmp_path):
    (tmp_path / "w.pdb").write_text(WATER_PDB)
    xyz = write_xyz(tmp_path / "w.xyz", WATER[0], [[0, 0, 0.117], [0, 0.757, -0.469], [0, -0.757, -0.469]])
    (mol,) = read_geometry(tmp_path / "w.pdb")
    assert mol.symbols == ("O", "H", "H")
    assert np.allclose(mol.coords, read_geometry(xyz)[0].coords)
    assert _smallest(tmp_path / "w.pdb").eigenvalues == _smallest(xyz).eigenvalues


def test_sdf_atoms_charge_and_records(tmp_path):
    (tmp_path / "a.sdf").write_text(ACETATE_SDF + ACETATE_SDF.replace("acetate", "again"))
    frames = read_geometry(tmp_path / "a.sdf")
    assert len(frames) == 2 and frames[1].frame == 1 and frames[0].comment == "acetate"
    mol = frames[0]
    assert mol.symbols == ("C", "C", "O", "O", "H", "H", "H") and mol.charge == -1
    assert mol.coords[3].tolist() == [2.15, -1.08, 0.0]
    (tmp_path / "a.mol").write_text(ACETATE_SDF.replace("M  CHG  1   4  -1\n", ""))
    (plain,) = read_geometry(tmp_path / "a.mol")
    assert plain.charge == -1  # from the atom block's charge code 5
    r = auditor.audit(tmp_path / "a.mol", "sto-3g", remedies=False)
    assert r.input.charge == -1 and r.input.n_atoms == 7


@pytest.mark.parametrize("label", ["X-H", "x_H", "ghost-H", "GHOST_H", "Gh(H)", "gh(h)", "@H", "H:", "H-Bq"])
def test_ghost_spellings(label):
    assert atom_label(label, "f") == ("H", True)


@pytest.mark.parametrize("label", ["X", "Bq", "Gh", "XH"])
def test_dummy_atoms_without_element_are_refused(label):
    with pytest.raises(InputError):
        atom_label(label, "f")


def test_xenon_is_not_a_ghost():
    assert atom_label("Xe", "f") == ("Xe", False) and atom_label("XE", "f") == ("Xe", False)


def test_ghosts_written_in_the_file_equal_the_ghost_option(tmp_path):
    coords = WATER[1] + [[2.8, 0.0, 0.1], [3.3, 0.6, 0.1]]
    plain = write_xyz(tmp_path / "p.xyz", ["O", "H", "H", "H", "H"], coords)
    marked = write_xyz(tmp_path / "m.xyz", ["O", "H", "H", "Gh(H)", "X-H"], coords)
    ext = tmp_path / "e.extxyz"
    lines = ["5", 'Properties=species:S:1:pos:R:3:ghost:L:1 pbc="F F F"']
    lines += [f"{s} {x} {y} {z} {'T' if i >= 3 else 'F'}" for i, (s, (x, y, z)) in enumerate(zip("OHHHH", coords))]
    ext.write_text("\n".join(lines) + "\n")
    ext2 = tmp_path / "e2.extxyz"
    ext2.write_text(marked.read_text().replace("\n\n", '\nProperties=species:S:1:pos:R:3 pbc="F F F"\n', 1))
    want = auditor.audit(plain, "aug-cc-pvdz", ghost="4-5", remedies=False)
    for path in (marked, ext, ext2):
        got = auditor.audit(path, "aug-cc-pvdz", remedies=False)
        assert got.input.ghost_atoms == (4, 5)
        assert got.spectrum.eigenvalues == want.spectrum.eigenvalues
        assert got.verdict == want.verdict and got.input.multiplicity == want.input.multiplicity
    # written in the file and --ghost together: the union
    both = auditor.load_molecules(marked, ghost="2")
    assert both[0].ghost == (False, True, False, True, True)
    with pytest.raises(UsageError, match="no real atom"):
        auditor.load_molecules(marked, ghost="1-3")


def _qcschema_input(basis, real=None, fragments=None):
    bohr = (np.asarray(WATER[1] + [[2.8, 0.0, 0.1]]) / BOHR_IN_ANGSTROM).ravel().tolist()
    mol = {"schema_name": "qcschema_molecule", "schema_version": 2, "symbols": ["O", "H", "H", "He"], "geometry": bohr}
    if real is not None:
        mol["real"] = real
    if fragments is not None:
        mol["fragments"] = fragments
    mol["molecular_charge"] = 0
    mol["molecular_multiplicity"] = 1
    return {
        "schema_name": "qcschema_input",
        "schema_version": 1,
        "molecule": mol,
        "driver": "energy",
        "model": {"method": "hf", "basis": basis},
    }


def test_qcschema_input_equals_xyz_with_basis_and_ghost(tmp_path):
    doc = _qcschema_input("cc-pvdz", real=[True, True, True, False])
    (tmp_path / "in.json").write_text(json.dumps(doc))
    # the same atoms in ångström as pyscf converts them (its own bohr), every digit written
    angstrom = np.asarray(doc["molecule"]["geometry"]).reshape(-1, 3) * PYSCF_BOHR
    rows = [f"{s} {x!r} {y!r} {z!r}" for s, (x, y, z) in zip(["O", "H", "H", "He"], angstrom.tolist())]
    xyz = tmp_path / "in.xyz"
    xyz.write_text("4\n\n" + "\n".join(rows) + "\n")
    got = auditor.audit(tmp_path / "in.json", remedies=False)  # the document's basis
    want = auditor.audit(xyz, "cc-pvdz", ghost="4", remedies=False)
    assert got.input.ghost_atoms == (4,) and got.input.basis_data["from"] == "QCSchema document"
    assert np.allclose(got.spectrum.eigenvalues, want.spectrum.eigenvalues, rtol=0, atol=1e-13)
    assert got.verdict == want.verdict
    assert auditor.audit(tmp_path / "in.json", "sto-3g", remedies=False).input.basis.startswith("sto-3g")


def test_qcschema_basis_object_is_used_as_it_is(tmp_path):
    from pyscf.gto import basis as pbasis

    def center(el):
        shells = []
        for sh in pbasis.load("cc-pvdz", el):
            exps = [p[0] for p in sh[1:]]
            rows = [[p[k] for p in sh[1:]] for k in range(1, len(sh[1]))]
            shells.append({"harmonic_type": "spherical", "angular_momentum": [sh[0]], "exponents": exps,
                           "coefficients": rows})  # fmt: skip
        return {"electron_shells": shells}

    basis = {
        "schema_name": "qcschema_basis",
        "name": "my-cc-pvdz",
        "center_data": {"O": center("O"), "H": center("H"), "He": center("He")},
        "atom_map": ["O", "H", "H", "He"],
    }
    (tmp_path / "b.json").write_text(json.dumps(_qcschema_input(basis, real=[True, True, True, False])))
    got = auditor.audit(tmp_path / "b.json", remedies=False)
    assert got.input.basis_data["from"] == "QCSchema document"
    assert {e["source"] for e in got.input.basis_data["elements"]} == {"QCSchema document"}
    (tmp_path / "n.json").write_text(json.dumps(_qcschema_input("cc-pvdz", real=[True, True, True, False])))
    want = auditor.audit(tmp_path / "n.json", remedies=False)
    assert np.allclose(got.spectrum.eigenvalues, want.spectrum.eigenvalues, rtol=0, atol=1e-12)
    with pytest.raises(UsageError, match="basis data"):
        auditor.audit(tmp_path / "b.json", cartesian=True, remedies=False)


def test_qcschema_fragments_are_read(tmp_path):
    (tmp_path / "f.json").write_text(json.dumps(_qcschema_input("sto-3g", fragments=[[0, 1, 2], [3]])))
    (mol,) = read_geometry(tmp_path / "f.json")
    assert mol.fragments == ((0, 1, 2), (3,))
    bare = _qcschema_input("sto-3g")["molecule"]
    del bare["schema_name"]
    (tmp_path / "bare.json").write_text(json.dumps(bare))
    assert read_geometry(tmp_path / "bare.json", input_format="qcschema")[0].symbols == ("O", "H", "H", "He")


def test_checkpoint_of_a_real_run_gives_its_exact_overlap(tmp_path):
    """RHF in pyscf with chkfile=, a ghost atom, a per-element basis (and one atom with a
    label of its own), Cartesian: the audit's S is the run's S, bit for bit."""
    from pyscf import gto, scf

    mol = gto.M(
        atom="O 0 0 0.1173; H 0 0.7572 -0.4692; H1 0 -0.7572 -0.4692; ghost-He 0 0 2.6",
        basis={"O": "cc-pvdz", "H": "sto-3g", "H1": "6-31g", "GHOST-He": "cc-pvdz"},
        cart=True,
        verbose=0,
    )
    mf = scf.RHF(mol)
    mf.chkfile = str(tmp_path / "run.chk")
    mf.max_cycle = 3
    mf.kernel()
    (m,) = read_geometry(tmp_path / "run.chk")
    assert m.ghost == (False, False, False, True) and m.charge == 0 and m.multiplicity == 1
    prep = prepare(m, make_spec(None))
    assert prep.spec.cartesian and prep.mole.nao == mol.nao
    assert np.array_equal(prep.mole.intor("int1e_ovlp"), mol.intor("int1e_ovlp"))
    r = auditor.audit(tmp_path / "run.chk", remedies=False)
    S = mol.intor("int1e_ovlp")
    d = 1 / np.sqrt(np.diag(S))
    assert np.allclose(r.spectrum.eigenvalues, np.linalg.eigvalsh(S * d[:, None] * d[None, :]), rtol=0, atol=1e-14)
    assert r.input.basis_data["from"] == "checkpoint" and r.input.ghost_atoms == (4,)
    assert all(len(e["sha256"]) == 64 for e in r.input.basis_data["elements"])


def test_checkpoint_charge_and_spin(tmp_path):
    from pyscf import gto, lib

    mol = gto.M(atom="O 0 0 0; H 0 0 0.97", basis="sto-3g", charge=0, spin=1, verbose=0)
    lib.chkfile.save_mol(mol, str(tmp_path / "oh.chk"))
    (m,) = read_geometry(tmp_path / "oh.chk")
    assert (m.charge, m.multiplicity) == (0, 2)
    assert auditor.audit(tmp_path / "oh.chk", remedies=False).input.basis.startswith("sto-3g")


def test_no_basis_anywhere_is_a_usage_error(tmp_path):
    xyz = write_xyz(tmp_path / "w.xyz", *WATER)
    with pytest.raises(UsageError, match="no basis"):
        auditor.audit(xyz, remedies=False)


def test_gate_items_carry_their_own_basis_and_ghosts(tmp_path, monkeypatch):
    from pyscf import gto, lib
    from typer.testing import CliRunner

    from auditor.cli import app

    monkeypatch.chdir(tmp_path)
    atom = "O 0 0 0.1173; H 0 0.7572 -0.4692; ghost-H 0 -0.7572 -0.4692"
    mol = gto.M(atom=atom, basis="6-31g", spin=1, verbose=0)
    lib.chkfile.save_mol(mol, "run.chk")
    write_xyz(tmp_path / "w.xyz", ["O", "H", "Gh(H)"], WATER[1], comment="multiplicity=2")
    res = CliRunner().invoke(app, ["gate", "run.chk", "w.xyz", "-o", "g", "--no-cache", "-j", "1"])
    assert res.exit_code == 1  # w.xyz has no basis
    assert "w.xyz: no basis" in res.output
    chk = json.loads((tmp_path / "g" / "items" / "run.json").read_text())
    assert chk["input"]["basis_data"]["from"] == "checkpoint" and chk["input"]["ghost_atoms"] == [3]
    res = CliRunner().invoke(app, ["gate", "run.chk", "w.xyz", "-b", "6-31g", "-o", "h", "--no-cache", "-j", "1"])
    assert res.exit_code == 0, res.output
    items = {p.stem: json.loads(p.read_text()) for p in (tmp_path / "h" / "items").glob("*.json")}
    assert items["w"]["input"]["ghost_atoms"] == [3]
    assert items["w"]["spectrum"]["eigenvalues"] == items["run"]["spectrum"]["eigenvalues"]


def test_prune_of_a_checkpoint_keeps_each_atoms_own_basis(tmp_path):
    """Two hydrogens with different bases (per-label basis data): the pruned basis gives each its own."""
    from pyscf import gto, lib

    atom = "O 0 0 0.1173; H 0 0.7572 -0.4692; H1 0 -0.7572 -0.4692"
    mol = gto.M(atom=atom, basis={"O": "cc-pvdz", "H": "sto-3g", "H1": "6-31g"}, verbose=0)
    lib.chkfile.save_mol(mol, str(tmp_path / "run.chk"))
    prep = prepare(read_geometry(tmp_path / "run.chk")[0], make_spec(None))
    result, plan = auditor.prune_prepared(prep, options=auditor.RemedyOptions(target=0.05))
    doc = plan.pruned
    assert doc is not None and load_pruned_doc(doc).nao == doc["n_functions"]
    labels = [a[0] for a in doc["atoms"]]
    assert labels[1] != labels[2]  # H and H1 of the run keep their own shells
