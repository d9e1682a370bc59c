"""The trial SCF: progress after every cycle, a plain line for a run that stops at its time
limit, does not converge or fails, in every report and on the terminal; a failure never ends
the audit."""

from __future__ import annotations

import io
import json

import numpy as np
import pytest
from typer.testing import CliRunner

import auditor
from auditor.cli import app
from auditor.cli.options import ScfProgress
from auditor.pipeline.run import make_spec, prepare
from auditor.report.schemas import validate
from helpers import make_molecule, write_xyz

HE2 = (["He", "He"], [[0.0, 0.0, 0.0], [0.0, 0.0, 0.9]])
OPTIONS = dict(target=3e-2, trial_scf="hf")


@pytest.fixture(scope="module")
def he2():
    return prepare(make_molecule(*HE2), make_spec("aug-cc-pvdz"))


def test_progress_reports_every_cycle(he2):
    seen = []
    r = auditor.audit_prepared(he2, remedies=auditor.RemedyOptions(**OPTIONS, progress=seen.append))
    runs = r.remedies.trial_scf["runs"]
    for run in runs:
        cycles = [p["cycle"] for p in seen if p["basis"] == run["basis"]]
        assert cycles == list(range(1, run["cycles"] + 1))
    last = [p for p in seen if p["basis"] == runs[0]["basis"]][-1]
    assert last["energy"] == pytest.approx(runs[0]["energy"], abs=1e-8)
    # the terminal printer rewrites one line per run
    stream = io.StringIO()
    printer = ScfProgress(stream)
    for p in seen:
        printer(p)
    printer.close()
    text = stream.getvalue()
    assert text.count("\n") == len(runs) and "cycle 1" in text and "hartree" in text


def test_time_limit_and_non_convergence_get_a_plain_line(he2, monkeypatch):
    stopped = auditor.audit_prepared(he2, remedies=auditor.RemedyOptions(**OPTIONS, trial_time_limit=1e-9)).as_dict()
    tri = stopped["remedies"]["trial_scf"]
    assert [run["status"] for run in tri["runs"]] == ["stopped", "stopped"]
    assert all("stopped at its time limit" in a for a in tri["alerts"]) and len(tri["alerts"]) == 2
    assert tri["difference_microhartree"] is None
    for text in (auditor.render_markdown(stopped), auditor.render_html(stopped, images={})):
        assert "stopped at its time limit" in text
    from pyscf.scf import hf

    monkeypatch.setattr(hf.SCF, "max_cycle", 1)
    slow = auditor.audit_prepared(he2, remedies=auditor.RemedyOptions(**OPTIONS)).as_dict()["remedies"]["trial_scf"]
    assert all(run["status"] == "done" and not run["converged"] for run in slow["runs"])
    assert all("did not converge" in a for a in slow["alerts"]) and slow["difference_microhartree"] is None


def test_a_failing_run_does_not_end_the_audit(tmp_path, monkeypatch):
    from auditor.remedies import trial_scf

    def broken(S_raw, threshold):
        raise np.linalg.LinAlgError("Eigenvalues did not converge")

    monkeypatch.setattr(trial_scf, "orthogonalizer", broken)
    path = write_xyz(tmp_path / "he2.xyz", *HE2)
    res = CliRunner().invoke(
        app, ["check", str(path), "-b", "aug-cc-pvdz", "--target", "3e-2", "--trial-scf", "hf", "-o", str(tmp_path)]
    )
    assert res.exit_code in (0, 1), res.output
    doc = json.loads((tmp_path / "he2.json").read_text())
    tri = doc["remedies"]["trial_scf"]
    assert [run["status"] for run in tri["runs"]] == ["failed", "failed"]
    assert "LinAlgError" in tri["alerts"][0] and "the audit went on without it" in tri["alerts"][0]
    assert "LinAlgError" in res.output  # on the terminal
    assert doc["remedies"]["alternatives"]  # the rest of the remedies are there
    validate(doc, "report")
