"""The items of a run: files, folders, globs and @lists expanded; every frame an item."""

from __future__ import annotations

import glob
import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from ..base.errors import AuditorError, UsageError
from ..diagnosis.verdict import Policy
from ..inputs.basis import BasisSpec
from ..inputs.geometry import Molecule, load_molecules
from ..report.naming import report_stem, unique_name
from .periodic import Crystal, PeriodicOptions, is_periodic, load_cells

#: file names a directory argument contributes (recursively)
GEOMETRY_PATTERNS = ("*.xyz", "*.extxyz", "*.cif")


@dataclass(frozen=True)
class GateOptions:
    """What every item of a run is audited with."""

    spec: BasisSpec
    policy: Policy
    unit: str = "angstrom"
    ghost: str | None = None
    spectrum_method: str = "auto"
    remedies: bool = False  # remedies cost several times the audit on small molecules; opt in
    periodic: PeriodicOptions | None = None  # the mesh and precision of periodic items


@dataclass
class Item:
    """One frame of one file. ``name`` is unique in the run: DIR/items/<name>.json."""

    path: str
    frame: int | None  # 1-based; None when the file could not be read
    n_frames: int = 1
    molecule: Molecule | Crystal | None = None  # a Crystal for a periodic item
    error: str = ""
    name: str = ""
    key: str = ""


def display_path(p: str | Path) -> str:
    """The path relative to the working folder when it lies below it, else absolute (posix)."""
    absolute = os.path.abspath(p)
    rel = os.path.relpath(absolute)
    return Path(rel if not rel.startswith("..") else absolute).as_posix()


def _has_magic(s: str) -> bool:
    return any(c in s for c in "*?[")


def expand_inputs(
    args: list[str], patterns: Sequence[str] = GEOMETRY_PATTERNS, _depth: int = 0
) -> tuple[list[Path], list[tuple[str, str]]]:
    """Files named by ``args`` (files, folders searched recursively, glob patterns, and
    ``@LIST`` text files with one such argument a line, relative to the list file),
    plus (argument, message) for arguments that name nothing."""
    files: list[Path] = []
    missing: list[tuple[str, str]] = []
    for arg in args:
        arg = str(arg)
        if arg.startswith("@") and not os.path.exists(arg):
            listing = Path(arg[1:])
            try:
                lines = listing.read_text(encoding="utf-8").splitlines()
            except (OSError, UnicodeDecodeError):
                missing.append((arg[1:], f"{arg[1:]}: cannot read the list of paths"))
                continue
            if _depth > 8:
                raise UsageError(f"{listing}: lists of paths nest too deeply")
            entries = [ln.strip() for ln in lines if ln.strip() and not ln.lstrip().startswith("#")]
            base = listing.parent
            entries = [e if os.path.isabs(e) or e.startswith("@") else str(base / e) for e in entries]
            f, m = expand_inputs(entries, patterns, _depth + 1)
            files += f
            missing += m
            continue
        p = Path(arg)
        if p.is_dir():
            found = {
                q
                for pat in patterns
                for q in p.rglob(pat)
                if q.is_file() and not any(part.startswith(".") for part in q.relative_to(p).parts)
            }
            if not found:
                missing.append((arg, f"{arg}: folder holds no geometry file ({', '.join(patterns)})"))
            files += sorted(found)
        elif p.exists():
            files.append(p)
        elif _has_magic(arg):
            hits = sorted(glob.glob(arg, recursive=True))
            if not hits:
                missing.append((arg, f"{arg}: pattern matches no file"))
            for h in hits:
                f, m = expand_inputs([h], patterns, _depth + 1) if os.path.isdir(h) else ([Path(h)], [])
                files += f
                missing += m
        else:
            missing.append((arg, f"{arg}: no such file or folder"))
    return files, missing


def collect_items(args: list[str], options: GateOptions, patterns: Sequence[str] = GEOMETRY_PATTERNS) -> list[Item]:
    """Every frame of every file as an item, sorted by (path, frame); unreadable files
    and arguments that name nothing become error items."""
    files, missing = expand_inputs(args, patterns)
    items: list[Item] = [Item(display_path(a) if os.path.isabs(a) else a, None, error=m) for a, m in missing]
    seen: set[str] = set()
    for f in files:
        real = os.path.realpath(f)
        if real in seen:
            continue
        seen.add(real)
        shown = display_path(f)
        try:
            if is_periodic(f):
                frames: list = load_cells(f, unit=options.unit, ghost=options.ghost)
            else:
                frames = load_molecules(f, unit=options.unit, ghost=options.ghost)
        except AuditorError as exc:
            items.append(Item(shown, None, error=exc.message))
            continue
        for mol in frames:
            items.append(Item(shown, mol.frame + 1, mol.n_frames, mol))
    items.sort(key=lambda it: (it.path, it.frame or 0))
    used: set[str] = set()
    for it in items:
        flat = it.path.lstrip("/").replace("../", "up__").replace("/", "__")
        flat = "".join(c if c.isalnum() or c in "._-" else "_" for c in flat)
        it.name = unique_name(report_stem(flat, it.frame or 1, it.n_frames), used)
    return items
