"""The items of a run: files, folders, globs and @lists expanded; every frame an item."""

from __future__ import annotations

import glob
import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from ..base.errors import AuditorError, InputError, UsageError, failure
from ..base.textio import read_text
from ..diagnosis.verdict import Policy
from ..inputs.basis import BasisSpec
from ..inputs.geometry import Molecule
from ..inputs.readers import load_molecules
from ..report.naming import report_stem, unique_name
from .periodic import Crystal, PeriodicOptions, is_periodic, load_cells

#: file names a directory argument contributes (recursively)
GEOMETRY_PATTERNS = ("*.xyz", "*.extxyz", "*.cif", "*.pdb", "*.sdf", "*.mol", "*.chk")


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
    input_format: str | None = None  # --input-format: every file read with this reader


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


def _list_entries(listing: Path) -> list[str]:
    """The arguments of an @LIST file, one a line ('#' starts a comment line), made
    relative to the list's own folder (nested @lists too, at every depth)."""
    lines = read_text(listing, "list of paths").splitlines()
    entries = [ln.strip() for ln in lines if ln.strip() and not ln.lstrip().startswith("#")]
    base = listing.parent
    out = []
    for e in entries:
        at, name = ("@", e[1:]) if e.startswith("@") else ("", e)
        out.append(e if os.path.isabs(name) else at + str(base / name))
    return out


def _expand_folder(arg: str, patterns: Sequence[str]) -> tuple[list[Path], list[tuple[str, str]]]:
    p = Path(arg)
    found = {
        q
        for pat in patterns
        for q in p.rglob(pat)
        if q.is_file() and not any(part.startswith(".") for part in q.relative_to(p).parts)
    }
    if not found:
        return [], [(arg, f"{arg}: folder holds no geometry file ({', '.join(patterns)})")]
    return sorted(found), []


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
        f: list[Path] = []
        m: list[tuple[str, str]] = []
        if arg.startswith("@") and not os.path.lexists(arg):
            if _depth > 8:
                raise UsageError(f"{arg[1:]}: lists of paths nest too deeply")
            try:
                f, m = expand_inputs(_list_entries(Path(arg[1:])), patterns, _depth + 1)
            except InputError as exc:
                m = [(arg[1:], exc.message)]
        elif os.path.isdir(arg):
            f, m = _expand_folder(arg, patterns)
        elif os.path.lexists(arg):
            f = [Path(arg)]
        elif _has_magic(arg):
            hits = sorted(glob.glob(arg, recursive=True))
            m = [] if hits else [(arg, f"{arg}: pattern matches no file")]
            for h in hits:
                fh, mh = _expand_folder(h, patterns) if os.path.isdir(h) else ([Path(h)], [])
                f += fh
                m += mh
        else:
            m = [(arg, f"{arg}: no such file or folder")]
        files += f
        missing += m
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
                frames = load_molecules(f, unit=options.unit, ghost=options.ghost, input_format=options.input_format)
        except Exception as exc:  # one unreadable file is that item's error, never the run's end
            message, _ = failure(exc)
            items.append(Item(shown, None, error=message if isinstance(exc, AuditorError) else f"{shown}: {message}"))
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
