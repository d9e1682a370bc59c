"""`auditor gate` end to end: mixed sets, cache reuse, interruption and resume, policy,
baseline, JUnit XML, the Dask engine and the pre-commit hook definition."""

import json
import os
import shlex
import signal
import subprocess
import sys
import time
import xml.etree.ElementTree as ET
from contextlib import closing
from pathlib import Path

import pandas as pd
import pytest
from typer.testing import CliRunner

from auditor.cli import app
from auditor.gate.cache import ResultCache
from helpers import WATER, write_xyz

ROOT = Path(__file__).resolve().parents[2]
H2 = (["H", "H"], [[0, 0, 0], [0, 0, 0.74]])
# water with its second hydrogen pasted twice, 0.001 Å apart
PASTED = (WATER[0] + ["H"], WATER[1] + [[0.0, 0.7572, -0.4682]])


def gate(*args):
    return CliRunner().invoke(app, ["gate", *map(str, args)])


def summary(out: Path) -> pd.DataFrame:
    return pd.read_csv(out / "summary.csv", keep_default_na=False, na_values=[""])


def run_stats(out: Path) -> dict:
    return json.loads((out / "run.json").read_text())


@pytest.fixture
def mixed(tmp_path, monkeypatch):
    """Good, failing and malformed files, a multi-frame file and a list file."""
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    s = tmp_path / "set"
    (s / "deep").mkdir(parents=True)
    write_xyz(s / "water.xyz", *WATER)
    write_xyz(s / "deep" / "h2.xyz", *H2)
    (s / "scan.xyz").write_text("".join(f"2\n\nH 0 0 0\nH 0 0 {0.7 + 0.05 * k}\n" for k in range(3)))
    write_xyz(s / "pasted.xyz", *PASTED)
    (s / "badcoord.xyz").write_text("2\n\nH 0 0 0\nH 0 0 zero\n")
    (s / "empty.xyz").write_text("")
    (s / "deep" / "element.xyz").write_text("1\n\nQq 0 0 0\n")
    return tmp_path


def test_mixed_set_reports_every_item_with_reasons(mixed):
    res = gate("set", "missing.xyz", "-b", "sto-3g", "-o", "out", "--cache-dir", "cache", "-j", "2")
    assert res.exit_code == 1, res.output
    df = summary(mixed / "out")
    assert len(df) == 10
    by = {(p, f): r for p, f, r in zip(df.path, df.frame.fillna(0).astype(int), df.to_dict("records"))}
    # sto-3g: one function per H, five on O
    for key, n_functions in {
        ("set/water.xyz", 1): 7,
        ("set/deep/h2.xyz", 1): 2,
        ("set/scan.xyz", 1): 2,
        ("set/scan.xyz", 2): 2,
        ("set/scan.xyz", 3): 2,
    }.items():
        row = by[key]
        assert row["verdict"] == "pass" and row["outcome"] == "ok"
        assert row["n_functions"] == n_functions and row["smallest_eigenvalue"] > 1e-2
        assert row["top_atom"] and row["threshold"] > 0 and row["n_removed"] == 0
    pasted = by[("set/pasted.xyz", 1)]
    assert pasted["verdict"] == "fail" and pasted["outcome"] == "blocked"
    report = json.loads((mixed / "out" / "items" / f"{pasted['item']}.json").read_text())
    main = next(f for f in report["findings"] if f["severity"] == "error")
    assert pasted["reason"] == main["message"]
    errors = {p: r["error"] for (p, _), r in by.items() if r["verdict"] == "error"}
    assert set(errors) == {"set/badcoord.xyz", "set/empty.xyz", "set/deep/element.xyz", "missing.xyz"}
    assert "coordinates are not numbers" in errors["set/badcoord.xyz"]
    assert "empty" in errors["set/empty.xyz"]
    assert "Qq" in errors["set/deep/element.xyz"]
    for path, message in errors.items():
        assert message.startswith(path) and "\n" not in message
        assert "Traceback" not in res.output
    # one report per item, Parquet holds the same table
    assert sorted(p.stem for p in (mixed / "out" / "items").glob("*.json")) == sorted(df["item"])
    pq = pd.read_parquet(mixed / "out" / "summary.parquet")
    assert list(pq.columns) == list(df.columns) and pq["verdict"].tolist() == df["verdict"].tolist()
    assert pq["smallest_eigenvalue"].dropna().tolist() == df["smallest_eigenvalue"].dropna().tolist()


