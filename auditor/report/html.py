"""Self-contained HTML report for one audit result: figures embedded as PNG data URIs,
inline CSS, no scripts and no network access needed to view it.

Every number shown comes from the result; each carries its full value and its place in
the JSON report (``data-key``, ``data-value``) so that the two can be checked against
each other.
"""

from __future__ import annotations

import base64
import json
import math
from html import escape
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..base.files import atomic_write
from ..base.jsonio import clean
from ..diagnosis.findings import SEVERITY_ORDER
from .counterpoise import counterpoise_html
from .figures import draw_figures
from .periodic import periodic_html
from .style import PAGE_CSS
from .text import (
    X_NOTE,
    FunctionSubsetView,
    RemediesView,
    ShellPruningView,
    TrialView,
    frames_view,
    lower_bound_sentence,
    named_basis_lines,
    remedies_view,
    vectors_note,
)

if TYPE_CHECKING:
    from ..pipeline.result import AuditResult

CSS = (
    PAGE_CSS
    + """
main { max-width: 1080px; margin: 0 auto; padding: 20px 28px 40px; }
h2 { font-size: 1.2em; margin: 1.8em 0 0.5em; padding-bottom: 4px; border-bottom: 2px solid var(--line); }
h3 { font-size: 1.0em; margin: 1.2em 0 0.4em; }
nav { font-size: 0.9em; margin: 8px 0 4px; }
nav a { margin-right: 14px; color: var(--accent); text-decoration: none; }
.verdict { display:flex; gap:18px; align-items:flex-start; border:1px solid var(--line);
           border-left: 8px solid var(--c); border-radius: 6px; padding: 14px 18px; background: var(--band); }
.verdict .word { font-weight: 800; font-size: 1.5em; letter-spacing: 0.06em; color: #fff;
                 background: var(--c); padding: 2px 14px; border-radius: 4px; white-space: nowrap; }
.verdict p { margin: 0; }
.num { white-space: nowrap; }
.v-pass { --c: var(--pass); } .v-caution { --c: var(--caution); }
.v-fail { --c: var(--fail); } .v-error { --c: var(--error); }
.v-caution .word { color: #1f2328; }
table { border-collapse: collapse; margin: 8px 0 12px; font-size: 0.92em; }
th, td { border-bottom: 1px solid var(--line); padding: 4px 10px; text-align: left; vertical-align: top; }
th { background: var(--band); font-weight: 600; }
tr.chosen td { background: #e7f1fa; font-weight: 600; }
.sev { font-weight: 700; padding: 0 6px; border-radius: 3px; color: #fff; }
.sev-error { background: var(--fail); } .sev-warning { background: var(--caution); color: #1f2328; }
.sev-info { background: #8c8c8c; }
.grid { display: flex; flex-wrap: wrap; gap: 0 28px; }
figcaption { color: var(--muted); font-size: 0.88em; max-width: 820px; }
pre { background: var(--band); border: 1px solid var(--line); border-radius: 4px; padding: 10px 12px;
      white-space: pre-wrap; word-break: break-word; font-size: 0.86em; }
code { font-size: 0.92em; }
ul.caveats li { margin-bottom: 4px; }
details summary { cursor: pointer; color: var(--accent); margin: 4px 0; }
"""
    + "@media print { nav { display: none; } main { max-width: none; } h2 { break-after: avoid; } "
    + "figure { break-inside: avoid; } }\n"
)


def _d(result: AuditResult | dict) -> dict:
    return clean(result if isinstance(result, dict) else result.as_dict())


def _value_attr(value: Any) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "null"
    return json.dumps(value)


