"""File names of reports."""

from __future__ import annotations

from pathlib import Path


def report_stem(source: str, frame: int, n_frames: int) -> str:
    """File stem of a report: the geometry's stem, plus ``_f<frame>`` for multi-frame files."""
    stem = Path(source).stem or "geometry"
    return f"{stem}_f{frame:03d}" if n_frames > 1 else stem


def unique_name(base: str, used: set[str]) -> str:
    """``base``, or ``base-2``, ``base-3``, ... : the first not in ``used`` (which it joins)."""
    name, k = base, 2
    while name in used:
        name, k = f"{base}-{k}", k + 1
    used.add(name)
    return name
