"""What `auditor prune` writes: the pruned basis, the matrix X and an explanation."""

from __future__ import annotations

import io
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ..base.files import atomic_write
from ..remedies.canonical import canonical_transform
from ..remedies.plan import RemedyPlan
from ..remedies.pruned_basis import write_pruned
from .markdown import caveat_lines, remedies_lines

if TYPE_CHECKING:
    from ..pipeline.result import AuditResult
    from ..pipeline.run import Prepared


def explain_markdown(result: AuditResult | dict, plan: RemedyPlan, files: dict[str, str]) -> str:
    """The Markdown explanation written next to the pruned basis."""
    d = result if isinstance(result, dict) else result.as_dict()
    inp, doc = d["input"], _pruned_document(plan)
    name = Path(inp["path"]).name
    lines = [
        f"# Pruned basis for {name}",
        "",
        (
            f"Basis {inp['basis']}; {inp['n_atoms']} atoms; target smallest eigenvalue of the unit-diagonal "
            f"overlap matrix {plan.target:.1e} (full basis: {d['spectrum']['smallest']:.3e})."
        ),
        "",
        (
            f"The pruned basis keeps **{doc['n_functions']} of {doc['n_functions_full']}** functions and drops "
            f"{len(doc['dropped_shells'])} whole shell(s); its smallest eigenvalue is "
            f"{_fmt_num(doc['smallest_eigenvalue'])}. Every component of a shell is kept or dropped together, "
            "so the basis stays rotationally invariant. Shells were chosen by pivoted Cholesky over whole "
            "shells (Lehtola, J. Chem. Phys. 151, 241102 (2019)) at the target: the longest prefix of the pivot "
            "order whose overlap meets the target is kept, then the other shells are offered back one by one."
        ),
        "",
        "## Files",
        "",
        (
            f"- `{files['basis']}`: the pruned basis for pyscf (`atoms` with one label per atom that needs its "
            "own basis, `basis` in pyscf's internal format, `dropped_shells` for reading)."
        ),
        (
            f"- `{files['transform']}`: X (functions × kept directions) for canonical orthogonalization of the "
            f"full basis at {d['recommendation']['threshold']:.1e}, in pyscf's AO order; X^T S X = 1."
        ),
        "",
        "## Using them",
        "",
        "```python",
        "from auditor import load_pruned",
        f"mol = load_pruned('{files['basis']}')          # a pyscf Mole",
        "# or, with pyscf alone:",
        f"import json; from pyscf import gto; d = json.load(open('{files['basis']}'))",
        "mol = gto.M(atom=d['atoms'], basis=d['basis'], unit='Angstrom', cart=d['cartesian'],",
        "            charge=d['charge'], spin=d['spin'])",
        "",
        f"import numpy as np; from pyscf import scf; X = np.load('{files['transform']}')",
        "mf = scf.RHF(full_mol)  # full_mol: the unpruned geometry and basis",
        "mf.check_linear_dependency = lambda s, verbose=None: X  # pyscf then works in span(X)",
        "```",
        "",
    ]
    lines += remedies_lines(d["remedies"], inp["n_functions"])
    lines += caveat_lines(d)
    return "\n".join(lines)


def _fmt_num(x: float | None) -> str:
    return "not computed" if x is None else f"{x:.3e}"


def _pruned_document(plan: RemedyPlan) -> dict:
    if plan.pruned is None:  # prune_prepared raises a UsageError before it returns such a plan
        raise ValueError("the remedy plan holds no shell-pruned basis")
    return plan.pruned


def write_prune_outputs(result: AuditResult, plan: RemedyPlan, prep: Prepared, out_dir: Path, stem: str) -> list[Path]:
    """Write DIR/<stem>.pruned.json, DIR/<stem>.X.npy and DIR/<stem>.prune.md."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    files = {"basis": f"{stem}.pruned.json", "transform": f"{stem}.X.npy", "explain": f"{stem}.prune.md"}
    paths = [write_pruned(_pruned_document(plan), out_dir / files["basis"])]
    tau = result.recommendation.threshold
    X = canonical_transform(prep, plan.target if tau is None else tau)
    buf = io.BytesIO()
    np.save(buf, X)
    atomic_write(out_dir / files["transform"], buf.getvalue())
    paths.append(out_dir / files["transform"])
    atomic_write(out_dir / files["explain"], explain_markdown(result, plan, files))
    paths.append(out_dir / files["explain"])
    return paths