def num(key: str, value: Any, spec: str = ".3e", none: str = "not computed") -> str:
    """A number as shown, tagged with its JSON path and full value."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        shown = none
    else:
        shown = format(value, spec)
    return (
        f'<span class="num" data-key="{escape(key)}" data-value="{escape(_value_attr(value))}">{escape(shown)}</span>'
    )


def _img(png: bytes | None, alt: str, caption: str) -> str:
    if not png:
        return ""
    data = base64.b64encode(png).decode("ascii")
    return (
        f'<figure><img src="data:image/png;base64,{data}" alt="{escape(alt)}">'
        f"<figcaption>{caption}</figcaption></figure>"
    )


def _atoms_text(atoms: list, limit: int = 12) -> str:
    text = ", ".join(str(a) for a in atoms[:limit])
    return text + (" …" if len(atoms) > limit else "")


def explanation(d: dict) -> str:
    """One paragraph (HTML) that says what the verdict means for this geometry."""
    sp, c, rec, inp = d["spectrum"], d["causes"], d["recommendation"], d["input"]
    parts = [escape(d["verdict_reason"])]
    lc = sp["log10_condition"]
    smallest = (
        ""
        if "overlap eigenvalue" in d["verdict_reason"]
        else f" (smallest eigenvalue {num('spectrum.smallest', sp['smallest'])})"
    )
    if lc is None:
        parts.append(
            f"The unit-diagonal overlap matrix is singular to rounding{smallest}: some basis "
            "functions are exact combinations of others."
        )
    else:
        parts.append(
            f"Log10 of the condition number of the unit-diagonal overlap matrix is "
            f"{num('spectrum.log10_condition', lc, '.1f')}{smallest}: roughly that many decimal "
            "digits are lost when the basis is orthogonalized."
        )
    errors = [
        f
        for f in d["findings"]
        if f["severity"] == "error" and f["kind"] not in ("near_singular", d.get("verdict_finding"))
    ]
    if errors:
        parts.append("The geometry itself needs attention first: " + escape(errors[0]["message"]))
    top = [(i, a) for i, a in enumerate(c["atoms"][:3]) if a["weight"] >= 0.05]
    if top:
        who = ", ".join(
            f"{escape(a['element'])}{a['atom']} ({num(f'causes.atoms.{i}.weight', a['weight'], '.0%')})" for i, a in top
        )
        parts.append(
            f"The near-null space sits mostly on {who}; diffuse shells carry "
            f"{num('causes.diffuse.diffuse', c['diffuse']['diffuse'], '.0%')} of it."
        )
    if rec["threshold"] is None:
        parts.append("Fix the geometry first: no orthogonalization threshold or remedy is advised for a broken file.")
    elif rec["n_removed"]:
        parts.append(
            f"Canonical orthogonalization with threshold "
            f"{num('recommendation.threshold', rec['threshold'], '.1e')} removes "
            f"{num('recommendation.n_removed', rec['n_removed'], 'd')} of "
            f"{num('input.n_functions', inp['n_functions'], 'd')} functions."
        )
    elif rec["n_removed"] == 0:
        parts.append(
            f"At the advised threshold {num('recommendation.threshold', rec['threshold'], '.1e')} "
            "no function would be removed."
        )
    return " ".join(parts)


def _input_table(d: dict) -> str:
    inp = d["input"]
    frame = f"{inp['frame']} of {inp['n_frames']}" if inp["n_frames"] > 1 else "1"
    rows = [
        ("geometry file", f"<code>{escape(inp['path'])}</code>"),
        ("frame", escape(frame)),
        ("basis", escape(inp["basis"])),
        ("atoms", num("input.n_atoms", inp["n_atoms"], "d")),
        ("ghost atoms", escape(_atoms_text(inp["ghost_atoms"])) if inp["ghost_atoms"] else "none"),
        ("basis functions", num("input.n_functions", inp["n_functions"], "d")),
        ("shells", num("input.n_shells", inp["n_shells"], "d")),
        ("charge", num("input.charge", inp["charge"], "d")),
        ("multiplicity", num("input.multiplicity", inp["multiplicity"], "d", "not given")),
    ]
    return "<table>" + "".join(f"<tr><th>{k}</th><td>{v}</td></tr>" for k, v in rows) + "</table>"


def _spectrum_tables(d: dict) -> str:
    sp, pol = d["spectrum"], d["policy"]
    rows = [
        ("smallest eigenvalue", num("spectrum.smallest", sp["smallest"], ".4e")),
        ("largest eigenvalue", num("spectrum.largest", sp["largest"], ".4f")),
        ("condition number", num("spectrum.condition_number", sp["condition_number"], ".3e", "infinite (singular)")),
        ("log10 condition number (digits lost)", num("spectrum.log10_condition", sp["log10_condition"], ".2f", "all")),
        ("Gershgorin lower bound", num("spectrum.gershgorin_bound", sp["gershgorin_bound"], ".3f")),
        ("caution level", num("policy.caution", pol["caution"], ".0e")),
        ("fail level", num("policy.fail", pol["fail"], ".0e")),
        ("method", escape(str(sp["method"]))),
    ]
    left = "<table>" + "".join(f'<tr><th>{k}</th><td class="n">{v}</td></tr>' for k, v in rows) + "</table>"
    counts = "".join(
        f'<tr><td class="n">{escape(k)}</td><td class="n">'
        f"{num(f'spectrum.counts_below.{k}', v, 'd', 'not counted')}</td></tr>"
        for k, v in sp["counts_below"].items()
    )
    right = '<table><tr><th class="n">below</th><th class="n">eigenvalues</th></tr>' + counts + "</table>"
    return f'<div class="grid"><div>{left}</div><div>{right}</div></div>'


def _causes_tables(d: dict, limit: int = 12) -> str:
    c = d["causes"]
    arows = "".join(
        f"<tr><td>{a['atom']}</td><td>{escape(a['element'])}</td><td>{'ghost' if a['ghost'] else ''}</td>"
        f'<td class="n">{num(f"causes.atoms.{i}.weight", a["weight"], ".3f")}</td></tr>'
        for i, a in enumerate(c["atoms"][:limit])
    )
    srows = "".join(
        f"<tr><td>{escape(s['shell'])}</td><td>{escape(str(s['l']))}</td>"
        f'<td class="n">{num(f"causes.shells.{i}.exponent", s["exponent"], ".4g")}</td>'
        f"<td>{'yes' if s['diffuse'] else ''}</td>"
        f'<td class="n">{num(f"causes.shells.{i}.weight", s["weight"], ".3f")}</td></tr>'
        for i, s in enumerate(c["shells"][:limit])
    )
    lrows = "".join(
        f"<tr><td>{escape(str(x['l']))}</td>"
        f'<td class="n">{num(f"causes.angular.{i}.weight", x["weight"], ".3f")}</td></tr>'
        for i, x in enumerate(c["angular"])
    )
    return (
        '<div class="grid">'
        '<div><h3>Atoms</h3><table><tr><th>atom</th><th>element</th><th></th><th class="n">share</th></tr>'
        f"{arows}</table></div>"
        '<div><h3>Shells</h3><table><tr><th>shell</th><th>l</th><th class="n">smallest exponent</th>'
        f'<th>diffuse</th><th class="n">share</th></tr>{srows}</table></div>'
        f'<div><h3>Angular momentum</h3><table><tr><th>l</th><th class="n">share</th></tr>{lrows}</table></div>'
        "</div>"
    )


def _findings(d: dict) -> str:
    last = len(SEVERITY_ORDER)  # an unknown severity after the known ones
    fs = sorted(enumerate(d["findings"]), key=lambda p: (SEVERITY_ORDER.get(p[1]["severity"], last), p[0]))
    if not fs:
        return "<p>No geometry defects, duplicate functions or crowded diffuse shells were found.</p>"
    rows = "".join(
        f'<tr><td><span class="sev sev-{escape(f["severity"])}">{escape(f["severity"])}</span></td>'
        f"<td><code>{escape(f['kind'])}</code></td><td>{escape(_atoms_text(f['atoms']))}</td>"
        f"<td>{escape(f['message'])}</td></tr>"
        for _, f in fs
    )
    return f"<table><tr><th>severity</th><th>kind</th><th>atoms</th><th>what it means</th></tr>{rows}</table>"


def _advice(d: dict) -> str:
    rec, n = d["recommendation"], d["input"]["n_functions"]
    if rec["threshold"] is None:
        head = f"<p>No threshold is advised: {escape(rec['reason'])}.</p>"
        return head + _candidates_table(rec)
    head = (
        f"<p>Advised threshold <strong>τ = {num('recommendation.threshold', rec['threshold'], '.1e')}</strong>: "
        f"{escape(rec['reason'])}. Eigenvectors of S with eigenvalue below τ are dropped and the rest are "
        f"scaled, X = U<sub>k</sub> Λ<sub>k</sub><sup>-1/2</sup>. This removes "
        f"{num('recommendation.n_removed', rec['n_removed'], 'd')} of "
        f"{num('input.n_functions', n, 'd')} functions; the smallest kept eigenvalue is "
        f"{num('recommendation.smallest_kept', rec['smallest_kept'])} and the largest element of X is "
        f"{num('recommendation.max_transform_element', rec['max_transform_element'], '.1f')}. "
        f"{escape(rec['versus_library'])}</p>"
    )
    how = f"<h3>Applying it in pyscf</h3><pre><code>{escape(rec['how_to'])}</code></pre>"
    return head + _candidates_table(rec) + how


def _candidates_table(rec: dict) -> str:
    rows = []
    for i, c in enumerate(rec["candidates"]):
        chosen = ' class="chosen"' if c["threshold"] == rec["threshold"] else ""
        k = f"recommendation.candidates.{i}"
        rows.append(
            f'<tr{chosen}><td class="n">{num(k + ".threshold", c["threshold"], ".0e")}</td>'
            f'<td class="n">{num(k + ".n_removed", c["n_removed"], "d")}</td>'
            f'<td class="n">{num(k + ".smallest_kept", c["smallest_kept"])}</td>'
            f'<td class="n">{num(k + ".max_transform_element", c["max_transform_element"], ".1f")}</td></tr>'
        )
    table = (
        '<table><tr><th class="n">threshold τ</th><th class="n">functions removed</th>'
        '<th class="n">smallest kept eigenvalue</th><th class="n">largest element of X</th></tr>'
        + "".join(rows)
        + "</table>"
    )
    return table + f'<p class="sub">{escape(X_NOTE)}</p>'


def _label(key: str) -> str:
    return escape(str(key).replace("_", " "))


def _generic(value: Any, key: str, depth: int = 0) -> str:
    """Any JSON value as HTML: dicts as two-column tables, lists of records as tables."""
    if isinstance(value, bool) or value is None:
        return escape({True: "yes", False: "no", None: "—"}[value])
    if isinstance(value, int):
        return num(key, value, "d")
    if isinstance(value, float):
        spec = ".4g" if value == 0 or 1e-3 <= abs(value) < 1e5 else ".3e"
        return num(key, value, spec)
    if isinstance(value, str):
        if "\n" in value:
            return f"<pre><code>{escape(value)}</code></pre>"
        return escape(value)
    if isinstance(value, dict):
        rows = "".join(
            f"<tr><th>{_label(k)}</th><td>{_generic(v, f'{key}.{k}', depth + 1)}</td></tr>" for k, v in value.items()
        )
        return f"<table>{rows}</table>"
    if isinstance(value, (list, tuple)):
        if not value:
            return "none"
        if all(isinstance(v, dict) for v in value):
            cols: list[str] = []
            for v in value:
                cols += [k for k in v if k not in cols]
            head = "".join(f"<th>{_label(k)}</th>" for k in cols)
            body = "".join(
                "<tr>"
                + "".join(f"<td>{_generic(v[k], f'{key}.{i}.{k}', depth + 1) if k in v else ''}</td>" for k in cols)
                + "</tr>"
                for i, v in enumerate(value)
            )
            return f"<table><tr>{head}</tr>{body}</table>"
        return ", ".join(_generic(v, f"{key}.{i}", depth + 1) for i, v in enumerate(value))
    return escape(str(value))


MAX_REMEDY_ROWS = 40


def _capped_table(n_all: int, what: str, heads: list[str], rows: str) -> str:
    """A folded table of the first MAX_REMEDY_ROWS rows, with a last row saying how many
    more the JSON report holds."""
    more = (
        f'<tr><td colspan="{len(heads)}">… {n_all - MAX_REMEDY_ROWS} more in the JSON report</td></tr>'
        if n_all > MAX_REMEDY_ROWS
        else ""
    )
    return _fold(n_all, what, f"<table><tr>{''.join(heads)}</tr>{rows}{more}</table>")


def _fold(n_rows: int, what: str, table: str) -> str:
    """Long tables start folded, short ones open."""
    state = " open" if n_rows <= 12 else ""
    return f"<details{state}><summary>{n_rows} {escape(what)}</summary>{table}</details>"


def _frames(d: dict) -> str:
    """The one threshold and one set of remedies of a multi-frame input, each frame's figures."""
    view = frames_view(d)
    if view is None:
        return ""
    rows = "".join(
        f'<tr><td class="n">{r.frame}</td><td class="n">{num(f"{r.key}.smallest", r.smallest)}</td>'
        f"<td>{escape(r.verdict)}</td>"
        f'<td class="n">{num(f"{r.key}.advised_threshold", r.advised_threshold, ".1e", "none")}</td>'
        f'<td class="n">{num(f"{r.key}.directions_removed", r.directions_removed, "d")}</td>'
        f'<td class="n">{num(f"{r.key}.smallest_kept", r.smallest_kept)}</td>'
        f'<td class="n">{"—" if r.below_target is None else r.below_target}</td>'
        f'<td class="n">{"—" if r.shells_smallest is None else format(r.shells_smallest, ".3e")}</td>'
        f"<td>{escape(r.point_group)} / {escape(r.pruned_point_group)}</td></tr>"
        for r in view.rows
    )
    heads = (
        '<tr><th class="n">frame</th><th class="n">smallest eigenvalue</th><th>verdict</th>'
        '<th class="n">own advice</th><th class="n">removed at the one threshold</th><th class="n">smallest kept</th>'
        '<th class="n">below the target</th><th class="n">pruned basis: smallest</th>'
        "<th>point group (full / pruned)</th></tr>"
    )
    return f'<h2 id="frames">Frames</h2><p>{escape(view.sentence)}</p><table>{heads}{rows}</table>'


