"""The hostile-input corpus (corpus.py) against the command line and the Python API: every
case ends with its documented exit code (or exception type) and one line naming the file
or option; FIFO, device and hang cases run in a fresh process with a time-out."""

from __future__ import annotations

import os
import sys
from pathlib import Path

import corpus
import pytest

pytestmark = pytest.mark.slow  # every test here runs whole auditor processes

#: seconds a case run in its own process may take (the import of pyscf is most of it)
TIME_OUT = 90


@pytest.fixture(autouse=True)
def _close():
    yield
    corpus.close_resources()


def _run_inline(case: corpus.Case, folder: Path, monkeypatch, capsys) -> tuple[int, str, str]:
    from auditor.cli import main

    corpus.apply_patch(case.patch, monkeypatch)
    monkeypatch.chdir(folder)
    monkeypatch.setattr(sys, "argv", ["auditor", *case.args])
    capsys.readouterr()
    try:
        main()
        code = 0
    except SystemExit as stop:
        code = stop.code if isinstance(stop.code, int) else (0 if stop.code is None else 1)
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def _run_alone(case: corpus.Case, folder: Path) -> tuple[int, str, str]:
    res = corpus.launch(corpus.cli_args(case), TIME_OUT, folder, {**os.environ, "COLUMNS": "80"})
    if res is None:
        pytest.fail(f"{case.id}: still running after {TIME_OUT} s (it should be refused at once)")
    return res.returncode, res.stdout, res.stderr


@pytest.mark.parametrize("case", corpus.CLI_CASES, ids=lambda c: c.id)
def test_command_line_case(case, tmp_path, monkeypatch, capsys):
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    corpus.write_files(case, tmp_path)
    if case.id in corpus.LIVE:
        case = corpus.LIVE[case.id](case)
    if case.alone:
        code, out, err = _run_alone(case, tmp_path)
    else:
        code, out, err = _run_inline(case, tmp_path, monkeypatch, capsys)
    corpus.check_outcome(case, tmp_path, code, out, err)


@pytest.mark.parametrize("case", corpus.API_CASES, ids=lambda c: c.id)
def test_api_case(case, tmp_path):
    if case.alone:
        res = corpus.launch(["api", case.id, str(tmp_path)], TIME_OUT)
        if res is None:
            pytest.fail(f"{case.id}: still running after {TIME_OUT} s")
        got = res.stdout.strip().splitlines()[-1] if res.stdout.strip() else res.stderr[-500:]
    else:
        got = corpus.run_api_case(case, tmp_path)
    want = "returned" if case.expected == "returned" else f"exception: {case.expected}: "
    assert got.startswith(want), got
    assert case.fragment in got, got
    assert not (tmp_path / corpus.CANARY).exists()


def test_corpus_is_large_and_covers_every_class():
    cases = corpus.CLI_CASES + corpus.API_CASES
    assert len(cases) >= 60
    assert len({c.id for c in cases}) == len(cases)
    assert {c.cls for c in cases} == {"code", "loss", "wrong", "hang", "crash", "message"}
