"""Writers: each reads an AuditResult (never recomputes) and writes one format."""
from __future__ import annotations

import os
import tempfile
from pathlib import Path


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def atomic_write(path: Path, data: str | bytes) -> None:
    """Write ``data`` to ``path`` through a temporary file and a rename, so that an
    interrupted run never leaves a half-written report. The file gets the usual
    permissions (0666 less the umask), not mkstemp's private 0600."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    mode = "wb" if isinstance(data, bytes) else "w"
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    try:
        with os.fdopen(fd, mode, **({} if isinstance(data, bytes) else {"encoding": "utf-8"})) as fh:
            fh.write(data)
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def report_stem(source: str, frame: int, n_frames: int) -> str:
    """File stem of a report: the geometry's stem, plus ``_f<frame>`` for multi-frame files."""
    stem = Path(source).stem or "geometry"
    return f"{stem}_f{frame:03d}" if n_frames > 1 else stem