def _remedies(d: dict) -> str:
    rem = d.get("remedies")
    if rem and not isinstance(rem, dict):
        return '<h2 id="remedies">Remedies</h2>' + _generic(rem, "remedies")
    view = remedies_view(rem)
    if view is None:
        return ""
    n = d["input"]["n_functions"]
    out = ['<h2 id="remedies">Remedies</h2>', _alternatives(view, n)]
    if not view.nothing_needed:
        out.append(f"<p>{escape(lower_bound_sentence(view.lower_bound, view.target))}</p>")
    out += [f"<p>{escape(problem)}</p>" for problem in view.problems]
    if view.symmetry:
        out.append(f"<p>{escape(view.symmetry.sentence)}</p>")
    out += [f"<p>{escape(line)}</p>" for line in named_basis_lines(rem.get("named_basis") if rem else None)]
    if view.shells:
        out += _dropped_shells(view.shells, n)
    if view.unconstrained:
        out += _dropped_shells(view.unconstrained, n, "Shell-pruned basis ignoring symmetry")
    if view.functions:
        out += _dropped_functions(view.functions, n)
    if view.diffuse_by_element:
        out.append(
            "<h3>Diffuse shells by element</h3>" + _generic(view.diffuse_by_element, "remedies.diffuse_by_element")
        )
    if view.trial:
        out += _trial_scf(view.trial)
    for k, v in view.others.items():
        out.append(f"<h3>{_label(k).capitalize()}</h3>" + _generic(v, f"remedies.{k}"))
    return "\n".join(out)


