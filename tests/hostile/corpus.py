"""The hostile-input corpus: each case writes its files, runs the command line (or the
Python API) and states the exit code (or exception type) and a fragment of the message.

Classes: ``code`` (text in a file must never run), ``loss`` (no user file is lost),
``wrong`` (a silently wrong result: a value read as something else or ignored), ``hang``
(FIFOs, devices, huge sizes and ranges, silent servers: refused at once), ``crash`` (no
traceback, no internal error for what a user can cause), ``message`` (one clear line).

Run by tests/hostile/test_corpus.py; ``record.py`` runs it against any checkout.
"""

from __future__ import annotations

import json
import os
import socket
import sqlite3
import subprocess
import sys
import threading
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

WATER_LINES = ["O 0.0 0.0 0.1173", "H 0.0 0.7572 -0.4692", "H 0.0 -0.7572 -0.4692"]
WATER_XYZ = "3\n\n" + "\n".join(WATER_LINES) + "\n"
CANARY = "PWNED"
PY = f"__import__('pathlib').Path('{CANARY}').touch()"


def xyz(first: str = WATER_LINES[0], comment: str = "") -> str:
    """Water with its first atom line (line 3) and comment line (line 2) replaced."""
    return "\n".join(["3", comment, first, *WATER_LINES[1:]]) + "\n"


def extxyz(comment_extra: str = "", first: str = "O 0.0 0.0 0.1173") -> str:
    head = 'Properties=species:S:1:pos:R:3 pbc="F F F"'
    return "\n".join(["3", f"{head} {comment_extra}".strip(), first, *WATER_LINES[1:]]) + "\n"


CHECK = ["-b", "sto-3g", "-o", "out", "-f", "json"]
GATE = ["-b", "sto-3g", "-o", "gout", "--no-cache", "-j", "1"]


@dataclass
class Case:
    """One command-line case. ``files``: name -> text (or bytes, or a builder called with
    the folder); ``args``: after ``auditor``; ``errors``: expected ``error:`` lines on
    standard error (None: not counted); ``alone``: run in a fresh process with a time-out."""

    id: str
    cls: str
    args: list[str]
    code: int
    fragment: str
    files: dict = field(default_factory=dict)
    errors: int | None = -1
    alone: bool = False
    patch: str = ""
    after: Callable[[Path, str, str], None] | None = None
    setup: Callable[[Path], None] | None = None
    strict: bool = True  # every line on standard error starts with error: or note:

    def expected_errors(self) -> int | None:
        if self.errors != -1:
            return self.errors
        return 1 if self.code in (2, 3, 4) else None


# ---------------------------------------------------------------- builders


def _fifo(name: str) -> Callable[[Path], None]:
    def make(folder: Path) -> None:
        os.mkfifo(folder / name)

    return make


def _symlink(name: str, target: str) -> Callable[[Path], None]:
    def make(folder: Path) -> None:
        if target.startswith("fifo:"):
            os.mkfifo(folder / target[5:])
            os.symlink(folder / target[5:], folder / name)
        else:
            os.symlink(target, folder / name)

    return make


_SOCKETS: list[socket.socket] = []


def _unix_socket(name: str) -> Callable[[Path], None]:
    def make(folder: Path) -> None:
        s = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
        s.bind(str(folder / name))
        _SOCKETS.append(s)

    return make


def silent_listener() -> int:
    """A TCP port that accepts connections and never answers (closed by close_resources)."""
    s = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    s.bind(("127.0.0.1", 0))
    s.listen(16)
    _SOCKETS.append(s)
    held: list[socket.socket] = []

    def accept() -> None:
        while True:
            try:
                conn, _ = s.accept()
            except OSError:
                return
            held.append(conn)
            _SOCKETS.append(conn)

    threading.Thread(target=accept, daemon=True).start()
    return s.getsockname()[1]


def close_resources() -> None:
    while _SOCKETS:
        try:
            _SOCKETS.pop().close()
        except OSError:
            pass


def _ase_json(pairs: dict) -> Callable[[Path], None]:
    """w.json, an ASE JSON database of water with these key-value pairs."""

    def make(folder: Path) -> None:
        from ase import Atoms
        from ase.db import connect

        symbols = [ln.split()[0] for ln in WATER_LINES]
        pos = [[float(v) for v in ln.split()[1:]] for ln in WATER_LINES]
        connect(folder / "w.json", type="json").write(Atoms(symbols, positions=pos), **pairs)

    return make


def _big_xyz(megabytes: float) -> str:
    return xyz(comment="x" * int(megabytes * 2**20))


EVIL_BASIS = f'BASIS "ao basis" PRINT\nH    S\n  ({PY} or 1.0, 1.0)\nO    S\n  1.0 1.0\nEND\n'


def _basis(o_exponent: str) -> str:
    return f"H S\n  1.0 1.0\nO S\n  {o_exponent} 1.0\n"


def _policy(text: str) -> dict:
    return {"w.xyz": WATER_XYZ, "policy.toml": text}


def _cache_setup(mutate: str) -> Callable[[Path], None]:
    """A cache holding the entry of w.xyz, then spoiled in one way."""

    def make(folder: Path) -> None:
        cache = folder / "cache"
        if mutate == "not-sqlite":
            cache.mkdir()
            (cache / "results.sqlite").write_bytes(b"this is not a database\n" * 100)
            return
        from typer.testing import CliRunner

        from auditor.cli import app

        here = os.getcwd()
        os.chdir(folder)
        try:
            CliRunner().invoke(app, ["gate", "w.xyz", "-b", "sto-3g", "-o", "warm", "-j", "1", "--cache-dir", "cache"])
        finally:
            os.chdir(here)
        db = sqlite3.connect(cache / "results.sqlite")
        if mutate == "columns":
            db.execute("DROP TABLE results")
            db.execute("CREATE TABLE results (key TEXT PRIMARY KEY, x TEXT)")
            db.execute("INSERT INTO results VALUES ('k', 'v')")
        else:
            sets = {
                "brief": "brief = '[1, 2]'",
                "report": "report = 'not json at all'",
                "foreign": 'report = \'{"schema": "something-else/1"}\'',
                "brief-keys": "brief = '{\"input\": 5}'",
            }[mutate]
            db.execute(f"UPDATE results SET {sets}")
        db.commit()
        db.close()

    return make


def _item_is_report(folder: Path, out: str, err: str) -> None:
    doc = json.loads((folder / "gout" / "items" / "w.json").read_text())
    assert doc.get("schema") == "auditor-report/1", doc


def _no_canary(folder: Path, out: str, err: str) -> None:
    assert not (folder / CANARY).exists(), "text in an input ran as code"


