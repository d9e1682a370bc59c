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


def distinct_labels(paths: list[str]) -> list[str]:
    """Short labels for ``paths``: the file name, or as many trailing folders as it takes to
    tell apart inputs that share a file name (``a/x.xyz`` and ``b/x.xyz``)."""
    parts = [Path(p).parts for p in paths]
    labels = []
    for mine in parts:
        depth = 1
        while depth < len(mine) and any(other != mine and other[-depth:] == mine[-depth:] for other in parts):
            depth += 1
        labels.append("/".join(mine[-depth:]))
    return labels
