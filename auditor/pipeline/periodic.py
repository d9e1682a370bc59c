"""The periodic audit: one cell in one basis on a k-point mesh, from S(k) to the same
AuditResult the molecular path returns, with a ``periodic`` part (``AuditResult.extra``)."""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np

from .. import __version__
from ..base.errors import InputError, UsageError
from ..diagnosis.causes import attribute_causes
from ..diagnosis.findings import SEVERITY_ORDER, Finding
from ..diagnosis.periodic import (
    contact_findings,
    image_overlap_findings,
    lattice_sum_findings,
    periodic_near_singular,
    shortest_translation,
    summed_dimension,
)
from ..diagnosis.verdict import BROKEN_KINDS, Policy, decide
from ..inputs.basis import BasisSpec, basis_origin, load_shells, thaw
from ..inputs.cell import Crystal, default_kmesh, load_cells, mesh_rows
from ..numerics import periodic as P
from ..numerics.overlap import FunctionTable, function_table
from ..numerics.spectrum import COUNT_LEVELS, Spectrum, level_key
from ..remedies.canonical import Recommendation, advise, broken_geometry_advice
from ..remedies.periodic import PeriodicPlan, PeriodicSetup, plan_periodic
from ..remedies.plan import RemedyOptions
from ..remedies.subset import check_target
from .result import AuditResult, InputInfo
from .run import _default_threshold, input_info, make_spec, spectrum_info, with_digest

HOW_TO = (
    "from pyscf.scf import hf; hf.overlap_zero_eigenvalue_threshold = {tau:.1e}  # before building the "
    "k-point SCF object; pyscf then drops the eigenvectors of each S(k) below it. The auditor's S(k) is "
    "pyscf's own (home-cell diagonal 1, not rescaled per k), so the threshold carries over"
)


@dataclass
class PreparedCell:
    """A cell with its basis on a mesh: the converged S(k) spectra and what made them."""

    crystal: Crystal
    spec: BasisSpec
    kmesh: tuple[int, int, int]  # along the file's lattice vectors
    kmesh_default: bool
    cell: Any
    mesh: P.KMesh
    spectra: P.KSpectra
    convergence: P.Convergence
    table: FunctionTable
    basis: dict[str, list]  # label -> shells


def prepare_cell(
    crystal: Crystal, spec: BasisSpec, kmesh: tuple[int, int, int] | None = None, precision: float | None = None
) -> PreparedCell:
    """Build the cell, guard the memory, compute S(k) on the mesh with the lattice-sum check."""
    precision = P.DEFAULT_PRECISION if precision is None else float(precision)
    if not spec.default:
        raise UsageError(f"{crystal.source}: no basis: a periodic input carries none; give one (--basis)")
    if not (0.0 < precision < 1.0):
        raise UsageError(f"--precision must lie between 0 and 1, got {precision:g}")
    chosen = kmesh or default_kmesh(crystal)
    rows = mesh_rows(crystal, chosen)
    basis = P.cell_basis(crystal, spec)
    first = P.build_cell(crystal, basis, precision, spec.cartesian)
    P.check_memory(first.nao, int(np.prod(rows)))  # before any S(k) is built

    def make(p: float) -> Any:
        return first if p == precision else P.build_cell(crystal, basis, p, spec.cartesian)

    spectra, conv, cell, mesh = P.converged_spectra(make, rows, precision)
    table = function_table(crystal.molecule(), spec)
    if table.n_functions != cell.nao:
        raise InputError(f"{crystal.source}: pyscf's cell and the function table disagree on the functions")
    return PreparedCell(crystal, spec, chosen, kmesh is None, cell, mesh, spectra, conv, table, basis)


def mesh_spectrum(prep: PreparedCell, vectors: np.ndarray, tol: float) -> Spectrum:
    """The eigenvalues of every S(k) on the mesh as one Spectrum (those of the Born–von Kármán
    supercell, by Bloch's theorem), for the counts and the canonical-orthogonalization advice."""
    sp = prep.spectra
    values = np.sort(sp.values.ravel())
    counts: dict[str, int | None] = {level_key(t): int(sp.counts(t).sum()) for t in COUNT_LEVELS}
    return Spectrum(
        n=values.size,
        values=values,
        vectors=vectors,
        smallest=float(values[0]),
        largest=float(values[-1]),
        counts_below=counts,
        gershgorin_bound=float(sp.gershgorin.min()),
        method="periodic",
        complete=True,
        degeneracy_tol=tol,
    )


