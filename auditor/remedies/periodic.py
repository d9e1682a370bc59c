"""Remedies for a periodic audit, ranked: the exponent cutoff (what practitioners do), the
whole-shell subset verified at every k-point, and canonical orthogonalization per k-point;
plus the pyscf.pbc-ready basis documents (format ``auditor-periodic-basis/1``)."""

from __future__ import annotations

import json
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ..base.errors import UsageError
from ..base.files import atomic_write
from ..base.jsonio import clean
from ..inputs.basis import BasisSpec
from ..inputs.cell import Crystal
from ..numerics.overlap import FunctionTable
from ..numerics.periodic import KMesh, KSpectra, atom_labels
from .canonical import Recommendation
from .cutoff import CutoffResult, CutoffSearch, run_cutoff_search
from .kshells import KShellSelection, select_shells
from .plan import Alternative, Remedies, alternative, rank_alternatives
from .pruned_basis import pruned_basis, shell_record
from .subset import check_atoms_not_emptied, check_target

PERIODIC_BASIS_FORMAT = "auditor-periodic-basis/1"


@dataclass
class PeriodicSetup:
    """What the periodic remedies need from the audit."""

    crystal: Crystal
    spec: BasisSpec
    table: FunctionTable
    cell: Any  # the pyscf.pbc Cell the spectrum was computed with
    mesh: KMesh
    spectra: KSpectra
    bases: dict[str, list]  # element -> full shells
    make_cell: Callable[[dict[str, list]], Any]  # label -> shells basis -> Cell at the precision used
    overlap_at: Callable[[int], np.ndarray]  # S(k) of the full basis at k-point k
    smallest_at: Callable[[np.ndarray], tuple[float, int]]  # kept functions -> (smallest over mesh, k)


@dataclass
class PeriodicPlan:
    """The periodic remedies found, the documents for pyscf.pbc, and what went wrong."""

    target: float
    needed: bool
    cutoff: CutoffResult | None = None
    shells: KShellSelection | None = None
    cutoff_doc: dict | None = None
    shells_doc: dict | None = None
    alternatives: list[Alternative] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)
    lower_bound: int | None = None  # the most eigenvalues below the target at any one k-point

    def report(self) -> Remedies:
        return Remedies(
            target=self.target,
            needed=self.needed,
            alternatives=list(self.alternatives),
            lower_bound=self.lower_bound,
            problems=list(self.problems),
        )

    def details(self, table: FunctionTable) -> dict:
        """The ``periodic.remedies`` part of the JSON report."""
        cut = self.cutoff
        sh = self.shells
        return {
            "exponent_cutoff": None
            if cut is None
            else {
                "elements": [c.as_dict() for c in cut.elements],
                "n_functions": cut.n_functions,
                "n_functions_full": cut.n_functions_full,
                "smallest_after": cut.smallest_after,
                "worst_k": cut.worst_k + 1,
                "reaches_target": cut.reaches_target,
                "trials": cut.trials,
                "notes": list(cut.notes),
            },
            "shells": None
            if sh is None
            else {
                "kpoints": [k + 1 for k in sh.kpoints],
                "smallest_after": sh.smallest_kept,
                "worst_k": sh.worst_k + 1,
                "kept": int(sum(int(np.sum(table.func_shell == s)) for s in sh.order)),
                "dropped_shells": [shell_record(table, s) for s in sh.dropped],
                "notes": list(sh.notes),
            },
        }


def plan_periodic(
    setup: PeriodicSetup, recommendation: Recommendation, target: float, force: bool = False
) -> PeriodicPlan:
    """Every periodic remedy, ranked; nothing is computed when the mesh already meets the
    target (unless ``force``)."""
    target = check_target(target)
    smallest = float(setup.spectra.smallest.min())
    values = setup.spectra.values
    below = [int(np.searchsorted(v, target)) for v in values]
    plan = PeriodicPlan(target=target, needed=bool(smallest < target), lower_bound=max(below))
    if not plan.needed and not force:
        return plan
    n = setup.table.n_functions
    if recommendation.threshold is not None:  # none for a broken geometry
        plan.alternatives.append(_canonical_at_target(values, below, target))
    _add_cutoff(plan, setup)
    _add_shells(plan, setup)
    plan.alternatives = rank_alternatives(plan.alternatives, n)
    return plan


def _canonical_at_target(values: np.ndarray, below: list[int], target: float) -> Alternative:
    """Canonical orthogonalization at the target at every k-point: it removes, at each k, the
    eigenvalues of S(k) below the target (the fewest any remedy can remove there); reported
    as the most at any one k-point, comparable with functions removed, which go at every k."""
    kept = [float(v[c]) for v, c in zip(values, below) if c < v.size]
    return alternative(
        "canonical_orthogonalization",
        f"canonical orthogonalization at the target {target:.1e} at every k-point",
        max(below),
        "directions",
        min(kept) if kept else None,
        target,
        "keep the basis; drop the eigenvectors of each S(k) below the target "
        f"(removed: the most at one k-point; {sum(below)} summed over the mesh)",
        threshold=target,
    )


