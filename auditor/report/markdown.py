"""Markdown report for one audit result."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from ..base.files import atomic_write
from .counterpoise import counterpoise_lines
from .periodic import periodic_lines
from .text import (
    X_NOTE,
    FunctionSubsetView,
    RemediesView,
    ShellPruningView,
    TrialView,
    advice_sentence,
    frames_view,
    lower_bound_sentence,
    named_basis_lines,
    remedies_view,
    vectors_note,
)

if TYPE_CHECKING:
    from ..pipeline.result import AuditResult

MAX_ROWS = 10
MAX_REMEDY_ROWS = 2 * MAX_ROWS


def _fmt(x: float | None, spec: str = ".3e", none: str = "not computed") -> str:
    return none if x is None else format(x, spec)


def _atoms(atoms: list) -> str:
    return ", ".join(str(a) for a in atoms[:12]) + (" ..." if len(atoms) > 12 else "")


def render_markdown(r: AuditResult | dict, extra_sections: list[str] | None = None) -> str:
    """The Markdown text of result ``r`` (an AuditResult or its JSON dictionary)."""
    d = r if isinstance(r, dict) else r.as_dict()
    n_functions = d["input"]["n_functions"]
    lines = _heading_lines(d)
    lines += _spectrum_lines(d["spectrum"])
    lines += periodic_lines(d)
    lines += counterpoise_lines(d)
    lines += _findings_lines(d["findings"])
    lines += _causes_lines(d)
    lines += _orthogonalization_lines(d["recommendation"], n_functions)
    lines += frames_lines(d)
    lines += remedies_lines(d.get("remedies"), n_functions)
    lines += extra_sections or []
    lines += caveat_lines(d)
    lines += [f"<sub>auditor {d['version']}, report schema {d['schema']}</sub>", ""]
    return "\n".join(lines)


def caveat_lines(d: dict) -> list[str]:
    """The "Read before acting" section: the caveats every report carries."""
    return ["## Read before acting", ""] + [f"- {c}" for c in d["caveats"]] + [""]


def _heading_lines(d: dict) -> list[str]:
    inp = d["input"]
    frame = f", frame {inp['frame']} of {inp['n_frames']}" if inp["n_frames"] > 1 else ""
    ghosts = f"; ghost atoms {_atoms(inp['ghost_atoms'])}" if inp["ghost_atoms"] else ""
    return [
        f"# Basis overlap audit: {Path(inp['path']).name}{frame}",
        "",
        f"**Verdict: {d['verdict'].upper()}**: {d['verdict_reason']}",
        "",
        f"Geometry `{inp['path']}`{frame}; basis {inp['basis']}; {inp['n_atoms']} atoms{ghosts}; "
        f"{inp['n_functions']} basis functions in {inp['n_shells']} shells. "
        f"Levels: caution below {d['policy']['caution']:.0e}, fail below {d['policy']['fail']:.0e} "
        "(smallest eigenvalue of the unit-diagonal overlap matrix).",
        "",
    ]


def _spectrum_lines(sp: dict) -> list[str]:
    counts = sp["counts_below"]
    return [
        "## Spectrum of the normalized overlap matrix",
        "",
        "| quantity | value |",
        "|---|---|",
        f"| smallest eigenvalue | {sp['smallest']:.4e} |",
        f"| largest eigenvalue | {sp['largest']:.4f} |",
        f"| condition number | {_fmt(sp['condition_number'], '.3e', 'infinite (singular)')} |",
        f"| decimal digits lost (log10 of it) | {_fmt(sp['log10_condition'], '.2f', 'all')} |",
        f"| Gershgorin lower bound | {sp['gershgorin_bound']:.3f} |",
        f"| method | {sp['method']} |",
        "",
        "| below | " + " | ".join(counts) + " |",
        "|---" * (len(counts) + 1) + "|",
        "| eigenvalues | " + " | ".join("n/c" if v is None else str(v) for v in counts.values()) + " |",
        "",
    ]


def _findings_lines(findings: list[dict]) -> list[str]:
    lines = ["## Findings", ""]
    if not findings:
        return lines + ["No geometry defects, duplicate functions or crowded diffuse shells were found."]
    lines += ["| severity | kind | atoms | what it means |", "|---|---|---|---|"]
    for f in findings:
        lines.append(f"| {f['severity']} | `{f['kind']}` | {_atoms(f['atoms'])} | {f['message']} |")
    return lines


def _causes_lines(d: dict) -> list[str]:
    c = d["causes"]
    lines = [
        "",
        "## Where the near-null space sits",
        "",
        f"Share of each function in {vectors_note(d)}, summed; each table adds up to 1. "
        f"Diffuse shells carry {c['diffuse']['diffuse']:.1%} of it.",
        "",
        "| atom | element | ghost | share |",
        "|---|---|---|---|",
    ]
    for a in c["atoms"][:MAX_ROWS]:
        lines.append(f"| {a['atom']} | {a['element']} | {'yes' if a['ghost'] else ''} | {a['weight']:.3f} |")
    lines += ["", "| shell | l | smallest exponent | diffuse | share |", "|---|---|---|---|---|"]
    for s in c["shells"][:MAX_ROWS]:
        lines.append(
            f"| {s['shell']} | {s['l']} | {s['exponent']:.4g} | {'yes' if s['diffuse'] else ''} | {s['weight']:.3f} |"
        )
    lines += ["", "By angular momentum: " + ", ".join(f"{x['l']} {x['weight']:.3f}" for x in c["angular"]) + "."]
    return lines


def _orthogonalization_lines(rec: dict, n_functions: int) -> list[str]:
    lines = [
        "",
        "## Canonical orthogonalization",
        "",
        advice_sentence(rec, n_functions) + (f" {rec['versus_library']}" if rec["versus_library"] else ""),
        "",
        "| threshold | functions removed | smallest kept eigenvalue | largest element of X |",
        "|---|---|---|---|",
    ]
    for cand in rec["candidates"]:
        lines.append(
            f"| {cand['threshold']:.0e} | {_fmt(cand['n_removed'], 'd')} | "
            f"{_fmt(cand['smallest_kept'])} | {_fmt(cand['max_transform_element'], '.1f')} |"
        )
    lines += ["", X_NOTE, ""]
    if not rec["how_to"]:
        return lines
    return lines + ["To apply it in pyscf:", "", "```python", rec["how_to"], "```", ""]


def remedies_lines(rem: dict | None, n_functions: int) -> list[str]:
    """The "Remedies" section: ranked alternatives, what they drop, the trial SCF."""
    view = remedies_view(rem)
    if view is None:
        return []
    lines = ["## Remedies", ""]
    if view.nothing_needed:
        return lines + [
            f"The smallest eigenvalue already meets the target {view.target:.1e}; nothing needs removing.",
            "",
        ]
    lines += _alternative_lines(view, n_functions)
    lines += [lower_bound_sentence(view.lower_bound, view.target), ""]
    for problem in view.problems:
        lines += [problem, ""]
    if view.symmetry:
        lines += [view.symmetry.sentence, ""]
    for line in named_basis_lines((rem or {}).get("named_basis")):
        lines += [line, ""]
    if view.shells:
        lines += _dropped_shell_lines(view.shells)
    if view.unconstrained:
        lines += _dropped_shell_lines(view.unconstrained, "ignoring symmetry")
    if view.functions:
        lines += _dropped_function_lines(view.functions)
    if view.trial:
        lines += _trial_lines(view.trial)
    return lines + [
        "Removing functions or directions changes total energies, and the target and thresholds are "
        "judgement calls (see below).",
        "",
    ]


def frames_lines(d: dict) -> list[str]:
    """The "Frames" section of a multi-frame input: the one threshold, each frame's figures."""
    view = frames_view(d)
    if view is None:
        return []
    lines = [
        "## Frames",
        "",
        view.sentence,
        "",
        "| frame | smallest eigenvalue | verdict | own advice | removed at the one threshold | "
        "smallest kept | below the target | pruned basis: smallest | point group (full / pruned) |",
        "|---|---|---|---|---|---|---|---|---|",
    ]
    for r in view.rows:
        lines.append(
            f"| {r.frame} | {_fmt(r.smallest)} | {r.verdict} | {_fmt(r.advised_threshold, '.1e', 'none')} | "
            f"{_fmt(r.directions_removed, 'd')} | {_fmt(r.smallest_kept)} | {_fmt(r.below_target, 'd', '—')} | "
            f"{_fmt(r.shells_smallest, '.3e', '—')} | {r.point_group} / {r.pruned_point_group} |"
        )
    return lines + [""]


