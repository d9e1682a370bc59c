"""Copies of "the same" basis differ: the report names the copy it used and a digest of the shells."""

import numpy as np
import pytest
from ase.build import molecule
from typer.testing import CliRunner

import auditor
from auditor.cli import app
from auditor.inputs.basis import BasisSpec, load_shells, thaw

bse = pytest.importorskip("basis_set_exchange")


def test_source_and_digest_are_reported_and_change_with_the_copy():
    lih = molecule("LiH")
    a = auditor.audit(lih, "aug-cc-pvtz", remedies=False)
    b = auditor.audit(lih, make_spec_bse("aug-cc-pvtz"), remedies=False)
    da, db = a.input.basis_data, b.input.basis_data
    assert {r["source"] for r in da["elements"]} == {"pyscf"}
    assert {r["source"] for r in db["elements"]} == {"basis_set_exchange"}
    assert da["digest"] != db["digest"]
    li_a = next(r for r in da["elements"] if r["element"] == "Li")
    li_b = next(r for r in db["elements"] if r["element"] == "Li")
    assert li_a["digest"] != li_b["digest"]  # pyscf's copy contracts Li's s shells differently
    assert "basis_set_exchange" in b.input.basis
    # the two copies really give different spectra (the reason to record the copy)
    assert a.spectrum.smallest / b.spectrum.smallest > 1.5  # 1.68 measured (pyscf 2.14, basis_set_exchange 0.12)


def test_exchange_copy_has_basis_set_exchange_exponents_and_coefficients():
    # reference: basis_set_exchange's own data for C in cc-pVDZ, read here independently
    data = bse.get_basis("cc-pvdz", elements=["C"])["elements"]["6"]["electron_shells"]
    ref = sorted((l, float(e)) for sh in data for l in sh["angular_momentum"] for e in sh["exponents"])
    shells = thaw(load_shells("cc-pvdz", "C", "bse"))
    got = sorted((sh[0], p[0]) for sh in shells for p in sh[1:])
    assert got == ref


def test_both_copies_of_a_name_pyscf_lacks_give_the_same_spectrum():
    # pyscf has no d-aug-cc-pVTZ of its own and asks basis_set_exchange; its conversion orders
    # the contractions of a general shell differently, which must not change the spectrum
    water = molecule("H2O")
    a = auditor.audit(water, "d-aug-cc-pvtz", remedies=False)
    b = auditor.audit(water, make_spec_bse("d-aug-cc-pvtz"), remedies=False)
    assert np.allclose(a.spectrum.eigenvalues, b.spectrum.eigenvalues, rtol=1e-9, atol=1e-14)
    assert a.input.basis_data["elements"][0]["source"] == "basis_set_exchange (pyscf's fallback)"


def test_file_source_records_its_sha256(tmp_path):
    import hashlib

    f = tmp_path / "h.nw"
    f.write_text("H S\n  3.42525091 0.15432897\n  0.62391373 0.53532814\n  0.16885540 0.44463454\n")
    r = auditor.audit(molecule("H2"), str(f), remedies=False)
    rec = r.input.basis_data["elements"][0]
    assert rec["source"] == "file" and rec["sha256"] == hashlib.sha256(f.read_bytes()).hexdigest()


def test_command_line_option(tmp_path):
    from helpers import WATER, write_xyz

    xyz = write_xyz(tmp_path / "w.xyz", *WATER)
    res = CliRunner().invoke(app, ["check", str(xyz), "-b", "cc-pvdz", "--basis-source", "bse", "-o", str(tmp_path)])
    assert res.exit_code == 0, res.output
    res = CliRunner().invoke(app, ["check", str(xyz), "-b", "cc-pvdz", "--basis-source", "nist", "-o", str(tmp_path)])
    assert res.exit_code == 2 and "basis source" in res.output


def make_spec_bse(name: str) -> BasisSpec:
    return BasisSpec(name, {}, False, "bse")
