"""What `auditor prune` writes for a periodic input: the exponent-cutoff basis and the
whole-shell subset for pyscf.pbc, and a Markdown explanation."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from ..base.files import atomic_write
from ..remedies.periodic import PeriodicPlan, write_periodic_basis
from .markdown import caveat_lines, remedies_lines
from .periodic import remedy_lines

if TYPE_CHECKING:
    from ..pipeline.result import AuditResult

LOAD = (
    "import json\n"
    "from pyscf.pbc import gto\n"
    "d = json.load(open('{path}'))\n"
    "cell = gto.M(atom=d['atoms'], a=d['lattice'], basis=d['basis'], unit='Angstrom',\n"
    "             dimension=d['dimension'], cart=d['cartesian'])"
)


def explain_periodic_prune(d: dict, files: dict[str, str]) -> str:
    """The Markdown explanation written beside the periodic basis files."""
    inp, part = d["input"], d["periodic"]
    lines = [
        f"# Basis remedies for {Path(inp['path']).name} (periodic)",
        "",
        f"Basis {inp['basis']}; {inp['n_atoms']} atoms in the cell; mesh {'×'.join(map(str, part['kmesh']))} "
        f"({part['n_kpoints']} k-points); target: the smallest eigenvalue of S(k) at every k-point at least "
        f"{d['remedies']['target']:.1e} (full basis: {d['spectrum']['smallest']:.3e}).",
        "",
        "## Files",
        "",
    ]
    if "basis" in files:
        lines.append(
            f"- `{files['basis']}`: the basis with the exponent cutoff (every primitive below its element's "
            "cutoff dropped, shells left empty dropped, contractions renormalized)."
        )
    if "shells" in files:
        lines.append(f"- `{files['shells']}`: the whole-shell subset, the alternative (same layout).")
    first = files.get("basis", files.get("shells", ""))
    lines += ["", "## Using them", "", "```python", LOAD.format(path=first), "```", ""]
    lines += remedy_lines(part.get("remedies"))
    lines += remedies_lines(d["remedies"], inp["n_functions"])
    lines += caveat_lines(d)
    return "\n".join(lines)


def write_periodic_prune(result: AuditResult, plan: PeriodicPlan, out_dir: Path, stem: str) -> list[Path]:
    """Write DIR/<stem>.pruned.json (exponent cutoff), DIR/<stem>.shells.json (whole-shell
    subset) when found, and DIR/<stem>.prune.md."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    files: dict[str, str] = {}
    paths = []
    if plan.cutoff_doc is not None:
        files["basis"] = f"{stem}.pruned.json"
        paths.append(write_periodic_basis(plan.cutoff_doc, out_dir / files["basis"]))
    if plan.shells_doc is not None:
        files["shells"] = f"{stem}.shells.json"
        paths.append(write_periodic_basis(plan.shells_doc, out_dir / files["shells"]))
    files["explain"] = f"{stem}.prune.md"
    atomic_write(out_dir / files["explain"], explain_periodic_prune(result.as_dict(), files))
    return paths + [out_dir / files["explain"]]
