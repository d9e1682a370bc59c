"""JUnit XML of a gate run: one test case per item, read by CI systems."""

from __future__ import annotations

import math
import xml.etree.ElementTree as ET
from pathlib import Path

from ..base.files import atomic_write
from .rows import BLOCKING, item_label


def _details(r: dict) -> str:
    if r["verdict"] == "error":
        return r["error"]
    lam, cond = r["smallest_eigenvalue"], r["condition_number"]
    lines = [
        r["reason"],
        f"verdict: {r['verdict']}",
        f"smallest overlap eigenvalue: {lam:.3e}",
        "condition number: " + ("infinite (singular to rounding)" if math.isinf(cond) else f"{cond:.3e}"),
        f"functions: {r['n_functions']}, atoms: {r['n_atoms']}, basis: {r['basis']}",
        f"atom with the largest near-null-space weight: {r['top_atom'] or '-'}",
        (
            "advised orthogonalization threshold: none (fix the geometry first)"
            if math.isnan(r["threshold"])
            else f"advised orthogonalization threshold: {r['threshold']:.1e} (removes {r['n_removed']} function(s))"
        ),
    ]
    if r.get("change"):
        lines.append(f"since the baseline: {r['change']}")
    lines.append(f"report: items/{r['item']}.json")
    return "\n".join(lines)


def junit_xml(rows: list[dict], suite: str = "auditor gate", seconds: dict | None = None) -> str:
    """JUnit XML text; ``seconds`` maps item -> time spent on it in this run."""
    seconds = seconds or {}
    counts = {"failures": 0, "errors": 0, "skipped": 0}
    cases = []
    for r in rows:
        case = ET.Element(
            "testcase", classname=r["path"], name=item_label(r), time=f"{seconds.get(r['item'], 0.0):.3f}"
        )
        outcome = r.get("outcome", "ok")
        if outcome in BLOCKING:
            if r["verdict"] == "error":
                tag, counts["errors"] = "error", counts["errors"] + 1
                message = r["error"]
            else:
                tag, counts["failures"] = "failure", counts["failures"] + 1
                message = (f"{r['change']}: " if outcome == "regressed" and r.get("change") else "") + r["reason"]
            ET.SubElement(
                case, tag, message=message, type=outcome if outcome == "regressed" else r["verdict"]
            ).text = _details(r)
        elif outcome in ("allowed", "known"):
            counts["skipped"] += 1
            why = f"allowed to fail: {r['note']}" if outcome == "allowed" else "fails in the baseline too"
            ET.SubElement(case, "skipped", message=f"{why} ({r['reason']})")
        elif r["verdict"] == "caution":
            ET.SubElement(case, "system-out").text = _details(r)
        cases.append(case)
    total = sum(seconds.values())
    attributes = {"name": suite, "tests": str(len(rows)), "time": f"{total:.3f}"}
    attributes.update({k: str(v) for k, v in counts.items()})
    root = ET.Element("testsuites", attributes)
    ts = ET.SubElement(root, "testsuite", attributes)
    ts.extend(cases)
    ET.indent(root)
    return ET.tostring(root, encoding="unicode", xml_declaration=True) + "\n"


def write_junit(rows: list[dict], path: Path, seconds: dict | None = None) -> Path:
    atomic_write(path, junit_xml(rows, seconds=seconds))
    return path