def _alternatives(view: RemediesView, n: int) -> str:
    """The ranked remedies (or the sentence that none is needed)."""
    target = num("remedies.target", view.target, ".1e")
    if view.nothing_needed:
        return f"<p>The smallest eigenvalue already reaches the target {target}; nothing needs removing.</p>"
    rows = "".join(
        f'<tr><td class="n">{num(f"{a.key}.rank", a.rank, "d", "")}</td>'
        f"<td>{escape(a.title)}</td>"
        f'<td class="n">{num(f"{a.key}.removed", a.removed, "d", "?")} {escape(a.unit)}</td>'
        f'<td class="n">{num(f"{a.key}.smallest_after", a.smallest_after)}</td>'
        f"<td>{a.reaches}</td><td>{escape(a.how)}</td></tr>"
        for a in view.alternatives
    )
    return (
        f"<p>Each remedy below is judged by whether the smallest eigenvalue of what it keeps reaches "
        f"the target {target}; those that do come first, then those that remove least.</p>\n"
        '<table><tr><th class="n">rank</th><th>remedy</th>'
        f'<th class="n">removes (of {n})</th><th class="n">smallest eigenvalue after</th>'
        f"<th>reaches target</th><th>how</th></tr>{rows}</table>"
    )


def _dropped_shells(sh: ShellPruningView, n: int, heading: str = "Shell-pruned basis") -> list[str]:
    how = (
        "Pivoted Cholesky over whole shells"
        if sh.by_shell_pivoting
        else "Keeping the shells that the pivoted-Cholesky subset of functions leaves whole"
    )
    intro = (
        f"<h3>{escape(heading)}</h3><p>{how} (tolerance "
        f"{num(f'{sh.key}.tolerance', sh.tolerance, '.2e')}) keeps "
        f"{num(f'{sh.key}.kept', sh.kept, 'd')} of {n} functions; the smallest "
        f"eigenvalue of the kept set is "
        f"{num(f'{sh.key}.smallest_kept', sh.smallest_kept)}. Shells dropped:</p>"
    )
    rows = "".join(
        f"<tr><td>{escape(x.where)}</td><td>{escape(x.l_letter)}</td>"
        f'<td class="n">{num(f"{x.key}.exponent", x.exponent, ".4g")}</td>'
        f"<td>{x.diffuse_mark}</td>"
        f'<td class="n">{num(f"{x.key}.functions", x.functions, "d")}</td></tr>'
        for x in sh.dropped[:MAX_REMEDY_ROWS]
    )
    heads = [
        "<th>atom and shell</th>",
        "<th>l</th>",
        '<th class="n">smallest exponent</th>',
        "<th>diffuse</th>",
        '<th class="n">functions</th>',
    ]
    return [intro, _capped_table(len(sh.dropped), "shells dropped", heads, rows)]


