"""JSON report (schema ``auditor-report/1``, documented in the README)."""
from __future__ import annotations

import json
import math
from pathlib import Path

from . import atomic_write


def _clean(x):
    if isinstance(x, float):
        return x if math.isfinite(x) else None
    if isinstance(x, dict):
        return {k: _clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_clean(v) for v in x]
    if hasattr(x, "item") and callable(x.item):  # numpy scalars
        return _clean(x.item())
    return x


def to_json(result) -> str:
    """Deterministic JSON text of a result (non-finite numbers become null)."""
    return json.dumps(_clean(result.as_dict()), indent=2, ensure_ascii=False, allow_nan=False) + "\n"


def write_json(result, path: Path) -> Path:
    atomic_write(path, to_json(result))
    return path
