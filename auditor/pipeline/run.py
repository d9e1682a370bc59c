"""The Python API: audit a geometry (path, ASE Atoms, pyscf Mole or Molecule)."""

from __future__ import annotations

import hashlib
import math
import re
from collections.abc import Callable
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from .. import __version__
from ..base.elements import element_symbol
from ..base.errors import InputError, ResourceError, UsageError
from ..diagnosis.causes import Causes, attribute_causes
from ..diagnosis.findings import (
    SEVERITY_ORDER,
    Finding,
    crowding_from_maxima,
    diffuse_shell_maxima,
    duplicate_findings,
    geometry_findings,
    near_singular_finding,
)
from ..diagnosis.verdict import BROKEN_KINDS, Decision, Policy, decide
from ..inputs.basis import BasisSpec, FileBasis, basis_origin, check_basis_name, parse_overrides, shells_digest
from ..inputs.geometry import Molecule, molecule_from_atoms
from ..inputs.readers import read_geometry
from ..numerics.eigen import compute_spectrum
from ..numerics.memory import check_memory
from ..numerics.overlap import FunctionTable, build_mole, function_table, mole_function_table, normalized_overlap
from ..numerics.spectrum import Spectrum
from ..remedies.canonical import Recommendation, advise, broken_geometry_advice
from ..remedies.plan import Remedies, RemedyOptions, RemedyPlan, make_plan, remedies_fit, remedies_for
from ..remedies.subset import check_target
from .result import AuditResult, InputInfo, SpectrumInfo, caveats_for


@dataclass
class Prepared:
    """A geometry with its basis: the pyscf Mole, the function table and unit-diagonal S."""

    molecule: Molecule
    spec: BasisSpec
    mole: Any  # a pyscf Mole (pyscf has no type information)
    table: FunctionTable
    S: np.ndarray


def make_spec(
    basis: str | BasisSpec | None,
    basis_for: dict[str, str] | list[str] | None = None,
    cartesian: bool = False,
    source: str = "pyscf",
) -> BasisSpec:
    """BasisSpec from a name (or file) plus overrides given as dict or ['H=cc-pvtz', ...]."""
    if isinstance(basis, BasisSpec):
        return basis
    if basis is not None and not isinstance(basis, str):
        check_basis_name(basis)  # the usage error for a basis that is not a name
    if isinstance(basis_for, dict):
        over = {element_symbol(k, "basis_for"): check_basis_name(v, f"basis_for {k}") for k, v in basis_for.items()}
    else:
        over = parse_overrides(basis_for)
    default = check_basis_name(basis) if basis else ""  # "": each input's own basis (resolve_spec)
    return BasisSpec(default=default, per_element=over, cartesian=cartesian, source=source)


def resolve_spec(spec: BasisSpec, mol: Molecule) -> BasisSpec:
    """The basis ``mol`` is audited in: ``spec`` when it names one (the command line's
    --basis wins), else the basis the input carries: a name (a QCSchema document's, with
    ``spec``'s per-element overrides and Cartesian flag) or its exact basis data (a
    checkpoint's, a QCSchema basis object), which no option may change."""
    if spec.default or spec.data is not None:
        return spec
    carried = mol.basis
    if carried is None:
        raise UsageError(f"{mol.source}: no basis: the input carries none; give one (--basis, or basis= in the API)")
    if not carried.explicit:
        return replace(spec, default=carried.name)
    if spec.per_element or spec.cartesian or spec.source != "pyscf":
        raise UsageError(
            f"{mol.source}: --basis-for, --cartesian and --basis-source change a named basis; this input "
            f"carries its basis data (the {carried.origin}'s), used as they are (--basis replaces them)"
        )
    return BasisSpec(carried.name, {}, carried.cartesian, "pyscf", carried)


