"""JSON report (schema ``auditor-report/1``, documented in the README)."""
from __future__ import annotations

import json
from pathlib import Path

from . import atomic_write


def _clean(x):
    t = type(x)
    if t is float:
        return x if x - x == 0.0 else None  # NaN and +-inf become null
    if t is dict:
        return {k: _clean(v) for k, v in x.items()}
    if t is list or t is tuple:
        return [_clean(v) for v in x]
    if t is str or t is int or t is bool or x is None:
        return x
    if isinstance(x, float):
        return _clean(float(x))
    if isinstance(x, dict):
        return {k: _clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_clean(v) for v in x]
    if hasattr(x, "item") and callable(x.item):  # numpy scalars
        return _clean(x.item())
    return x


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