def test_junit_xml_reads_with_standard_parsers(mixed):
    gate("set", "-b", "sto-3g", "-o", "out", "--no-cache", "-j", "1")
    path = mixed / "out" / "junit.xml"
    df = summary(mixed / "out")
    suite = ET.parse(path).getroot().find("testsuite")
    cases = suite.findall("testcase")
    assert len(cases) == len(df) == int(suite.get("tests"))
    failures = [c for c in cases if c.find("failure") is not None]
    errors = [c for c in cases if c.find("error") is not None]
    assert [c.get("classname") for c in failures] == ["set/pasted.xyz"]
    assert failures[0].find("failure").get("message") == df.set_index("path").loc["set/pasted.xyz", "reason"]
    assert sorted(c.get("classname") for c in errors) == ["set/badcoord.xyz", "set/deep/element.xyz", "set/empty.xyz"]
    junitparser = pytest.importorskip("junitparser")
    xml = junitparser.JUnitXml.fromfile(str(path))
    parsed = [case for s in xml for case in s]
    assert len(parsed) == len(df)
    assert sum(1 for case in parsed if not case.is_passed) == 4


def test_rerun_hits_the_cache_and_no_cache_recomputes(mixed):
    first = gate("set", "-b", "sto-3g", "-o", "out", "--cache-dir", "cache", "-j", "2")
    n_good = (summary(mixed / "out").verdict != "error").sum()
    assert run_stats(mixed / "out")["computed"] == n_good
    before = (mixed / "out" / "summary.csv").read_text()
    second = gate("set", "-b", "sto-3g", "-o", "out", "--cache-dir", "cache", "-j", "2")
    assert second.exit_code == first.exit_code == 1
    stats = run_stats(mixed / "out")
    assert stats["computed"] == 0 and stats["cached"] == n_good
    assert (mixed / "out" / "summary.csv").read_text() == before
    gate("set", "-b", "sto-3g", "-o", "out", "--cache-dir", "cache", "--no-cache", "-j", "2")
    assert run_stats(mixed / "out")["computed"] == n_good
    # another basis is another key
    gate("set", "-b", "6-31g", "-o", "out", "--cache-dir", "cache", "-j", "2")
    assert run_stats(mixed / "out")["cached"] == 0


def test_exit_codes_policy_file_and_usage_errors(mixed):
    assert gate("set/water.xyz", "set/scan.xyz", "-b", "sto-3g", "-o", "out", "--no-cache").exit_code == 0
    assert gate("set/pasted.xyz", "-b", "sto-3g", "-o", "out", "--no-cache").exit_code == 1
    Path("policy.toml").write_text('[[allow]]\npath = "set/pasted*"\nreason = "kept to test the reader"\n')
    res = gate("set/pasted.xyz", "set/water.xyz", "-b", "sto-3g", "-o", "out", "--no-cache", "--policy", "policy.toml")
    assert res.exit_code == 0, res.output
    row = summary(mixed / "out").set_index("path").loc["set/pasted.xyz"]
    assert (row["verdict"], row["outcome"], row["note"]) == ("fail", "allowed", "kept to test the reader")
    skipped = ET.parse(mixed / "out" / "junit.xml").getroot().iter("skipped")
    assert ["kept to test the reader" in s.get("message") for s in skipped] == [True]
    # per-basis levels: a caution level above every eigenvalue of water in sto-3g turns it to caution
    Path("levels.toml").write_text('[basis."STO-3G"]\ncaution = 0.9\nfail = 1e-9\n')
    gate("set/water.xyz", "-b", "sto-3g", "-o", "out", "--no-cache", "--policy", "levels.toml")
    assert summary(mixed / "out").verdict.tolist() == ["caution"]
    Path("broken.toml").write_text("caution = [\n")
    for bad in (
        ["--policy", "broken.toml"],
        ["--jobs", "0"],
        ["--engine", "dask"],
        ["--baseline", "nothere.csv"],
        ["--unit", "furlong"],
        ["--basis-for", "Xx=sto-3g"],
    ):
        res = gate("set/water.xyz", "-b", "sto-3g", "-o", "out", "--no-cache", *bad)
        assert res.exit_code == 2, (bad, res.output)
        assert "Traceback" not in res.output
    res = gate("set/water.xyz", "-b", "no-such-basis-xz", "-o", "out", "--no-cache")
    assert res.exit_code == 2 and "unknown basis name" in res.output