def _unchanged(name: str, text: str) -> Callable[[Path, str, str], None]:
    def check(folder: Path, out: str, err: str) -> None:
        assert (folder / name).read_text() == text

    return check


def _once(fragment: str) -> Callable[[Path, str, str], None]:
    def check(folder: Path, out: str, err: str) -> None:
        assert (out + err).count(fragment) == 1, (out + err).count(fragment)

    return check


def _absent(fragment: str) -> Callable[[Path, str, str], None]:
    def check(folder: Path, out: str, err: str) -> None:
        assert fragment not in out + err

    return check


def _summary_written(folder: Path, out: str, err: str) -> None:
    assert (folder / "gout" / "summary.csv").exists(), "the gate stopped before its summary"
    assert "w.xyz" in (folder / "gout" / "summary.csv").read_text()


def _first_x(value: float) -> Callable[[Path, str, str], None]:
    def check(folder: Path, out: str, err: str) -> None:
        doc = json.loads((folder / "out" / "w.json").read_text())
        assert abs(doc["input"]["atoms"][0]["xyz"][0] - value) < 1e-12

    return check


def _all(*checks: Callable[[Path, str, str], None]) -> Callable[[Path, str, str], None]:
    def check(folder: Path, out: str, err: str) -> None:
        for c in checks:
            c(folder, out, err)

    return check


def _demo(toml: str) -> dict:
    return {"ex/examples.toml": toml, "ex/w.xyz": WATER_XYZ}


def _dask(address: str) -> list[str]:
    return ["gate", "w.xyz", *GATE, "--engine", "dask", "--scheduler", address]


# ---------------------------------------------------------------- the cases


def _c(id, cls, args, code, fragment, files=None, **kw) -> Case:
    return Case(id, cls, args, code, fragment, files if files is not None else {"w.xyz": WATER_XYZ}, **kw)


def _bad(text: str | bytes, name: str = "bad.xyz") -> dict:
    return {name: text}


CHECK_BAD = ["check", "bad.xyz", *CHECK]

