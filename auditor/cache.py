"""Result cache: a content hash -> one JSON file on disk.

Entries are plain JSON (never pickle), so a cache copied from elsewhere cannot run
code; a file that does not parse or does not carry its own key is a miss. Every
entry is written through a temporary file and a rename, so a killed run leaves
either the whole entry or none.
"""
from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

from .report import atomic_write

FORMAT = "auditor-cache/1"


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
    """Audit reports (the JSON text of one AuditResult) stored by content key."""

    def __init__(self, root: str | Path):
        self.root = Path(root)
        self.failed_writes = 0   # a cache that cannot be written slows the next run, it does not fail this one

    def path_for(self, key: str) -> Path:
        return self.root / key[:2] / f"{key}.json"

    def get(self, key: str) -> dict | None:
        """The stored result as {"text": report JSON text, "data": parsed dict}, or None
        when absent, unreadable or not ours."""
        try:
            entry = json.loads(self.path_for(key).read_text(encoding="utf-8"))
            if not isinstance(entry, dict) or entry.get("format") != FORMAT or entry.get("key") != key:
                return None
            data = json.loads(entry["report"])
        except (OSError, ValueError, KeyError, TypeError):
            return None
        return {"text": entry["report"], "data": data} if isinstance(data, dict) else None

    def put(self, key: str, report: str) -> None:
        """Store the report text (kept verbatim, so a hit needs no re-encoding)."""
        text = json.dumps({"format": FORMAT, "key": key, "report": report}, ensure_ascii=False)
        try:
            atomic_write(self.path_for(key), text)
        except OSError:
            self.failed_writes += 1