def _dropped_functions(fn: FunctionSubsetView, n: int) -> list[str]:
    intro = (
        f"<h3>Pivoted-Cholesky subset of functions</h3><p>Pivoting on S − τI, τ = "
        f"{num(f'{fn.key}.tolerance', fn.tolerance, '.2e')} (no function left could be added alone), found in "
        f"{num(f'{fn.key}.factorizations', fn.factorizations, 'd')} "
        f"factorization(s); keeps {num(f'{fn.key}.kept', fn.kept, 'd')} of "
        f"{n} functions. Single functions are dropped, so the basis is no longer rotationally "
        "invariant. Functions dropped:</p>"
    )
    rows = "".join(
        f'<tr><td class="n">{x.function}</td><td>{escape(x.where)}</td><td>{escape(x.component)}</td>'
        f'<td class="n">{num(f"{x.key}.exponent", x.exponent, ".4g")}</td></tr>'
        for x in fn.dropped[:MAX_REMEDY_ROWS]
    )
    heads = [
        '<th class="n">function</th>',
        "<th>atom and shell</th>",
        "<th>component</th>",
        '<th class="n">smallest exponent</th>',
    ]
    return [intro, _capped_table(len(fn.dropped), "functions dropped", heads, rows)]


def _trial_scf(tri: TrialView) -> list[str]:
    out = ['<h3 id="trial-scf">Trial SCF</h3>']
    if tri.skipped:
        return out + [f"<p>{escape(tri.skipped)}.</p>"]
    out.append(f"<p>Method {escape(tri.method)}; energies in hartree.</p>")
    rows = "".join(
        f"<tr><td>{escape(r.basis)}</td>"
        f'<td class="n">{num(f"{r.key}.n_functions", r.n_functions, "d")}</td>'
        f'<td class="n">{num(f"{r.key}.directions_removed", r.directions_removed, "d")}</td>'
        f"<td>{r.converged_text}</td>"
        f'<td class="n">{num(f"{r.key}.cycles", r.cycles, "d", "")}</td>'
        f'<td class="n">{num(f"{r.key}.energy", r.energy, ".8f", "none")}</td>'
        f'<td class="n">{num(f"{r.key}.seconds", r.seconds, ".1f", "")}</td>'
        f"<td>{escape(r.note)}</td></tr>"
        for r in tri.runs
    )
    out.append(
        '<table><tr><th>basis</th><th class="n">functions</th><th class="n">directions removed</th>'
        '<th>converged</th><th class="n">cycles</th><th class="n">energy (hartree)</th>'
        f'<th class="n">time (s)</th><th>note</th></tr>{rows}</table>'
    )
    out += [f"<p><strong>{escape(line)}</strong></p>" for line in tri.alerts]
    if tri.difference_microhartree is not None:
        out.append(
            f"<p>Pruned basis minus canonical orthogonalization: "
            f"{num(f'{tri.key}.difference_microhartree', tri.difference_microhartree, '+.1f')} microhartree.</p>"
        )
    if tri.reminder:
        out.append(f"<p>{escape(tri.reminder)}</p>")
    return out


