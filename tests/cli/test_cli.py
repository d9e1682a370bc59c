"""The command line as a user runs it: files written, exit codes, one-line errors."""

import json
import subprocess
import sys

import pytest
from typer.testing import CliRunner

from auditor.cli import app
from helpers import WATER, write_xyz

runner = CliRunner()


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


@pytest.fixture
def water_xyz(tmp_path):
    return write_xyz(tmp_path / "water.xyz", *WATER, comment="water charge=0 multiplicity=1")


def test_check_writes_json_and_markdown(tmp_path, water_xyz):
    out = tmp_path / "out"
    res = run("check", water_xyz, "--basis", "cc-pvdz", "--out", out)
    assert res.exit_code == 0, res.output
    d = json.loads((out / "water.json").read_text())
    assert d["verdict"] == "pass" and d["input"]["n_atoms"] == 3
    md = (out / "water.md").read_text()
    assert "PASS" in md and f"{d['spectrum']['smallest']:.4e}" in md


def test_format_json_only_and_multiframe(tmp_path):
    f = tmp_path / "scan.xyz"
    symbols, coords = WATER
    text = ""
    for shift in (0.0, 0.1, 0.2):
        text += f"3\nframe {shift}\n" + "".join(
            f"{s} {x:.5f} {y + shift:.5f} {z:.5f}\n" for s, (x, y, z) in zip(symbols, coords)
        )
    f.write_text(text)
    out = tmp_path / "o"
    res = run("check", f, "-b", "sto-3g", "-o", out, "--format", "json")
    assert res.exit_code == 0, res.output
    assert sorted(p.name for p in out.iterdir()) == [
        "scan.scan.json",
        "scan_f001.json",
        "scan_f002.json",
        "scan_f003.json",
    ]
    frames = [json.loads((out / f"scan_f00{k}.json").read_text())["input"]["frame"] for k in (1, 2, 3)]
    assert frames == [1, 2, 3]


def test_fail_exit_code_and_ghost_option(tmp_path):
    symbols, coords = WATER
    f = write_xyz(tmp_path / "dup.xyz", symbols + ["H"], coords + [coords[1]])
    res = run("check", f, "-b", "sto-3g", "-o", tmp_path / "o")
    assert res.exit_code == 1
    res = run("check", f, "-b", "sto-3g", "-o", tmp_path / "o2", "--ghost", "4")
    d = json.loads((tmp_path / "o2" / "dup.json").read_text())
    assert d["input"]["ghost_atoms"] == [4]


def test_bohr_unit_option(tmp_path):
    symbols, coords = WATER
    f = write_xyz(tmp_path / "wb.xyz", symbols, [[c / 0.529177210903 for c in xyz] for xyz in coords])
    assert run("check", f, "-b", "sto-3g", "-o", tmp_path / "a").exit_code == 1  # read as ångström: units suspect
    assert run("check", f, "-b", "sto-3g", "-o", tmp_path / "b", "--unit", "bohr").exit_code == 0


def test_extended_xyz_read_through_ase(tmp_path):
    from ase import Atoms
    from ase.io import write

    symbols, coords = WATER
    p = tmp_path / "w.extxyz"
    write(p, Atoms(symbols, positions=coords), format="extxyz")
    res = run("check", p, "-b", "sto-3g", "-o", tmp_path / "o", "-f", "json")
    assert res.exit_code == 0, res.output
    assert json.loads((tmp_path / "o" / "w.json").read_text())["input"]["n_atoms"] == 3


