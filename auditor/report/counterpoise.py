"""The counterpoise part of the reports: the table of combinations (the complex, each fragment
in the complex basis and in its own) in Markdown and HTML. Reads the ``counterpoise`` part of
a JSON result; recomputes nothing."""

from __future__ import annotations

from collections.abc import Callable
from html import escape

Num = Callable[..., str]

_HEAD = (
    "combination",
    "real atoms",
    "ghost atoms",
    "functions",
    "smallest λ",
    "log10 κ",
    "below caution",
    "below fail",
)


def _part(d: dict) -> dict | None:
    part = d.get("counterpoise")
    return part if isinstance(part, dict) else None


def _atoms(atoms: list[int]) -> str:
    """1-based atom numbers as ranges: 1-6, 9."""
    out: list[str] = []
    for a in atoms:
        if out and out[-1].split("-")[-1] == str(a - 1):
            out[-1] = f"{out[-1].split('-')[0]}-{a}"
        else:
            out.append(str(a))
    return ", ".join(out) or "–"


def combination_name(row: dict) -> str:
    if row["fragment"] is None:
        return "complex"
    where = "the complex basis" if row["basis"] == "complex" else "its own basis"
    return f"fragment {row['fragment']} in {where}"


def _intro(part: dict) -> str:
    frags = "; ".join(f"fragment {f['fragment']}: atoms {_atoms(f['atoms'])}" for f in part["fragments"])
    frags = frags[:1].upper() + frags[1:]
    return (
        f"{len(part['combinations'])} spectra: the complex, and each fragment in the complex basis (the other "
        f"fragments as ghost atoms) and in its own basis. {frags}. A fragment in the complex basis has the "
        "complex's functions, so the same S; its verdict can differ (contacts and electrons count real atoms only)."
    )


def counterpoise_lines(d: dict) -> list[str]:
    """The Markdown section of a counterpoise result ([] otherwise)."""
    part = _part(d)
    if part is None:
        return []
    lines = ["## Counterpoise combinations", "", _intro(part), ""]
    lines += ["| " + " | ".join((*_HEAD, "verdict")) + " |", "|" + "---|" * (len(_HEAD) + 1)]
    for r in part["combinations"]:
        log_k = "—" if r["log10_condition"] is None else f"{r['log10_condition']:.1f}"
        cells = [
            combination_name(r),
            _atoms(r["real_atoms"]),
            _atoms(r["ghost_atoms"]),
            str(r["n_functions"]),
            f"{r['smallest']:.3e}",
            log_k,
            "—" if r["below_caution"] is None else str(r["below_caution"]),
            "—" if r["below_fail"] is None else str(r["below_fail"]),
            r["verdict"],
        ]
        lines.append("| " + " | ".join(cells) + " |")
    shares = ", ".join(f"fragment {k} {100 * s:.0f}%" for k, s in enumerate(part["near_null_share"], 1))
    lines += ["", f"**Limiting fragment: {part['limiting_fragment']}.** {part['limiting_reason']}", ""]
    lines += [f"Share of the complex's near-null space: {shares}.", ""]
    return lines


def _row_html(k: int, r: dict, num: Num) -> str:
    key = f"counterpoise.combinations.{k}"
    cells = [
        escape(_atoms(r["real_atoms"])),
        escape(_atoms(r["ghost_atoms"])),
        num(f"{key}.n_functions", r["n_functions"], "d"),
        num(f"{key}.smallest", r["smallest"]),
        num(f"{key}.log10_condition", r["log10_condition"], ".1f", "—"),
        num(f"{key}.below_caution", r["below_caution"], "d", "—"),
        num(f"{key}.below_fail", r["below_fail"], "d", "—"),
    ]
    verdict = escape(str(r["verdict"]))
    return (
        f"<tr><td>{escape(combination_name(r))}</td>"
        + "".join(f'<td class="n">{c}</td>' if i >= 2 else f"<td>{c}</td>" for i, c in enumerate(cells))
        + f"<td>{verdict}</td></tr>"
    )


def counterpoise_html(d: dict, num: Num) -> str:
    """The HTML section of a counterpoise result ("" otherwise); ``num`` is the page's
    tagged-number helper."""
    part = _part(d)
    if part is None:
        return ""
    head = "".join(f"<th>{escape(h)}</th>" for h in (*_HEAD, "verdict"))
    rows = "".join(_row_html(k, r, num) for k, r in enumerate(part["combinations"]))
    shares = ", ".join(
        f"fragment {k + 1} {num(f'counterpoise.near_null_share.{k}', s, '.0%')}"
        for k, s in enumerate(part["near_null_share"])
    )
    return (
        '<h2 id="counterpoise">Counterpoise combinations</h2>'
        f"<p>{escape(_intro(part))}</p><table><tr>{head}</tr>{rows}</table>"
        f"<p><strong>Limiting fragment: {num('counterpoise.limiting_fragment', part['limiting_fragment'], 'd')}."
        f"</strong> {escape(part['limiting_reason'])}</p><p>Share of the complex's near-null space: {shares}.</p>"
    )