def audit_cell_prepared(
    prep: PreparedCell, policy: Policy | None = None, remedies: bool | RemedyOptions = True
) -> AuditResult:
    """The whole periodic audit of a prepared cell."""
    policy = policy or Policy()
    sp = prep.spectra
    worst_values, vectors, tol = P.worst_vectors(sp, prep.cell, policy.caution)
    spec = mesh_spectrum(prep, vectors, tol)
    n_below = int(np.searchsorted(worst_values, policy.caution))
    causes = attribute_causes(np.abs(vectors), prep.table, below=policy.caution, n_below=n_below)
    troubled = spec.smallest < policy.caution
    findings: list[Finding] = contact_findings(prep.crystal, policy.contact_fail, policy.contact_caution)
    findings += lattice_sum_findings(prep.convergence, sp)
    findings += image_overlap_findings(prep.crystal, prep.table, sp, troubled)
    if troubled:
        findings.insert(0, periodic_near_singular(spec, policy, causes, sp))
    findings.sort(key=lambda f: SEVERITY_ORDER[f.severity])
    decision = decide(policy, spec.smallest, findings)
    broken = decision.finding in BROKEN_KINDS
    if broken:
        rec = broken_geometry_advice(spec, decision.finding or "")
    else:
        rec = advise(spec, default_threshold=_default_threshold(policy), min_kept=policy.fail)
        rec = replace(rec, how_to=HOW_TO.format(tau=rec.threshold))
    plan = None
    if remedies is not False and not broken:
        options = remedies if isinstance(remedies, RemedyOptions) else RemedyOptions()
        plan = periodic_plan(prep, rec, policy, options)
    return AuditResult(
        version=__version__,
        input=_input_info(prep),
        verdict=decision.verdict,
        verdict_reason=decision.reason,
        verdict_finding=decision.finding,
        policy=policy.as_dict(),
        spectrum=spectrum_info(spec, "periodic", worst_values),
        findings=tuple(findings),
        causes=causes,
        recommendation=rec,
        remedies=None if plan is None else plan.report(),
        extra={"periodic": periodic_section(prep, policy, plan)},
    )


def periodic_plan(prep: PreparedCell, rec: Recommendation, policy: Policy, options: RemedyOptions) -> PeriodicPlan:
    """The periodic remedies at the target (default: the caution level)."""
    target = check_target(policy.caution if options.target is None else options.target)
    return plan_periodic(setup(prep), rec, target, force=options.force)


def setup(prep: PreparedCell) -> PeriodicSetup:
    """What the remedies need: builders of cells and S(k) at the precision the audit used."""
    precision = prep.spectra.precision
    crystal, cart = prep.crystal, prep.spec.cartesian
    bases = {
        el: thaw(load_shells(prep.spec.for_element(el), el, prep.spec.source)) for el in sorted(set(crystal.symbols))
    }

    def overlap_at(k: int) -> np.ndarray:
        return P.overlap_at(prep.cell, prep.mesh, k)

    def smallest_at(kept: np.ndarray) -> tuple[float, int]:
        return P.smallest_kept(prep.cell, prep.mesh, kept)

    return PeriodicSetup(
        crystal=crystal,
        spec=prep.spec,
        table=prep.table,
        cell=prep.cell,
        mesh=prep.mesh,
        spectra=prep.spectra,
        bases=bases,
        make_cell=lambda basis: P.build_cell(crystal, basis, precision, cart),
        overlap_at=overlap_at,
        smallest_at=smallest_at,
    )


def _basis_data(spec: BasisSpec, symbols: tuple[str, ...]) -> dict:
    records = [dict(basis_origin(spec.for_element(el), el, spec.source)) for el in sorted(set(symbols))]
    return with_digest(records, None)


def _input_info(prep: PreparedCell) -> InputInfo:
    return input_info(prep.crystal, prep.spec, prep.table, _basis_data(prep.spec, prep.crystal.symbols), 0, None)


