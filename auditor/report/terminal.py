"""Short terminal summary (rich)."""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from rich.console import Console, Group
from rich.table import Table
from rich.text import Text

from .naming import distinct_labels
from .rows import item_label, rank_key
from .style import TERMINAL_STYLE as STYLE
from .text import FramesView, RemediesView, frames_view, lower_bound_sentence, remedies_view

if TYPE_CHECKING:
    from ..pipeline.result import AuditResult


def summary_table(results: Sequence[AuditResult], errors: Iterable[tuple[str, str]] = ()) -> Table:
    """One row per audited frame, plus one per input that could not be read. Inputs that
    share a file name are shown with enough of their path to tell them apart."""
    errors = list(errors)
    labels = distinct_labels([r.input.path for r in results] + [p for p, _ in errors])
    t = Table(show_header=True, header_style="bold", box=None, pad_edge=False)
    for col in ("geometry", "verdict", "functions", "smallest λ", "log10 κ", "τ advised", "removed", "main atom"):
        t.add_column(col, justify="left" if col in ("geometry", "verdict", "main atom") else "right")
    for r, label in zip(results, labels):
        t.add_row(*_summary_cells(r, label))
    for (_, msg), label in zip(errors, labels[len(results) :]):
        t.add_row(Text(label), f"[{STYLE['unreadable']}]unreadable[/]", "", "", "", "", "", Text(msg))
    return t


def _summary_cells(r: AuditResult, label: str) -> list[str | Text]:
    name = label + (f" [{r.input.frame}]" if r.input.n_frames > 1 else "")
    top = r.causes.atoms[0] if r.causes.atoms and r.verdict != "pass" else None
    lc = r.spectrum.log10_condition
    rec = r.recommendation
    return [
        Text(name),
        f"[{STYLE[r.verdict]}]{r.verdict}[/]",
        str(r.input.n_functions),
        f"{r.spectrum.smallest:.2e}",
        "inf" if lc is None else f"{lc:.1f}",
        "—" if rec.threshold is None else f"{rec.threshold:.1e}",
        "—" if rec.threshold is None else ("?" if rec.n_removed is None else str(rec.n_removed)),
        f"{top['element']}{top['atom']} ({top['weight']:.0%})" if top else "",
    ]


def print_summary(
    results: Sequence[AuditResult], errors: Iterable[tuple[str, str]] = (), console: Console | None = None
) -> None:
    """The summary table, then every error- and warning-level finding of each result, one
    line each, errors first (findings are sorted so), after the reason that decided it."""
    console = console or Console(highlight=False)
    console.print(summary_table(results, errors))
    labels = distinct_labels([r.input.path for r in results])
    for r, label in zip(results, labels):
        if r.verdict != "pass":
            console.print(f"  {label}: {r.verdict}: {r.verdict_reason}", highlight=False, markup=False, soft_wrap=True)
        for f in r.findings:
            if f.severity in ("error", "warning") and f.kind != r.verdict_finding:
                console.print(f"  {label}: {f.severity}: {f.message}", highlight=False, markup=False, soft_wrap=True)


def print_remedies(
    results: Iterable[AuditResult | dict], console: Console | None = None, always: bool = False, top: int = 4
) -> None:
    """The best few ranked remedies of each result that needs one (or of all, ``always``);
    the frames of one input share their remedies and are shown once."""
    console = console or Console(highlight=False)
    shown: set[str] = set()
    for r in results:
        d = r if isinstance(r, dict) else r.as_dict()
        view = remedies_view(d.get("remedies"))
        if view is None or not view.alternatives or not (view.needed or always):
            continue
        frames = frames_view(d)
        if frames is not None:
            if d["input"]["path"] in shown:
                continue
            shown.add(d["input"]["path"])
        for line in _remedy_lines(d, view, frames, top):
            console.print(line, highlight=False, markup=False, soft_wrap=True)


def _remedy_lines(d: dict, view: RemediesView, frames: FramesView | None, top: int) -> list[str]:
    name = Path(d["input"]["path"]).name
    every = f" (all {frames.n_frames} frames)" if frames is not None else ""
    lines = [f"  {name}{every}: remedies for a smallest eigenvalue of {view.target:.0e}"]
    for a in view.alternatives[:top]:
        after = "?" if a.smallest_after is None else f"{a.smallest_after:.2e}"
        mark = "" if a.reaches_target else " (misses the target)"
        lines.append(f"    {a.rank}. {a.title}: removes {a.removed_text}, smallest eigenvalue {after}{mark}")
    lines.append("    " + lower_bound_sentence(view.lower_bound, view.target))
    if view.symmetry is not None and view.unconstrained is not None:
        lines.append(f"    symmetry: {view.symmetry.note}")
    if frames is not None:
        lines.append("    frames: " + frames.sentence)
    tri = view.trial
    if tri and tri.skipped:
        lines.append(f"    {tri.skipped}")
    elif tri and tri.difference_microhartree is not None:
        lines.append(
            f"    trial SCF ({tri.method}): pruned minus canonical orthogonalization "
            f"{tri.difference_microhartree:+.1f} microhartree"
        )
    lines += [f"    trial SCF: {line}" for line in (tri.alerts if tri else [])]
    return lines


def _threshold_cell(value: float | None) -> str:
    """The advised threshold of a summary row; a dash where none is advised (a broken geometry)."""
    return "—" if value is None or not math.isfinite(value) else f"{value:.1e}"


def worst_rows(rows: list[dict], n: int) -> list[dict]:
    """The ``n`` worst rows (see ``rows.rank_key``)."""
    return sorted(rows, key=rank_key)[:n]


def worst_table(rows: list[dict], n: int = 10) -> Group:
    """rich renderable of the ``n`` worst items (blocking outcomes first, then smallest
    eigenvalue), with the reason of each item that is not plainly ok below the table."""
    t = Table(
        show_header=True,
        header_style="bold",
        box=None,
        pad_edge=False,
        title=f"worst {min(n, len(rows))} of {len(rows)} item(s)",
        title_justify="left",
    )
    for col in ("item", "verdict", "gate", "smallest λ", "log10 κ", "main atom", "τ advised", "removed"):
        t.add_column(
            col,
            justify="right" if col in ("smallest λ", "log10 κ", "τ advised", "removed") else "left",
            overflow="fold",
            no_wrap=col not in ("item", "main atom"),
        )
    notes = []
    for r in worst_rows(rows, n):
        lam, cond = r["smallest_eigenvalue"], r["condition_number"]
        ok = r["verdict"] != "error"
        t.add_row(
            Text(item_label(r)),
            f"[{STYLE[r['verdict']]}]{r['verdict']}[/]",
            f"[{STYLE.get(r.get('outcome') or '', '')}]{r.get('outcome', '')}[/]",
            f"{lam:.2e}" if ok else "",
            ("inf" if math.isinf(cond) else f"{math.log10(cond):.1f}") if ok else "",
            Text(str(r["top_atom"] or "")),
            _threshold_cell(r["threshold"]) if ok else "",
            "" if r["n_removed"] is None else str(r["n_removed"]),
        )
        if r["verdict"] == "error" and not r.get("note") and not r.get("change"):
            continue  # its reason is the error line on standard error: said once
        if r["verdict"] != "pass" or r.get("outcome") != "ok" or r.get("change"):
            why = "; ".join(x for x in (r.get("change", ""), r.get("note", ""), r.get("reason", "")) if x)
            notes.append(Text(f"  {item_label(r)}: {why}"))
    return Group(t, *notes)