def prepare(
    mol: Molecule, spec: BasisSpec, spectrum_method: str = "large", stage: Callable[[str], None] | None = None
) -> Prepared:
    """Build the pyscf Mole, the function table and S for one molecule.

    The memory guard runs before S is built: ResourceError when S plus the spectrum
    step of ``spectrum_method`` cannot fit ("large" checks only what any audit needs).
    A geometry without a real atom is a UsageError: nothing would carry nuclei or electrons.
    """
    if mol.n_atoms and all(mol.ghost):
        raise UsageError(f"{mol.source}: no real atom: all {mol.n_atoms} atoms are ghost atoms")
    spec = resolve_spec(spec, mol)
    if stage:
        stage("overlap matrix (pyscf)")
    pm = build_mole(mol, spec)
    check_memory(pm.nao, spectrum_method)
    table = mole_function_table(pm, mol, spec) if spec.data is not None else function_table(mol, spec)
    return Prepared(mol, spec, pm, table, normalized_overlap(pm))


def _from_mole(pm: Any) -> tuple[Molecule, BasisSpec]:
    symbols, ghost = [], []
    for i in range(pm.natm):
        raw = re.sub(r"^(ghost-?|x-)", "", pm.atom_pure_symbol(i), flags=re.IGNORECASE)
        symbols.append(element_symbol(raw, f"pyscf Mole atom {i + 1}"))
        ghost.append(bool(pm.atom_charge(i) == 0))
    coords = pm.atom_coords(unit="Angstrom")
    b = pm.basis
    if isinstance(b, str):
        spec = BasisSpec(b, {}, bool(pm.cart))
    elif isinstance(b, dict) and all(isinstance(v, str) for v in b.values()):
        over = {}
        for k, v in b.items():
            try:
                over[element_symbol(re.sub(r"^(ghost-?|x-)", "", k, flags=re.IGNORECASE), "basis")] = v
            except InputError:
                continue
        spec = BasisSpec("custom", over, bool(pm.cart))
    else:
        spec = BasisSpec("custom", {}, bool(pm.cart))
    mol = Molecule(
        tuple(symbols),
        np.asarray(coords),
        tuple(ghost),
        charge=int(pm.charge),
        multiplicity=int(pm.spin) + 1,
        source="<pyscf Mole>",
    )
    return mol, spec


@dataclass(frozen=True)
class Audited:
    """One frame audited without remedies: the result, its spectrum, and the decision when
    the geometry is broken (no threshold and no remedy then)."""

    result: AuditResult
    spectrum: Spectrum
    broken: Decision | None


def audit_core(
    prep: Prepared,
    policy: Policy,
    spectrum_method: str = "auto",
    stage: Callable[[str], None] | None = None,
    for_remedies: bool = False,
) -> Audited:
    """Spectrum, causes, findings, verdict and advice of one frame, without remedies;
    ``stage`` (optional) is told the name of each step as it starts. With ``for_remedies``
    (this frame's remedies follow) the spectrum keeps the factorization they can reuse,
    when memory allows it."""
    stage = stage or _quiet
    keep = for_remedies and remedies_fit(prep.table.n_functions)
    core = prep.table.non_diffuse if keep else None  # the remedies' diffuse options keep these
    # what the findings read of S, read first: the spectrum may lend S's lower triangle to the
    # remedies (auditor.numerics.cholesky.FactorHandoff)
    stage("duplicate and crowded functions")
    scan = (duplicate_findings(prep.S, prep.table), diffuse_shell_maxima(prep.S, prep.table))
    spec = compute_spectrum(prep.S, policy.caution, spectrum_method, stage, keep_factor=keep, core=core)
    try:
        return _diagnose(prep, policy, spec, scan, stage)
    except BaseException:
        _release(spec)
        raise


def _release(spec: Spectrum) -> None:
    """Drop what the spectrum kept for remedies that will not run (S whole again: its lower
    triangle may hold a lent factor, auditor.numerics.cholesky.FactorHandoff)."""
    if spec.handoff is not None:
        spec.handoff.release()


def _diagnose(
    prep: Prepared,
    policy: Policy,
    spec: Spectrum,
    scan: tuple[list[Finding], np.ndarray | None],
    stage: Callable[[str], None],
) -> Audited:
    """Causes, findings, verdict and advice of one frame from its spectrum and ``scan``."""
    stage("findings and causes")
    causes = attribute_causes(spec.vectors, prep.table, below=policy.caution, n_below=spec.count_below(policy.caution))
    findings = _findings(prep, spec, policy, causes, scan)
    decision = decide(policy, spec.smallest, findings)
    broken = decision.finding in BROKEN_KINDS
    if broken:
        recommendation = broken_geometry_advice(spec, decision.finding or "")
    else:
        recommendation = advise(spec, _default_threshold(policy), policy.fail, prep.spec.cartesian)
    result = AuditResult(
        version=__version__,
        input=_input_info(prep),
        verdict=decision.verdict,
        verdict_reason=decision.reason,
        verdict_finding=decision.finding,
        policy=policy.as_dict(),
        spectrum=spectrum_info(spec),
        findings=tuple(findings),
        causes=causes,
        recommendation=recommendation,
        caveats=caveats_for(prep.molecule.n_frames),
    )
    return Audited(result, spec, decision if broken else None)


