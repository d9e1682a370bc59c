"""Markdown report for one audit result."""

from __future__ import annotations

from pathlib import Path

from ..base.files import atomic_write

MAX_ROWS = 10


def _fmt(x, spec=".3e", none="not computed"):
    return none if x is None else format(x, spec)


def _atoms(atoms) -> str:
    return ", ".join(str(a) for a in atoms[:12]) + (" ..." if len(atoms) > 12 else "")


def render_markdown(r, extra_sections: list[str] | None = None) -> str:
    """The Markdown text of result ``r`` (an AuditResult)."""
    d = r.as_dict()
    inp, sp, rec = d["input"], d["spectrum"], d["recommendation"]
    frame = f", frame {inp['frame']} of {inp['n_frames']}" if inp["n_frames"] > 1 else ""
    ghosts = f"; ghost atoms {_atoms(inp['ghost_atoms'])}" if inp["ghost_atoms"] else ""
    lines = [
        f"# Basis overlap audit: {Path(inp['path']).name}{frame}",
        "",
        f"**Verdict: {d['verdict'].upper()}**: {d['verdict_reason']}.",
        "",
        f"Geometry `{inp['path']}`{frame}; basis {inp['basis']}; {inp['n_atoms']} atoms{ghosts}; "
        f"{inp['n_functions']} basis functions in {inp['n_shells']} shells. "
        f"Levels: caution below {d['policy']['caution']:.0e}, fail below {d['policy']['fail']:.0e} "
        "(smallest eigenvalue of the unit-diagonal overlap matrix).",
        "",
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
        "| below | " + " | ".join(sp["counts_below"]) + " |",
        "|---" * (len(sp["counts_below"]) + 1) + "|",
        "| eigenvalues | " + " | ".join("n/c" if v is None else str(v) for v in sp["counts_below"].values()) + " |",
        "",
        "## Findings",
        "",
    ]
    if d["findings"]:
        lines += ["| severity | kind | atoms | what it means |", "|---|---|---|---|"]
        for f in d["findings"]:
            lines.append(f"| {f['severity']} | `{f['kind']}` | {_atoms(f['atoms'])} | {f['message']} |")
    else:
        lines.append("No geometry defects, duplicate functions or crowded diffuse shells were found.")
    c = d["causes"]
    lines += [
        "",
        "## Where the near-null space sits",
        "",
        f"Share of each function in the {c['n_vectors']} eigenvector(s) "
        + (f"with eigenvalue below {c['vectors_below']:.0e}" if c["n_vectors"] else "")
        + " (or the few smallest when none are), summed; each table adds up to 1. "
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
    lines += [
        "",
        "## Canonical orthogonalization",
        "",
        f"Suggested threshold **{rec['threshold']:.1e}**: {rec['reason']}. "
        f"It removes {_fmt(rec['n_removed'], 'd')} of {inp['n_functions']} functions; the smallest kept "
        f"eigenvalue is {_fmt(rec['smallest_kept'])} and the largest element of the transformation "
        f"X = U Λ^-1/2 is {_fmt(rec['max_transform_element'], '.1f')}.",
        "",
        "| threshold | functions removed | smallest kept eigenvalue | largest element of X |",
        "|---|---|---|---|",
    ]
    for cand in rec["candidates"]:
        lines.append(
            f"| {cand['threshold']:.0e} | {_fmt(cand['n_removed'], 'd')} | "
            f"{_fmt(cand['smallest_kept'])} | {_fmt(cand['max_transform_element'], '.1f')} |"
        )
    lines += ["", "To apply it in pyscf:", "", "```python", rec["how_to"], "```", ""]
    lines += remedies_lines(d.get("remedies"), inp["n_functions"])
    lines += extra_sections or []
    lines += ["## Read before acting", ""] + [f"- {c}" for c in d["caveats"]] + [""]
    lines += [f"<sub>auditor {d['version']}, report schema {d['schema']}</sub>", ""]
    return "\n".join(lines)


def _where(rec: dict) -> str:
    ghost = " (ghost)" if rec.get("ghost") else ""
    return f"{rec['element']}{rec['atom']}{ghost} {rec['shell']}"


def remedies_lines(rem: dict | None, n_functions: int) -> list[str]:
    """The "Remedies" section: ranked alternatives, what they drop, the trial SCF."""
    if not rem:
        return []
    lines = ["## Remedies", ""]
    if not rem["needed"] and not rem["alternatives"]:
        return lines + [
            f"The smallest eigenvalue already meets the target {rem['target']:.1e}; nothing needs removing.",
            "",
        ]
    lines += [
        f"Ranked by whether they reach the target smallest eigenvalue {rem['target']:.1e}, then by how "
        "little they remove.",
        "",
        "| rank | remedy | removes | smallest eigenvalue after | reaches target | how |",
        "|---|---|---|---|---|---|",
    ]
    for a in rem["alternatives"]:
        removed = "?" if a["removed"] is None else f"{a['removed']} {a['unit']}"
        lines.append(
            f"| {a['rank']} | {a['title']} | {removed} of {n_functions} | "
            f"{_fmt(a['smallest_after'])} | {'yes' if a['reaches_target'] else 'no'} | {a['how']} |"
        )
    lines.append("")
    for p in rem.get("problems", []):
        lines += [f"Not available: {p}.", ""]
    sh = rem.get("cholesky_shells")
    if sh:
        how = (
            "pivoted Cholesky over whole shells"
            if sh.get("chosen_by") == "shell pivoting"
            else "shells the pivoted-Cholesky subset of functions leaves whole"
        )
        lines += [
            f"Shells the pruned basis drops ({how}, tolerance {sh['tolerance']:.2e}, then "
            f"{sh['added_back']} function(s) offered back; {sh['kept']} functions kept):",
            "",
            "| atom shell | l | smallest exponent | diffuse | functions |",
            "|---|---|---|---|---|",
        ]
        for s in sh["dropped_shells"][: MAX_ROWS * 2]:
            lines.append(
                f"| {_where(s)} | {s['l']} | {s['exponent']:.4g} | {'yes' if s['diffuse'] else ''} | {s['functions']} |"
            )
        if len(sh["dropped_shells"]) > MAX_ROWS * 2:
            lines.append(f"| ... {len(sh['dropped_shells']) - MAX_ROWS * 2} more (see the JSON report) | | | | |")
        lines.append("")
    fn = rem.get("cholesky_functions")
    if fn:
        lines += [
            f"Functions the pivoted-Cholesky subset drops (tolerance {fn['tolerance']:.2e}, then "
            f"{fn['added_back']} offered back; {fn['factorizations']} Cholesky factorizations):",
            "",
            "| function | atom shell | component | l | smallest exponent |",
            "|---|---|---|---|---|",
        ]
        for f in fn["dropped"][: MAX_ROWS * 2]:
            lines.append(f"| {f['function']} | {_where(f)} | {f['component']} | {f['l']} | {f['exponent']:.4g} |")
        if len(fn["dropped"]) > MAX_ROWS * 2:
            lines.append(f"| ... {len(fn['dropped']) - MAX_ROWS * 2} more (see the JSON report) | | | | |")
        lines.append("")
    tri = rem.get("trial_scf")
    if tri:
        lines += ["### Trial SCF", ""]
        if tri.get("skipped"):
            lines += [tri["skipped"] + ".", ""]
        else:
            lines += [
                f"Method {tri['method']}; energies in hartree.",
                "",
                "| basis | functions | directions removed | converged | cycles | energy |",
                "|---|---|---|---|---|---|",
            ]
            for run in tri["runs"]:
                energy = _fmt(run["energy"], ".8f", run.get("note") or "none")
                lines.append(
                    f"| {run['basis']} | {run['n_functions']} | {run['directions_removed']} | "
                    f"{'yes' if run['converged'] else 'no'} | {run['cycles']} | {energy} |"
                )
            diff = tri.get("difference_microhartree")
            if diff is not None:
                lines += ["", f"Pruned minus canonically orthogonalized: {diff:+.1f} microhartree."]
            lines.append("")
    lines += [
        "Removing functions or directions changes total energies, and the target and thresholds are "
        "judgement calls (see below).",
        "",
    ]
    return lines


def write_markdown(result, path: Path, extra_sections: list[str] | None = None) -> Path:
    atomic_write(path, render_markdown(result, extra_sections))
    return path
