"""Verdicts and reasons a chemist and a CI gate can act on: a broken geometry is called broken,
everywhere with the same reason, before any basis advice."""

import json
import re

import pytest
from typer.testing import CliRunner

import auditor
from auditor.cli import app
from helpers import WATER, make_molecule, write_xyz

runner = CliRunner()

# water with a fourth H 0.08 Å from H2: no bond is that short
STRAY_H = (WATER[0] + ["H"], WATER[1] + [[0.0, 0.7572 + 0.08, -0.4692]])
# water with H2 pasted twice (0.002 Å apart): coincident atoms
PASTED = (WATER[0] + ["H"], WATER[1] + [[0.0, 0.7572, -0.4692 + 0.002]])


def _check(*args):
    return runner.invoke(app, ["check", *map(str, args)])


def _gate(*args):
    return runner.invoke(app, ["gate", *map(str, args)])


def test_stray_hydrogen_fails_everywhere(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    xyz = write_xyz(tmp_path / "stray.xyz", *STRAY_H)
    res = _check(xyz, "-b", "cc-pvdz", "-o", "out", "-f", "all")
    assert res.exit_code == 1, res.output
    report = json.loads((tmp_path / "out" / "stray.json").read_text())
    assert report["verdict"] == "fail" and report["verdict_finding"] == "impossible_contact"
    assert "impossible_contact" in {f["kind"] for f in report["findings"]}
    # the finding is on the terminal, and the HTML banner is not green
    assert "0.080 Å apart" in res.output
    html = (tmp_path / "out" / "stray.html").read_text()
    assert 'class="verdict v-fail"' in html and "v-pass" not in html.split('id="verdict"')[0][-200:]
    # the gate fails it with a JUnit failure that gives the same reason
    res = _gate("stray.xyz", "-b", "cc-pvdz", "-o", "gate", "--no-cache", "-j", "1")
    assert res.exit_code == 1
    junit = (tmp_path / "gate" / "junit.xml").read_text()
    assert "<failure" in junit and report["verdict_reason"] in junit


def test_scan_frame_with_a_too_short_bond_fails():
    # an N-H of 0.47 Å (46 % of the covalent-radius sum) in one frame of a scan
    r = auditor.audit(make_molecule(["N", "H"], [[0, 0, 0], [0, 0, 0.47]]), "cc-pvdz", remedies=False)
    assert r.verdict == "fail" and r.verdict_finding == "impossible_contact"


def test_pasted_atom_is_named_by_every_output_and_no_threshold_is_advised(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    write_xyz(tmp_path / "pasted.xyz", *PASTED)
    res = _check("pasted.xyz", "-b", "aug-cc-pvdz", "-o", "out", "-f", "json")
    assert res.exit_code == 1
    report = json.loads((tmp_path / "out" / "pasted.json").read_text())
    assert report["verdict_finding"] == "coincident_atoms"
    assert "H2 and H4 sit" in report["verdict_reason"]
    assert report["recommendation"]["threshold"] is None
    assert "fix the geometry" in report["recommendation"]["reason"]
    assert report["verdict_reason"] in " ".join(res.output.split())
    res = _gate("pasted.xyz", "-b", "aug-cc-pvdz", "-o", "gate", "--no-cache", "-j", "1")
    import pandas as pd

    row = pd.read_csv(tmp_path / "gate" / "summary.csv").iloc[0]
    assert row["reason"] == report["verdict_reason"]
    assert pd.isna(row["threshold"])
    junit = (tmp_path / "gate" / "junit.xml").read_text()
    assert re.search(r'<failure message="H2 and H4 sit', junit)


def test_all_ghost_input_is_a_usage_error(tmp_path):
    xyz = write_xyz(tmp_path / "w.xyz", *WATER)
    res = _check(xyz, "-b", "cc-pvdz", "--ghost", "1-3", "-o", tmp_path / "out")
    assert res.exit_code == 2
    assert "no real atom" in res.output
    with pytest.raises(auditor.UsageError, match="ghost="):
        auditor.audit(xyz, "cc-pvdz", ghost="1-3")


def test_doublet_for_an_even_electron_count_earns_a_caution(tmp_path):
    xyz = write_xyz(tmp_path / "w.xyz", *WATER, comment="charge=0 multiplicity=2")
    r = auditor.audit(xyz, "cc-pvdz", remedies=False)
    assert r.verdict == "caution" and r.verdict_finding == "spin_parity"
    assert "10 electrons" in r.verdict_reason and "multiplicity 2" in r.verdict_reason


def test_check_takes_folders_globs_and_lists_like_gate(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "set" / "sub").mkdir(parents=True)
    write_xyz(tmp_path / "set" / "a.xyz", *WATER)
    write_xyz(tmp_path / "set" / "sub" / "a.xyz", *WATER)
    res = _check("set", "-b", "sto-3g", "-o", "out", "-f", "json")
    assert res.exit_code == 0, res.output
    assert len(list((tmp_path / "out").glob("*.json"))) == 2
    # two inputs with the same file name are told apart on the terminal
    assert "set/a.xyz" in res.output and "sub/a.xyz" in res.output


def test_advice_says_when_it_equals_the_library_default():
    from ase.build import molecule

    r = auditor.audit(molecule("H2O"), "aug-cc-pvtz", remedies=False)
    rec = r.recommendation
    assert rec.threshold == 1e-6
    assert rec.library_default == 1e-6 and rec.same_as_library_default
    assert "changes nothing" in rec.versus_library


def test_version_option():
    res = runner.invoke(app, ["--version"])
    assert res.exit_code == 0 and auditor.__version__ in res.output