def audit_prepared(
    prep: Prepared,
    policy: Policy | None = None,
    spectrum_method: str = "auto",
    remedies: bool | RemedyOptions = True,
    stage: Callable[[str], None] | None = None,
) -> AuditResult:
    """Run the whole audit on a prepared geometry + basis (one frame on its own; see
    `auditor.pipeline.frames.audit_frames` for every frame of a scan at once).

    ``remedies``: True (default options), an ``auditor.RemedyOptions``, or False to skip them.
    A broken geometry (coincident atoms, an impossible contact, a unit mix-up) gets no
    threshold and no remedy: the file must be fixed first. ``stage`` (optional) is told the
    name of each step as it starts, for progress displays and timings.
    """
    policy = policy or Policy()
    core = audit_core(prep, policy, spectrum_method, stage, for_remedies=remedies is not False)
    rem = remedies_of([prep], [core], policy, remedies, stage=stage)
    return replace(core.result, remedies=rem)


def _quiet(_: str) -> None:
    pass


def _findings(
    prep: Prepared, spec: Spectrum, policy: Policy, causes: Causes, scan: tuple[list[Finding], np.ndarray | None]
) -> list[Finding]:
    """Every finding, errors first (stable within a severity); ``scan``: the duplicate
    findings and the diffuse shells' overlap maxima, read from S before its spectrum."""
    mol, table = prep.molecule, prep.table
    findings: list[Finding] = geometry_findings(mol, policy.contact_fail, policy.contact_caution)
    findings += scan[0]
    findings += crowding_from_maxima(scan[1], mol, table, troubled=spec.smallest < policy.caution)
    if spec.smallest < policy.caution:
        findings.insert(0, near_singular_finding(spec, policy, causes))
    findings.sort(key=lambda f: SEVERITY_ORDER[f.severity])
    return findings


def remedies_of(
    preps: list[Prepared],
    cores: list[Audited],
    policy: Policy,
    remedies: bool | RemedyOptions,
    recommendation: Recommendation | None = None,
    stage: Callable[[str], None] | None = None,
) -> Remedies | None:
    """The remedies of the frames ``preps`` (one set for all), or None when switched off.
    A broken frame gets none: the file must be fixed first."""
    if remedies is False:
        return None
    options = remedies if isinstance(remedies, RemedyOptions) else RemedyOptions()
    broken = [(k, c.broken) for k, c in enumerate(cores) if c.broken is not None]
    if broken:
        target = policy.caution if options.target is None else options.target
        k, decision = broken[0]
        where = f"frame {cores[k].result.input.frame} of the file is" if len(cores) > 1 else "the geometry is"
        why = f"{where} broken ({decision.finding}): fix the geometry first; no remedy is offered for it"
        for c in cores:  # release the factors kept for them
            _release(c.spectrum)
        return no_remedies(cores, target, why)
    rec = recommendation or cores[0].result.recommendation
    if stage:
        stage("remedies")
    return remedies_for(preps, rec, [c.spectrum for c in cores], options, policy.caution)


def no_remedies(cores: list[Audited], target: float, why: str) -> Remedies:
    """Remedies that were not worked out (``why``), with the interlacing bound all the same."""
    counts = [c.spectrum.count_below(target) for c in cores]
    lower = None if None in counts else max(c for c in counts if c is not None)
    smallest = min(c.spectrum.smallest for c in cores)
    return Remedies(target=target, needed=smallest < target, alternatives=[], lower_bound=lower, problems=[why])


def _default_threshold(policy: Policy) -> float:
    """Geometric middle of the caution and fail levels, rounded to a decade (1e-6 by default)."""
    return 10.0 ** round(0.5 * (math.log10(policy.caution) + math.log10(policy.fail)))


