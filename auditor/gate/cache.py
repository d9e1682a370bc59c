"""Result cache: a content hash -> the JSON text of one audit report (and its brief), in one SQLite file.

Entries are JSON text in a table (never pickle), so a cache copied from elsewhere
cannot run code; an entry of another format, or of the wrong shape (a brief that is not
the one of its report, a report that is not JSON or not an auditor report), is a miss:
recomputed and replaced. A file that is not an SQLite database of this layout is set
aside (renamed) with one note, and a new one is started.
Every entry is its own transaction (write-ahead log), so a run killed at any point
leaves each entry either whole or absent, and the next run resumes. One file instead
of a file per entry: creating hundreds of small files costs more than the audits of
small molecules on some file systems.
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path
from typing import TYPE_CHECKING

from ..report.rows import brief, result_row

if TYPE_CHECKING:
    import sqlite3

FORMAT = "auditor-cache/5"
FILE_NAME = "results.sqlite"
COLUMNS = ("key", "format", "brief", "report")
REPORT_SCHEMA = "auditor-report/1"
VERDICTS = ("pass", "caution", "fail")


def _number(x: object) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool)


def checked_entry(brief_text: object, report_text: object) -> dict | None:
    """The brief of a stored entry when the entry is whole and ours: the report parses as
    an auditor report, the brief is exactly the one of that report and makes a summary
    row of the right types; else None (a miss)."""
    if not isinstance(brief_text, str) or not isinstance(report_text, str):
        return None
    try:
        data, doc = json.loads(brief_text), json.loads(report_text)
    except ValueError:
        return None
    if not isinstance(doc, dict) or doc.get("schema") != REPORT_SCHEMA or not isinstance(data, dict):
        return None
    try:
        if brief(doc) != data:
            return None
        row = result_row("", 1, "", data)
    except (KeyError, TypeError, IndexError, AttributeError, ValueError):
        return None
    frame, n_frames = data["input"].get("frame"), data["input"].get("n_frames")
    if row["verdict"] not in VERDICTS or not _number(row["smallest_eigenvalue"]) or not _number(row["threshold"]):
        return None
    if not all(isinstance(v, int) and not isinstance(v, bool) for v in (frame, n_frames)):
        return None
    return data


def default_cache_dir() -> Path:
    """$XDG_CACHE_HOME/auditor, or ~/.cache/auditor when that is unset or not absolute."""
    xdg = os.environ.get("XDG_CACHE_HOME", "")
    base = Path(xdg) if xdg and os.path.isabs(xdg) else Path.home() / ".cache"
    return base / "auditor"


def content_key(content: dict) -> str:
    """SHA-256 of the canonical JSON text of ``content`` (sorted keys, exact floats)."""
    text = json.dumps(content, sort_keys=True, separators=(",", ":"), ensure_ascii=True, allow_nan=False)
    return hashlib.sha256(text.encode("ascii")).hexdigest()


def file_digest(path: str | Path) -> str:
    """SHA-256 of a file's bytes."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


class ResultCache:
    """Audit reports (the JSON text of one AuditResult) stored by content key in
    ROOT/results.sqlite. A cache that cannot be opened or written slows the next run;
    it never fails this one (``failed_writes`` counts what could not be stored)."""

    def __init__(self, root: str | Path) -> None:
        self.root = Path(root)
        self.path = self.root / FILE_NAME
        self.failed_writes = 0
        self.problem = ""  # why the cache is unusable, when it is
        self.notes: list[str] = []  # what was done about a damaged cache file (printed once)
        self._db: sqlite3.Connection | None = None

    def _connect(self, create: bool) -> sqlite3.Connection | None:
        if self._db is not None or self.problem:
            return self._db
        if not create and not self.path.exists():
            return None
        import sqlite3  # here, not at the top: loaded only by runs that use a cache

        try:
            self.root.mkdir(parents=True, exist_ok=True)
            try:
                db = self._open()
            except sqlite3.DatabaseError as exc:  # not a database, or not of this layout
                self._set_aside(str(exc))
                db = self._open()
        except (OSError, sqlite3.Error) as exc:
            self.problem = f"{self.path}: {exc}"
            return None
        self._db = db
        return db

    def _open(self) -> sqlite3.Connection:
        import sqlite3  # here, not at the top: loaded only by runs that use a cache

        if self.path.exists() and not self.path.is_file():
            raise OSError(f"{self.path} is not a regular file")
        db = sqlite3.connect(self.path, timeout=30.0, isolation_level=None)  # autocommit: one entry, one transaction
        try:
            db.execute("PRAGMA trusted_schema = OFF")
            db.execute("PRAGMA journal_mode = WAL")
            # survives a killed process; only a power cut may lose the newest entries
            db.execute("PRAGMA synchronous = NORMAL")
            db.execute(
                "CREATE TABLE IF NOT EXISTS results (key TEXT PRIMARY KEY, format TEXT NOT NULL, "
                "brief TEXT NOT NULL, report TEXT NOT NULL)"
            )
            columns = tuple(r[1] for r in db.execute("PRAGMA table_info(results)"))
            if columns != COLUMNS:
                raise sqlite3.DatabaseError(f"table results has columns {', '.join(columns)}")
        except BaseException:
            db.close()
            raise
        return db

    def _set_aside(self, why: str) -> None:
        """Rename a cache file that is not ours to use (and its journal files) out of the way."""
        aside = self.path.with_name(self.path.name + ".unusable")
        for suffix in ("-wal", "-shm"):
            self.path.with_name(self.path.name + suffix).unlink(missing_ok=True)
        os.replace(self.path, aside)
        self.notes.append(f"{self.path} was not a usable result cache ({why}); set aside as {aside.name}")

    def get(self, key: str) -> dict | None:
        """The stored result as {"text": report JSON text, "data": its brief (a dict)},
        or None when absent, unreadable or not ours."""
        import sqlite3  # here, not at the top: loaded only by runs that use a cache

        db = self._connect(create=False)
        if db is None:
            return None
        try:
            row = db.execute("SELECT format, brief, report FROM results WHERE key = ?", (key,)).fetchone()
        except sqlite3.Error:
            return None
        if row is None or row[0] != FORMAT:
            return None
        data = checked_entry(row[1], row[2])
        return {"text": row[2], "data": data} if data is not None else None

    def put(self, key: str, report: str, brief: dict) -> None:
        """Store the report text verbatim (a hit needs no re-encoding) with its brief
        (what the summary row needs, so that a hit does not parse the whole report)."""
        import sqlite3  # here, not at the top: loaded only by runs that use a cache

        db = self._connect(create=True)
        if db is None:
            self.failed_writes += 1
            return
        try:
            db.execute(
                "INSERT OR REPLACE INTO results (key, format, brief, report) VALUES (?, ?, ?, ?)",
                (key, FORMAT, json.dumps(brief), report),
            )
        except (sqlite3.Error, TypeError, ValueError):
            self.failed_writes += 1

    def keys(self) -> list[str]:
        """Keys of the stored entries of this format (sorted)."""
        import sqlite3  # here, not at the top: loaded only by runs that use a cache

        db = self._connect(create=False)
        if db is None:
            return []
        try:
            return [k for (k,) in db.execute("SELECT key FROM results WHERE format = ? ORDER BY key", (FORMAT,))]
        except sqlite3.Error:
            return []

    def close(self) -> None:
        if self._db is not None:
            self._db.close()
            self._db = None
