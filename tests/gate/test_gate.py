"""Batch gate internals: collecting items, the cache, the local engine's crash and timeout
handling, the policy file and the baseline comparison."""

import json
import math
import os
import time
from contextlib import closing

import pytest

from auditor.base.errors import UsageError
from auditor.diagnosis.verdict import Policy
from auditor.gate.baseline import judge
from auditor.gate.cache import ResultCache, content_key, default_cache_dir
from auditor.gate.engines import LocalEngine
from auditor.gate.items import GateOptions, collect_items
from auditor.gate.policy_file import Allowance, GatePolicy, load_gate_policy
from auditor.gate.run import run_batch
from auditor.gate.tasks import run_item
from auditor.pipeline.run import make_spec
from helpers import WATER, write_xyz

OPTIONS = GateOptions(make_spec("sto-3g"), Policy())
H2 = (["H", "H"], [[0, 0, 0], [0, 0, 0.74]])


def flaky_task(payload: str) -> str:
    """Worker task for the engine tests: dies or hangs on marked files, audits the rest."""
    source = json.loads(payload)["source"]
    if "crash" in source:
        os._exit(3)
    if "hang" in source:
        time.sleep(120)
    return run_item(payload)


@pytest.fixture
def tree(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "set" / "sub").mkdir(parents=True)
    write_xyz(tmp_path / "set" / "water.xyz", *WATER)
    write_xyz(tmp_path / "set" / "sub" / "water.xyz", *WATER)
    scan = "".join(f"2\nframe {k}\nH 0 0 0\nH 0 0 {0.6 + 0.1 * k}\n" for k in range(3))
    (tmp_path / "set" / "sub" / "scan.xyz").write_text(scan)
    (tmp_path / "set" / "notes.md").write_text("not a geometry\n")
    return tmp_path


def test_collect_folders_globs_lists_and_frames(tree):
    (tree / "list.txt").write_text("# the set\nset/water.xyz\n\nset/sub/*.xyz\n")
    items = collect_items(["@list.txt", "set", "missing.xyz", "nothing*.xyz"], OPTIONS)
    got = [(it.path, it.frame, it.name) for it in items]
    assert ("set/water.xyz", 1, "set__water") in got
    assert ("set/sub/water.xyz", 1, "set__sub__water") in got
    assert [g for g in got if g[0] == "set/sub/scan.xyz"] == [
        ("set/sub/scan.xyz", k, f"set__sub__scan_f{k:03d}") for k in (1, 2, 3)
    ]
    # the list, the folder and the glob name the same files: each is one item only
    assert len([g for g in got if g[0] == "set/water.xyz"]) == 1
    errors = {it.path: it.error for it in items if it.error}
    assert set(errors) == {"missing.xyz", "nothing*.xyz"}
    assert "no such file" in errors["missing.xyz"] and "matches no file" in errors["nothing*.xyz"]
    assert len({it.name for it in items}) == len(items)


def test_item_names_stay_unique(tree):
    write_xyz(tree / "set" / "water.extxyz", *WATER)  # same stem as set/water.xyz
    items = collect_items(["set/water.xyz", "set/water.extxyz"], OPTIONS)
    assert sorted(it.name for it in items) == ["set__water", "set__water-2"]


def _stored_report():
    """(report text, brief) of a real audit: what the cache stores."""
    from auditor.pipeline.run import audit
    from auditor.report.json_report import dumps_result
    from auditor.report.rows import brief
    from helpers import make_molecule

    result = audit(make_molecule(*WATER), "sto-3g", remedies=False).as_dict()
    return dumps_result(result, compact=True), brief(result)