def test_baseline_fails_only_on_regressions(mixed):
    base = mixed / "base"
    base.mkdir()
    write_xyz(base / "a.xyz", *WATER)  # stays good
    write_xyz(base / "b.xyz", *PASTED)  # fails before and after
    write_xyz(base / "c.xyz", *H2)  # squeezed below
    write_xyz(base / "d.xyz", *PASTED)  # repaired below
    gate("base", "-b", "cc-pvdz", "-o", "old", "--no-cache", "-j", "1")
    old = summary(mixed / "old").set_index("path")
    write_xyz(base / "c.xyz", ["H", "H"], [[0, 0, 0], [0, 0, 0.1]])
    write_xyz(base / "d.xyz", *WATER)
    for baseline in ("old/summary.csv", "old/summary.parquet"):
        res = gate("base", "-b", "cc-pvdz", "-o", "new", "--no-cache", "-j", "1", "--baseline", baseline)
        assert res.exit_code == 1, res.output
        new = summary(mixed / "new").set_index("path")
        assert new.loc["base/a.xyz", "outcome"] == "ok"
        assert (new.loc["base/b.xyz", "verdict"], new.loc["base/b.xyz", "outcome"]) == ("fail", "known")
        assert new.loc["base/c.xyz", "outcome"] == "regressed"
        assert new.loc["base/c.xyz", "smallest_eigenvalue"] < old.loc["base/c.xyz", "smallest_eigenvalue"] / 10
        assert (new.loc["base/d.xyz", "outcome"], new.loc["base/d.xyz", "change"]) == ("ok", "fixed")
        assert "improved: base/d.xyz" in res.output
    # without the regressed item only a known failure is left: the gate passes
    res = gate(
        "base/a.xyz",
        "base/b.xyz",
        "-b",
        "cc-pvdz",
        "-o",
        "new",
        "--no-cache",
        "-j",
        "1",
        "--baseline",
        "old/summary.csv",
    )
    assert res.exit_code == 0, res.output


def _wait_for(predicate, seconds):
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        if predicate():
            return True
        time.sleep(0.02)
    return False