def _input_info(prep: Prepared) -> InputInfo:
    mol = prep.molecule
    return input_info(mol, prep.spec, prep.table, basis_data(prep), mol.charge, mol.multiplicity)


def input_info(
    structure: Any, spec: BasisSpec, table: FunctionTable, data: dict, charge: int, multiplicity: int | None
) -> InputInfo:
    """The ``input`` part of a report for a molecule or a cell (``structure``: its source,
    frame, symbols, ghost flags and coordinates in ångström)."""
    s = structure
    atoms = tuple(
        {"atom": i + 1, "element": el, "ghost": bool(g), "xyz": [round(float(x), 8) for x in xyz]}
        for i, (el, g, xyz) in enumerate(zip(s.symbols, s.ghost, s.coords))
    )
    return InputInfo(
        path=s.source,
        frame=s.frame + 1,
        n_frames=s.n_frames,
        basis=spec.describe(),
        basis_spec=spec.as_dict(),
        basis_data=data,
        n_atoms=s.n_atoms,
        n_functions=table.n_functions,
        n_shells=table.n_shells,
        ghost_atoms=tuple(i + 1 for i, g in enumerate(s.ghost) if g),
        charge=charge,
        multiplicity=multiplicity,
        atoms=atoms,
    )


def basis_data(prep: Prepared) -> dict:
    """Where each element's shells came from (pyscf's library, basis_set_exchange or a file,
    with versions or the file's SHA-256) and a digest of the shells actually used, so that
    two audits of "the same" basis from different copies can be told apart."""
    elements = sorted(set(prep.molecule.symbols))
    if prep.spec.data is not None:
        return _carried_basis_data(prep.molecule, prep.spec.data, elements)
    if prep.spec.default == "custom":  # a pyscf Mole with its own basis data
        records = [
            {
                "element": el,
                "basis": "custom",
                "source": "pyscf Mole (API)",
                "digest": shells_digest(prep.mole._basis.get(el, prep.mole._basis.get("ghost-" + el, []))),
            }
            for el in elements
        ]
        return with_digest(records, "pyscf Mole")
    records = [dict(basis_origin(prep.spec.for_element(el), el, prep.spec.source)) for el in elements]
    carried = prep.molecule.basis
    named_by = carried.origin if carried is not None and prep.spec.default == carried.name else "given"
    return with_digest(records, named_by)


def with_digest(records: list[dict], named_by: str | None) -> dict:
    """basis_data from per-element records: one digest over them all, and where the basis
    was named (``named_by``; no "from" key when None)."""
    joined = "".join(f"{r['element']}:{r['digest']};" for r in records)
    data: dict = {"digest": hashlib.sha256(joined.encode("ascii")).hexdigest()}
    if named_by is not None:
        data["from"] = named_by
    data["elements"] = records  # last, as in every report written so far
    return data


def _carried_basis_data(mol: Molecule, data: FileBasis, elements: list[str]) -> dict:
    """basis_data for the basis data an input carries: per element the digest of its atoms'
    shells (of the one set when all its atoms share it), the file's SHA-256."""
    records = []
    for el in elements:
        sets = list(dict.fromkeys(data.atoms[i] for i, s in enumerate(mol.symbols) if s == el))
        record = {"element": el, "basis": data.name, "source": data.origin}
        if data.sha256:
            record["sha256"] = data.sha256
        record["digest"] = shells_digest(sets[0] if len(sets) == 1 else tuple(sets))
        records.append(record)
    return with_digest(records, data.origin)


def spectrum_info(spec: Spectrum, method: str | None = None, values: np.ndarray | None = None) -> SpectrumInfo:
    """The report's spectrum part; ``method`` and ``values`` replace the spectrum's own
    (periodic audits report "periodic" and the worst k-point's eigenvalues)."""
    cond = spec.condition_number
    return SpectrumInfo(
        smallest=spec.smallest,
        largest=spec.largest,
        condition_number=cond,
        log10_condition=math.log10(cond) if cond else None,
        counts_below=dict(spec.counts_below),
        gershgorin_bound=spec.gershgorin_bound,
        method=method or spec.method,
        eigenvalues=tuple(float(v) for v in (spec.values if values is None else values)),
    )


