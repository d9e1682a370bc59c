"""JSON text of results: plain types only, non-finite numbers as null, fixed key order.

Result objects are dataclasses; ``to_jsonable`` turns them into JSON-ready dictionaries
with their fields in declaration order. Field metadata can rename a key (``JSON_NAME``) or
leave it out when its value is None (``OMIT_NONE``).
"""

from __future__ import annotations

import json
from dataclasses import fields, is_dataclass
from typing import Any

import numpy as np

JSON_NAME = "json_name"
OMIT_NONE = "omit_none"
_PLAIN = (str, int, float, bool, type(None))


def to_jsonable(x: Any) -> Any:
    """Plain JSON types from dataclasses, mappings, sequences and numpy values. Floats stay
    as they are (``dumps`` turns non-finite ones into null)."""
    if type(x) in _PLAIN:
        return x
    if is_dataclass(x) and not isinstance(x, type):
        out = {}
        for f in fields(x):
            value = getattr(x, f.name)
            if value is None and f.metadata.get(OMIT_NONE):
                continue
            out[f.metadata.get(JSON_NAME, f.name)] = to_jsonable(value)
        return out
    if isinstance(x, dict):
        return {k: to_jsonable(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [v if type(v) in _PLAIN else to_jsonable(v) for v in x]
    if isinstance(x, np.ndarray):
        return to_jsonable(x.tolist())
    if isinstance(x, np.generic):
        return x.item()
    return x


def clean(x: Any) -> Any:
    """``x`` with NaN and infinities as None and numpy scalars as Python numbers."""
    t = type(x)
    if t is float:
        return x if x - x == 0.0 else None  # NaN and +-inf become null
    if t is dict:
        return {k: clean(v) for k, v in x.items()}
    if t is list or t is tuple:
        return [clean(v) for v in x]
    if t is str or t is int or t is bool or x is None:
        return x
    if isinstance(x, float):
        return clean(float(x))
    if isinstance(x, dict):
        return {k: clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [clean(v) for v in x]
    if hasattr(x, "item") and callable(x.item):  # numpy scalars
        return clean(x.item())
    return x


def dumps(data: Any, compact: bool = False) -> str:
    """Deterministic JSON text of plain data (non-finite numbers become null). ``compact``:
    one line without indentation, the same content."""
    options: dict = dict(indent=None, separators=(",", ":")) if compact else dict(indent=2)
    try:  # usually nothing needs cleaning: let the encoder find out (it refuses NaN and numpy types)
        return json.dumps(data, ensure_ascii=False, allow_nan=False, **options) + "\n"
    except (ValueError, TypeError):
        return json.dumps(clean(data), ensure_ascii=False, allow_nan=False, **options) + "\n"
