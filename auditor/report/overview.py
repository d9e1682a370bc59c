"""DIR/index.html for a set of audited items: a histogram of log10 of the smallest
eigenvalue, verdict counts, the worst items, and a sortable table linking to each report.

Items are plain dicts (summary rows) with at least ``path``, ``frame``, ``verdict``,
``smallest_eigenvalue``, ``n_functions``, ``report`` (link relative to DIR, or empty) and
``error`` (message, or empty). Optional: ``basis``, ``n_atoms``, ``condition_number``,
``top_atom``, ``threshold``, ``n_removed``, ``outcome``, ``reason``, ``item``.
"""

from __future__ import annotations

import base64
import json
import math
from html import escape
from pathlib import Path
from typing import TYPE_CHECKING, Any
from urllib.parse import quote

from ..base.files import atomic_write
from .html import write_html
from .plots import set_histogram_png
from .rows import OUTCOME_RANK, VERDICT_RANK, _int, _number, _text, _verdict, item_label, rank_key, result_row
from .style import PAGE_CSS

if TYPE_CHECKING:
    from ..pipeline.result import AuditResult

WORST_SHOWN = 10

CSS = (
    PAGE_CSS
    + """
main { max-width: 1400px; margin: 0 auto; padding: 20px 28px 40px; }
h2 { font-size: 1.2em; margin: 1.6em 0 0.5em; padding-bottom: 4px; border-bottom: 2px solid var(--line); }
.tiles { display: flex; gap: 12px; flex-wrap: wrap; margin: 12px 0; }
.tile { border: 1px solid var(--line); border-top: 6px solid var(--c); border-radius: 6px;
        padding: 8px 16px; min-width: 110px; background: var(--band); }
.tile .count { font-size: 1.7em; font-weight: 800; }
.tile .label { color: var(--muted); font-size: 0.9em; }
.v-pass { --c: var(--pass); } .v-caution { --c: var(--caution); } .v-fail { --c: var(--fail); }
.v-error { --c: var(--error); } .v-other { --c: #8c8c8c; }
.badge { font-weight: 700; padding: 0 6px; border-radius: 3px; color: #fff; background: var(--c); }
.v-caution.badge { color: #1f2328; }
table { border-collapse: collapse; margin: 8px 0 12px; font-size: 0.86em; width: 100%; }
th, td { border-bottom: 1px solid var(--line); padding: 4px 8px; text-align: left; vertical-align: top; }
th { background: var(--band); font-weight: 600; position: sticky; top: 0; }
th button { all: unset; cursor: pointer; }
th button:focus-visible { outline: 2px solid var(--accent); }
th[aria-sort="ascending"] button::after { content: " \\25B2"; font-size: 0.75em; }
th[aria-sort="descending"] button::after { content: " \\25BC"; font-size: 0.75em; }
td.why { color: var(--muted); font-size: 0.95em; min-width: 18em; }
td.item { overflow-wrap: anywhere; min-width: 12em; }
.scroll { overflow-x: auto; }
a { color: var(--accent); }
figcaption { color: var(--muted); font-size: 0.88em; }
"""
)

# Sorts the rows of every table.sortable by the data-sort value of the clicked column:
# numbers numerically, text alphabetically, empty cells last in either direction.
SORT_JS = """
document.querySelectorAll("table.sortable").forEach(function (table) {
  var heads = table.querySelectorAll("thead th");
  heads.forEach(function (th, col) {
    var button = th.querySelector("button");
    if (!button) return;
    button.addEventListener("click", function () {
      var asc = th.getAttribute("aria-sort") !== "ascending";
      heads.forEach(function (h) { h.removeAttribute("aria-sort"); });
      th.setAttribute("aria-sort", asc ? "ascending" : "descending");
      var numeric = th.dataset.type === "num";
      var body = table.tBodies[0];
      var rows = Array.prototype.slice.call(body.rows);
      rows.sort(function (a, b) {
        var x = a.cells[col].dataset.sort, y = b.cells[col].dataset.sort;
        if (x === "" || y === "") return (x === "") - (y === "");
        var c = numeric ? parseFloat(x) - parseFloat(y) : x.localeCompare(y);
        return asc ? c : -c;
      });
      rows.forEach(function (r) { body.appendChild(r); });
    });
  });
});
"""