def audit(
    source: Any,
    basis: str | BasisSpec | None = None,
    *,
    basis_for: dict[str, str] | list[str] | None = None,
    cartesian: bool = False,
    unit: str = "angstrom",
    ghost: str | list[int] | None = None,
    frame: int = 1,
    policy: Policy | None = None,
    spectrum_method: str = "auto",
    remedies: bool | RemedyOptions = True,
) -> AuditResult:
    """Audit one geometry in one basis and return the result object.

    ``source`` is a path to a geometry file (XYZ, extended XYZ, PDB, SDF, QCSchema, a
    pyscf checkpoint, ...; ``frame`` picks a frame, 1-based), an ASE Atoms, a pyscf Mole
    (its own basis is used when ``basis`` is None), or a Molecule. ``basis`` is a name
    pyscf knows or a basis file; None uses the basis the input carries (a checkpoint's, a
    QCSchema input's);
    ``basis_for`` overrides it per element ({'H': 'cc-pvtz'} or ['H=cc-pvtz']);
    ``ghost`` marks atoms (1-based) as ghost atoms; ``remedies`` is True, False or a
    ``auditor.RemedyOptions`` (target, opt-in trial SCF).
    """
    if hasattr(source, "intor") and hasattr(source, "nao_nr"):
        mol, mole_spec = _from_mole(source)
        if basis is None:
            check_memory(source.nao, spectrum_method)  # before S is built, as in prepare
            table = mole_function_table(source, mol, mole_spec)
            return audit_prepared(
                Prepared(mol, mole_spec, source, table, normalized_overlap(source)), policy, spectrum_method, remedies
            )
    elif isinstance(source, Molecule):
        mol = source
    elif hasattr(source, "get_positions") and hasattr(source, "get_chemical_symbols"):
        mol = molecule_from_atoms(source)
    else:
        frames = read_geometry(source, unit=unit)
        if not 1 <= frame <= len(frames):
            raise UsageError(f"{source}: frame {frame} requested, file has {len(frames)} frame(s)")
        mol = frames[frame - 1]
    if ghost:
        mol = mol.with_ghosts(ghost, option="ghost=")  # checked against the atom count before any range is expanded
    spec = make_spec(basis, basis_for, cartesian)
    return audit_prepared(prepare(mol, spec, spectrum_method), policy, spectrum_method, remedies)


def prune_prepared(
    prep: Prepared, policy: Policy | None = None, options: RemedyOptions | None = None
) -> tuple[AuditResult, RemedyPlan]:
    """Audit a prepared geometry and work out its pruned basis even when nothing must go.

    Returns (AuditResult with remedies, RemedyPlan). Raises UsageError when no shell-pruned
    basis reaches the target (for example because an atom would lose every function).
    `auditor.pipeline.frames.prune_frames` does the same for every frame of a scan.
    """
    policy = policy or Policy()
    options = prune_options(options, policy)
    core = audit_core(prep, policy, for_remedies=True)
    refuse_broken(core)
    plan = make_plan(prep, core.result.recommendation, core.spectrum, options, policy.caution)
    check_pruned(plan)
    return replace(core.result, remedies=plan.report(prep.table)), plan


def prune_options(options: RemedyOptions | None, policy: Policy) -> RemedyOptions:
    """``options`` with ``force`` on (prune works out the basis even when nothing must go);
    UsageError for a bad target."""
    options = replace(options or RemedyOptions(), force=True)
    check_target(policy.caution if options.target is None else options.target)
    return options


def refuse_broken(core: Audited) -> None:
    """UsageError for a broken geometry: its basis is not pruned, the file must be fixed."""
    if core.result.verdict_finding in BROKEN_KINDS:
        _release(core.spectrum)
        r = core.result
        raise UsageError(f"{r.input.path}: {r.verdict_reason} Fix the geometry before pruning its basis.")


def check_pruned(plan: RemedyPlan) -> None:
    """ResourceError when the remedies did not fit in memory, UsageError when no shell-pruned
    basis reaches the target."""
    if plan.pruned is None:
        memory = [p for p in plan.problems if p.startswith("remedies skipped")]
        if memory:
            raise ResourceError(memory[0])
        why = next((p for p in plan.problems if p.startswith("shell-pruned")), "no pruned basis found")
        raise UsageError(why)
