"""The summary-row model: one row per item, read from a JSON result; the order of verdicts and
gate outcomes (worst first) that every list of items uses."""

from __future__ import annotations

import math
import sys
from typing import Any

#: Column order of summary.csv / summary.parquet (documented in docs/json.md).
COLUMNS = (
    "path",
    "frame",
    "item",
    "basis",
    "n_atoms",
    "n_functions",
    "smallest_eigenvalue",
    "condition_number",
    "verdict",
    "top_atom",
    "threshold",
    "n_removed",
    "outcome",
    "change",
    "note",
    "reason",
    "finding",
    "error",
)


_INTS = ("frame", "n_atoms", "n_functions", "n_removed")


_FLOATS = ("smallest_eigenvalue", "condition_number", "threshold")


#: verdicts that count as failing the gate
FAILING = ("fail", "error")


#: outcomes that make the gate exit non-zero
BLOCKING = ("blocked", "regressed")


#: worst first, for every list of items (terminal table, set overview)
OUTCOME_RANK = {"regressed": 0, "blocked": 1, "allowed": 2, "known": 3, "ok": 4}


VERDICT_RANK = {"fail": 0, "error": 1, "caution": 2, "pass": 3}


def main_reason(result: dict) -> str:
    """The one sentence that decided the verdict (the deciding finding's own message)."""
    return str(result.get("verdict_reason", ""))


def brief(result: dict) -> dict:
    """The parts of a JSON result that ``result_row`` and the input check of a cached
    result read, in the same layout (a few hundred bytes instead of the whole report)."""
    inp, spec, rec = result["input"], result["spectrum"], result["recommendation"]
    return {
        "input": {k: inp.get(k) for k in ("path", "frame", "n_frames", "basis", "n_atoms", "n_functions")},
        "spectrum": {k: spec.get(k) for k in ("smallest", "condition_number")},
        "verdict": result["verdict"],
        "verdict_reason": result.get("verdict_reason", ""),
        "verdict_finding": result.get("verdict_finding"),
        "causes": {"atoms": result["causes"]["atoms"][:1]},
        "recommendation": {k: rec.get(k) for k in ("threshold", "n_removed")},
    }


def result_row(path: str, frame: int | None, item: str, result: dict) -> dict:
    """Summary row of one audited item, read from its JSON result."""
    spec, rec, atoms = result["spectrum"], result["recommendation"], result["causes"]["atoms"]
    cond = spec["condition_number"]
    return {
        "path": path,
        "frame": frame,
        "item": item,
        "basis": result["input"]["basis"],
        "n_atoms": result["input"]["n_atoms"],
        "n_functions": result["input"]["n_functions"],
        "smallest_eigenvalue": spec["smallest"],
        "condition_number": math.inf if cond is None else cond,
        "verdict": result["verdict"],
        "top_atom": f"{atoms[0]['element']}{atoms[0]['atom']}" if atoms and result["verdict"] != "pass" else "",
        "threshold": math.nan if rec["threshold"] is None else rec["threshold"],
        "n_removed": rec["n_removed"],
        "reason": main_reason(result),
        "finding": result.get("verdict_finding") or "",
        "error": "",
    }


def error_row(path: str, frame: int | None, item: str, basis: str, message: str) -> dict:
    """Summary row of an item that could not be audited."""
    return {
        "path": path,
        "frame": frame,
        "item": item,
        "basis": basis,
        "n_atoms": None,
        "n_functions": None,
        "smallest_eigenvalue": math.nan,
        "condition_number": math.nan,
        "verdict": "error",
        "top_atom": "",
        "threshold": math.nan,
        "n_removed": None,
        "reason": message,
        "finding": "",
        "error": message,
    }


def item_label(r: dict) -> str:
    """An item's path, with its frame in brackets when it has one."""
    return r["path"] + (f" [{r['frame']}]" if r.get("frame") is not None else "")


def _number(v: Any) -> float | None:
    if v is None or v == "":
        return None
    try:
        x = float(v)
    except (TypeError, ValueError):
        return None
    return x if not math.isnan(x) else None


def _int(v: Any) -> int | None:
    x = _number(v)
    return None if x is None or math.isinf(x) else int(x)


def _text(v: Any) -> str:
    """Text of a cell; None, NaN and pandas' missing values are empty."""
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return ""
    pd = sys.modules.get("pandas")  # its missing values can only come from pandas itself
    if pd is not None:
        try:
            if pd.isna(v) is True:
                return ""
        except (TypeError, ValueError):
            pass
    return str(v).strip()


def _verdict(item: dict) -> str:
    v = _text(item.get("verdict"))
    return v or ("error" if _text(item.get("error")) else "unknown")


def rank_key(item: dict) -> tuple[int, int, float, str, int]:
    """Worst first: blocking gate outcomes, then fail, error, caution, pass; then the
    smallest eigenvalue, ascending."""
    lam = _number(item.get("smallest_eigenvalue"))
    return (
        OUTCOME_RANK.get(_text(item.get("outcome")), 9),
        VERDICT_RANK.get(_verdict(item), 9),
        math.inf if lam is None else lam,
        _text(item.get("path")),
        _int(item.get("frame")) or 0,
    )