def _why(item: dict) -> str:
    if _text(item.get("error")):
        return _text(item.get("error"))
    return "; ".join(x for x in (_text(item.get(k)) for k in ("change", "note", "reason")) if x)


def _label(item: dict) -> str:
    return item_label({"path": _text(item.get("path")), "frame": _int(item.get("frame"))})


def _link(item: dict, text: str) -> str:
    report = _text(item.get("report"))
    if not report:
        return escape(text)
    href = quote(report.replace("\\", "/"), safe="/._-~#")
    return f'<a href="{escape(href)}">{escape(text)}</a>'


def _cell(value: Any, shown: str, numeric: bool = False) -> str:
    sort = "" if value is None else (repr(float(value)) if numeric else str(value))
    cls = ' class="n"' if numeric else ' class="text"'
    return f'<td{cls} data-sort="{escape(sort)}">{escape(shown)}</td>'


def _fmt(x: float | None, spec: str) -> str:
    if x is None:
        return ""
    if math.isinf(x):
        return "inf"
    return format(x, spec)


def _row(rank: int, it: dict, has: set[str]) -> str:
    v = _verdict(it)
    lam = _number(it.get("smallest_eigenvalue"))
    cond = _number(it.get("condition_number"))
    log_cond = None if cond is None else (math.inf if math.isinf(cond) else math.log10(cond) if cond > 0 else None)
    cells = [
        _cell(rank, str(rank), True),
        f'<td class="item" data-sort="{escape(_label(it))}">{_link(it, _label(it))}</td>',
        f'<td data-sort="{VERDICT_RANK.get(v, 9)}"><span class="badge v-{_badge_class(v)}">{escape(v)}</span></td>',
    ]
    if "outcome" in has:
        o = _text(it.get("outcome"))
        cells.append(f'<td data-sort="{OUTCOME_RANK.get(o, 9)}">{escape(o)}</td>')
    cells.append(
        f'<td class="n" data-sort="{"" if lam is None else escape(repr(lam))}" data-key="smallest_eigenvalue" '
        f'data-value="{escape(json.dumps(lam))}">{escape(_fmt(lam, ".3e"))}</td>'
    )
    if "condition_number" in has:
        cells.append(
            _cell(
                None if log_cond is None else (1e308 if math.isinf(log_cond) else log_cond), _fmt(log_cond, ".1f"), True
            )
        )
    cells.append(_cell(_int(it.get("n_functions")), _fmt(_number(it.get("n_functions")), ".0f"), True))
    if "n_atoms" in has:
        cells.append(_cell(_int(it.get("n_atoms")), _fmt(_number(it.get("n_atoms")), ".0f"), True))
    if "basis" in has:
        cells.append(_cell(_text(it.get("basis")) or None, _text(it.get("basis"))))
    if "top_atom" in has:
        cells.append(_cell(_text(it.get("top_atom")) or None, _text(it.get("top_atom"))))
    if "threshold" in has:
        th = _number(it.get("threshold"))
        cells.append(_cell(th, _fmt(th, ".1e"), True))
    if "n_removed" in has:
        nr = _int(it.get("n_removed"))
        cells.append(_cell(nr, "" if nr is None else str(nr), True))
    why = _why(it)
    cells.append(f'<td class="why" data-sort="{escape(why)}">{escape(why)}</td>')
    return "<tr>" + "".join(cells) + "</tr>"


