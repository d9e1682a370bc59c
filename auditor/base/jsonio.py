"""JSON text of results: plain types only, non-finite numbers as null, fixed key order."""

from __future__ import annotations


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