def test_cache_round_trip_and_corrupt_entries(tmp_path):
    import sqlite3

    from auditor.gate.cache import FORMAT

    cache = ResultCache(tmp_path)
    key = content_key({"a": [1.0, 2.5e-300], "b": "x"})
    assert key == content_key({"b": "x", "a": [1.0, 2.5e-300]})
    assert cache.get(key) is None
    text, short = _stored_report()
    cache.put(key, text, short)
    assert cache.get(key) == {"text": text, "data": short}
    assert cache.keys() == [key]
    cache.close()
    other = dict(short, verdict="fail")  # a brief that is not the one of its report
    with sqlite3.connect(cache.path) as db:  # entries written by someone else
        for k, brief_text, report in [
            ("k-old", "{}", "{}"),
            ("k-cut", '{"verdict": "pa', text),
            ("k-list", "[1, 2]", text),
            ("k-other-brief", json.dumps(other), text),
            ("k-not-json", json.dumps(short), "not json"),
            ("k-foreign", json.dumps(short), '{"schema": "something/1"}'),
            ("k-number", "5", "5"),
        ]:
            db.execute(
                "INSERT INTO results VALUES (?, ?, ?, ?)", (k, FORMAT if k != "k-old" else "x/1", brief_text, report)
            )
    again = ResultCache(tmp_path)
    assert again.get(key) is not None
    bad = ("k-old", "k-cut", "k-list", "k-other-brief", "k-not-json", "k-foreign", "k-number", "k-absent")
    assert all(again.get(k) is None for k in bad)
    again.put("k-not-json", text, short)  # a miss is recomputed and replaced
    assert again.get("k-not-json") == {"text": text, "data": short}
    again.close()


def test_unusable_cache_counts_failures_instead_of_raising(tmp_path):
    (tmp_path / "plain_file").write_text("")
    cache = ResultCache(tmp_path / "plain_file" / "cache")  # cannot be created
    cache.put(content_key({"a": 1}), "{}", {})
    assert cache.failed_writes == 1 and cache.get(content_key({"a": 1})) is None


@pytest.mark.parametrize("kind", ["not-sqlite", "wrong-columns"])
def test_a_cache_file_that_is_not_ours_is_set_aside(tmp_path, kind):
    import sqlite3

    folder = tmp_path / "junk"
    folder.mkdir()
    if kind == "not-sqlite":
        (folder / "results.sqlite").write_bytes(b"not a database at all, " * 100)
    else:
        with closing(sqlite3.connect(folder / "results.sqlite")) as db:
            db.execute("CREATE TABLE results (key TEXT, value BLOB)")
            db.commit()
    junk = ResultCache(folder)
    assert junk.get(content_key({"a": 1})) is None
    text, short = _stored_report()
    junk.put(content_key({"a": 1}), text, short)
    assert junk.failed_writes == 0 and not junk.problem
    assert junk.get(content_key({"a": 1})) is not None
    assert len(junk.notes) == 1 and "set aside" in junk.notes[0]
    assert (folder / "results.sqlite.unusable").exists()
    junk.close()


def test_default_cache_dir_follows_xdg(monkeypatch, tmp_path):
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path))
    assert default_cache_dir() == tmp_path / "auditor"
    monkeypatch.setenv("XDG_CACHE_HOME", "relative/path")  # the convention ignores relative paths
    assert str(default_cache_dir()) == os.path.expanduser("~/.cache/auditor")


def test_key_ignores_file_name_but_not_geometry_or_options(tree):
    cache = ResultCache(tree / "cache")
    write_xyz(tree / "moved.xyz", [s for s in WATER[0]], [[x + 1e-6 for x in r] for r in WATER[1]])
    run = run_batch(["set/water.xyz", "set/sub/water.xyz", "moved.xyz"], OPTIONS, tree / "out", LocalEngine(1), cache)
    # two files with the same geometry share one entry (and one audit); a moved atom is a new entry
    assert run.computed + run.cached == 3 and run.computed == 2
    with closing(ResultCache(tree / "cache")) as c:
        assert len(c.keys()) == 2
    strict = GateOptions(OPTIONS.spec, Policy(caution=1e-4, fail=1e-6))
    again = run_batch(["set/water.xyz"], strict, tree / "out2", LocalEngine(1), cache)
    assert again.cached == 0 and again.computed == 1
    # a hit reports the path of the item it serves, not of the file that filled the cache
    report = json.loads((tree / "out" / "items" / "set__sub__water.json").read_text())
    assert report["input"]["path"] == "set/sub/water.xyz"


def test_worker_crash_and_timeout_mark_only_their_item(tree):
    write_xyz(tree / "set" / "crash.xyz", *H2)
    write_xyz(tree / "set" / "hang.xyz", H2[0], [[0, 0, 0], [0, 0, 0.75]])  # not the same geometry: not one item
    engine = LocalEngine(jobs=2, timeout=3, task=flaky_task)
    run = run_batch(["set"], OPTIONS, tree / "out", engine)
    rows = {r["item"]: r for r in run.rows}
    assert rows["set__crash"]["verdict"] == "error" and "died" in rows["set__crash"]["error"]
    assert rows["set__hang"]["verdict"] == "error" and "timeout" in rows["set__hang"]["error"]
    assert "set/crash.xyz" in rows["set__crash"]["error"]
    good = [r for k, r in rows.items() if k not in ("set__crash", "set__hang")]
    assert len(good) == 5 and all(r["verdict"] == "pass" for r in good)