def _header(has: set[str]) -> str:
    cols = [("#", "num"), ("item", "text"), ("verdict", "num")]
    if "outcome" in has:
        cols.append(("gate", "num"))
    cols.append(("smallest eigenvalue", "num"))
    if "condition_number" in has:
        cols.append(("log10 κ", "num"))
    cols.append(("functions", "num"))
    if "n_atoms" in has:
        cols.append(("atoms", "num"))
    if "basis" in has:
        cols.append(("basis", "text"))
    if "top_atom" in has:
        cols.append(("main atom", "text"))
    if "threshold" in has:
        cols.append(("τ advised", "num"))
    if "n_removed" in has:
        cols.append(("removed", "num"))
    cols.append(("why", "text"))
    right, first = ' class="n"', ' aria-sort="ascending"'
    ths = "".join(
        f'<th data-type="{t}"{right if t == "num" and name not in ("verdict", "gate") else ""}'
        f'{first if name == "#" else ""}><button type="button">{escape(name)}</button></th>'
        for name, t in cols
    )
    return f"<thead><tr>{ths}</tr></thead>"


def render_set_index(
    items: list[dict], title: str = "Audit of a set of geometries", policy: dict | None = None, note: str = ""
) -> str:
    """The HTML text of the set index (see the module docstring for ``items``)."""
    items = sorted(items, key=rank_key)
    has, shared = _columns(items)
    if shared:
        note = f"{note} Every item: {'; '.join(shared)}.".strip()
    levels = ""
    if policy:
        levels = (
            f" Levels: caution below {policy.get('caution', float('nan')):.0e}, "
            f"fail below {policy.get('fail', float('nan')):.0e}."
        )
    rows = "".join(_row(i + 1, it, has) for i, it in enumerate(items))
    return "\n".join(
        [
            "<!DOCTYPE html>",
            '<html lang="en"><head><meta charset="utf-8">',
            '<meta name="viewport" content="width=device-width, initial-scale=1">',
            f"<title>{escape(title)}</title><style>{CSS}</style></head><body><main>",
            f"<h1>{escape(title)}</h1>",
            f'<p class="sub">{len(items)} item(s).{escape(levels)} {escape(note)}</p>',
            f'<div class="tiles">{_tiles(items)}</div>',
            _histogram(items, policy),
            _worst(items),
            '<h2 id="items">All items</h2>',
            '<p class="sub">Worst first; click a column heading to sort by it.</p>',
            f'<div class="scroll"><table class="sortable">{_header(has)}<tbody>{rows}</tbody></table></div>',
            "<footer>Self-contained page: the figure is embedded and nothing is fetched from the network.</footer>",
            f"<script>{SORT_JS}</script>",
            "</main></body></html>",
            "",
        ]
    )


def _columns(items: list[dict]) -> tuple[set[str], list[str]]:
    """The optional columns that some item fills, and the "basis ..." / "advised threshold ..."
    notes of the columns that hold one value for every item (said once, above the table,
    instead of as a column)."""
    has = {
        k
        for it in items
        for k in ("outcome", "condition_number", "n_atoms", "basis", "top_atom", "threshold", "n_removed")
        if _text(it.get(k))
    }
    shared = []
    for key, label in (("basis", "basis"), ("threshold", "advised threshold")):
        values = {_text(it.get(key)) for it in items if _text(it.get(key))}
        if key in has and len(values) == 1 and len(items) > 1:
            has.discard(key)
            v = values.pop()
            shared.append(f"{label} {format(float(v), '.1e') if key == 'threshold' else v}")
    return has, shared


def _badge_class(verdict: str) -> str:
    return escape(verdict if verdict in VERDICT_RANK else "other")


def _tiles(items: list[dict]) -> str:
    """One tile per verdict with its count, worst verdict first."""
    counts: dict[str, int] = {}
    for it in items:
        counts[_verdict(it)] = counts.get(_verdict(it), 0) + 1
    order = [v for v in VERDICT_RANK if v in counts]
    order += sorted(set(counts) - set(order))
    return "".join(
        f'<div class="tile v-{_badge_class(v)}" data-key="count.{escape(v)}" '
        f'data-value="{counts[v]}"><div class="count">{counts[v]}</div><div class="label">{escape(v)}</div></div>'
        for v in order
    )


