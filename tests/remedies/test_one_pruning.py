"""One pruning: `check`, `prune` and the Python API keep the same whole shells for the same
input and target (one rule, `auditor.remedies.plan.WHOLE_SHELL_RULE`)."""

from __future__ import annotations

import json

import pytest
from typer.testing import CliRunner

import auditor
from auditor.cli import app
from helpers import WATER, write_xyz

DIMER = (
    ["O", "H", "H", "O", "H", "H"],
    [[0, 0, 0], [0.757, 0.586, 0], [-0.757, 0.586, 0], [0.3, -0.2, 2.2], [1.0, 0.4, 2.3], [-0.5, 0.3, 2.5]],
)
HE2 = (["He", "He"], [[0.0, 0.0, 0.0], [0.0, 0.0, 0.9]])
# three waters stacked 2.6 Å apart
STACK = (WATER[0] * 3, [[x, y, z + 2.6 * k] for k in range(3) for x, y, z in WATER[1]])

CASES = [
    ("dimer", DIMER, "d-aug-cc-pvdz", 1e-3),
    ("he2", HE2, "aug-cc-pvdz", 3e-2),
    ("stack", STACK, "aug-cc-pvdz", 1e-2),
]


def _shells(records):
    return sorted((r["atom"], r["shell"]) for r in records)


@pytest.mark.parametrize("name, geometry, basis, target", CASES, ids=[c[0] for c in CASES])
def test_check_prune_and_api_keep_the_same_shells(tmp_path, name, geometry, basis, target):
    path = write_xyz(tmp_path / f"{name}.xyz", *geometry)
    runner = CliRunner()
    res = runner.invoke(
        app, ["check", str(path), "-b", basis, "--target", str(target), "-o", str(tmp_path / "c"), "-f", "json", "-q"]
    )
    assert res.exit_code in (0, 1), res.output
    report = json.loads((tmp_path / "c" / f"{name}.json").read_text())
    res = runner.invoke(
        app, ["prune", str(path), "-b", basis, "--target", str(target), "-o", str(tmp_path / "p"), "-q"]
    )
    assert res.exit_code == 0, res.output
    pruned = json.loads((tmp_path / "p" / f"{name}.pruned.json").read_text())
    api = auditor.audit(str(path), basis, remedies=auditor.RemedyOptions(target=target)).as_dict()
    from_check = _shells(report["remedies"]["cholesky_shells"]["dropped_shells"])
    assert from_check, "the case must drop something"
    assert _shells(pruned["dropped_shells"]) == from_check
    assert _shells(api["remedies"]["cholesky_shells"]["dropped_shells"]) == from_check
    assert pruned["n_functions"] == report["remedies"]["cholesky_shells"]["kept"]
