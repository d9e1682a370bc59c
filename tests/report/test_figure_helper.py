"""The figure helper process: the same figures as drawn in process, and a fallback that
never fails a run (a dead or stuck helper, a command line that draws no figures)."""

import json
import os
import signal
import subprocess
import sys

import pytest

import auditor
import auditor.report.figures as figures
from auditor.cli.check import _format_asked
from auditor.report.json_report import to_json
from helpers import WATER, make_molecule, write_xyz


@pytest.fixture(scope="module")
def result_dict():
    return json.loads(to_json(auditor.audit(make_molecule(*WATER), "sto-3g", remedies=False)))


@pytest.fixture
def helper():
    figures.start_helper()
    assert figures._helper is not None
    yield figures._helper
    figures.stop_helper()


def test_helper_draws_the_same_figures_as_this_process(helper, result_dict):
    # reference: plots.report_plots in this process (the figures are deterministic bytes)
    local = figures.draw_figures(result_dict)
    assert set(local) == {"spectrum", "causes", "molecule"}
    assert figures.report_figures(result_dict) == local
    assert figures._helper is helper  # it answered: still running, used for the next report
    assert figures.report_figures(result_dict) == local


def test_dead_helper_falls_back_to_drawing_here(helper, result_dict):
    helper.proc.kill()
    helper.proc.wait()
    assert figures.report_figures(result_dict) == figures.draw_figures(result_dict)
    assert figures._helper is None  # stopped, not asked again


@pytest.mark.skipif(not hasattr(signal, "SIGSTOP"), reason="needs SIGSTOP")
def test_stuck_helper_is_not_waited_for(helper, result_dict, monkeypatch):
    monkeypatch.setattr(figures, "HELPER_WAIT", 0.5)
    os.kill(helper.proc.pid, signal.SIGSTOP)  # alive but never answers
    try:
        assert figures.report_figures(result_dict) == figures.draw_figures(result_dict)
        assert figures._helper is None
    finally:
        if helper.proc.poll() is None:
            os.kill(helper.proc.pid, signal.SIGCONT)
    assert helper.proc.wait(timeout=10) is not None  # killed when stopped


def test_format_is_read_from_the_command_line_as_the_parser_reads_it():
    assert _format_asked(["check", "a.xyz", "-b", "sto-3g"]) is None
    assert _format_asked(["check", "a.xyz", "-f", "json"]) == "json"
    assert _format_asked(["check", "a.xyz", "--format=json"]) == "json"
    assert _format_asked(["check", "a.xyz", "-fjson"]) == "json"
    assert _format_asked(["check", "-f", "md", "a.xyz", "--format", "json"]) == "json"  # the last one wins


@pytest.mark.slow
def test_console_run_writes_the_figures_drawn_in_process(tmp_path):
    # end to end as a user runs it (the command starts the helper, which draws the PNGs, or
    # falls back to drawing them itself): the bytes must be those drawn here for the same audit
    xyz = write_xyz(tmp_path / "w.xyz", *WATER)
    out = tmp_path / "o"
    cmd = [sys.executable, "-c", "from auditor.cli import main; main()", "check", str(xyz), "-b", "sto-3g"]
    proc = subprocess.run([*cmd, "-o", str(out), "-f", "md", "-q"], capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    assert proc.stderr == ""
    d = json.loads(to_json(auditor.audit(make_molecule(*WATER, source=str(xyz)), "sto-3g")))
    drawn = figures.draw_figures(d)
    for name in ("spectrum", "causes", "molecule"):
        assert (out / f"w_{name}.png").read_bytes() == drawn[name]