def _histogram(items: list[dict], policy: dict | None) -> str:
    """The histogram of the smallest eigenvalues as an embedded figure ("" when no item has one)."""
    audited = [it for it in items if _number(it.get("smallest_eigenvalue")) is not None]
    if not audited:
        return ""
    png = set_histogram_png(
        [_number(it.get("smallest_eigenvalue")) for it in audited], [_verdict(it) for it in audited], policy
    )
    return (
        f'<figure><img src="data:image/png;base64,{base64.b64encode(png).decode("ascii")}" '
        'alt="Histogram of log10 of the smallest overlap eigenvalue over the set, coloured by verdict">'
        "<figcaption>Each item counted once, coloured by its verdict; the vertical lines are the "
        "caution and fail levels.</figcaption></figure>"
    )


def _worst(items: list[dict]) -> str:
    """The first WORST_SHOWN items that do not pass, with why ("" when every item passes)."""
    worst = [it for it in items if _verdict(it) != "pass"][:WORST_SHOWN]
    if not worst:
        return ""
    lis = "".join(
        f'<li>{_link(it, _label(it))}: <span class="badge v-'
        f'{_badge_class(_verdict(it))}">{escape(_verdict(it))}</span> '
        + (
            f"smallest eigenvalue {_fmt(_number(it.get('smallest_eigenvalue')), '.2e')}; "
            if _number(it.get("smallest_eigenvalue")) is not None and "eigenvalue" not in _why(it)
            else ""
        )
        + f"{escape(_why(it))}</li>"
        for it in worst
    )
    return f'<h2 id="worst">Worst items</h2><ol class="worst">{lis}</ol>'


def write_set_index(
    out_dir: Path,
    items: list[dict],
    title: str = "Audit of a set of geometries",
    policy: dict | None = None,
    note: str = "",
    filename: str = "index.html",
) -> Path:
    """Write ``out_dir/index.html`` for ``items`` (summary rows plus a relative ``report`` link)."""
    path = Path(out_dir) / filename
    atomic_write(path, render_set_index(items, title, policy, note))
    return path


def item_from_result(result: AuditResult | dict, report: str = "") -> dict:
    """An index item read from one AuditResult (or its dict): its summary row and link."""
    d = result if isinstance(result, dict) else result.as_dict()
    inp = d["input"]
    return {**result_row(inp["path"], inp["frame"] if inp.get("n_frames", 1) > 1 else None, "", d), "report": report}


def link_reports(out_dir: Path, rows: list[dict], items_dir: str = "items") -> list[dict]:
    """Copies of gate summary rows with ``report`` pointing at items/<item>.html when it
    exists, else at items/<item>.json (browsers show JSON too), else nothing."""
    linked = []
    for r in rows:
        name = _text(r.get("item"))
        report = ""
        for ext in (".html", ".json"):
            if name and (Path(out_dir) / items_dir / f"{name}{ext}").is_file():
                report = f"{items_dir}/{name}{ext}"
                break
        linked.append({**r, "report": _text(r.get("report")) or report})
    return linked


def write_item_pages(
    out_dir: Path, rows: list[dict], items_dir: str = "items", verdicts: tuple[str, ...] | None = None
) -> list[Path]:
    """Write items/<item>.html beside each items/<item>.json that holds an audit result
    (item errors have no page); ``verdicts`` limits the pages to those verdicts."""
    written = []
    for r in rows:
        name = _text(r.get("item"))
        src = Path(out_dir) / items_dir / f"{name}.json"
        if not name or not src.is_file() or (verdicts and _verdict(r) not in verdicts):
            continue
        page = src.with_suffix(".html")
        if page.is_file() and page.stat().st_mtime_ns >= src.stat().st_mtime_ns:
            written.append(page)  # drawn from this very JSON already (gate rewrites only changed reports)
            continue
        data = json.loads(src.read_text(encoding="utf-8"))
        if "spectrum" in data and "input" in data:
            written.append(write_html(data, page))
    return written
