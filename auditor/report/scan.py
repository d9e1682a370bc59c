"""Scans: the smallest eigenvalue of every frame of a multi-frame input, against the frame
and against a scan coordinate, and the frame where each policy level is first crossed.

Fed with the list of per-frame results (and the frames' comment lines); writes
DIR/<stem>.scan.json (``auditor-scan/1``), .md (with a PNG beside it) and .html. Recomputes
nothing: every number is a result's.

The scan coordinate, in this order:

1. From the comment lines: each comment's numbers, in order, each named by ``name=number``
   (or ``name: number``) or else by the word just before it, with a unit right after it if
   one is written (charge and multiplicity are left out). When every frame has the same
   names in the same order, the positions whose values change from frame to frame and are
   not just the frame number are candidates; one named like a coordinate (COORDINATE_NAMES,
   any case) is taken, else the only candidate, else none.
2. From the geometry: when exactly one interatomic distance changes (by more than 1e-4 Å
   from the first frame) and every other stays, that distance in ångström.
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from html import escape
from pathlib import Path
from typing import Any

import numpy as np

from .. import __version__
from ..base.files import atomic_write
from ..base.jsonio import dumps
from ..base.textio import NUMBER

SCAN_SCHEMA = "auditor-scan/1"
#: a distance changes when it moves by more than this from the first frame (ångström)
DISTANCE_TOLERANCE = 1e-4
COORDINATE_NAMES = (
    "r",
    "d",
    "dist",
    "distance",
    "separation",
    "bond",
    "coord",
    "coordinate",
    "scan",
    "q",
    "angle",
    "dihedral",
)
_SKIP = ("charge", "multiplicity", "mult", "properties", "lattice", "pbc")
_TOKEN = re.compile(
    r"(?:([A-Za-z_][\w()]*)\s*[=:]\s*|([A-Za-z]+)\s+)?("
    + NUMBER.pattern
    + r")(?![\w.])(?:\s*(Å|A|Ang|angstrom|bohr|deg|degrees)(?!\w))?"
)


def comment_numbers(comment: str) -> list[tuple[str, float]]:
    """(name or "", value) of every number in a comment line, in order: the name is the one
    written ``name=number`` (or ``name: number``), else the word just before the number."""
    return [(name, value) for name, value, _ in _comment_values(comment)]


def _comment_values(comment: str) -> list[tuple[str, float, str | None]]:
    """(name, value, unit or None) of every number in a comment line."""
    out: list[tuple[str, float, str | None]] = []
    for m in _TOKEN.finditer(comment):
        name = m.group(1) or m.group(2) or ""
        start = m.start(3)
        if start > 0 and (comment[start - 1].isalnum() or comment[start - 1] in "_.") and not name:
            continue  # part of a word (H2O, x1)
        if name.lower() in _SKIP:
            continue
        value = float(m.group(3).replace("d", "e").replace("D", "e"))
        if math.isfinite(value):
            unit: str | None = {"A": "Å", "Ang": "Å", "angstrom": "Å", "degrees": "deg"}.get(
                m.group(4) or "", m.group(4)
            )
            out.append((name, value, unit))
    return out


def _from_comments(comments: Sequence[str]) -> dict | None:
    parsed = [_comment_values(c) for c in comments]
    names = [[n for n, _, _ in p] for p in parsed]
    if not parsed[0] or any(n != names[0] for n in names):
        return None
    n = len(parsed)
    candidates = []
    for pos, name in enumerate(names[0]):
        values = [p[pos][1] for p in parsed]
        frame_like = values in ([float(k) for k in range(1, n + 1)], [float(k) for k in range(n)])
        if len(set(values)) > 1 and not frame_like:
            candidates.append((name, values, parsed[0][pos][2]))
    named = [c for c in candidates if c[0].lower() in COORDINATE_NAMES]
    chosen = named[0] if named else (candidates[0] if len(candidates) == 1 else None)
    if chosen is None:
        return None
    name = chosen[0] or "value in the comment line"
    return {"source": "comment", "name": name, "unit": chosen[2], "values": chosen[1]}


def _from_geometry(results: Sequence[Any]) -> dict | None:
    xyz = [np.asarray([a["xyz"] for a in r["input"]["atoms"]], dtype=float) for r in results]
    if len({x.shape for x in xyz}) != 1 or xyz[0].shape[0] < 2:
        return None
    iu = np.triu_indices(xyz[0].shape[0], 1)
    dist = np.array([np.linalg.norm(x[:, None] - x[None, :], axis=-1)[iu] for x in xyz])
    changed = np.flatnonzero(np.abs(dist - dist[0]).max(axis=0) > DISTANCE_TOLERANCE)
    if changed.size != 1:
        return None
    i, j = int(iu[0][changed[0]]), int(iu[1][changed[0]])
    atoms = results[0]["input"]["atoms"]
    name = f"r({atoms[i]['element']}{i + 1}–{atoms[j]['element']}{j + 1})"
    values = [round(float(v), 8) for v in dist[:, changed[0]]]
    return {"source": "distance", "name": name, "unit": "Å", "atoms": [i + 1, j + 1], "values": values}


def scan_coordinate(results: Sequence[Any], comments: Sequence[str]) -> dict | None:
    """The scan coordinate of the frames (see the module docstring), or None."""
    return _from_comments(comments) or _from_geometry(results)


def _first_below(frames: list[dict], level: float) -> int | None:
    return next((f["frame"] for f in frames if f["smallest"] < level), None)


def scan_document(results: Sequence[Any], comments: Sequence[str] = ()) -> dict:
    """The ``auditor-scan/1`` document of the per-frame results (AuditResults or their dicts)."""
    ds = [r if isinstance(r, dict) else r.as_dict() for r in results]
    comments = list(comments) if len(comments) == len(ds) else [""] * len(ds)
    policy = ds[0]["policy"]
    coordinate = scan_coordinate(ds, comments)
    frames = []
    for k, d in enumerate(ds):
        s = d["spectrum"]
        frames.append(
            {
                "frame": d["input"]["frame"],
                "coordinate": coordinate["values"][k] if coordinate else None,
                "n_functions": d["input"]["n_functions"],
                "smallest": s["smallest"],
                "log10_condition": s["log10_condition"],
                "verdict": d["verdict"],
                "verdict_finding": d["verdict_finding"],
            }
        )
    if coordinate:
        coordinate = {k: v for k, v in coordinate.items() if k != "values"}
    crossings = {level: _first_below(frames, policy[level]) for level in ("caution", "fail")}
    return {
        "schema": SCAN_SCHEMA,
        "version": __version__,
        "path": ds[0]["input"]["path"],
        "basis": ds[0]["input"]["basis"],
        "n_frames": len(frames),
        "policy": {"caution": policy["caution"], "fail": policy["fail"]},
        "coordinate": coordinate,
        "first_frame_below": crossings,
        "frames": frames,
    }


def _crossing_text(doc: dict) -> list[str]:
    out = []
    for level in ("caution", "fail"):
        frame = doc["first_frame_below"][level]
        value = doc["policy"][level]
        if frame is None:
            out.append(f"No frame falls below the {level} level ({value:.0e}).")
        else:
            row = doc["frames"][frame - 1] if doc["frames"][frame - 1]["frame"] == frame else None
            at = f" ({doc['coordinate']['name']} = {row['coordinate']:g})" if row and doc["coordinate"] else ""
            out.append(f"The {level} level ({value:.0e}) is first crossed at frame {frame}{at}.")
    return out


def _coordinate_text(doc: dict) -> str:
    c = doc["coordinate"]
    if c is None:
        return "No scan coordinate found (neither in the comment lines nor as one changing distance)."
    unit = f" in {c['unit']}" if c["unit"] else ""
    where = "the comment lines" if c["source"] == "comment" else "the geometry (the one distance that changes)"
    return f"Scan coordinate {c['name']}{unit}, read from {where}."


def scan_markdown(doc: dict, figure: str | None) -> str:
    lines = [f"# Scan: {Path(doc['path']).name}", "", f"{doc['n_frames']} frames in {doc['basis']}.", ""]
    lines += [_coordinate_text(doc), "", *_crossing_text(doc), ""]
    if figure:
        lines += [f"![Smallest eigenvalue against frame and scan coordinate]({figure})", ""]
    name = doc["coordinate"]["name"] if doc["coordinate"] else "coordinate"
    lines += [f"| frame | {name} | functions | smallest λ | log10 κ | verdict |", "|---|---|---|---|---|---|"]
    for f in doc["frames"]:
        coord = "—" if f["coordinate"] is None else f"{f['coordinate']:g}"
        logk = "—" if f["log10_condition"] is None else f"{f['log10_condition']:.1f}"
        lines.append(f"| {f['frame']} | {coord} | {f['n_functions']} | {f['smallest']:.3e} | {logk} | {f['verdict']} |")
    lines += ["", f"<sub>auditor {doc['version']}, scan schema {doc['schema']}</sub>", ""]
    return "\n".join(lines)


def scan_html(doc: dict, png: bytes | None) -> str:
    from .html import CSS, _img, num

    title = f"Scan: {Path(doc['path']).name}"
    rows = "".join(
        f"<tr><td class='n'>{num(f'frames.{k}.frame', f['frame'], 'd')}</td>"
        f"<td class='n'>{num(f'frames.{k}.coordinate', f['coordinate'], 'g', '—')}</td>"
        f"<td class='n'>{num(f'frames.{k}.n_functions', f['n_functions'], 'd')}</td>"
        f"<td class='n'>{num(f'frames.{k}.smallest', f['smallest'])}</td>"
        f"<td class='n'>{num(f'frames.{k}.log10_condition', f['log10_condition'], '.1f', '—')}</td>"
        f"<td>{escape(str(f['verdict']))}</td></tr>"
        for k, f in enumerate(doc["frames"])
    )
    name = escape(doc["coordinate"]["name"]) if doc["coordinate"] else "coordinate"
    figure = _img(png, "Smallest eigenvalue of S against frame and scan coordinate", "Smallest eigenvalue per frame.")
    text = "".join(f"<p>{escape(t)}</p>" for t in [_coordinate_text(doc), *_crossing_text(doc)])
    return "\n".join(
        [
            "<!DOCTYPE html>",
            '<html lang="en"><head><meta charset="utf-8">',
            f"<title>{escape(title)}</title><style>{CSS}</style></head><body><main>",
            f"<h1>{escape(title)}</h1><p>{doc['n_frames']} frames in {escape(doc['basis'])}.</p>",
            text,
            figure,
            f"<table><tr><th>frame</th><th>{name}</th><th>functions</th><th>smallest λ</th><th>log10 κ</th>"
            f"<th>verdict</th></tr>{rows}</table>",
            f"<footer>auditor {escape(doc['version'])}, scan schema {escape(doc['schema'])}.</footer>",
            "</main></body></html>",
            "",
        ]
    )


def scan_png(doc: dict) -> bytes:
    """The smallest eigenvalue (log axis) against frame, and against the coordinate when
    there is one, with the policy levels and the first crossing of each."""
    from matplotlib import rc_context

    from .plots import STYLE, _new, _png
    from .style import BLUE, LEVEL_LINES

    frames = doc["frames"]
    panels = [("frame", [f["frame"] for f in frames])]
    if doc["coordinate"]:
        c = doc["coordinate"]
        panels.append((c["name"] + (f" / {c['unit']}" if c["unit"] else ""), [f["coordinate"] for f in frames]))
    y = np.array([f["smallest"] for f in frames], dtype=float)
    floor = max(1e-16, float(np.min(y[y > 0])) / 10 if (y > 0).any() else 1e-16)
    with rc_context(STYLE):
        fig, axes = _new(4.4 * len(panels), 3.3, ncols=len(panels), squeeze=False)
        for ax, (label, x) in zip(axes[0], panels):
            ax.semilogy(x, np.maximum(y, floor), "o-", color=BLUE, ms=4, lw=1.0, label="smallest eigenvalue")
            for level in ("caution", "fail"):
                line = LEVEL_LINES[level]
                value = doc["policy"][level]
                ax.axhline(value, color=line.colour, ls=line.dashes, lw=line.width, label=line.label(value))
                first = doc["first_frame_below"][level]
                if first is not None:
                    ax.axvline(x[first - 1], color=line.colour, ls=":", lw=0.9)
            ax.set_xlabel(label)
            ax.set_ylabel("smallest eigenvalue of S")
        first = doc["first_frame_below"]
        crossed = ", ".join(f"{k} at frame {v}" for k, v in first.items() if v is not None) or "no level crossed"
        axes[0][0].set_title(f"Smallest eigenvalue per frame: {crossed}", loc="left")
        axes[0][0].legend(loc="best")
        fig.tight_layout()
        return _png(fig)


def write_scan(results: Sequence[Any], out: Path, formats: str, stem: str, comments: Sequence[str] = ()) -> list[Path]:
    """Write DIR/<stem>.json, .md (with <stem>.png) and .html of a scan, as ``formats`` asks."""
    doc = scan_document(results, comments)
    written = []
    if formats in ("json", "all"):
        atomic_write(out / f"{stem}.json", dumps(doc, False))
        written.append(out / f"{stem}.json")
    png = scan_png(doc) if formats in ("md", "html", "all") else None
    if formats in ("md", "all") and png is not None:
        atomic_write(out / f"{stem}.png", png)
        atomic_write(out / f"{stem}.md", scan_markdown(doc, f"{stem}.png"))
        written += [out / f"{stem}.png", out / f"{stem}.md"]
    if formats in ("html", "all"):
        atomic_write(out / f"{stem}.html", scan_html(doc, png))
        written.append(out / f"{stem}.html")
    return written