def test_policy_file_levels_overrides_and_allowances(tmp_path):
    f = tmp_path / "policy.toml"
    f.write_text(
        'caution = 1e-4\nfail = 1e-6\n[basis."AUG-cc-pVDZ"]\nfail = 1e-9\ncaution = 1e-7\n'
        '[[allow]]\npath = "legacy/*.xyz"\nreason = "kept for history"\n'
        '[[allow]]\npath = "scan.xyz"\nframe = 2\nreason = "the short contact is the point"\n'
    )
    gp = load_gate_policy(f)
    assert gp.levels_for("cc-pvdz") == Policy(1e-4, 1e-6)
    assert gp.levels_for("aug-cc-pvdz") == Policy(1e-7, 1e-9)
    assert gp.levels_for("aug-cc-pvdz", fail=1e-8) == Policy(1e-7, 1e-8)
    assert gp.allowance("legacy/a.xyz", 1).reason == "kept for history"
    assert gp.allowance("scan.xyz", 2) is not None and gp.allowance("scan.xyz", 1) is None


@pytest.mark.parametrize(
    "text, words",
    [
        ("caution = \n", "not valid TOML"),
        ("cuation = 1e-5\n", "unknown key"),
        ("caution = 1e-8\nfail = 1e-5\n", "must not exceed"),
        ('[[allow]]\npath = "a.xyz"\n', "needs a reason"),
        ('[basis.x]\nfail = "low"\n', "must be a number"),
    ],
)
def test_bad_policy_files_are_usage_errors(tmp_path, text, words):
    f = tmp_path / "p.toml"
    f.write_text(text)
    with pytest.raises(UsageError) as exc:
        load_gate_policy(f)
    assert words in exc.value.message and str(f) in exc.value.message


def _row(path, verdict, lam, frame=1):
    return {"path": path, "frame": frame, "verdict": verdict, "smallest_eigenvalue": lam}


def test_judge_with_and_without_baseline():
    gp = GatePolicy()
    rows = [_row("a", "pass", 1e-3), _row("b", "fail", 1e-9), _row("c", "error", math.nan, None)]
    judge(rows, gp)
    assert [r["outcome"] for r in rows] == ["ok", "blocked", "blocked"]
    baseline = {
        ("a", 1): _row("a", "pass", 1e-1),
        ("b", 1): _row("b", "fail", 2e-9),
        ("d", 1): _row("d", "fail", 1e-9),
        ("e", 1): _row("e", "pass", 1e-5),
    }
    rows = [
        _row("a", "pass", 1e-3),
        _row("b", "fail", 1e-9),
        _row("d", "pass", 1e-4),
        _row("e", "pass", 1e-3),
        _row("f", "caution", 1e-6),
        _row("g", "fail", 1e-8),
    ]
    judge(rows, gp, baseline, drop_decades=1.0)
    got = {r["path"]: (r["outcome"], r["change"]) for r in rows}
    assert got["a"] == ("regressed", "dropped 2.0 decades")
    assert got["b"] == ("known", "")
    assert got["d"] == ("ok", "fixed")
    assert got["e"] == ("ok", "improved 2.0 decades")
    assert got["f"] == ("ok", "new item")
    assert got["g"] == ("regressed", "new failure")
    rows = [_row("a", "pass", 1e-3)]
    judge(rows, gp, baseline, drop_decades=2.5)
    assert rows[0]["outcome"] == "ok"
    allow = GatePolicy(allowed=(Allowance("g*", None, "legacy set"),))
    rows = [_row("g", "fail", 1e-8), _row("b", "fail", 1e-9)]
    judge(rows, allow)
    assert [(r["outcome"], r["note"]) for r in rows] == [("allowed", "legacy set"), ("blocked", "")]


