"""The periodic part of the reports: the Markdown and HTML sections (lattice, mesh, lattice-sum
check, the table of k-points, the remedies' details). Each reads the ``periodic`` part of a
JSON result; none recomputes. Its figure (the smallest eigenvalue at every k-point) is drawn
in `auditor.report.plots`."""

from __future__ import annotations

from collections.abc import Callable
from html import escape

#: rows of the k-point table shown (the JSON holds every k-point)
MAX_KPOINT_ROWS = 30

Num = Callable[..., str]


def periodic_part(d: dict) -> dict | None:
    """The result's ``periodic`` part, or None for a molecule."""
    part = d.get("periodic")
    return part if isinstance(part, dict) else None


def _k(scaled: list) -> str:
    return "(" + ", ".join(f"{x:.3g}" for x in scaled) + ")"


def _shown(rows: list[dict], worst: int) -> list[dict]:
    """The worst k-points first when the table is cut, else all in mesh order."""
    if len(rows) <= MAX_KPOINT_ROWS:
        return rows
    keep = sorted(rows, key=lambda r: (r["smallest"], r["k"]))[:MAX_KPOINT_ROWS]
    return sorted(keep, key=lambda r: r["k"])


def _precision_text(p: dict) -> str:
    if p["converged"]:
        check = (
            f"checked against {p['checked_at']:.0e} (largest eigenvalue shift within rounding, {p['tolerance']:.1e})"
        )
    else:
        check = "not converged at the tightest precision tried"
    asked = "" if p["requested"] == p["used"] else f" (asked: {p['requested']:.0e}, not converged there)"
    return f"lattice sums at pyscf precision {p['used']:.0e}{asked}, {check}; rcut {p['rcut_bohr']:.1f} bohr"


def periodic_lines(d: dict) -> list[str]:
    """The Markdown section of a periodic result ([] for a molecule)."""
    part = periodic_part(d)
    if part is None:
        return []
    mesh = "×".join(str(n) for n in part["kmesh"])
    default = " (the default from the cell size)" if part["kmesh_default"] else ""
    lines = [
        "## Periodic: S(k) on the k-point mesh",
        "",
        f"Periodic in {part['dimension']} direction(s); lattice vectors (Å, pyscf's order, file axes "
        f"{part['axis_order']}): " + "; ".join(_k(r) for r in part["lattice"]) + ".",
        f"Mesh {mesh}{default}: {part['n_kpoints']} k-points ({part['mesh']}), S(k) built at "
        f"{part['n_computed']} of them (S(-k) = S(k)*). {_precision_text(part['precision'])}.",
        f"Worst k-point: {part['worst']['k']} at {_k(part['worst']['scaled'])} (fractions of the reciprocal "
        f"vectors), smallest eigenvalue {part['worst']['smallest']:.3e}; {part['worst']['kpoints_below_caution']} "
        "k-point(s) below the caution level.",
        "",
        "| k | k (reciprocal fractions) | smallest | largest | below 1e-05 | below 1e-07 | smallest Bloch norm |",
        "|---|---|---|---|---|---|---|",
    ]
    for r in _shown(part["kpoints"], part["worst"]["k"]):
        c = r["counts_below"]
        lines.append(
            f"| {r['k']} | {_k(r['scaled'])} | {r['smallest']:.3e} | {r['largest']:.3f} | {c['1e-05']} | "
            f"{c['1e-07']} | {r['smallest_bloch_norm']:.2e} |"
        )
    if len(part["kpoints"]) > MAX_KPOINT_ROWS:
        lines.append(f"| ... the {MAX_KPOINT_ROWS} worst of {len(part['kpoints'])} (see the JSON report) | | | | | | |")
    return lines + [""] + remedy_lines(part.get("remedies"))