def _alternative_lines(view: RemediesView, n_functions: int) -> list[str]:
    lines = [
        f"Ranked by whether they reach the target smallest eigenvalue {view.target:.1e}, then by how "
        "little they remove.",
        "",
        "| rank | remedy | removes | smallest eigenvalue after | reaches target | how |",
        "|---|---|---|---|---|---|",
    ]
    for a in view.alternatives:
        lines.append(
            f"| {a.rank} | {a.title} | {a.removed_text} of {n_functions} | "
            f"{_fmt(a.smallest_after)} | {a.reaches} | {a.how} |"
        )
    return lines + [""]


def _more_rows(n_rows: int, n_columns: int) -> list[str]:
    """The last row of a table cut at MAX_REMEDY_ROWS: how many more the JSON report holds."""
    if n_rows <= MAX_REMEDY_ROWS:
        return []
    return [f"| ... {n_rows - MAX_REMEDY_ROWS} more (see the JSON report) |" + " |" * (n_columns - 1)]


def _dropped_shell_lines(sh: ShellPruningView, which: str = "") -> list[str]:
    how = (
        "pivoted Cholesky over whole shells"
        if sh.by_shell_pivoting
        else "shells the pivoted-Cholesky subset of functions leaves whole"
    )
    what = f"the pruned basis {which}" if which else "the pruned basis"
    lines = [
        f"Shells {what} drops ({how}, tolerance {sh.tolerance:.2e}, then "
        f"{sh.added_back} function(s) offered back; {sh.kept} functions kept):",
        "",
        "| atom shell | l | smallest exponent | diffuse | functions |",
        "|---|---|---|---|---|",
    ]
    for s in sh.dropped[:MAX_REMEDY_ROWS]:
        lines.append(f"| {s.where} | {s.l} | {s.exponent:.4g} | {s.diffuse_mark} | {s.functions} |")
    return lines + _more_rows(len(sh.dropped), 5) + [""]


