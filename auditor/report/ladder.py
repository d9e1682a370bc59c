"""The ladder report (``auditor-ladder/1``): JSON, Markdown with its figure, and a
self-contained HTML page with the smallest eigenvalue plotted against the function count."""

from __future__ import annotations

import base64
import json
from html import escape
from pathlib import Path
from typing import TYPE_CHECKING, Any

from matplotlib import rc_context

from ..base.files import atomic_write
from ..base.jsonio import clean
from .plots import STYLE, _new, _png
from .style import BLUE, GREY, INK, LEVEL_LINES, PAGE_CSS, VERMILION

if TYPE_CHECKING:
    from ..pipeline.ladder import LadderReport

LADDER_FORMATS = ("json", "md", "html", "all")


def _d(report: LadderReport | dict) -> dict:
    return clean(report if isinstance(report, dict) else report.as_dict())


def _fmt(x: Any, spec: str, none: str = "—") -> str:
    return none if x is None else format(x, spec)


def _published(r: dict) -> str:
    if r["published"] is None:
        return "named basis" if r["kind"] != "requested" else "—"
    flag = {True: "matches", False: "differs from", None: "not checked against"}[r["matches_published"]]
    return f"{flag} {r['published']}"


def rung_rows(d: dict) -> list[list[str]]:
    """The table of the ladder as text cells (one wording for Markdown and HTML)."""
    rows = []
    for r in d["rungs"]:
        counts = r["counts_below"] or {}
        below = ", ".join(f"{v} < {k}" for k, v in counts.items() if v and k in ("1e-04", "1e-05", "1e-06", "1e-07"))
        verdict = r["verdict"] or f"error: {r['error']}"
        rows.append(
            [
                r["basis"] + (" (asked for)" if r["kind"] == "requested" else ""),
                r["use_name"] if r["use_name"] != r["basis"] else "",
                _fmt(r["n_functions"], "d"),
                _fmt(r["smallest"], ".3e"),
                _fmt(r["condition_number"], ".2e"),
                below or ("none below 1e-04" if counts else "—"),
                verdict,
                {True: "yes", False: "no"}[bool(r["reaches_target"])],
                _published(r),
            ]
        )
    return rows


HEADS = [
    "basis",
    "published as",
    "functions",
    "smallest eigenvalue",
    "κ",
    "eigenvalues below",
    "verdict",
    "reaches target",
    "against basis_set_exchange",
]


def summary_sentence(d: dict) -> str:
    """What the ladder found, in one or two sentences."""
    frames = d["input"]["frames"]
    where = f" (all {len(frames)} frames: the worst decides)" if len(frames) > 1 else ""
    chosen = f"Use {d['chosen']}: {d['reason']}." if d["chosen"] else f"{d['reason'][:1].upper()}{d['reason'][1:]}."
    return f"Ladder of {d['requested']} at {Path(d['input']['path']).name}{where}, target {d['target']:.1e}. {chosen}"


def render_ladder_markdown(report: LadderReport | dict, figure: str | None = None) -> str:
    d = _d(report)
    lines = [f"# Basis ladder: {Path(d['input']['path']).name}", "", summary_sentence(d), ""]
    lines += ["| " + " | ".join(HEADS) + " |", "|" + "---|" * len(HEADS)]
    lines += ["| " + " | ".join(row) + " |" for row in rung_rows(d)]
    lines += ["", "How each relative is made:", ""]
    lines += [f"- {r['basis']}: {r['how']}" + (f" ({r['reference']})" if r["reference"] else "") for r in d["rungs"]]
    lines.append("")
    if figure:
        lines += [f"![Smallest overlap eigenvalue against the number of basis functions]({figure})", ""]
    lines += ["## Read before acting", ""] + [f"- {c}" for c in d["caveats"]] + [""]
    lines += [f"<sub>auditor {d['version']}, ladder schema {d['schema']}</sub>", ""]
    return "\n".join(lines)