def _kpoint_rows(prep: PreparedCell) -> list[dict]:
    sp, mesh = prep.spectra, prep.mesh
    counts = P.count_levels(sp)
    return [
        {
            "k": k + 1,
            "scaled": [round(float(x), 10) + 0.0 for x in mesh.scaled[k]],
            "smallest": float(sp.smallest[k]),
            "largest": float(sp.largest[k]),
            "counts_below": {key: int(v[k]) for key, v in counts.items()},
            "gershgorin_bound": float(sp.gershgorin[k]),
            "smallest_bloch_norm": float(sp.bloch_norms[k].min()),
            "partner": int(mesh.partner[k]) + 1,
        }
        for k in range(mesh.n)
    ]


def periodic_section(prep: PreparedCell, policy: Policy, plan: PeriodicPlan | None) -> dict:
    """The ``periodic`` part of the JSON report (docs/json.md)."""
    c, sp, conv, mesh = prep.crystal, prep.spectra, prep.convergence, prep.mesh
    k = sp.worst
    return {
        "lattice": [[round(float(x), 10) for x in row] for row in c.lattice],
        "pbc": list(c.pbc),
        "dimension": c.dimension,
        "summed_dimensions": summed_dimension(c.dimension),
        "axis_order": [a + 1 for a in c.axis_order],
        "vacuum_added": [r + 1 for r in c.vacuum_added],
        "shortest_translation_angstrom": round(shortest_translation(c), 8),
        "kmesh": list(prep.kmesh),
        "kmesh_default": prep.kmesh_default,
        "mesh": "Monkhorst-Pack, Gamma-centred (pyscf make_kpts)",
        "n_kpoints": mesh.n,
        "n_computed": int(mesh.computed.size),
        "home_diagonal_error": sp.diagonal_error,
        "precision": {
            "requested": conv.requested,
            "used": conv.used,
            "checked_at": conv.checked_at,
            "converged": conv.converged,
            "tolerance": conv.tolerance,
            "rcut_bohr": sp.rcut,
            "steps": [dict(s) for s in conv.steps],
        },
        "worst": {
            "k": k + 1,
            "scaled": [round(float(x), 10) + 0.0 for x in mesh.scaled[k]],
            "smallest": float(sp.smallest[k]),
            "kpoints_below_caution": int(np.sum(sp.smallest < policy.caution)),
        },
        "kpoints": _kpoint_rows(prep),
        "remedies": None if plan is None else plan.details(prep.table),
    }


def audit_cell(
    source: str | Path | Crystal,
    basis: str | BasisSpec,
    *,
    kmesh: tuple[int, int, int] | None = None,
    precision: float | None = None,
    basis_for: dict[str, str] | list[str] | None = None,
    cartesian: bool = False,
    unit: str = "angstrom",
    ghost: str | list[int] | None = None,
    frame: int = 1,
    policy: Policy | None = None,
    remedies: bool | RemedyOptions = True,
) -> AuditResult:
    """Audit one periodic geometry (a CIF, extended XYZ with a Lattice, ... or a Crystal) in one
    basis on a Γ-centred Monkhorst–Pack mesh (``kmesh`` along the file's lattice vectors;
    default from the cell size, docs/periodic.md)."""
    if isinstance(source, Crystal):
        crystal = source
    else:
        frames = load_cells(source, unit=unit, ghost=ghost)
        if not 1 <= frame <= len(frames):
            raise UsageError(f"{source}: frame {frame} requested, file has {len(frames)} frame(s)")
        crystal = frames[frame - 1]
    spec = make_spec(basis, basis_for, cartesian)
    return audit_cell_prepared(prepare_cell(crystal, spec, kmesh, precision), policy, remedies)


def prune_cell(
    prep: PreparedCell, policy: Policy | None = None, options: RemedyOptions | None = None
) -> tuple[AuditResult, PeriodicPlan]:
    """Audit a prepared cell and work out its remedies even when nothing must go; UsageError
    when neither the exponent cutoff nor the whole-shell subset reaches the target."""
    policy = policy or Policy()
    options = replace(options or RemedyOptions(), force=True)
    result = audit_cell_prepared(prep, policy, remedies=False)
    plan = periodic_plan(prep, result.recommendation, policy, options)
    if plan.cutoff_doc is None and plan.shells_doc is None:
        raise UsageError("; ".join(plan.problems) or "no periodic remedy reaches the target")
    periodic = {**result.extra["periodic"], "remedies": plan.details(prep.table)}
    return replace(result, remedies=plan.report(), extra={"periodic": periodic}), plan