def _add_cutoff(plan: PeriodicPlan, setup: PeriodicSetup) -> None:
    counts = {el: setup.crystal.symbols.count(el) for el in setup.bases}
    search = CutoffSearch(setup.bases, counts, setup.spec.cartesian, _by_element(setup), setup.mesh, plan.target)
    search.watch = [setup.spectra.worst]
    result = run_cutoff_search(search)
    if result is None:
        plan.problems.append(
            "exponent cutoff: no cutoff short of removing every shell of an element reaches the target"
        )
        return
    plan.cutoff = result
    plan.cutoff_doc = cutoff_document(setup, result, plan.target)
    names = ", ".join(f"{c.element} {c.cutoff:.3g}" for c in result.elements if c.cutoff > 0) or "none"
    plan.alternatives.append(
        alternative(
            "exponent_cutoff",
            f"exponent cutoff (drop primitives below: {names})",
            result.removed,
            "functions",
            result.smallest_after,
            plan.target,
            "auditor prune writes the cut basis for pyscf.pbc (JSON); contractions renormalized",
        )
    )


def _by_element(setup: PeriodicSetup) -> Callable[[dict[str, list]], Any]:
    """A cell builder from element -> shells (ghost atoms get their element's shells)."""

    def make(shells: dict[str, list]) -> Any:
        basis = {lab: shells[el] for lab, el in zip(atom_labels(setup.crystal), setup.crystal.symbols)}
        return setup.make_cell(basis)

    return make


def _add_shells(plan: PeriodicPlan, setup: PeriodicSetup) -> None:
    table = setup.table
    groups = [np.flatnonzero(table.func_shell == s) for s in range(table.n_shells)]
    sel = select_shells(setup.overlap_at, setup.spectra.worst, groups, plan.target, setup.smallest_at)
    if sel is None:
        plan.problems.append("whole-shell subset: no set of whole shells reaches the target at every k-point")
        return
    kept = np.sort(np.concatenate([groups[s] for s in sel.order]))
    try:
        check_atoms_not_emptied(kept, table.func_atom - 1, what=f"target {plan.target:g}")
    except UsageError as exc:
        plan.problems.append(f"whole-shell subset: {exc.message}")
        return
    plan.shells = sel
    plan.shells_doc = shells_document(setup, sel, plan.target)
    plan.alternatives.append(
        alternative(
            "cholesky_shells",
            "whole-shell subset (pivoted Cholesky of S(k) - target at the worst k-points, checked at every k)",
            int(table.n_functions - kept.size),
            "functions",
            sel.smallest_kept,
            plan.target,
            "auditor prune writes it for pyscf.pbc (JSON, <stem>.shells.json)",
            tolerance=plan.target,
            shells_removed=len(sel.dropped),
        )
    )


def _common(setup: PeriodicSetup, remedy: str, target: float, smallest: float, n: int) -> dict:
    c = setup.crystal
    return {
        "format": PERIODIC_BASIS_FORMAT,
        "remedy": remedy,
        "source": c.source,
        "basis_name": setup.spec.describe(),
        "unit": "angstrom",
        "cartesian": bool(setup.spec.cartesian),
        "dimension": c.dimension,
        "kmesh": list(setup.mesh.shape),
        "precision": float(setup.spectra.precision),
        "target": target,
        "smallest_eigenvalue": smallest,
        "n_functions": n,
        "n_functions_full": setup.table.n_functions,
        "lattice": [[round(float(x), 10) for x in row] for row in c.lattice],
    }


def cutoff_document(setup: PeriodicSetup, result: CutoffResult, target: float) -> dict:
    """The cut basis for pyscf.pbc: one label per element (ghost atoms 'ghost-' + element)."""
    c = setup.crystal
    from .cutoff import cutoff_between, exponents, truncate

    labels = atom_labels(c)
    basis: dict[str, list] = {}
    for lab, el in zip(labels, c.symbols):
        ex = exponents(setup.bases[el])
        basis[lab] = truncate(setup.bases[el], cutoff_between(ex, result.levels[el]))
    doc = _common(setup, "exponent_cutoff", target, result.smallest_after, result.n_functions)
    doc["atoms"] = [[lab, [round(float(x), 10) for x in xyz]] for lab, xyz in zip(labels, c.coords)]
    doc["basis"] = basis
    doc["cutoffs"] = [e.as_dict() for e in result.elements]
    return doc


@dataclass
class _Geometry:
    """What `pruned_basis` reads (the molecular writer of per-atom labels and kept shells)."""

    molecule: Any
    spec: BasisSpec
    mole: Any
    table: FunctionTable
    S: Any = None


def shells_document(setup: PeriodicSetup, sel: KShellSelection, target: float) -> dict:
    """The whole-shell subset for pyscf.pbc: atoms that lost a shell get a label of their own."""
    geo = _Geometry(setup.crystal.molecule(), setup.spec, setup.cell, setup.table)
    mol_doc = pruned_basis(geo, sel.order, target, sel.smallest_kept)
    doc = _common(setup, "shell_subset", target, sel.smallest_kept, int(mol_doc["n_functions"]))
    doc["atoms"] = mol_doc["atoms"]
    doc["basis"] = mol_doc["basis"]
    doc["dropped_shells"] = mol_doc["dropped_shells"]
    return doc


def write_periodic_basis(doc: dict, path: Path) -> Path:
    atomic_write(path, json.dumps(clean(doc), indent=1, ensure_ascii=False, allow_nan=False) + "\n")
    return Path(path)
