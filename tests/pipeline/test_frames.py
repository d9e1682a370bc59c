"""A scan as one job: one threshold and one pruned basis for every frame (the worst frame
decides), each frame's own figures kept, and the caution on every report."""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

import auditor
from auditor.cli import app
from auditor.numerics.overlap import normalized_overlap
from auditor.report.schemas import validate

W = np.array([[0.0, 0.0, 0.1173], [0.0, 0.7572, -0.4692], [0.0, -0.7572, -0.4692]])
DISTANCES = (3.4, 3.0, 2.6, 2.3, 2.0, 1.8)  # the second water approaches along z
TARGET = 1e-3


@pytest.fixture(scope="module")
def scan(tmp_path_factory):
    path = tmp_path_factory.mktemp("scan") / "scan.xyz"
    blocks = []
    for d in DISTANCES:
        xyz = np.vstack([W, W @ np.diag([1.0, -1.0, -1.0]) + [0.0, 0.0, d]])
        lines = [f"{s} {x:.8f} {y:.8f} {z:.8f}" for s, (x, y, z) in zip("OHHOHH", xyz)]
        blocks.append("6\nwater dimer scan\n" + "\n".join(lines) + "\n")
    path.write_text("".join(blocks))
    return path


def run(*args):
    return CliRunner().invoke(app, [str(a) for a in args])


def test_one_pruned_basis_meets_the_target_in_every_frame(scan, tmp_path):
    res = run("prune", scan, "-b", "aug-cc-pvdz", "--target", TARGET, "-o", tmp_path, "-q")
    assert res.exit_code == 0, res.output
    doc = json.loads((tmp_path / "scan.pruned.json").read_text())
    validate(doc, "pruned-basis")
    assert doc["dropped_shells"] and len(doc["frames"]) == 6
    # Reference: numpy's eigvalsh of each frame's unit-diagonal overlap in the pruned basis,
    # the Mole built by pyscf at that frame's coordinates.
    lows = []
    for k in range(1, 7):
        mol = auditor.load_pruned(tmp_path / "scan.pruned.json", frame=k)
        assert np.allclose(mol.atom_coords(unit="Angstrom"), doc["frames"][k - 1])
        lows.append(np.linalg.eigvalsh(normalized_overlap(mol))[0])
    assert min(lows) >= TARGET
    assert doc["smallest_eigenvalue"] == pytest.approx(min(lows), rel=1e-8)
    assert doc["frame"] == 6 and lows[5] == min(lows)  # the closest frame is the worst
    assert len(list(tmp_path.glob("scan_f*.X.npy"))) == 6


def test_check_gives_every_frame_the_same_threshold_and_remedies(scan, tmp_path):
    res = run("check", scan, "-b", "aug-cc-pvdz", "--target", TARGET, "-o", tmp_path, "-f", "all", "-q")
    assert res.exit_code in (0, 1), res.output
    docs = [json.loads((tmp_path / f"scan_f{k:03d}.json").read_text()) for k in range(1, 7)]
    for doc in docs:
        validate(doc, "report")
    assert len({d["recommendation"]["threshold"] for d in docs}) == 1
    assert all(d["remedies"] == docs[0]["remedies"] for d in docs)
    assert all(d["frames"] == docs[0]["frames"] for d in docs)
    # each frame keeps its own figures
    smallest = [d["spectrum"]["smallest"] for d in docs]
    assert len(set(smallest)) == 6
    assert [r["smallest"] for r in docs[0]["frames"]["per_frame"]] == smallest
    assert docs[0]["remedies"]["deciding_frame"] == int(np.argmin(smallest)) + 1
    # the same pruned basis as prune's
    res = run("prune", scan, "-b", "aug-cc-pvdz", "--target", TARGET, "-o", tmp_path / "p", "-q")
    pruned = json.loads((tmp_path / "p" / "scan.pruned.json").read_text())
    dropped = docs[0]["remedies"]["cholesky_shells"]["dropped_shells"]
    assert [(s["atom"], s["shell"]) for s in pruned["dropped_shells"]] == [(s["atom"], s["shell"]) for s in dropped]
    # the caution, plainly, in every report and format
    for k in (1, 6):
        for ext in ("json", "md", "html"):
            assert "make energy curves discontinuous" in (tmp_path / f"scan_f{k:03d}.{ext}").read_text()
    assert "frame 6 decides" in (tmp_path / "scan_f001.md").read_text()


def test_prune_one_frame(scan, tmp_path):
    res = run("prune", scan, "-b", "aug-cc-pvdz", "--target", TARGET, "--frame", 1, "-o", tmp_path, "-q")
    assert res.exit_code == 0, res.output
    doc = json.loads((tmp_path / "scan_f001.pruned.json").read_text())
    assert "frames" not in doc and doc["dropped_shells"] == []  # frame 1 already meets the target
