"""JSON report (schema ``auditor-report/1``, documented in docs/json.md)."""

from __future__ import annotations

import json
from pathlib import Path

from ..base.files import atomic_write
from ..base.jsonio import _clean


def to_json(result, compact: bool = False) -> str:
    """Deterministic JSON text of a result (non-finite numbers become null).

    ``compact``: one line without indentation (what ``gate`` stores per item; about
    five times faster to write, the same content)."""
    return dumps_result(result.as_dict(), compact)


def dumps_result(data: dict, compact: bool = False) -> str:
    """``to_json`` for a result already turned into a dict (``as_dict``, or parsed JSON)."""
    options = dict(indent=None, separators=(",", ":")) if compact else dict(indent=2)
    try:  # usually nothing needs cleaning: let the encoder find out (it refuses NaN and numpy types)
        return json.dumps(data, ensure_ascii=False, allow_nan=False, **options) + "\n"
    except (ValueError, TypeError):
        return json.dumps(_clean(data), ensure_ascii=False, allow_nan=False, **options) + "\n"


def write_json(result, path: Path) -> Path:
    atomic_write(path, to_json(result))
    return path