CLI_CASES: list[Case] = [
    # -- text in a file never runs as code
    _c(
        "code-basis-python",
        "code",
        ["check", "w.xyz", *CHECK[:0], "-b", "evil.nw", "-o", "out", "-f", "json"],
        3,
        "evil.nw:3: basis data must be plain numbers",
        {"w.xyz": WATER_XYZ, "evil.nw": EVIL_BASIS},
        after=_no_canary,
    ),
    _c("code-xyz-python-coordinate", "code", CHECK_BAD, 3, "bad.xyz:3:", _bad(xyz(f"H {PY} 0 0")), after=_no_canary),
    _c(
        "code-extxyz-python-charge",
        "code",
        ["check", "bad.extxyz", *CHECK],
        3,
        "charge",
        _bad(extxyz(f"charge={PY}"), "bad.extxyz"),
        after=_no_canary,
    ),
    _c(
        "code-python-file-as-geometry",
        "code",
        ["check", "geom.py", *CHECK],
        3,
        "geom.py",
        _bad(f"{PY}\n", "geom.py"),
        after=_no_canary,
    ),
    _c("code-format-never-guessed", "code", ["check", "geom.dat", *CHECK], 3, "geom.dat", _bad(extxyz(), "geom.dat")),
    # -- no user file is lost
    _c(
        "loss-check-out-is-a-file",
        "loss",
        ["check", "w.xyz", "-b", "sto-3g", "-o", "notes.txt", "-f", "json"],
        2,
        "notes.txt",
        {"w.xyz": WATER_XYZ, "notes.txt": "mine\n"},
        after=_unchanged("notes.txt", "mine\n"),
    ),
    _c(
        "loss-prune-out-is-a-file",
        "loss",
        ["prune", "w.xyz", "-b", "sto-3g", "-o", "notes.txt"],
        2,
        "notes.txt",
        {"w.xyz": WATER_XYZ, "notes.txt": "mine\n"},
        after=_unchanged("notes.txt", "mine\n"),
    ),
    _c(
        "loss-gate-out-is-a-file",
        "loss",
        ["gate", "w.xyz", "-b", "sto-3g", "-o", "notes.txt", "--no-cache"],
        2,
        "notes.txt",
        {"w.xyz": WATER_XYZ, "notes.txt": "mine\n"},
        after=_unchanged("notes.txt", "mine\n"),
    ),
    _c(
        "loss-demo-out-is-a-file",
        "loss",
        ["demo", "--examples", "ex", "-o", "notes.txt"],
        2,
        "notes.txt",
        {**_demo('[[example]]\nfile = "w.xyz"\nbasis = "sto-3g"\n'), "notes.txt": "mine\n"},
        after=_unchanged("notes.txt", "mine\n"),
    ),
    _c(
        "loss-check-out-dev-null",
        "loss",
        ["check", "w.xyz", "-b", "sto-3g", "-o", "/dev/null", "-f", "json"],
        2,
        "/dev/null",
    ),
    _c(
        "loss-gate-out-dev-null",
        "loss",
        ["gate", "w.xyz", "-b", "sto-3g", "-o", "/dev/null", "--no-cache"],
        2,
        "/dev/null",
    ),
    _c(
        "loss-check-out-not-writable",
        "loss",
        ["check", "w.xyz", "-b", "sto-3g", "-o", "/proc/self", "-f", "json"],
        2,
        "/proc/self",
    ),
    _c(
        "loss-prune-out-not-writable",
        "loss",
        ["prune", "w.xyz", "-b", "sto-3g", "-o", "/proc/auditor-x"],
        2,
        "/proc/auditor-x",
    ),
    _c(
        "loss-report-over-input",
        "loss",
        ["check", "w.json", "-b", "sto-3g", "-o", ".", "-f", "json"],
        2,
        "refusing to overwrite an input",
        {},
        setup=_ase_json({}),
    ),
    # -- values read as something else, or ignored
    _c("wrong-charge-word", "wrong", CHECK_BAD, 3, "bad.xyz:2: charge", _bad(xyz(comment="charge=abc"))),
    _c("wrong-charge-fraction", "wrong", CHECK_BAD, 3, "bad.xyz:2: charge", _bad(xyz(comment="charge=1.5 mult=2"))),
    _c(
        "wrong-multiplicity-fraction",
        "wrong",
        CHECK_BAD,
        3,
        "bad.xyz:2: multiplicity",
        _bad(xyz(comment="multiplicity=1.5")),
    ),
    _c(
        "wrong-multiplicity-zero",
        "wrong",
        CHECK_BAD,
        3,
        "bad.xyz:2: multiplicity",
        _bad(xyz(comment="charge=0 multiplicity=0")),
    ),
    _c("wrong-multiplicity-negative", "wrong", CHECK_BAD, 3, "bad.xyz:2: multiplicity", _bad(xyz(comment="mult=-2"))),
    _c("wrong-multiplicity-word", "wrong", CHECK_BAD, 3, "bad.xyz:2: multiplicity", _bad(xyz(comment="mult=two"))),
    _c(
        "wrong-extxyz-charge-word",
        "wrong",
        ["check", "bad.extxyz", *CHECK],
        3,
        "bad.extxyz:2: charge",
        _bad(extxyz("charge=abc"), "bad.extxyz"),
    ),
    _c(
        "wrong-extxyz-multiplicity-zero",
        "wrong",
        ["check", "bad.extxyz", *CHECK],
        3,
        "bad.extxyz:2: multiplicity",
        _bad(extxyz("multiplicity=0"), "bad.extxyz"),
    ),
    _c(
        "wrong-ase-json-charge-word",
        "wrong",
        ["check", "w.json", *CHECK],
        3,
        "w.json",
        {},
        setup=_ase_json({"charge": "abc"}),
    ),
    _c("wrong-underscore-digits", "wrong", CHECK_BAD, 3, "bad.xyz:3: coordinate", _bad(xyz("O 1_0 0 0"))),
    _c("wrong-fullwidth-digits", "wrong", CHECK_BAD, 3, "bad.xyz:3: coordinate", _bad(xyz("O １.0 0 0"))),
    _c("wrong-arabic-indic-digits", "wrong", CHECK_BAD, 3, "bad.xyz:3: coordinate", _bad(xyz("O ١ 0 0"))),
    _c(
        "wrong-fortran-exponent-read-right",
        "wrong",
        ["check", "w.xyz", *CHECK],
        0,
        "w.xyz",
        {"w.xyz": xyz("O 1.0D-1 0.0 0.1173")},
        after=_first_x(0.1),
    ),
    _c("wrong-ghost-beyond-the-file", "wrong", ["check", "w.xyz", *CHECK, "--ghost", "5"], 2, "w.xyz"),
    _c("wrong-ghost-zero", "wrong", ["check", "w.xyz", *CHECK, "--ghost", "0"], 2, "--ghost"),
    _c("wrong-ghost-arabic-digit", "wrong", ["check", "w.xyz", *CHECK, "--ghost", "٣"], 2, "--ghost"),
    _c(
        "wrong-latin1-comment",
        "wrong",
        CHECK_BAD,
        3,
        "bad.xyz:2: not UTF-8",
        _bad(xyz(comment="caf\xe9").encode("latin-1")),
    ),
    _c("wrong-element-superscript-digit", "wrong", CHECK_BAD, 3, "bad.xyz:3:", _bad(xyz("² 0 0 0"))),
    _c("wrong-element-arabic-indic-digit", "wrong", CHECK_BAD, 3, "bad.xyz:3:", _bad(xyz("٣ 0 0 0"))),
    _c("wrong-bom-accepted", "wrong", CHECK_BAD, 0, "bad.xyz", _bad(b"\xef\xbb\xbf" + WATER_XYZ.encode())),
    _c("wrong-crlf-accepted", "wrong", CHECK_BAD, 0, "bad.xyz", _bad(WATER_XYZ.replace("\n", "\r\n"))),
    _c(
        "wrong-basis-exponent-zero",
        "wrong",
        ["check", "w.xyz", "-b", "b.nw", "-o", "out", "-f", "json"],
        3,
        "exponent",
        {"w.xyz": WATER_XYZ, "b.nw": _basis("0.0")},
    ),
    _c(
        "wrong-basis-exponent-negative",
        "wrong",
        ["check", "w.xyz", "-b", "b.nw", "-o", "out", "-f", "json"],
        3,
        "exponent",
        {"w.xyz": WATER_XYZ, "b.nw": _basis("-1.0")},
    ),
    _c(
        "wrong-basis-exponent-overflow",
        "wrong",
        ["check", "w.xyz", "-b", "b.nw", "-o", "out", "-f", "json"],
        3,
        "exponent",
        {"w.xyz": WATER_XYZ, "b.nw": _basis("1e400")},
    ),
    _c(
        "wrong-basis-coefficient-nan",
        "wrong",
        ["check", "w.xyz", "-b", "b.nw", "-o", "out", "-f", "json"],
        3,
        "b.nw:4",
        {"w.xyz": WATER_XYZ, "b.nw": "H S\n  1.0 1.0\nO S\n  1.0 nan\n"},
    ),
    _c(
        "wrong-nested-lists-relative",
        "wrong",
        ["gate", "@lists/top.txt", *GATE],
        0,
        "3 item(s)",
        {
            "lists/top.txt": "a.xyz\n@sub/next.txt\n",
            "lists/a.xyz": WATER_XYZ,
            "lists/sub/next.txt": "b.xyz\n@deep/last.txt\n",
            "lists/sub/b.xyz": WATER_XYZ,
            "lists/sub/deep/last.txt": "c.xyz\n",
            "lists/sub/deep/c.xyz": WATER_XYZ,
        },
    ),
    _c("wrong-truncated-file", "wrong", CHECK_BAD, 3, "bad.xyz:1:", _bad("3\n\nO 0 0 0\nH 0 0 1\n")),
    # -- refused at once: special files, sizes, ranges, silent servers
    _c(
        "hang-fifo-geometry",
        "hang",
        ["check", "p.xyz", *CHECK],
        3,
        "not a regular file",
        {},
        alone=True,
        setup=_fifo("p.xyz"),
    ),
    _c(
        "hang-symlink-to-fifo",
        "hang",
        ["check", "l.xyz", *CHECK],
        3,
        "not a regular file",
        {},
        alone=True,
        setup=_symlink("l.xyz", "fifo:p"),
    ),
    _c("hang-dev-zero", "hang", ["check", "/dev/zero", *CHECK], 3, "/dev/zero", {}, alone=True),
    _c("hang-dev-null", "hang", ["check", "/dev/null", *CHECK], 3, "/dev/null", {}, alone=True),
    _c(
        "hang-socket",
        "hang",
        ["check", "s.xyz", *CHECK],
        3,
        "not a regular file",
        {},
        alone=True,
        setup=_unix_socket("s.xyz"),
    ),
    _c(
        "hang-folder-as-file",
        "hang",
        ["prune", "d.xyz", "-b", "sto-3g", "-o", "out"],
        3,
        "folder",
        {"d.xyz/x.txt": "x"},
    ),
    _c(
        "hang-fifo-basis",
        "hang",
        ["check", "w.xyz", "-b", "b.nw", "-o", "out", "-f", "json"],
        3,
        "not a regular file",
        alone=True,
        setup=_fifo("b.nw"),
    ),
    _c(
        "hang-fifo-list",
        "hang",
        ["gate", "@p.txt", "w.xyz", *GATE],
        1,
        "not a regular file",
        alone=True,
        setup=_fifo("p.txt"),
        errors=1,
    ),
    _c(
        "hang-fifo-gate-item",
        "hang",
        ["gate", "p.xyz", "w.xyz", *GATE],
        1,
        "not a regular file",
        alone=True,
        setup=_fifo("p.xyz"),
        errors=1,
    ),
    _c(
        "hang-ghost-huge-range", "hang", ["check", "w.xyz", *CHECK, "--ghost", "1-999999999999"], 2, "w.xyz", alone=True
    ),
    _c(
        "hang-ghost-huge-range-gate",
        "hang",
        ["gate", "w.xyz", *GATE, "--ghost", "2-999999999999"],
        1,
        "w.xyz",
        alone=True,
        errors=1,
    ),
    _c("hang-atom-count-huge", "hang", CHECK_BAD, 3, "bad.xyz:1:", _bad("999999999999\n\nH 0 0 0\n")),
    _c(
        "hang-extxyz-atom-count-huge",
        "hang",
        ["check", "bad.extxyz", *CHECK],
        3,
        "bad.extxyz:1:",
        _bad("999999999999\nProperties=species:S:1:pos:R:3\nH 0 0 0\n", "bad.extxyz"),
        alone=True,
    ),
    _c(
        "hang-oversize-refused",
        "hang",
        ["check", "big.xyz", *CHECK, "--max-input-mb", "1"],
        3,
        "--max-input-mb",
        _bad(_big_xyz(1.5), "big.xyz"),
    ),
    _c(
        "hang-oversize-limit-raised",
        "hang",
        ["check", "big.xyz", *CHECK, "--max-input-mb", "2"],
        0,
        "big.xyz",
        _bad(_big_xyz(1.5), "big.xyz"),
    ),
    _c(
        "hang-size-limit-option-checked", "hang", ["check", "w.xyz", *CHECK, "--max-input-mb", "0"], 2, "--max-input-mb"
    ),
    _c("hang-coordinate-1e200", "hang", CHECK_BAD, 3, "bad.xyz:3:", _bad(xyz("O 1e200 0 0"))),
    _c("hang-coordinate-1e308", "hang", CHECK_BAD, 3, "bad.xyz:3:", _bad(xyz("O 0 -1e308 0"))),
    _c("hang-coordinate-overflow", "hang", CHECK_BAD, 3, "bad.xyz:3:", _bad(xyz("O 0 0 1e400"))),
    _c("hang-coordinate-1e6", "hang", CHECK_BAD, 3, "bad.xyz:3:", _bad(xyz("O 1e6 0 0"))),
    _c("hang-coordinate-nan", "hang", CHECK_BAD, 3, "bad.xyz:3:", _bad(xyz("O nan 0 0"))),
    _c("hang-coordinate-inf", "hang", CHECK_BAD, 3, "bad.xyz:3:", _bad(xyz("O 0 -inf 0"))),
    _c("hang-coordinate-infinity", "hang", CHECK_BAD, 3, "bad.xyz:3:", _bad(xyz("O 0 0 Infinity"))),
    _c(
        "hang-extxyz-nan",
        "hang",
        ["check", "bad.extxyz", *CHECK],
        3,
        "bad.extxyz",
        _bad(extxyz(first="O nan 0 0"), "bad.extxyz"),
    ),
    _c(
        "hang-extxyz-huge",
        "hang",
        ["check", "bad.extxyz", *CHECK],
        3,
        "bad.extxyz",
        _bad(extxyz(first="O 1e200 0 0"), "bad.extxyz"),
    ),
    _c("hang-dask-silent-scheduler", "hang", [], 2, "scheduler", alone=True),
    _c("hang-dask-tls", "hang", _dask("tls://127.0.0.1:9"), 2, "tls://127.0.0.1:9", alone=True),
    _c("hang-dask-unknown-scheme", "hang", _dask("foo://127.0.0.1:9"), 2, "foo://", alone=True),
    _c("hang-dask-malformed", "hang", _dask("tcp://[::1"), 2, "tcp://[::1", alone=True),
    _c("hang-dask-no-port", "hang", _dask("tcp://127.0.0.1"), 2, "tcp://127.0.0.1", alone=True),
    # -- no traceback, no internal error
    _c("crash-element-markup-close", "crash", CHECK_BAD, 3, "'[/]'", _bad(xyz("[/] 0 0 0"))),
    _c("crash-element-markup-style", "crash", CHECK_BAD, 3, "'[bold]X'", _bad(xyz("[bold]X 0 0 0"))),
    _c("crash-path-markup-missing", "crash", ["check", "a[/]b.xyz", *CHECK], 3, "a[/]b.xyz", {}),
    _c("crash-path-markup-valid", "crash", ["check", "[red]w.xyz", *CHECK], 0, "[red]w.xyz", {"[red]w.xyz": WATER_XYZ}),
    _c(
        "crash-basis-name-markup",
        "crash",
        ["check", "w.xyz", "-b", "nosuch[/]", "-o", "out", "-f", "json"],
        3,
        "nosuch[/]",
    ),
    _c("crash-out-markup", "crash", ["check", "w.xyz", "-b", "sto-3g", "-o", "o[/]ut", "-f", "json"], 0, "o[/]ut"),
    _c(
        "crash-gate-extxyz-charge-word",
        "crash",
        ["gate", "w.xyz", "bad.extxyz", *GATE],
        1,
        "bad.extxyz",
        {"w.xyz": WATER_XYZ, "bad.extxyz": extxyz("charge=abc")},
        errors=1,
        after=_summary_written,
    ),
    _c(
        "crash-gate-coordinate-1e200",
        "crash",
        ["gate", "w.xyz", "bad.xyz", *GATE],
        1,
        "bad.xyz:3:",
        {"w.xyz": WATER_XYZ, "bad.xyz": xyz("O 1e200 0 0")},
        errors=1,
        after=_summary_written,
    ),
    _c("crash-gate-path-markup", "crash", ["gate", "[/]x.xyz", "w.xyz", *GATE], 1, "[/]x.xyz", errors=1),
    _c(
        "crash-trial-scf-coincident-atoms",
        "crash",
        ["check", "w.xyz", *CHECK, "--trial-scf", "hf", "--target", "1e-3"],
        1,
        "w.xyz",
        {"w.xyz": "4\n\nO 0 0 0.1173\nH 0 0.7572 -0.4692\nH 0 -0.7572 -0.4692\nH 0 -0.7572 -0.4692\n"},
    ),
    _c(
        "crash-demo-not-toml",
        "crash",
        ["demo", "--examples", "ex", "-o", "out"],
        3,
        "examples.toml",
        _demo("[[example]\nfile="),
    ),
    _c(
        "crash-demo-missing-key",
        "crash",
        ["demo", "--examples", "ex", "-o", "out"],
        3,
        "examples.toml",
        _demo('[[example]]\nfile = "w.xyz"\n'),
    ),
    _c(
        "crash-demo-wrong-types",
        "crash",
        ["demo", "--examples", "ex", "-o", "out"],
        3,
        "examples.toml",
        _demo('[[example]]\nfile = 5\nbasis = ["sto-3g"]\n'),
    ),
    _c(
        "crash-demo-example-not-a-table",
        "crash",
        ["demo", "--examples", "ex", "-o", "out"],
        3,
        "examples.toml",
        _demo('example = "w.xyz"\n'),
    ),
    _c(
        "crash-policy-markup-location",
        "crash",
        ["gate", "w.xyz", *GATE, "--policy", "policy.toml"],
        2,
        '[basis."x[/]"]',
        _policy('[basis."x[/]"]\ncaution = 2.0\n'),
    ),
    _c(
        "crash-cache-not-sqlite",
        "crash",
        ["gate", "w.xyz", "-b", "sto-3g", "-o", "gout", "--cache-dir", "cache"],
        0,
        "note:",
        setup=_cache_setup("not-sqlite"),
        after=_item_is_report,
    ),
    _c(
        "crash-cache-wrong-columns",
        "crash",
        ["gate", "w.xyz", "-b", "sto-3g", "-o", "gout", "--cache-dir", "cache"],
        0,
        "1 audited",
        setup=_cache_setup("columns"),
        after=_item_is_report,
    ),
    _c(
        "crash-cache-brief-not-a-dict",
        "crash",
        ["gate", "w.xyz", "-b", "sto-3g", "-o", "gout", "--cache-dir", "cache"],
        0,
        "1 audited",
        setup=_cache_setup("brief"),
        after=_item_is_report,
    ),
    _c(
        "crash-cache-brief-wrong-keys",
        "crash",
        ["gate", "w.xyz", "-b", "sto-3g", "-o", "gout", "--cache-dir", "cache"],
        0,
        "1 audited",
        setup=_cache_setup("brief-keys"),
        after=_item_is_report,
    ),
    _c(
        "crash-cache-report-not-json",
        "crash",
        ["gate", "w.xyz", "-b", "sto-3g", "-o", "gout", "--cache-dir", "cache"],
        0,
        "1 audited",
        setup=_cache_setup("report"),
        after=_item_is_report,
    ),
    _c(
        "crash-cache-report-foreign",
        "crash",
        ["gate", "w.xyz", "-b", "sto-3g", "-o", "gout", "--cache-dir", "cache"],
        0,
        "1 audited",
        setup=_cache_setup("foreign"),
        after=_item_is_report,
    ),
    # -- one clear line
    _c("message-memory-refusal-names-file", "message", ["check", "w.xyz", *CHECK], 4, "w.xyz", patch="memory"),
    _c(
        "message-prune-memory-names-file",
        "message",
        ["prune", "w.xyz", "-b", "sto-3g", "-o", "out"],
        4,
        "w.xyz",
        patch="memory",
    ),
    _c(
        "message-no-cache-no-cache-count",
        "message",
        ["gate", "w.xyz", *GATE],
        0,
        "1 audited",
        after=_absent("from the cache"),
    ),
    _c(
        "message-glob-once",
        "message",
        ["gate", "nothing*.xyz", "w.xyz", *GATE],
        1,
        "matches no file",
        errors=1,
        after=_once("matches no file"),
    ),
    _c(
        "message-list-not-utf8",
        "message",
        ["gate", "@list.txt", *GATE],
        1,
        "list.txt:2",
        errors=1,
        files={"w.xyz": WATER_XYZ, "list.txt": "w.xyz\ncaf\xe9.xyz\n".encode("latin-1")},
    ),
    _c("message-long-path-one-line", "message", ["check", "x" * 230 + ".xyz", *CHECK], 3, "x" * 230 + ".xyz", {}),
    _c(
        "message-list-nests-too-deeply",
        "message",
        ["gate", "@loop.txt", *GATE],
        2,
        "loop.txt",
        {"loop.txt": "@loop.txt\n"},
    ),
    _c("message-help-atom-list-whole", "message", ["check", "--help"], 0, "4-6,9", errors=None),
    _c("message-unknown-unit", "message", ["check", "w.xyz", *CHECK, "--unit", "parsec"], 2, "--unit"),
    _c("message-basis-for-markup", "message", ["check", "w.xyz", *CHECK, "--basis-for", "X[/]=sto-3g"], 2, "X[/]"),
]