def remedy_lines(rem: dict | None) -> list[str]:
    if not rem:
        return []
    lines = []
    cut = rem.get("exponent_cutoff")
    if cut:
        lines += [
            f"Exponent cutoff: keeps {cut['n_functions']} of {cut['n_functions_full']} functions; smallest "
            f"eigenvalue over the mesh after it {cut['smallest_after']:.3e} (k-point {cut['worst_k']}; "
            f"{cut['trials']} cells tried).",
            "",
            "| element | cutoff (bohr⁻²) | largest removed | smallest kept | primitives removed | shells removed |",
            "|---|---|---|---|---|---|",
        ]
        for e in cut["elements"]:
            big = "-" if e["largest_removed"] is None else f"{e['largest_removed']:.4g}"
            lines.append(
                f"| {e['element']} | {e['cutoff']:.4g} | {big} | {e['smallest_kept']:.4g} | "
                f"{e['primitives_removed']} | {e['shells_removed']} |"
            )
        lines.append("")
    sh = rem.get("shells")
    if sh:
        names = ", ".join(f"{s['element']}{s['atom']} {s['shell']}" for s in sh["dropped_shells"][:20])
        lines += [
            f"Whole-shell subset (pivoted at k-points {sh['kpoints']}): keeps {sh['kept']} functions; smallest "
            f"eigenvalue over the mesh {sh['smallest_after']:.3e}; drops {names}"
            + (" ..." if len(sh["dropped_shells"]) > 20 else "")
            + ".",
            "",
        ]
    return lines


def periodic_html(d: dict, images: dict[str, bytes], num: Num, img: Callable[[bytes | None, str, str], str]) -> str:
    """The HTML section of a periodic result ("" for a molecule); ``num`` and ``img`` are the
    page's tagged-number and figure helpers (auditor.report.html)."""
    part = periodic_part(d)
    if part is None:
        return ""
    w = part["worst"]
    head = (
        '<h2 id="periodic">Periodic: S(k) on the k-point mesh</h2>'
        f"<p>Periodic in {num('periodic.dimension', part['dimension'], 'd')} direction(s); mesh "
        f"{escape('×'.join(str(n) for n in part['kmesh']))}"
        f"{' (default from the cell size)' if part['kmesh_default'] else ''}, "
        f"{num('periodic.n_kpoints', part['n_kpoints'], 'd')} k-points, S(k) built at "
        f"{num('periodic.n_computed', part['n_computed'], 'd')} (S(−k) = S(k)*). "
        f"{escape(_precision_text(part['precision']))}. Worst k-point {num('periodic.worst.k', w['k'], 'd')} at "
        f"{escape(_k(w['scaled']))}: smallest eigenvalue {num('periodic.worst.smallest', w['smallest'])}.</p>"
    )
    figure = img(
        images.get("kpoints"),
        "Smallest eigenvalue of S(k) at every k-point of the mesh, on a log axis, with the policy levels",
        "Smallest eigenvalue of S(k) at each k-point (mesh order), with the caution and fail levels.",
    )
    rows = "".join(_kpoint_row(r, num) for r in _shown(part["kpoints"], w["k"]))
    table = (
        "<table><tr><th>k</th><th>k (reciprocal fractions)</th><th class='n'>smallest</th><th class='n'>largest</th>"
        f"<th class='n'>below 1e-05</th><th class='n'>smallest Bloch norm</th></tr>{rows}</table>"
    )
    more = "".join(f"<p>{escape(x)}</p>" for x in remedy_lines(part.get("remedies")) if x and not x.startswith("|"))
    return head + figure + table + more


def _kpoint_row(r: dict, num: Num) -> str:
    key = f"periodic.kpoints.{r['k'] - 1}"
    cells = [
        num(f"{key}.smallest", r["smallest"]),
        num(f"{key}.largest", r["largest"], ".3f"),
        num(f"{key}.counts_below.1e-05", r["counts_below"]["1e-05"], "d"),
        num(f"{key}.smallest_bloch_norm", r["smallest_bloch_norm"], ".2e"),
    ]
    return (
        f"<tr><td>{r['k']}</td><td>{escape(_k(r['scaled']))}</td>"
        + "".join(f'<td class="n">{c}</td>' for c in cells)
        + "</tr>"
    )