def ladder_png(report: LadderReport | dict) -> bytes:
    """Smallest eigenvalue (log axis) against function count, with the target and the levels."""
    d = _d(report)
    with rc_context(STYLE):
        fig, ax = _new(7.6, 4.0)
        fig.subplots_adjust(left=0.11, right=0.72, top=0.9, bottom=0.14)
        pts = [r for r in d["rungs"] if r["n_functions"] and r["smallest"] and r["smallest"] > 0]
        for r in pts:
            chosen = r["use_name"] == d["chosen"]
            colour = VERMILION if chosen else (INK if r["kind"] == "requested" else BLUE)
            ax.plot(r["n_functions"], r["smallest"], "o", color=colour, ms=7 if chosen else 5, zorder=3)
            ax.annotate(r["basis"], (r["n_functions"], r["smallest"]), xytext=(4, 4), textcoords="offset points")
        ax.set_yscale("log")
        ax.axhline(d["target"], color=GREY, lw=1.2, label=f"target {d['target']:.0e}")
        for key in ("caution", "fail"):
            line = LEVEL_LINES[key]
            value = d["policy"][key]
            ax.axhline(value, color=line.colour, ls=line.dashes, lw=line.width, label=line.label(value))
        ax.set_xlabel("basis functions")
        ax.set_ylabel("smallest eigenvalue of unit-diagonal S")
        ax.set_title(f"Ladder of {d['requested']}", loc="left")
        ax.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0)
        return _png(fig)


def render_ladder_html(report: LadderReport | dict, png: bytes | None = None) -> str:
    d = _d(report)
    title = f"Basis ladder: {Path(d['input']['path']).name}"
    head = "".join(f"<th>{escape(h)}</th>" for h in HEADS)
    body = "".join("<tr>" + "".join(f"<td>{escape(c)}</td>" for c in row) + "</tr>" for row in rung_rows(d))
    how = "".join(
        f"<li>{escape(r['basis'])}: {escape(r['how'])}"
        + (f" ({escape(r['reference'])})" if r["reference"] else "")
        + "</li>"
        for r in d["rungs"]
    )
    img = ""
    if png:
        data = base64.b64encode(png).decode("ascii")
        img = (
            f'<figure><img src="data:image/png;base64,{data}" alt="Smallest overlap eigenvalue against the number '
            'of basis functions"><figcaption>Smallest eigenvalue of the unit-diagonal overlap matrix against the '
            "number of basis functions; the chosen relative in red.</figcaption></figure>"
        )
    caveats = "".join(f"<li>{escape(c)}</li>" for c in d["caveats"])
    return "\n".join(
        [
            "<!DOCTYPE html>",
            '<html lang="en"><head><meta charset="utf-8">',
            f"<title>{escape(title)}</title><style>{PAGE_CSS}</style></head><body><main>",
            f"<h1>{escape(title)}</h1>",
            f"<p>{escape(summary_sentence(d))}</p>",
            img,
            f"<table><tr>{head}</tr>{body}</table>",
            f"<h2>How each relative is made</h2><ul>{how}</ul>",
            f'<h2>Read before acting</h2><ul class="caveats">{caveats}</ul>',
            f"<footer>auditor {escape(str(d['version']))}, ladder schema {escape(str(d['schema']))}. "
            "This page is self-contained.</footer>",
            "</main></body></html>",
            "",
        ]
    )


def write_ladder_reports(report: LadderReport, out: Path, formats: str, stem: str) -> list[Path]:
    """Write DIR/<stem>.ladder.json, .ladder.md (with .ladder.png) and .ladder.html."""
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    written = []
    doc = _d(report)
    if formats in ("json", "all"):
        path = out / f"{stem}.ladder.json"
        atomic_write(path, json.dumps(doc, indent=1, ensure_ascii=False, allow_nan=False) + "\n")
        written.append(path)
    png = ladder_png(doc) if formats in ("md", "html", "all") else None
    if formats in ("md", "all") and png:
        fig = out / f"{stem}.ladder.png"
        atomic_write(fig, png)
        md = out / f"{stem}.ladder.md"
        atomic_write(md, render_ladder_markdown(doc, fig.name))
        written += [fig, md]
    if formats in ("html", "all"):
        path = out / f"{stem}.ladder.html"
        atomic_write(path, render_ladder_html(doc, png))
        written.append(path)
    return written
