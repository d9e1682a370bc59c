"""What `auditor prune` writes: the pruned basis, the matrix X and an explanation."""

from __future__ import annotations

import io
from dataclasses import replace
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ..base.files import atomic_write
from ..remedies.canonical import canonical_transform
from ..remedies.export import ExportFile, export_texts, file_name
from ..remedies.plan import RemedyPlan
from ..remedies.pruned_basis import write_pruned
from .markdown import caveat_lines, frames_lines, remedies_lines

if TYPE_CHECKING:
    from ..pipeline.result import AuditResult
    from ..pipeline.run import Prepared


# size: one list of the explanation's lines, in the order they are read
def explain_markdown(results: AuditResult | dict | list, plan: RemedyPlan, files: dict[str, str]) -> str:
    """The Markdown explanation written next to the pruned basis (``results``: one result,
    or one per frame of a multi-frame input)."""
    listed = results if isinstance(results, list) else [results]
    ds = [r if isinstance(r, dict) else r.as_dict() for r in listed]
    d = ds[0]
    inp, doc = d["input"], _pruned_document(plan)
    name = Path(inp["path"]).name
    smallest = min(x["spectrum"]["smallest"] for x in ds)
    every = (
        f" It holds for every one of the {len(ds)} frames of the file: frame {plan.deciding_frame}, the worst, "
        "was searched first, and every frame's overlap on the kept shells meets the target."
        if len(ds) > 1
        else ""
    )
    lines = [
        f"# Pruned basis for {name}",
        "",
        (
            f"Basis {inp['basis']}; {inp['n_atoms']} atoms; target smallest eigenvalue of the unit-diagonal "
            f"overlap matrix {plan.target:.1e} (full basis: {smallest:.3e})."
        ),
        "",
        (
            f"The pruned basis keeps **{doc['n_functions']} of {doc['n_functions_full']}** functions and drops "
            f"{len(doc['dropped_shells'])} whole shell(s); its smallest eigenvalue is "
            f"{_fmt_num(doc['smallest_eigenvalue'])}. Every component of a shell is kept or dropped together, "
            "so the basis stays rotationally invariant, and equivalent atoms lose the same shells, so it keeps "
            "the point group of the full basis where that can be done. Shells were chosen by the rule of "
            "docs/numerics.md: the shells a pivoted-Cholesky subset of functions (Lehtola, J. Chem. Phys. 151, "
            f"241102 (2019)) leaves whole, then the other shells offered back one by one.{every}"
        ),
        "",
        "## Files",
        "",
        (
            f"- `{files['basis']}`: the pruned basis for pyscf (`atoms` with one label per set of atoms that "
            "share a pruned basis, `basis` in pyscf's internal format, `dropped_shells` for reading"
            + ("; `frames` holds every frame's coordinates)." if len(ds) > 1 else ").")
        ),
        (
            f"- `{files['transform']}`: X (functions × kept directions) for canonical orthogonalization of the "
            f"full basis at {_fmt_tau(d['recommendation']['threshold'])}, in pyscf's AO order; X^T S X = 1"
            + (" (one file per frame, the frame number before .X.npy)." if len(ds) > 1 else ".")
        ),
        *files.get("exports", []),
        "",
        "## Using them",
        "",
        "```python",
        "from auditor import load_pruned",
        f"mol = load_pruned('{files['basis']}')          # a pyscf Mole"
        + ("; load_pruned(path, frame=k) for frame k" if len(ds) > 1 else ""),
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
    lines += frames_lines(d)
    lines += remedies_lines(d["remedies"], inp["n_functions"])
    lines += caveat_lines(d)
    return "\n".join(lines)


def _fmt_num(x: float | None) -> str:
    return "not computed" if x is None else f"{x:.3e}"


def _fmt_tau(x: float | None) -> str:
    return "the target" if x is None else f"{x:.1e}"


def _pruned_document(plan: RemedyPlan) -> dict:
    if plan.pruned is None:  # prune_frames raises a UsageError before it returns such a plan
        raise ValueError("the remedy plan holds no shell-pruned basis")
    return plan.pruned


def _save_npy(path: Path, X: np.ndarray) -> Path:
    buf = io.BytesIO()
    np.save(buf, X)
    atomic_write(path, buf.getvalue())
    return path


def write_transform(result: AuditResult, prep: Prepared, path: Path, target: float) -> Path:
    """X for canonical orthogonalization of the full basis at the result's threshold (the
    target when none is advised), in pyscf's AO order, X^T S X = 1."""
    tau = result.recommendation.threshold
    return _save_npy(path, canonical_transform(prep, target if tau is None else tau))


def write_exports(doc: dict, formats: list[str], out_dir: Path, stem: str) -> list[ExportFile]:
    """The pruned basis in other programs' formats (basis_set_exchange's writers), each read
    back where a reader exists; refused formats are listed with the reason."""
    records = []
    for rec, text in export_texts(doc, formats):
        if text is not None:
            name = file_name(stem, rec.format)
            atomic_write(out_dir / name, text)
            rec = replace(rec, file=name)
        records.append(rec)
    return records


def export_lines(records: list[ExportFile]) -> list[str]:
    """The exported files as a Markdown table."""
    if not records:
        return []
    lines = [
        "",
        "The same basis for other programs (basis_set_exchange's writers; each file read back with its reader "
        "where one exists):",
        "",
        "| format | program | file | read back |",
        "|---|---|---|---|",
    ]
    for r in records:
        shown = f"`{r.file}`" if r.file else "—"
        lines.append(f"| {r.format} | {r.program} | {shown} | {r.checked if r.written else r.note} |")
    return lines


def write_prune_outputs(
    results: AuditResult | list[AuditResult],
    plan: RemedyPlan,
    preps: Prepared | list[Prepared],
    out_dir: Path,
    stem: str,
    exports: list[str] | None = None,
) -> tuple[list[Path], list[ExportFile]]:
    """Write DIR/<stem>.pruned.json, DIR/<stem>.X.npy (one per frame, <stem>_fNNN.X.npy, for
    several frames), the basis in the ``exports`` formats (DIR/<stem>.pruned.<format><ext>)
    and DIR/<stem>.prune.md. Returns the paths and the export records."""
    results = results if isinstance(results, list) else [results]
    preps = preps if isinstance(preps, list) else [preps]
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    files: dict = {"basis": f"{stem}.pruned.json", "transform": f"{stem}.X.npy", "explain": f"{stem}.prune.md"}
    paths = [write_pruned(_pruned_document(plan), out_dir / files["basis"])]
    for result, prep in zip(results, preps):
        name = files["transform"] if len(results) == 1 else f"{stem}_f{result.input.frame:03d}.X.npy"
        paths.append(write_transform(result, prep, out_dir / name, plan.target))
    if len(results) > 1:
        files["transform"] = f"{stem}_fNNN.X.npy"
    records = write_exports(_pruned_document(plan), list(exports or []), out_dir, stem)
    paths += [out_dir / r.file for r in records if r.file]
    files["exports"] = export_lines(records)
    atomic_write(out_dir / files["explain"], explain_markdown(list(results), plan, files))
    paths.append(out_dir / files["explain"])
    return paths, records
