"""The comparison with a baseline summary, and the outcome of every row."""

from __future__ import annotations

import io
import math
from pathlib import Path
from typing import Any

from ..base.errors import InputError, UsageError
from ..base.textio import read_bytes
from ..report.rows import FAILING
from .policy_file import GatePolicy


def row_key(path: str, frame: Any) -> tuple[str, int | None]:
    """(path, frame) with a missing frame (an unreadable file) as None."""
    if frame is None or (isinstance(frame, float) and math.isnan(frame)):
        return str(path), None
    try:
        return str(path), int(frame)
    except (TypeError, ValueError):
        return str(path), None


def load_baseline(path: str | Path) -> dict:
    """Rows of an earlier summary (CSV or Parquet) by (path, frame)."""
    import pandas as pd  # here, not at the top: slow to import, and only a baseline needs it

    path = Path(path)
    try:
        data = io.BytesIO(read_bytes(path, "baseline summary"))  # a regular file of bounded size
        df = pd.read_parquet(data) if path.suffix.lower() in (".parquet", ".pq") else pd.read_csv(data)
    except InputError as exc:
        raise UsageError(exc.message) from None
    except Exception as exc:  # pandas and pyarrow raise many types; the message is what matters
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise UsageError(f"{path}: cannot read baseline summary ({first})") from None
    missing = {"path", "frame", "verdict", "smallest_eigenvalue"} - set(df.columns)
    if missing:
        raise UsageError(f"{path}: not a gate summary (missing column(s) {', '.join(sorted(missing))})")
    out = {}
    for rec in df.to_dict("records"):
        out[row_key(rec["path"], rec["frame"])] = rec
    return out


def _log10(x: Any) -> float | None:
    try:
        x = float(x)
    except (TypeError, ValueError):
        return None
    if math.isnan(x):
        return None
    return math.log10(max(x, 1e-300))


def judge(
    rows: list[dict], policy: GatePolicy, baseline: dict | None = None, drop_decades: float | None = None
) -> None:
    """Set ``outcome``, ``change`` and ``note`` on every summary row.

    Outcomes: ok; blocked (fails, no baseline); regressed (baseline mode: a new
    failure or a drop of the smallest eigenvalue by more than ``drop_decades``);
    known (fails now and in the baseline); allowed (the policy file lets it fail).
    """
    decades = policy.drop_decades if drop_decades is None else drop_decades
    for row in rows:
        failing = row["verdict"] in FAILING
        change, regressed = "", False
        if baseline is not None:
            old = baseline.get(row_key(row["path"], row["frame"]))
            if old is None:
                change, regressed = ("new failure", True) if failing else ("new item", False)
            else:
                was_failing = str(old["verdict"]) in FAILING
                before, now = _log10(old["smallest_eigenvalue"]), _log10(row["smallest_eigenvalue"])
                drop = before - now if before is not None and now is not None else None
                if failing and not was_failing:
                    change, regressed = "new failure", True
                elif was_failing and not failing:
                    change = "fixed"
                elif drop is not None and drop > decades:
                    change, regressed = f"dropped {drop:.1f} decades", True
                elif drop is not None and -drop > decades:
                    change = f"improved {-drop:.1f} decades"
        allow = policy.allowance(row["path"], row["frame"])
        note = ""
        if allow is not None and (failing or regressed):
            outcome, note = "allowed", allow.reason
        elif regressed:
            outcome = "regressed"
        elif failing:
            outcome = "known" if baseline is not None else "blocked"
        else:
            outcome = "ok"
        row.update(outcome=outcome, change=change, note=note)


def improvements(rows: list[dict]) -> list[dict]:
    return [r for r in rows if r.get("change") == "fixed" or str(r.get("change", "")).startswith("improved")]
