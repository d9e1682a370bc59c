"""The pruned basis in other programs' formats: every file written through
basis_set_exchange's writers reads back (basis_set_exchange's readers, pyscf's NWChem parser
with its eval switch off) to the exponents and coefficients of the pruned-basis document."""

from __future__ import annotations

import json

import ase.build
import numpy as np
import pytest
from basis_set_exchange import readers
from typer.testing import CliRunner

import auditor
from auditor.cli import app
from auditor.inputs.basis import load_shells, thaw
from auditor.inputs.geometry import molecule_from_atoms
from auditor.pipeline.run import make_spec, prepare, prune_prepared
from auditor.remedies.export import export_texts
from helpers import WATER, write_xyz

READERS = {
    "nwchem": "nwchem",
    "gaussian94": "gaussian94",
    "molpro": "molpro",
    "turbomole": "turbomole",
    "cfour": "genbas",
}


def _columns(entries):
    """pyscf-format shells -> sorted (l, exponents, coefficients) with zero coefficients dropped."""
    out = []
    for e in entries:
        l, prims = e[0], e[1:]
        for c in range(len(prims[0]) - 1):
            kept = [(p[0], p[1 + c]) for p in prims if p[1 + c] != 0.0]
            out.append((l, tuple(x for x, _ in kept), tuple(y for _, y in kept)))
    return sorted(out)


def _from_bse(block):
    out = []
    for sh in block["electron_shells"]:
        exps = [float(x) for x in sh["exponents"]]
        for l, col in zip(sh["angular_momentum"] * len(sh["coefficients"]), sh["coefficients"]):
            out.append([l, *[[e, float(c)] for e, c in zip(exps, col)]])
    return _columns(out)


def _same(a, b):
    assert len(a) == len(b)
    for (la, ea, ca), (lb, eb, cb) in zip(a, b):
        assert la == lb
        assert np.allclose(ea, eb, rtol=1e-12, atol=0) and np.allclose(ca, cb, rtol=1e-12, atol=0)


@pytest.fixture(scope="module")
def water_export(tmp_path_factory):
    out = tmp_path_factory.mktemp("export")
    path = write_xyz(out / "water.xyz", *WATER)
    res = CliRunner().invoke(app, ["prune", str(path), "-b", "aug-cc-pvdz", "--target", "1e-2", "-o", str(out), "-q"])
    assert res.exit_code == 0, res.output
    return out, json.loads((out / "water.pruned.json").read_text())


@pytest.mark.parametrize(
    "fmt, ext", [("nwchem", "nw"), ("gaussian94", "gbs"), ("molpro", "mpro"), ("turbomole", "tm"), ("cfour", "c4bas")]
)
def test_exported_files_read_back_to_the_document(water_export, fmt, ext):
    out, doc = water_export
    assert doc["dropped_shells"]
    text = (out / f"water.pruned.{fmt}.{ext}").read_text()
    read = readers.read_formatted_basis_str(text, READERS[fmt])["elements"]
    labels = {a[0].rstrip("0123456789"): a[0] for a in doc["atoms"]}  # one set per element here
    for el, z in (("O", "8"), ("H", "1")):
        _same(_from_bse(read[z]), _columns(doc["basis"][labels[el]]))


def test_nwchem_file_also_reads_with_pyscf_with_eval_off(water_export):
    out, doc = water_export
    path = str(out / "water.pruned.nwchem.nw")
    labels = {a[0].rstrip("0123456789"): a[0] for a in doc["atoms"]}
    for el in ("O", "H"):
        _same(_columns(thaw(load_shells(path, el))), _columns(doc["basis"][labels[el]]))
    assert "read back" in (out / "water.prune.md").read_text()


def test_per_atom_sets_go_only_where_the_format_names_atoms():
    # pyridine at 1e-5: some atoms of one element keep fewer shells than the others
    prep = prepare(molecule_from_atoms(ase.build.molecule("C5H5N")), make_spec("aug-cc-pvtz"))
    _, plan = prune_prepared(prep, options=auditor.RemedyOptions(target=1e-5))
    doc = plan.pruned
    labels = [label for label, _ in doc["atoms"]]
    atoms_of: dict[str, list[int]] = {}
    for i, label in enumerate(labels, 1):
        atoms_of.setdefault(label, []).append(i)
    assert len(atoms_of) > len({label.rstrip("0123456789") for label in labels})  # some element has two sets
    records = {r.format: (r, t) for r, t in export_texts(doc, ["nwchem", "gaussian94", "orca", "molpro"])}
    assert not records["orca"][0].written and "names elements, not atoms" in records["orca"][0].note
    assert not records["molpro"][0].written
    # Gaussian: one block per set of atoms, headed by their numbers; each block reads back
    g94 = records["gaussian94"][1]
    heads = {line.strip() for line in g94.splitlines() if line.strip().endswith(" 0")}
    expected = {" ".join(map(str, atoms)) + " 0": label for label, atoms in atoms_of.items()}
    assert heads == set(expected)
    blocks = g94.split("****")
    for head, label in expected.items():
        block = next(b for b in blocks if f"\n{head}\n" in f"\n{b.strip()}\n").replace(head, "H     0", 1)
        read = readers.read_formatted_basis_str(block + "\n****\n", "gaussian94")["elements"]["1"]
        _same(_from_bse(read), _columns(doc["basis"][label]))
    # NWChem: the tag of each set
    nw = records["nwchem"][1]
    tagged = [line.split()[0] for line in nw.splitlines() if len(line.split()) == 2 and line.split()[1] in "SPDF"]
    assert set(atoms_of) == set(tagged)
    assert records["nwchem"][0].checked == records["gaussian94"][0].checked == "same exponents and coefficients"


def test_check_writes_x_when_asked(tmp_path):
    # Reference: X^T S X = 1 with S from pyscf for the same geometry and basis.
    path = write_xyz(tmp_path / "water.xyz", *WATER)
    res = CliRunner().invoke(
        app, ["check", str(path), "-b", "aug-cc-pvdz", "-o", str(tmp_path), "-f", "json", "--write-x", "-q"]
    )
    assert res.exit_code == 0, res.output
    X = np.load(tmp_path / "water.X.npy")
    S = prepare(
        auditor.Molecule(tuple(WATER[0]), np.array(WATER[1]), (False,) * 3), make_spec("aug-cc-pvdz")
    ).mole.intor("int1e_ovlp")
    assert np.allclose(X.T @ S @ X, np.eye(X.shape[1]), atol=1e-8)
    doc = json.loads((tmp_path / "water.json").read_text())
    assert X.shape == (doc["input"]["n_functions"], doc["input"]["n_functions"] - doc["recommendation"]["n_removed"])