def render_html(result: AuditResult | dict, images: dict[str, bytes] | None = None) -> str:
    """The HTML text of one result. ``images`` maps "spectrum", "causes" and "molecule" to
    PNG bytes; when None they are drawn here."""
    d = _d(result)
    if images is None:  # callers usually pass them
        images = draw_figures(d)
    sections = [
        *_page_top(d),
        *_figure_sections(d, images),
        periodic_html(d, images, num, _img),
        counterpoise_html(d, num),
        '<h2 id="findings">Findings</h2>',
        _findings(d),
        '<h2 id="advice">Canonical orthogonalization</h2>',
        _advice(d),
        _frames(d),
        _remedies(d),
        '<h2 id="caveats">Read before acting</h2>',
        '<ul class="caveats">' + "".join(f"<li>{escape(x)}</li>" for x in d["caveats"]) + "</ul>",
        (
            f"<footer>auditor {escape(str(d['version']))}, report schema {escape(str(d['schema']))}. "
            "This page is self-contained: the figures are embedded and nothing is fetched from the network.</footer>"
        ),
        "</main></body></html>",
        "",
    ]
    return "\n".join(s for s in sections if s)


def _page_top(d: dict) -> list[str]:
    """Head, title, subtitle, navigation and the verdict box."""
    inp, verdict = d["input"], str(d["verdict"])
    frame = f", frame {inp['frame']} of {inp['n_frames']}" if inp["n_frames"] > 1 else ""
    title = f"Basis overlap audit: {Path(inp['path']).name}{frame}"
    ghosts = f", {len(inp['ghost_atoms'])} of them ghost atoms" if inp["ghost_atoms"] else ""
    return [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{escape(title)}</title>",
        f"<style>{CSS}</style></head><body><main>",
        f"<h1>{escape(title)}</h1>",
        (
            f'<p class="sub">Basis {escape(inp["basis"])}; {inp["n_atoms"]} atoms{ghosts}; '
            f"{inp['n_functions']} basis functions in {inp['n_shells']} shells.</p>"
        ),
        (
            '<nav><a href="#spectrum">Spectrum</a><a href="#causes">Causes</a><a href="#geometry">Geometry</a>'
            '<a href="#findings">Findings</a><a href="#advice">Orthogonalization</a>'
            + ('<a href="#frames">Frames</a>' if d.get("frames") else "")
            + ('<a href="#remedies">Remedies</a>' if d.get("remedies") else "")
            + ('<a href="#trial-scf">Trial SCF</a>' if (d.get("remedies") or {}).get("trial_scf") else "")
            + '<a href="#caveats">Read before acting</a></nav>'
        ),
        (
            f'<section class="verdict v-{escape(verdict)}" id="verdict"><span class="word" data-key="verdict" '
            f'data-value="{escape(json.dumps(verdict))}">{escape(verdict.upper())}</span>'
            f"<p>{explanation(d)}</p></section>"
        ),
    ]