def test_brief_gives_the_same_summary_row_as_the_whole_report():
    # the cache and the workers hand over a brief; the row must not depend on which one is read
    import auditor
    from auditor.report.json_report import to_json
    from auditor.report.rows import brief, result_row
    from helpers import make_molecule

    pasted = make_molecule(WATER[0] + ["H"], WATER[1] + [WATER[1][1]])  # coincident atoms: error finding
    for mol in (make_molecule(*WATER), pasted):
        full = json.loads(to_json(auditor.audit(mol, "aug-cc-pvdz", remedies=False)))
        assert result_row("p.xyz", 1, "p", brief(full)) == result_row("p.xyz", 1, "p", full)
        assert brief(json.loads(json.dumps(brief(full)))) == brief(full)


def test_spawned_workers_give_the_same_reports(tree, monkeypatch):
    # where no fork server is available the workers are spawned; the reports must not change
    import multiprocessing as mp

    import auditor.gate.engines

    forked = run_batch(["set/water.xyz"], OPTIONS, tree / "forked", LocalEngine(1), None)
    monkeypatch.setattr(auditor.gate.engines, "worker_context", lambda: mp.get_context("spawn"))
    spawned = run_batch(["set/water.xyz"], OPTIONS, tree / "spawned", LocalEngine(1), None)
    assert forked.computed == spawned.computed == 1
    assert (tree / "forked" / "items" / "set__water.json").read_text() == (
        tree / "spawned" / "items" / "set__water.json"
    ).read_text()


def test_command_line_starts_workers_early_only_when_nothing_is_cached(tmp_path, monkeypatch):
    # common practice: start slow imports early only when they will surely be needed
    import auditor.gate.workers as workers
    from auditor.gate.cache import FILE_NAME

    calls = []
    monkeypatch.setattr(workers, "start_server", lambda *a: calls.append(a))
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    cached = tmp_path / "warm"
    cached.mkdir()
    (cached / FILE_NAME).write_bytes(b"")
    expected = {
        ("gate", "set", "-b", "sto-3g"): 1,  # default cache absent
        ("gate", "set", "--no-cache"): 1,
        ("gate", "set", "--cache-dir", str(tmp_path / "empty")): 1,
        ("gate", "set", "--cache-dir", str(cached)): 0,  # results may be cached
        ("gate", "set", f"--cache-dir={cached}"): 0,
        ("gate", "set", "--engine", "dask", "--no-cache"): 0,  # remote workers
        ("gate", "--help"): 0,
        ("check", "a.xyz", "--no-cache"): 0,
    }
    for argv, n in expected.items():
        calls.clear()
        workers.start_early(list(argv))
        assert len(calls) == n, argv


def test_worst_items_come_in_one_order_everywhere():
    # the terminal table and the set overview share one ranking: blocking outcomes, then
    # fail before unreadable, caution, pass; then the smallest eigenvalue (common practice)
    from auditor.report.rows import error_row
    from auditor.report.terminal import worst_rows

    rows = [
        {"path": "p.xyz", "frame": 1, "verdict": "pass", "smallest_eigenvalue": 1e-3, "outcome": "ok"},
        {"path": "c.xyz", "frame": 1, "verdict": "caution", "smallest_eigenvalue": 1e-6, "outcome": "ok"},
        {**error_row("e.xyz", None, "e", "sto-3g", "unreadable"), "outcome": "blocked"},
        {"path": "f.xyz", "frame": 1, "verdict": "fail", "smallest_eigenvalue": 1e-9, "outcome": "blocked"},
        {"path": "g.xyz", "frame": 1, "verdict": "fail", "smallest_eigenvalue": 1e-8, "outcome": "allowed"},
    ]
    order = [r["path"] for r in worst_rows(rows, 5)]
    assert order == ["f.xyz", "e.xyz", "g.xyz", "c.xyz", "p.xyz"]


def test_policy_file_sets_the_contact_levels(tmp_path):
    from auditor.gate.policy_file import load_gate_policy

    f = tmp_path / "p.toml"
    f.write_text("contact_caution = 0.8\ncontact_fail = 0.6\n")
    levels = load_gate_policy(f).levels_for("cc-pvdz")
    assert (levels.contact_caution, levels.contact_fail) == (0.8, 0.6)
    f.write_text("contact_caution = 0.4\ncontact_fail = 0.6\n")  # contradictory
    with pytest.raises(UsageError, match="contact"):
        load_gate_policy(f)
