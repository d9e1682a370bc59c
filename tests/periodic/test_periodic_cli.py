"""Periodic inputs through the command line: a diamond CIF of our own fails in aug-cc-pVDZ and
prune's exponent cutoff makes every k-point meet 1e-5 (pyscf.pbc loads the result); a slab in
extended XYZ with its vacuum axis first is reordered; gate audits periodic items; --kmesh on a
molecule is a usage error. Every JSON document is checked against its schema."""

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from auditor.cli import app
from auditor.inputs.cell import has_cell, read_cells
from auditor.report import schemas
from helpers import WATER, write_xyz

jsonschema = pytest.importorskip("jsonschema")

# diamond, primitive fcc cell (a = 3.567 Å), written as a CIF
DIAMOND_CIF = """data_diamond
_symmetry_space_group_name_H-M 'P 1'
_cell_length_a 2.52225
_cell_length_b 2.52225
_cell_length_c 2.52225
_cell_angle_alpha 60
_cell_angle_beta 60
_cell_angle_gamma 60
loop_
_atom_site_label
_atom_site_type_symbol
_atom_site_fract_x
_atom_site_fract_y
_atom_site_fract_z
C1 C 0.00 0.00 0.00
C2 C 0.25 0.25 0.25
"""

# an H2 layer periodic in x and z, vacuum along y (the file's second axis)
SLAB = """2
Lattice="2.5 0.0 0.0 0.0 15.0 0.0 0.0 0.0 2.7" Properties=species:S:1:pos:R:3 pbc="T F T"
H 0.0 7.0 0.0
H 0.0 7.74 0.0
"""


def run(*args):
    return CliRunner().invoke(app, [str(a) for a in args])


def test_diamond_fails_in_aug_cc_pvdz_and_the_cutoff_fixes_every_k_point(tmp_path):
    cif = tmp_path / "diamond.cif"
    cif.write_text(DIAMOND_CIF)
    res = run("check", cif, "-b", "aug-cc-pvdz", "--kmesh", "2,2,2", "-o", tmp_path / "out", "-f", "all")
    assert res.exit_code == 1, res.output
    doc = json.loads((tmp_path / "out" / "diamond.json").read_text())
    schemas.validate(doc, "report")
    assert doc["verdict"] == "fail" and doc["spectrum"]["method"] == "periodic"
    part = doc["periodic"]
    assert part["kmesh"] == [2, 2, 2] and part["n_kpoints"] == 8 and part["worst"]["k"] == 1
    assert (tmp_path / "out" / "diamond_kpoints.png").stat().st_size > 1000
    assert "S(k) on the k-point mesh" in (tmp_path / "out" / "diamond.md").read_text()
    assert 'id="periodic"' in (tmp_path / "out" / "diamond.html").read_text()

    res = run("prune", cif, "-b", "aug-cc-pvdz", "--kmesh", "2,2,2", "-o", tmp_path / "pr", "-q")
    assert res.exit_code == 0, res.output
    d = json.loads((tmp_path / "pr" / "diamond.pruned.json").read_text())
    schemas.validate(d, "periodic-basis")
    assert d["remedy"] == "exponent_cutoff" and d["smallest_eigenvalue"] >= 1e-5
    from pyscf.pbc import gto

    cell = gto.M(atom=d["atoms"], a=d["lattice"], basis=d["basis"], unit="Angstrom", verbose=0, precision=1e-12)
    S = np.asarray(cell.pbc_intor("int1e_ovlp", hermi=1, kpts=cell.make_kpts(d["kmesh"])))
    assert cell.nao == d["n_functions"] < d["n_functions_full"]
    assert min(np.linalg.eigvalsh(s)[0] for s in S) >= 1e-5
    schemas.validate(json.loads((tmp_path / "pr" / "diamond.shells.json").read_text()), "periodic-basis")


def test_slab_axes_are_reordered_and_the_vacuum_axis_takes_one_k_point(tmp_path):
    f = tmp_path / "slab.xyz"
    f.write_text(SLAB)
    assert has_cell(f)
    (c,) = read_cells(f)
    assert c.dimension == 2 and c.pbc == (True, True, False) and c.axis_order == (0, 2, 1)
    assert np.linalg.det(c.lattice) > 0 and np.allclose(np.abs(c.lattice[2]), [0, 15, 0])
    res = run("check", f, "-b", "sto-3g", "--kmesh", "2,3,2", "-o", tmp_path / "out", "-f", "json")
    assert res.exit_code == 2 and "non-periodic" in res.output
    res = run("check", f, "-b", "cc-pvdz", "--kmesh", "2,1,2", "-o", tmp_path / "out", "-f", "json")
    assert res.exit_code in (0, 1), res.output
    doc = json.loads((tmp_path / "out" / "slab.json").read_text())
    schemas.validate(doc, "report")
    assert doc["periodic"]["dimension"] == 2 and doc["periodic"]["kmesh"] == [2, 1, 2]
    assert doc["periodic"]["axis_order"] == [1, 3, 2] and doc["periodic"]["n_kpoints"] == 4


def test_kmesh_on_a_molecule_is_a_usage_error(tmp_path):
    f = write_xyz(tmp_path / "water.xyz", *WATER)
    assert not has_cell(f)
    res = run("check", f, "-b", "sto-3g", "--kmesh", "2,2,2", "-o", tmp_path / "out")
    assert res.exit_code == 2 and "periodic inputs" in res.output
    res = run("prune", f, "-b", "sto-3g", "--kmesh", "2,2,2", "-o", tmp_path / "pr")
    assert res.exit_code == 2


def test_gate_audits_periodic_items_and_keys_them_by_lattice_and_mesh(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "diamond.cif").write_text(DIAMOND_CIF)
    stretched = DIAMOND_CIF.replace("2.52225", "2.60000")
    (tmp_path / "wide.cif").write_text(stretched)
    args = ["gate", "diamond.cif", "wide.cif", "-b", "sto-3g", "--kmesh", "2,2,2", "-j", "1"]
    res = run(*args, "-o", "g1", "--cache-dir", "cache")
    assert res.exit_code == 0, res.output
    docs = {p.stem: json.loads(p.read_text()) for p in (tmp_path / "g1" / "items").glob("*.json")}
    for doc in docs.values():
        schemas.validate(doc, "report")
    assert docs["diamond"]["spectrum"]["smallest"] != docs["wide"]["spectrum"]["smallest"]
    res = run(*args, "-o", "g2", "--cache-dir", "cache")
    assert "0 audited, 2 from the cache" in res.output
    res = run("gate", "diamond.cif", "-b", "sto-3g", "--kmesh", "1,1,2", "-j", "1", "-o", "g3", "--cache-dir", "cache")
    assert "1 audited" in res.output  # another mesh, another key
