"""Gate summary: one row per item, written as CSV and Parquet, and the table of the worst items."""
from __future__ import annotations

import io
import math
from pathlib import Path

from . import atomic_write

#: Column order of summary.csv / summary.parquet (documented in the README).
COLUMNS = (
    "path", "frame", "item", "basis", "n_atoms", "n_functions", "smallest_eigenvalue",
    "condition_number", "verdict", "top_atom", "threshold", "n_removed",
    "outcome", "change", "note", "reason", "error",
)
_INTS = ("frame", "n_atoms", "n_functions", "n_removed")
_FLOATS = ("smallest_eigenvalue", "condition_number", "threshold")

#: worst first, for every list of items (terminal table, set overview)
OUTCOME_RANK = {"regressed": 0, "blocked": 1, "allowed": 2, "known": 3, "ok": 4}
VERDICT_RANK = {"fail": 0, "error": 1, "caution": 2, "pass": 3}
_STYLE = {"pass": "green", "caution": "yellow", "fail": "bold red", "error": "magenta",
          "regressed": "bold red", "blocked": "bold red", "allowed": "cyan", "known": "yellow", "ok": "green"}


def main_reason(result: dict) -> str:
    """The sentence that best explains a verdict: the first error-level finding, else the verdict's reason."""
    for f in result.get("findings", []):
        if f.get("severity") == "error":
            return f["message"]
    return result.get("verdict_reason", "")


def brief(result: dict) -> dict:
    """The parts of a JSON result that ``result_row`` and the input check of a cached
    result read, in the same layout (a few hundred bytes instead of the whole report)."""
    inp, spec, rec = result["input"], result["spectrum"], result["recommendation"]
    errors = [f for f in result.get("findings", []) if f.get("severity") == "error"][:1]
    return {
        "input": {k: inp.get(k) for k in ("path", "frame", "n_frames", "basis", "n_atoms", "n_functions")},
        "spectrum": {k: spec.get(k) for k in ("smallest", "condition_number")},
        "verdict": result["verdict"], "verdict_reason": result.get("verdict_reason", ""),
        "findings": [{"severity": f["severity"], "message": f["message"]} for f in errors],
        "causes": {"atoms": result["causes"]["atoms"][:1]},
        "recommendation": {k: rec.get(k) for k in ("threshold", "n_removed")},
    }


def result_row(path: str, frame: int, item: str, result: dict) -> dict:
    """Summary row of one audited item, read from its JSON result."""
    spec, rec, atoms = result["spectrum"], result["recommendation"], result["causes"]["atoms"]
    cond = spec["condition_number"]
    return {
        "path": path, "frame": frame, "item": item, "basis": result["input"]["basis"],
        "n_atoms": result["input"]["n_atoms"], "n_functions": result["input"]["n_functions"],
        "smallest_eigenvalue": spec["smallest"],
        "condition_number": math.inf if cond is None else cond,
        "verdict": result["verdict"],
        "top_atom": f"{atoms[0]['element']}{atoms[0]['atom']}" if atoms else "",
        "threshold": rec["threshold"], "n_removed": rec["n_removed"],
        "reason": main_reason(result), "error": "",
    }


def error_row(path: str, frame: int | None, item: str, basis: str, message: str) -> dict:
    """Summary row of an item that could not be audited."""
    return {
        "path": path, "frame": frame, "item": item, "basis": basis, "n_atoms": None, "n_functions": None,
        "smallest_eigenvalue": math.nan, "condition_number": math.nan, "verdict": "error",
        "top_atom": "", "threshold": math.nan, "n_removed": None, "reason": message, "error": message,
    }


def prefetch_libraries() -> None:
    """Import pandas and its Parquet engine in a background thread, so that the import
    overlaps work that waits on other processes (Python's import lock makes a later
    ``import pandas`` wait for this one instead of importing twice)."""
    import threading

    def load() -> None:
        try:
            import pandas  # noqa: F401
            import pyarrow.parquet  # noqa: F401
        except Exception:  # noqa: BLE001 - the writer imports again and reports the problem itself
            pass

    threading.Thread(target=load, name="auditor-prefetch", daemon=True).start()


def summary_frame(rows: list[dict]):
    """pandas DataFrame with the summary columns and stable dtypes."""
    import pandas as pd

    df = pd.DataFrame([{c: r.get(c, "") for c in COLUMNS} for r in rows], columns=list(COLUMNS))
    for c in _INTS:
        df[c] = pd.array([None if v is None or (isinstance(v, float) and math.isnan(v)) else int(v)
                          for v in df[c]], dtype="Int64")
    for c in _FLOATS:
        df[c] = df[c].astype("float64")
    for c in set(COLUMNS) - set(_INTS) - set(_FLOATS):
        df[c] = df[c].fillna("").astype(str)
    return df


def write_summary(rows: list[dict], out: Path) -> tuple[Path, Path]:
    """Write out/summary.csv and out/summary.parquet (each atomically)."""
    df = summary_frame(rows)
    csv_path, pq_path = Path(out) / "summary.csv", Path(out) / "summary.parquet"
    atomic_write(csv_path, df.to_csv(index=False))
    buf = io.BytesIO()
    df.to_parquet(buf, index=False)
    atomic_write(pq_path, buf.getvalue())
    return csv_path, pq_path


def item_label(r: dict) -> str:
    return r["path"] + (f" [{r['frame']}]" if r.get("frame") is not None else "")


def worst_rows(rows: list[dict], n: int) -> list[dict]:
    from .set_index import rank_key

    return sorted(rows, key=rank_key)[:n]


def worst_table(rows: list[dict], n: int = 10):
    """rich renderable of the ``n`` worst items (blocking outcomes first, then smallest
    eigenvalue), with the reason of each item that is not plainly ok below the table."""
    from rich.console import Group
    from rich.markup import escape
    from rich.table import Table
    from rich.text import Text

    t = Table(show_header=True, header_style="bold", box=None, pad_edge=False,
              title=f"worst {min(n, len(rows))} of {len(rows)} item(s)", title_justify="left")
    for col in ("item", "verdict", "gate", "smallest λ", "log10 κ", "main atom", "τ advised", "removed"):
        t.add_column(col, justify="right" if col in ("smallest λ", "log10 κ", "τ advised", "removed") else "left",
                     overflow="fold", no_wrap=col not in ("item", "main atom"))
    notes = []
    for r in worst_rows(rows, n):
        lam, cond = r["smallest_eigenvalue"], r["condition_number"]
        ok = r["verdict"] != "error"
        t.add_row(
            escape(item_label(r)),
            f"[{_STYLE[r['verdict']]}]{r['verdict']}[/]",
            f"[{_STYLE.get(r.get('outcome'), '')}]{r.get('outcome', '')}[/]",
            f"{lam:.2e}" if ok else "",
            ("inf" if math.isinf(cond) else f"{math.log10(cond):.1f}") if ok else "",
            r["top_atom"],
            f"{r['threshold']:.1e}" if ok else "",
            "" if r["n_removed"] is None else str(r["n_removed"]),
        )
        if r["verdict"] != "pass" or r.get("outcome") != "ok" or r.get("change"):
            why = "; ".join(x for x in (r.get("change", ""), r.get("note", ""), r.get("reason", "")) if x)
            notes.append(Text(f"  {why}" if r["verdict"] == "error" and not r.get("note") else f"  {item_label(r)}: {why}"))
    return Group(t, *notes)