def _dropped_function_lines(fn: FunctionSubsetView) -> list[str]:
    lines = [
        f"Functions the pivoted-Cholesky subset drops (pivoting on S − τI, τ = {fn.tolerance:.2e}, "
        f"which keeps no function that would take the set below the target and leaves none that "
        f"could be added alone; {fn.factorizations} Cholesky factorization(s)):",
        "",
        "| function | atom shell | component | l | smallest exponent |",
        "|---|---|---|---|---|",
    ]
    for f in fn.dropped[:MAX_REMEDY_ROWS]:
        lines.append(f"| {f.function} | {f.where} | {f.component} | {f.l} | {f.exponent:.4g} |")
    return lines + _more_rows(len(fn.dropped), 5) + [""]


def _trial_lines(tri: TrialView) -> list[str]:
    lines = ["### Trial SCF", ""]
    if tri.skipped:
        return lines + [tri.skipped + ".", ""]
    lines += [
        f"Method {tri.method}; energies in hartree.",
        "",
        "| basis | functions | directions removed | converged | cycles | energy |",
        "|---|---|---|---|---|---|",
    ]
    for run in tri.runs:
        energy = _fmt(run.energy, ".8f", run.note or "none")
        lines.append(
            f"| {run.basis} | {run.n_functions} | {run.directions_removed} | "
            f"{run.converged_text} | {run.cycles} | {energy} |"
        )
    for line in tri.alerts:
        lines += ["", f"**{line}**"]
    if tri.difference_microhartree is not None:
        lines += ["", f"Pruned minus canonically orthogonalized: {tri.difference_microhartree:+.1f} microhartree."]
    return lines + [""]


def write_markdown(result: AuditResult | dict, path: Path, extra_sections: list[str] | None = None) -> Path:
    atomic_write(path, render_markdown(result, extra_sections))
    return path
