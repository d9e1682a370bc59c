"""Hostile input: nothing in a file runs as code, and no file of the user's is lost."""

import json
import os
import subprocess
import sys

import pytest
from typer.testing import CliRunner

import auditor
from auditor.base.errors import InputError
from auditor.cli import app
from helpers import WATER, write_xyz

runner = CliRunner()


def _evil_basis(path, canary):
    # pyscf's NWChem parser evaluates a data line that is not a plain number unless its
    # DISABLE_EVAL switch is on: this line would create the canary file
    path.write_text(
        'BASIS "ao basis" PRINT\n'
        "H    S\n"
        f"  (__import__('pathlib').Path({str(canary)!r}).touch() or 1.0, 1.0)\n"
        "O    S\n"
        "  1.0 1.0\n"
        "END\n"
    )
    return path


def test_basis_file_with_python_runs_nothing_in_check(tmp_path):
    canary = tmp_path / "PWNED"
    basis = _evil_basis(tmp_path / "evil.nw", canary)
    xyz = write_xyz(tmp_path / "w.xyz", *WATER)
    res = runner.invoke(app, ["check", str(xyz), "-b", str(basis), "-o", str(tmp_path / "out")])
    assert res.exit_code == 3, res.output
    assert "evil.nw:3: basis data must be plain numbers" in res.output
    assert not canary.exists()


def test_basis_file_with_python_runs_nothing_in_the_api_or_pyscf_itself(tmp_path):
    canary = tmp_path / "PWNED"
    basis = _evil_basis(tmp_path / "evil.nw", canary)
    with pytest.raises(InputError, match="plain numbers"):
        auditor.audit(write_xyz(tmp_path / "w.xyz", *WATER), basis=str(basis))
    # the switch is on in pyscf's own parser too (a pruned-basis document could carry basis text)
    from pyscf.gto.basis import parse_nwchem

    with pytest.raises(ValueError):
        parse_nwchem.parse(basis.read_text())
    assert not canary.exists()


def test_basis_file_with_python_runs_nothing_in_gate_workers(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    canary = tmp_path / "PWNED"
    basis = _evil_basis(tmp_path / "evil.nw", canary)
    write_xyz(tmp_path / "w.xyz", *WATER)
    res = runner.invoke(app, ["gate", "w.xyz", "-b", str(basis), "-o", "out", "--no-cache", "-j", "1"])
    assert res.exit_code == 1
    err = json.loads((tmp_path / "out" / "items" / "w.json").read_text())
    assert "plain numbers" in err["error"]
    assert not canary.exists()


def test_basis_text_given_as_a_name_is_a_usage_error(tmp_path):
    xyz = write_xyz(tmp_path / "w.xyz", *WATER)
    res = runner.invoke(app, ["check", str(xyz), "-b", "sto-3g\nH S\n 1.0 1.0", "-o", str(tmp_path)])
    assert res.exit_code == 2 and "one line" in res.output


def test_basis_file_lacking_an_element_is_exit_3_naming_it(tmp_path):
    # pyscf alone would give O the shells of H from this file (it falls back to the whole file)
    basis = tmp_path / "h_only.nw"
    basis.write_text("H S\n  13.01 0.0197\n  1.962 0.138\nH P\n  0.727 1.0\n")
    xyz = write_xyz(tmp_path / "w.xyz", *WATER)
    res = runner.invoke(app, ["check", str(xyz), "-b", str(basis), "-o", str(tmp_path / "out")])
    assert res.exit_code == 3
    assert "no functions for element O" in res.output


def test_check_never_overwrites_its_input(tmp_path, monkeypatch):
    from ase.io import write

    from helpers import make_molecule

    monkeypatch.chdir(tmp_path)
    mol = make_molecule(*WATER)
    from ase import Atoms

    write("mol.json", Atoms(mol.symbols, positions=mol.coords))
    before = (tmp_path / "mol.json").read_bytes()
    res = runner.invoke(app, ["check", "mol.json", "-b", "sto-3g", "-o", ".", "-f", "json"])
    assert res.exit_code == 2 and "refusing to overwrite an input" in res.output
    assert (tmp_path / "mol.json").read_bytes() == before


def test_gate_leaves_the_users_files_in_out_untouched(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "set").mkdir()
    write_xyz(tmp_path / "set" / "a.xyz", *WATER)
    write_xyz(tmp_path / "set" / "b.xyz", *WATER)
    write_xyz(tmp_path / ".hidden.xyz", *WATER)
    items = tmp_path / "out" / "items"
    items.mkdir(parents=True)
    mine = {"results.json": '{"mine": true}\n', ".gitkeep": "", "notes.txt": "keep\n"}
    for name, text in mine.items():
        (items / name).write_text(text)
    args = ["gate", "set", ".hidden.xyz", "-b", "sto-3g", "-o", "out", "--no-cache", "-j", "1", "-q"]
    assert runner.invoke(app, args).exit_code == 0
    assert (items / "set__b.json").exists() and (items / ".hidden.json").exists()
    # a second run without b.xyz deletes b's report (written and recorded by the tool), nothing else
    (tmp_path / "set" / "b.xyz").unlink()
    assert runner.invoke(app, args).exit_code == 0
    assert not (items / "set__b.json").exists()
    assert (items / "set__a.json").exists() and (items / ".hidden.json").exists()
    for name, text in mine.items():
        assert (items / name).read_text() == text
    recorded = json.loads((tmp_path / "out" / "run.json").read_text())["item_files"]
    assert sorted(recorded) == [".hidden.json", "set__a.json"]


def test_second_gate_run_into_the_same_folder_is_refused(tmp_path, monkeypatch):
    import fcntl

    monkeypatch.chdir(tmp_path)
    write_xyz(tmp_path / "a.xyz", *WATER)
    (tmp_path / "out").mkdir()
    fd = os.open(tmp_path / "out" / ".auditor-gate.lock", os.O_RDWR | os.O_CREAT)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)  # another run holds the folder
        res = subprocess.run(
            [sys.executable, "-m", "auditor.cli", "gate", "a.xyz", "-b", "sto-3g", "-o", "out", "--no-cache"],
            cwd=tmp_path,
            capture_output=True,
            text=True,
            timeout=120,
        )
    finally:
        os.close(fd)
    assert res.returncode == 2
    assert "another auditor gate run is writing to this folder" in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "out" / "summary.csv").exists()