BAD = {
    "missing": (None, "no such file"),
    "empty": ("", "file is empty"),
    "count": ("three\nx\nO 0 0 0\n", "expected an atom count"),
    "short": ("3\nc\nO 0 0 0\nH 0 0 1\n", "announces 3 atoms but only 2 atom lines follow"),
    "coords": ("1\nc\nO 0 zero 0\n", "coordinates are not numbers"),
    "element": ("1\nc\nQq 0 0 0\n", "unknown element symbol 'Qq'"),
    "nan": ("2\nc\nO 0 0 0\nH nan 0 1\n", "not finite"),
    "fewcols": ("1\nc\nO 0 0\n", "expected 'element x y z'"),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_geometry_gives_one_line_error(tmp_path, case):
    text, expected = BAD[case]
    p = tmp_path / f"{case}.xyz"
    if text is not None:
        p.write_text(text)
    res = run("check", p, "-b", "sto-3g", "-o", tmp_path / "o")
    assert res.exit_code == 3
    assert expected in res.output
    assert "Traceback" not in res.output
    assert str(p.name) in res.output


def test_atomic_numbers_and_lowercase_symbols(tmp_path):
    p = tmp_path / "z.xyz"
    p.write_text("3\nwater by atomic number\n8 0 0 0.1173\nh 0 0.7572 -0.4692\n1 0 -0.7572 -0.4692\n")
    res = run("check", p, "-b", "sto-3g", "-o", tmp_path / "o", "-f", "json")
    assert res.exit_code == 0, res.output
    atoms = json.loads((tmp_path / "o" / "z.json").read_text())["input"]["atoms"]
    assert [a["element"] for a in atoms] == ["O", "H", "H"]


def test_line_number_in_error(tmp_path):
    p = tmp_path / "l.xyz"
    p.write_text("2\ncomment\nO 0 0 0\nH 0 0 x\n")
    res = run("check", p, "-b", "sto-3g", "-o", tmp_path / "o")
    assert f"{p}:4:" in res.output.replace("\n", "")


def test_basis_errors(tmp_path, water_xyz):
    res = run("check", water_xyz, "-b", "aug-cc-pvtx", "-o", tmp_path / "o")
    assert res.exit_code == 3 and "unknown basis name" in res.output and "aug-cc-pvtz" in res.output
    u = write_xyz(tmp_path / "u.xyz", ["U", "O"], [[0, 0, 0], [0, 0, 1.8]])
    res = run("check", u, "-b", "cc-pvdz", "-o", tmp_path / "o")
    assert res.exit_code == 3 and "no functions for element U" in res.output


def test_one_bad_file_does_not_stop_the_others(tmp_path, water_xyz):
    bad = tmp_path / "bad.xyz"
    bad.write_text("1\nc\nXx 0 0 0\n")
    out = tmp_path / "o"
    res = run("check", bad, water_xyz, "-b", "sto-3g", "-o", out)
    assert res.exit_code == 3
    assert (out / "water.json").is_file()


def test_usage_errors(tmp_path, water_xyz):
    assert run("check", water_xyz, "-b", "sto-3g", "--format", "pdf").exit_code == 2
    assert run("check", water_xyz, "-b", "sto-3g", "--caution", "1e-9", "--fail", "1e-5").exit_code == 2
    assert run("check", water_xyz, "-b", "sto-3g", "--ghost", "2-x").exit_code == 2
    assert run("check", water_xyz).exit_code == 2  # --basis missing


@pytest.mark.slow
def test_console_script_prints_no_traceback(tmp_path):
    # the installed entry point, as a user runs it
    p = tmp_path / "nan.xyz"
    p.write_text("1\nc\nO nan 0 0\n")
    proc = subprocess.run(
        [
            sys.executable,
            "-c",
            "from auditor.cli import main; main()",
            "check",
            str(p),
            "-b",
            "sto-3g",
            "-o",
            str(tmp_path / "o"),
        ],
        capture_output=True,
        text=True,
    )
    assert proc.returncode == 3
    assert "Traceback" not in proc.stderr + proc.stdout
    assert len(proc.stderr.strip().splitlines()) == 1


def test_demo_writes_reports(tmp_path):
    res = run("demo", "--out", tmp_path / "r")
    assert res.exit_code == 0, res.output
    index = (tmp_path / "r" / "index.md").read_text()
    for stem, verdict in (("acetamide", "pass"), ("ethanol_pasted_atom", "fail"), ("benzene_bohr", "fail")):
        assert json.loads((tmp_path / "r" / f"{stem}.json").read_text())["verdict"] == verdict
        assert stem in index


def test_no_remedies_gives_the_verdict_only(tmp_path, water_xyz):
    res = run(
        "check", water_xyz, "-b", "aug-cc-pvdz", "--caution", "0.05", "--no-remedies", "-o", tmp_path, "-f", "json"
    )
    assert res.exit_code == 0, res.output
    d = json.loads((tmp_path / "water.json").read_text())
    assert d["verdict"] == "caution" and d["remedies"] is None
    assert "remedies for" not in res.output


def test_stages_are_reported_in_order(water_xyz):
    import auditor

    seen: list[str] = []
    mol = auditor.load_molecules(water_xyz)[0]
    prep = auditor.prepare(mol, auditor.make_spec("cc-pvdz"), stage=seen.append)
    auditor.audit_prepared(prep, spectrum_method="large", stage=seen.append)
    assert seen[0] == "overlap matrix (pyscf)" and seen[-1] == "remedies"
    assert any("Cholesky" in s for s in seen) and any("Krylov" in s for s in seen)


def test_a_full_disk_is_a_resource_error_and_earlier_reports_stay(tmp_path, water_xyz, monkeypatch):
    # The second input's reports hit a full disk (ENOSPC): one line, exit code 4, and the
    # first input's reports are complete. Exit codes: docs/cli.md.
    import errno

    from auditor.gate import serial

    second = write_xyz(tmp_path / "second.xyz", *WATER)
    real = serial.write_reports

    def writes_once(result, out, formats, stem):
        if stem == "second":
            raise OSError(errno.ENOSPC, "No space left on device", str(out / "second.json"))
        return real(result, out, formats, stem)

    monkeypatch.setattr(serial, "write_reports", writes_once)
    out = tmp_path / "out"
    res = run("check", water_xyz, second, "--basis", "sto-3g", "--out", out, "--format", "json")
    assert res.exit_code == 4, res.output
    assert "no space left on the device (writing" in res.output and "internal error" not in res.output
    assert json.loads((out / "water.json").read_text())["verdict"] == "pass"


def test_failure_lines_for_file_system_errors():
    # errno values from the C library (errno(3)); anything else stays an internal error (5).
    import errno

    from auditor.base.errors import failure

    assert failure(OSError(errno.EDQUOT, "Disk quota exceeded", "r.json"))[1] == 4
    message, code = failure(PermissionError(errno.EACCES, "Permission denied", "out/r.json"))
    assert code == 2 and message == "cannot write out/r.json (Permission denied)"
    assert failure(OSError(errno.EIO, "Input/output error"))[1] == 5