def _figure_sections(d: dict, images: dict[str, bytes]) -> list[str]:
    """The spectrum, causes and geometry sections: heading, figure and tables of each."""
    return [
        '<h2 id="spectrum">Spectrum of the normalized overlap matrix</h2>',
        _img(
            images.get("spectrum"),
            "Overlap eigenvalues on a log axis, smallest first, with the caution "
            "and fail levels and the advised threshold",
            "Eigenvalues of D<sup>-1/2</sup> S D<sup>-1/2</sup> (unit diagonal), smallest first, on a log axis. "
            "Open circles are the directions the advised threshold removes.",
        ),
        _spectrum_tables(d),
        '<h2 id="causes">Where the near-null space sits</h2>',
        _img(
            images.get("causes"),
            "Bar charts of the near-null-space share per atom, per angular momentum and for diffuse shells",
            f"Share of each atom, angular momentum and shell kind in {escape(vectors_note(d))}; "
            "each chart adds up to 1.",
        ),
        _causes_tables(d),
        '<h2 id="geometry">Geometry</h2>',
        _img(
            images.get("molecule"),
            "The molecule projected onto its principal plane, atoms shaded by their near-null-space share",
            "Atoms on the plane of the two largest principal axes of the coordinates, shaded by their share "
            "of the near-null space. Grey lines are bonds (distance below 1.2 times the covalent-radius sum); "
            "red dashed lines or rings mark coincident atoms and short contacts from the findings.",
        ),
        _input_table(d),
    ]


def write_html(result: AuditResult | dict, path: Path, images: dict[str, bytes] | None = None) -> Path:
    atomic_write(path, render_html(result, images))
    return path
