"""summary.csv and summary.parquet: the rows of a gate run as a table."""

from __future__ import annotations

import io
import math
import threading
from pathlib import Path
from typing import TYPE_CHECKING

from ..base.files import atomic_write
from .rows import _FLOATS, _INTS, COLUMNS

if TYPE_CHECKING:
    import pandas as pd


def prefetch_libraries() -> None:
    """Import pandas and its Parquet engine in a background thread, so that the import
    overlaps work that waits on other processes (Python's import lock makes a later
    ``import pandas`` wait for this one instead of importing twice)."""

    def load() -> None:
        try:
            import pandas  # noqa: F401
            import pyarrow.parquet  # noqa: F401
        except Exception:  # noqa: BLE001 - the writer imports again and reports the problem itself
            pass

    threading.Thread(target=load, name="auditor-prefetch", daemon=True).start()


def summary_frame(rows: list[dict]) -> pd.DataFrame:
    """pandas DataFrame with the summary columns and stable dtypes."""
    import pandas as pd  # pandas takes most of a second to import; only the gate's summary needs it

    df = pd.DataFrame([{c: r.get(c, "") for c in COLUMNS} for r in rows], columns=list(COLUMNS))
    for c in _INTS:
        df[c] = pd.array(
            [None if v is None or (isinstance(v, float) and math.isnan(v)) else int(v) for v in df[c]], dtype="Int64"
        )
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