# ---------------------------------------------------------------- readers of other formats


def _h5(name: str, mol: object = None, other: bool = False) -> Callable[[Path], None]:
    """An HDF5 file: a 'mol' entry holding ``mol`` (text, or JSON of a dict/list, or a
    numeric array when ``mol`` is a number), or only an unrelated dataset (``other``)."""

    def make(folder: Path) -> None:
        import h5py
        import numpy as np

        with h5py.File(folder / name, "w") as fh:
            if other:
                fh["scf/e_tot"] = -76.0
            elif isinstance(mol, (int, float)):
                fh["mol"] = np.full(3, mol)
            else:
                fh["mol"] = mol if isinstance(mol, str) else json.dumps(mol)

    return make


def _water_chk(folder: Path) -> None:
    from pyscf import gto, lib

    lib.chkfile.save_mol(gto.M(atom=";".join(WATER_LINES), basis="sto-3g", verbose=0), str(folder / "w.chk"))


def _truncated_chk(folder: Path) -> None:
    _water_chk(folder)
    data = (folder / "w.chk").read_bytes()
    (folder / "w.chk").write_bytes(data[: len(data) // 2])


_H2O_BOHR = [0.0, 0.0, 0.2217, 0.0, 1.4309, -0.8867, 0.0, -1.4309, -0.8867]
_ATOM = [["O", _H2O_BOHR[0:3]], ["H", _H2O_BOHR[3:6]], ["H", _H2O_BOHR[6:9]]]
_SHELLS = {"O": [[0, [5.0, 1.0]], [1, [1.0, 1.0]]], "H": [[0, [1.0, 1.0]]]}


def _chk_mol(**changes) -> dict:
    return {"_atom": _ATOM, "_basis": _SHELLS, "cart": False, **changes}


def _qc(mol: dict | None = None, basis: object = "sto-3g", **changes) -> str:
    m = {"schema_name": "qcschema_molecule", "symbols": ["O", "H", "H"], "geometry": _H2O_BOHR, **(mol or {})}
    return json.dumps(
        {"schema_name": "qcschema_input", "molecule": m, "model": {"method": "hf", "basis": basis}, **changes}
    )


def _qc_basis(exponent: object = 1.0, atom_map: tuple = ("O", "H", "H")) -> dict:
    shell = {"harmonic_type": "spherical", "angular_momentum": [0], "exponents": [exponent], "coefficients": [[1.0]]}
    center = {"electron_shells": [shell]}
    return {
        "schema_name": "qcschema_basis",
        "name": "tiny",
        "center_data": {"O": center, "H": center},
        "atom_map": list(atom_map),
    }


_SDF_HEAD = "water\n  sketch\n\n"


def _sdf(counts: str, atoms: list[str], tail: str = "M  END\n") -> str:
    return _SDF_HEAD + counts + "\n" + "".join(a + "\n" for a in atoms) + tail


_SDF_ATOMS = [f"{x:10.4f}{y:10.4f}{z:10.4f} {el:<3} 0  0" for el, x, y, z in
              (("O", 0, 0, 0.1173), ("H", 0, 0.7572, -0.4692), ("H", 0, -0.7572, -0.4692))]  # fmt: skip
CHK = ["check", "w.chk", "-o", "out", "-f", "json"]
QC = ["check", "q.json", "-o", "out", "-f", "json"]
SDF = ["check", "m.sdf", "-b", "sto-3g", "-o", "out", "-f", "json"]

READER_CASES: list[Case] = [
    _c("reader-chk-not-hdf5", "message", CHK, 3, "w.chk: not an HDF5 file", {"w.chk": "just text\n"}),
    _c("reader-chk-no-molecule", "message", CHK, 3, "without a molecule", {}, setup=_h5("w.chk", other=True)),
    _c(
        "reader-chk-mol-not-json",
        "message",
        CHK,
        3,
        "w.chk: the stored molecule is not JSON",
        {},
        setup=_h5("w.chk", "{oops"),
    ),
    _c("reader-chk-mol-array", "message", CHK, 3, "w.chk: the 'mol' entry is not a text", {}, setup=_h5("w.chk", 1.5)),
    _c(
        "reader-chk-python-in-molecule",
        "code",
        CHK,
        3,
        "w.chk: the stored molecule has no atoms",
        {},
        setup=_h5("w.chk", {"atom": PY, "basis": PY, "_atom": PY}),
        after=_no_canary,
    ),
    _c("reader-chk-no-basis", "message", CHK, 3, "no basis data", {}, setup=_h5("w.chk", {"_atom": _ATOM})),
    _c(
        "reader-chk-basis-infinite",
        "hang",
        CHK,
        3,
        "finite",
        {},
        setup=_h5("w.chk", json.dumps(_chk_mol()).replace("5.0", "1e999")),
    ),
    _c(
        "reader-chk-basis-wrong-shape",
        "crash",
        CHK,
        3,
        "w.chk: basis of O",
        {},
        setup=_h5("w.chk", _chk_mol(_basis={"O": [[0, 1.0]], "H": [[0, [1.0, 1.0]]]})),
    ),
    _c(
        "reader-chk-unknown-element",
        "message",
        CHK,
        3,
        "unknown element",
        {},
        setup=_h5("w.chk", _chk_mol(_atom=[["Qq", [0, 0, 0]], *_ATOM[1:]])),
    ),
    _c("reader-chk-truncated", "crash", CHK, 3, "w.chk", {}, setup=_truncated_chk),
    _c(
        "reader-chk-cartesian-option",
        "wrong",
        [*CHK, "--cartesian"],
        2,
        "carries its basis data",
        {},
        setup=_water_chk,
    ),
    _c("reader-qcschema-truncated", "message", QC, 3, "q.json: not valid JSON", {"q.json": _qc()[:60]}),
    _c(
        "reader-qcschema-geometry-length",
        "message",
        QC,
        3,
        "geometry holds 8 numbers",
        {"q.json": _qc({"geometry": _H2O_BOHR[:8]})},
    ),
    _c("reader-qcschema-real-length", "message", QC, 3, "real has 2 values", {"q.json": _qc({"real": [True, False]})}),
    _c(
        "reader-qcschema-unknown-element",
        "message",
        QC,
        3,
        "unknown element",
        {"q.json": _qc({"symbols": ["O", "H", "Qq"]})},
    ),
    _c("reader-qcschema-nan", "hang", QC, 3, "q.json: not valid JSON", {"q.json": _qc().replace("0.2217", "NaN")}),
    _c(
        "reader-qcschema-huge-coordinate", "hang", QC, 3, "q.json: atom 1", {"q.json": _qc().replace("0.2217", "1e400")}
    ),
    _c("reader-qcschema-wrong-type", "message", QC, 3, "not a QCSchema", {"q.json": _qc({"geometry": ["a"] * 9})}),
    _c(
        "reader-qcschema-missing-symbols",
        "message",
        QC,
        3,
        "not a QCSchema",
        {"q.json": json.dumps({"schema_name": "qcschema_molecule", "geometry": _H2O_BOHR})},
    ),
    _c(
        "reader-qcschema-fragments-overlap",
        "wrong",
        QC,
        3,
        "fragments must hold every atom",
        {"q.json": _qc({"fragments": [[0, 1], [1, 2]]})},
    ),
    _c(
        "reader-qcschema-basis-map",
        "message",
        QC,
        3,
        "atom_map has 2 entries",
        {"q.json": _qc(basis=_qc_basis(atom_map=("O", "H")))},
    ),
    _c("reader-qcschema-basis-exponent", "wrong", QC, 3, "must be positive", {"q.json": _qc(basis=_qc_basis(-1.0))}),
    _c(
        "reader-qcschema-basis-text",
        "code",
        QC,
        3,
        "is not a plain number",
        {"q.json": _qc(basis=_qc_basis(PY))},
        after=_no_canary,
    ),
    _c("reader-qcschema-basis-is-a-file", "wrong", QC, 3, "names a file", {"q.json": _qc(basis="/etc/hostname")}),
    _c("reader-qcschema-no-basis", "message", QC, 2, "no basis", {"q.json": _qc(basis=None)}),
    _c(
        "reader-sdf-truncated",
        "message",
        SDF,
        3,
        "m.sdf:4: the counts line announces 3 atoms",
        {"m.sdf": _sdf("  3  2", _SDF_ATOMS[:1], "")},
    ),
    _c(
        "reader-sdf-v3000",
        "message",
        SDF,
        3,
        "V3000",
        {"m.sdf": _SDF_HEAD + "  0  0  0     0  0            999 V3000\nM  END\n"},
    ),
    _c(
        "reader-sdf-coordinate-word",
        "message",
        SDF,
        3,
        "m.sdf:5: coordinates are not numbers",
        {"m.sdf": _sdf("  3  0", ["    zero      0.0       0.0 O   0  0", *_SDF_ATOMS[1:]])},
    ),
    _c(
        "reader-sdf-unknown-element",
        "message",
        SDF,
        3,
        "m.sdf:5: unknown element",
        {"m.sdf": _sdf("  3  0", [_SDF_ATOMS[0].replace(" O ", " Qq"), *_SDF_ATOMS[1:]])},
    ),
    _c(
        "reader-sdf-counts-word",
        "message",
        SDF,
        3,
        "m.sdf:4: expected a V2000 counts line",
        {"m.sdf": _sdf("  a  b", _SDF_ATOMS)},
    ),
    _c("reader-xyz-dummy-atom", "message", CHECK_BAD, 3, "bad.xyz:3: 'X' names no element", _bad(xyz("X 0 0 0"))),
    _c(
        "reader-extxyz-ghost-column-type",
        "message",
        ["check", "bad.extxyz", *CHECK],
        3,
        "ghost column must be logical",
        _bad(
            "3\nProperties=species:S:1:pos:R:3:ghost:I:1\n" + "".join(f"{ln} 1\n" for ln in WATER_LINES),
            "bad.extxyz",
        ),
    ),
    _c(
        "reader-input-format-unknown",
        "message",
        ["check", "w.xyz", *CHECK, "--input-format", "gaussian"],
        2,
        "--input-format",
    ),
    _c(
        "reader-fragments-overlap",
        "wrong",
        ["check", "w.xyz", *CHECK, "--fragments", "1-2", "--fragments", "2-3"],
        2,
        "two fragments",
    ),
    _c(
        "reader-gate-bad-checkpoint-among-good",
        "crash",
        ["gate", "w.xyz", "bad.chk", "-o", "gout", "--no-cache", "-j", "1", "-b", "sto-3g"],
        1,
        "bad.chk: not an HDF5 file",
        {"w.xyz": WATER_XYZ, "bad.chk": "nothing\n"},
        errors=1,
        after=_summary_written,
    ),
]
CLI_CASES += READER_CASES


def _dask_silent(case: Case) -> Case:
    port = silent_listener()
    case.args = _dask(f"tcp://127.0.0.1:{port}")
    case.fragment = f"tcp://127.0.0.1:{port}"
    return case


#: cases whose arguments need something live (a port), made when the case runs
LIVE = {"hang-dask-silent-scheduler": _dask_silent}


def write_files(case: Case, folder: Path) -> None:
    for name, content in case.files.items():
        path = folder / name
        path.parent.mkdir(parents=True, exist_ok=True)
        if isinstance(content, bytes):
            path.write_bytes(content)
        else:
            path.write_text(content, encoding="utf-8")
    if case.setup:
        case.setup(folder)


def apply_patch(name: str, monkeypatch) -> None:
    """``memory``: the machine has almost no memory left (the guard refuses every audit)."""
    if name != "memory":
        return
    import auditor.numerics.memory as memory

    for attr, value in (("_SMALL_BYTES", 0), ("available_bytes", lambda: 1)):
        if monkeypatch is None:
            setattr(memory, attr, value)
        else:
            monkeypatch.setattr(memory, attr, value)


def check_outcome(case: Case, folder: Path, code: int, out: str, err: str) -> None:
    text = out + err
    assert code == case.code, f"exit {code}, expected {case.code}: {text[-2000:]}"
    assert "Traceback" not in text and "internal error" not in text, text[-2000:]
    assert case.fragment in text, f"{case.fragment!r} not in {text[-2000:]!r}"
    lines = [ln for ln in err.splitlines() if ln.strip()]
    want = case.expected_errors()
    if want is not None:
        assert sum(ln.startswith("error:") for ln in lines) == want, err
    if case.strict:
        assert all(ln.startswith(("error:", "note:")) for ln in lines), err
    if case.after:
        case.after(folder, out, err)


# ---------------------------------------------------------------- the Python API


@dataclass
class ApiCase:
    id: str
    cls: str
    call: Callable[[Path], object]
    expected: str  # exception type name, or "returned"
    fragment: str = ""
    alone: bool = False
    files: dict = field(default_factory=dict)


def _mol(coords, symbols=("O", "H", "H")):
    import numpy as np

    from auditor import Molecule

    return Molecule(tuple(symbols), np.asarray(coords, dtype=float), (False,) * len(symbols), source="mem")


_W = [[0.0, 0.0, 0.1173], [0.0, 0.7572, -0.4692], [0.0, -0.7572, -0.4692]]


def _api_fifo(folder: Path):
    import auditor

    os.mkfifo(folder / "p.xyz")
    return auditor.read_geometry(folder / "p.xyz")


def _api_prune_doc(doc) -> Callable[[Path], object]:
    def call(folder: Path):
        import auditor

        (folder / "d.json").write_text(json.dumps(doc))
        return auditor.load_pruned(folder / "d.json")

    return call


def _api(fn: Callable) -> Callable[[Path], object]:
    return fn


def _audit_file(text: str, **kw) -> Callable[[Path], object]:
    def call(folder: Path):
        import auditor

        (folder / "w.xyz").write_text(text)
        return auditor.audit(folder / "w.xyz", "sto-3g", remedies=False, **kw)

    return call


def _prepare(coords) -> Callable[[Path], object]:
    def call(folder: Path):
        from auditor.pipeline.run import make_spec, prepare

        return prepare(_mol(coords), make_spec("sto-3g"))

    return call


def _audit_mol(coords, **kw) -> Callable[[Path], object]:
    def call(folder: Path):
        import auditor

        return auditor.audit(_mol(coords), "sto-3g", remedies=False, **kw)

    return call


def _audit_atoms(positions, info=None) -> Callable[[Path], object]:
    def call(folder: Path):
        from ase import Atoms

        import auditor

        return auditor.audit(Atoms("OHH", positions=positions, info=info or {}), "sto-3g", remedies=False)

    return call


def _audit_basis(text: str) -> Callable[[Path], object]:
    def call(folder: Path):
        import auditor

        (folder / "b.nw").write_text(text)
        return auditor.audit(_mol(_W), str(folder / "b.nw"), remedies=False)

    return call


def _audit_source(source) -> Callable[[Path], object]:
    def call(folder: Path):
        import auditor

        return auditor.audit(source, "sto-3g", remedies=False)

    return call


def _read(text, name="w.xyz", **kw) -> Callable[[Path], object]:
    def call(folder: Path):
        import auditor

        path = folder / name
        if isinstance(text, bytes):
            path.write_bytes(text)
        else:
            path.write_text(text)
        return auditor.read_geometry(path, **kw)

    return call


def _load_molecules_ghost(ghost) -> Callable[[Path], object]:
    def call(folder: Path):
        import auditor

        (folder / "w.xyz").write_text(WATER_XYZ)
        return auditor.load_molecules(folder / "w.xyz", ghost=ghost)

    return call


def _load_pruned_fifo(folder: Path):
    import auditor

    os.mkfifo(folder / "p.json")
    return auditor.load_pruned(folder / "p.json")


_EVIL_DOC = {"atoms": "O 0 0 0; H 0 0 1; H 0 1 0", "basis": {"O": "sto-3g", "H": f"H S\n ({PY} or 1.0) 1.0\n"}}

API_CASES: list[ApiCase] = [
    ApiCase("api-read-fifo", "hang", _api_fifo, "InputError", "not a regular file", alone=True),
    ApiCase("api-read-folder", "hang", lambda f: __import__("auditor").read_geometry(f), "InputError", "folder"),
    ApiCase("api-read-nan", "hang", _read(xyz("O nan 0 0")), "InputError", "w.xyz:3"),
    ApiCase("api-read-1e300", "hang", _read(xyz("O 1e300 0 0")), "InputError", "w.xyz:3"),
    ApiCase("api-read-latin1", "wrong", _read(xyz(comment="\xe9").encode("latin-1")), "InputError", "w.xyz:2"),
    ApiCase("api-read-charge-word", "wrong", _read(xyz(comment="charge=abc")), "InputError", "w.xyz:2"),
    ApiCase("api-read-size-limit", "hang", _read(_big_xyz(1.2), max_bytes=2**20), "InputError", "MiB"),
    ApiCase("api-read-extxyz-charge-word", "crash", _read(extxyz("charge=abc"), "w.extxyz"), "InputError", "charge"),
    ApiCase("api-read-unit", "crash", _read(WATER_XYZ, unit="parsec"), "UsageError", "unit"),
    ApiCase("api-prepare-coordinate-1e200", "crash", _prepare([[1e200, 0, 0], *_W[1:]]), "InputError", "atom 1"),
    ApiCase("api-prepare-coordinate-nan", "crash", _prepare([[float("nan"), 0, 0], *_W[1:]]), "InputError", "atom 1"),
    ApiCase("api-audit-molecule-1e308", "crash", _audit_mol([[0, 1e308, 0], *_W[1:]]), "InputError", "atom 1"),
    ApiCase("api-audit-atoms-nan", "crash", _audit_atoms([[0, 0, float("nan")], *_W[1:]]), "InputError", "atom 1"),
    ApiCase("api-audit-atoms-charge-word", "wrong", _audit_atoms(_W, {"charge": "abc"}), "InputError", "charge"),
    ApiCase(
        "api-audit-atoms-multiplicity-zero",
        "wrong",
        _audit_atoms(_W, {"multiplicity": 0}),
        "InputError",
        "multiplicity",
    ),
    ApiCase("api-audit-file-coordinate-1e200", "crash", _audit_file(xyz("O 1e200 0 0")), "InputError", "w.xyz:3"),
    ApiCase(
        "api-audit-ghost-huge-range",
        "hang",
        _audit_file(WATER_XYZ, ghost="1-999999999999"),
        "UsageError",
        "w.xyz",
        alone=True,
    ),
    ApiCase("api-audit-ghost-beyond", "wrong", _audit_file(WATER_XYZ, ghost=[7]), "UsageError", "w.xyz"),
    ApiCase("api-audit-ghost-negative", "wrong", _audit_file(WATER_XYZ, ghost=[-1]), "UsageError", "-1"),
    ApiCase(
        "api-load-molecules-ghost-huge",
        "hang",
        _load_molecules_ghost("3-99999999999999"),
        "UsageError",
        "w.xyz",
        alone=True,
    ),
    ApiCase("api-audit-frame-zero", "crash", _audit_file(WATER_XYZ, frame=0), "UsageError", "frame"),
    ApiCase("api-audit-source-number", "crash", _audit_source(12345), "UsageError", "12345"),
    ApiCase("api-audit-source-none", "crash", _audit_source(None), "UsageError", "None"),
    ApiCase("api-audit-basis-exponent-zero", "wrong", _audit_basis(_basis("0")), "InputError", "exponent"),
    ApiCase(
        "api-audit-basis-number", "crash", lambda f: __import__("auditor").audit(_mol(_W), 5), "UsageError", "basis"
    ),
    ApiCase("api-load-pruned-garbage", "crash", _api_prune_doc({"atoms": 5, "basis": 7}), "InputError", "d.json"),
    ApiCase("api-load-pruned-list", "crash", _api_prune_doc([1, 2]), "InputError", "d.json"),
    ApiCase("api-load-pruned-basis-text", "code", _api_prune_doc(_EVIL_DOC), "InputError", "d.json"),
    ApiCase(
        "api-load-pruned-fifo",
        "hang",
        _load_pruned_fifo,
        "InputError",
        "not a regular file",
        alone=True,
    ),
]

API_CASES_BY_ID = {c.id: c for c in API_CASES}


LAUNCH = Path(__file__).with_name("launch.py")


def launch(
    args: list[str], timeout: float, cwd: Path | None = None, env: dict | None = None
) -> subprocess.CompletedProcess | None:
    """Run launch.py with ``args`` in a fresh process; None when it still runs after ``timeout`` s."""
    try:
        return subprocess.run(
            [sys.executable, str(LAUNCH), *args],
            cwd=cwd,
            capture_output=True,
            text=True,
            timeout=timeout,
            stdin=subprocess.DEVNULL,
            env=env,
        )
    except subprocess.TimeoutExpired:
        return None


def cli_args(case: Case) -> list[str]:
    """launch.py's arguments for a command-line case (its patch first)."""
    return ["cli", *(["--patch", case.patch] if case.patch else []), *case.args]


def run_api_case(case: ApiCase, folder: Path) -> str:
    """``exception: TYPE: MESSAGE`` or ``returned`` (run inside ``folder``)."""
    here = os.getcwd()
    os.chdir(folder)
    try:
        case.call(folder)
    except BaseException as exc:  # noqa: BLE001 - the type is what the case checks
        first = str(exc).splitlines()[0] if str(exc) else ""
        return f"exception: {type(exc).__name__}: {first}"
    finally:
        os.chdir(here)
    return "returned"