@pytest.mark.slow
def test_killed_run_leaves_no_corrupt_file_and_resumes(mixed):
    s = mixed / "resume"
    s.mkdir()
    for k in range(8):
        write_xyz(s / f"w{k}.xyz", WATER[0], [[x, y, z + 0.01 * k] for x, y, z in WATER[1]])
    big = (ROOT / "example_geometries" / "water_octamer.xyz").read_text()
    (s / "zz_octamer.xyz").write_text(big)  # sorted last, and slow: the run is still busy when killed
    (s / "zz_octamer2.xyz").write_text(big.replace(" 0.", " 0.01", 1))
    cmd = [
        sys.executable,
        "-m",
        "auditor.cli",
        "gate",
        "resume",
        "-b",
        "aug-cc-pvtz",
        "-o",
        "out",
        "--cache-dir",
        "cache",
        "-j",
        "1",
        "-q",
    ]
    proc = subprocess.Popen(
        cmd, cwd=mixed, start_new_session=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL
    )
    try:

        def entries():  # committed entries only
            with closing(ResultCache(mixed / "cache")) as c:
                return c.keys()

        assert _wait_for(lambda: len(entries()) >= 3, 120)
        assert proc.poll() is None and not (mixed / "out" / "summary.csv").exists()
    finally:
        os.killpg(proc.pid, signal.SIGKILL)
        proc.wait()
    done = entries()
    with closing(ResultCache(mixed / "cache")) as cache:
        assert all(cache.get(k) is not None for k in done)
    for report in (mixed / "out" / "items").glob("[!.]*.json"):
        json.loads(report.read_text())
    res = gate("resume", "-b", "aug-cc-pvtz", "-o", "out", "--cache-dir", "cache", "-j", "1")
    stats = run_stats(mixed / "out")
    assert stats["items"] == 10 and stats["cached"] >= len(done) and stats["computed"] == 10 - stats["cached"]
    assert len(summary(mixed / "out")) == 10 and res.exit_code in (0, 1)
    # everything cached now: the warm run does not import the integral library
    warm = subprocess.run([sys.executable, "-X", "importtime", *cmd[1:]], cwd=mixed, capture_output=True, text=True)
    assert run_stats(mixed / "out")["computed"] == 0
    assert "pyscf" not in warm.stderr and "auditor.gate.run" in warm.stderr


@pytest.mark.slow
def test_dask_local_cluster_gives_the_local_summary(mixed):
    distributed = pytest.importorskip("dask.distributed")
    gate("set", "-b", "sto-3g", "-o", "local", "--no-cache", "-j", "1")
    with distributed.LocalCluster(
        n_workers=1, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=None
    ) as cluster:
        address = cluster.scheduler_address
        assert address.startswith("tcp://127.0.0.1:")
        res = gate("set", "-b", "sto-3g", "-o", "dask", "--no-cache", "--engine", "dask", "--scheduler", address)
    assert res.exit_code == 1, res.output
    pd.testing.assert_frame_equal(
        pd.read_parquet(mixed / "dask" / "summary.parquet"), pd.read_parquet(mixed / "local" / "summary.parquet")
    )
    for report in (mixed / "local" / "items").glob("*.json"):
        assert report.read_text() == (mixed / "dask" / "items" / report.name).read_text()


@pytest.mark.slow
def test_unreachable_scheduler_is_a_usage_error(mixed):
    res = gate(
        "set/water.xyz",
        "-b",
        "sto-3g",
        "-o",
        "out",
        "--no-cache",
        "--engine",
        "dask",
        "--scheduler",
        "tcp://127.0.0.1:9",
    )
    assert res.exit_code == 2 and "cannot reach the Dask scheduler" in res.output


def test_pre_commit_hook_runs_the_gate(mixed):
    yaml = pytest.importorskip("yaml")
    hooks = yaml.safe_load((ROOT / ".pre-commit-hooks.yaml").read_text())
    hook = next(h for h in hooks if h["entry"].startswith("auditor gate"))
    # pre-commit runs: entry + args + the staged files that match `files`
    import re

    files = [f for f in ("set/water.xyz", "set/scan.xyz", "README.md") if re.search(hook["files"], f)]
    assert files == ["set/water.xyz", "set/scan.xyz"]
    argv = shlex.split(hook["entry"]) + hook.get("args", []) + files
    assert argv[:2] == ["auditor", "gate"]
    res = CliRunner().invoke(app, argv[1:])
    assert res.exit_code == 0, res.output
    write_xyz(mixed / "set" / "pasted.xyz", *PASTED)
    assert CliRunner().invoke(app, argv[1:] + ["set/pasted.xyz"]).exit_code == 1
