"""Remedies a chemist can apply, ranked: canonical orthogonalization, a pivoted-Cholesky
subset of functions, a shell-pruned per-atom basis, and dropping one element's diffuse shells.

The pruned basis is a JSON document that pyscf reads directly::

    d = json.load(open("x.pruned.json"))
    mol = pyscf.gto.M(atom=d["atoms"], basis=d["basis"], unit="Angstrom",
                      cart=d["cartesian"], charge=d["charge"], spin=d["spin"])

(`load_pruned` does exactly that).
"""
from __future__ import annotations

import io
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import scipy.linalg

from .cholesky import (
    Selection,
    check_atoms_not_emptied,
    check_target,
    select_for_target,
    shells_from_functions,
    smallest_from_factor,
)
from .errors import InputError, UsageError
from .geometry import ELEMENTS

PRUNED_FORMAT = "auditor-pruned-basis/1"
#: Peak number of N x N arrays the remedies hold beside S, rounded up (measured: 2.07 at
#: N = 11960, audit with remedies on the large path: the pivoted factor, then the shifted
#: copy or the add-back factor, each released before the next is made).
REMEDY_COPIES = 3
#: Above this many functions, kept sets are checked by Lanczos on their Cholesky factor
#: instead of a dense eigvalsh (same number to ~1e-10 relative, several times faster).
EIGVALSH_LIMIT = 1000


# ------------------------------------------------------------------------------ labels


def function_record(table, i: int) -> dict:
    """A function named by 1-based number and atom, element, shell, l and exponent."""
    s = int(table.func_shell[i])
    a = int(table.shell_atom[s])
    return {
        "function": i + 1,
        "atom": a,
        "element": table.elements[a - 1],
        "ghost": bool(table.ghost[a - 1]),
        "shell": table.shell_name[s],
        "component": table.func_component[i],
        "l": int(table.shell_l[s]),
        "exponent": float(table.shell_exponent[s]),
        "diffuse": bool(table.shell_diffuse[s]),
    }


def shell_record(table, s: int) -> dict:
    """A shell named by atom, element, shell name, l, smallest exponent and size."""
    a = int(table.shell_atom[s])
    return {
        "atom": a,
        "element": table.elements[a - 1],
        "ghost": bool(table.ghost[a - 1]),
        "shell": table.shell_name[s],
        "l": int(table.shell_l[s]),
        "exponent": float(table.shell_exponent[s]),
        "diffuse": bool(table.shell_diffuse[s]),
        "functions": int(np.sum(table.func_shell == s)),
    }


# ------------------------------------------------------------------------- numerics


def verify_mode(n: int) -> str:
    return "eigvalsh" if n <= EIGVALSH_LIMIT else "lanczos"


def smallest_eigenvalue(S: np.ndarray, idx: np.ndarray) -> float:
    """Smallest eigenvalue of ``S[idx, idx]`` (dense for small sets, Lanczos otherwise)."""
    idx = np.asarray(idx)
    if idx.size == 0:
        return float("inf")
    sub = S[np.ix_(idx, idx)]
    if idx.size <= EIGVALSH_LIMIT:
        return float(np.linalg.eigvalsh(sub)[0])
    try:  # sub is symmetric: factor its Fortran-ordered transpose in place
        factor = scipy.linalg.cholesky(sub.T, lower=True, overwrite_a=True, check_finite=False)
    except np.linalg.LinAlgError:
        del sub  # overwritten by the failed factorization
        return float(np.linalg.eigvalsh(S[np.ix_(idx, idx)])[0])
    return smallest_from_factor(factor)


def canonical_transform(prep, threshold: float) -> np.ndarray:
    """X with X^T S X = 1 in pyscf's AO basis, from the unit-diagonal S's eigenvectors
    with eigenvalue >= ``threshold`` (canonical orthogonalization)."""
    from .trial_scf import orthogonalizer

    return orthogonalizer(prep.mole.intor_symmetric("int1e_ovlp"), threshold)


# --------------------------------------------------------------------- pruned basis


def _shell_entries(pm) -> list[tuple[int, int, list[list[float]]]]:
    """(0-based atom, l, [[exponent, coefficient], ...]) per contracted shell, in the
    order of the function table (each contraction of a pyscf shell is its own shell).
    Coefficients refer to normalized primitives, the convention of pyscf basis input."""
    out = []
    for b in range(pm.nbas):
        exps = pm.bas_exp(b)
        coeff = pm.bas_ctr_coeff(b)
        for c in range(pm.bas_nctr(b)):
            prims = [[float(e), float(x)] for e, x in zip(exps, coeff[:, c]) if x != 0.0]
            out.append((pm.bas_atom(b), pm.bas_angular(b), prims))
    return out


def _spin(mol) -> int:
    if mol.multiplicity:
        return int(mol.multiplicity) - 1
    nelec = sum(ELEMENTS.index(s) + 1 for s, g in zip(mol.symbols, mol.ghost) if not g) - int(mol.charge)
    return nelec % 2


def pruned_basis(prep, kept_shells, target: float | None = None, smallest: float | None = None) -> dict:
    """The pyscf-ready document of a basis that keeps only ``kept_shells`` (0-based).

    Atoms that lose a shell get a label of their own (element plus 1-based atom number,
    e.g. "H5"); the others share the element's label. Raises UsageError if an atom
    would keep no function.
    """
    mol, table = prep.molecule, prep.table
    keep = np.zeros(table.n_shells, dtype=bool)
    keep[np.asarray(list(kept_shells), dtype=int)] = True
    check_atoms_not_emptied(np.flatnonzero(keep[table.func_shell]), table.func_atom - 1,
                            what="this pruning")
    entries = _shell_entries(prep.mole)
    if len(entries) != table.n_shells:
        raise InputError("pyscf shells and the function table disagree; cannot write a pruned basis")
    pruned_atoms = {int(table.shell_atom[s]) - 1 for s in np.flatnonzero(~keep)}
    atoms, basis = [], {}
    for i, (sym, ghost, xyz) in enumerate(zip(mol.symbols, mol.ghost, mol.coords)):
        base = ("ghost-" if ghost else "") + sym
        label = f"{base}{i + 1}" if i in pruned_atoms else base
        atoms.append([label, [round(float(x), 10) for x in xyz]])
        if label not in basis:
            basis[label] = [[l, *prims] for s, (a, l, prims) in enumerate(entries) if a == i and keep[s]]
    dropped = [shell_record(table, int(s)) for s in np.flatnonzero(~keep)]
    return {
        "format": PRUNED_FORMAT,
        "source": mol.source,
        "basis_name": prep.spec.describe(),
        "unit": "angstrom",
        "cartesian": bool(prep.spec.cartesian),
        "charge": int(mol.charge),
        "spin": _spin(mol),
        "target": target,
        "smallest_eigenvalue": smallest,
        "n_functions": int(np.sum(keep[table.func_shell])),
        "n_functions_full": table.n_functions,
        "atoms": atoms,
        "basis": basis,
        "dropped_shells": dropped,
    }


def write_pruned(doc: dict, path: Path) -> Path:
    from .report import atomic_write
    from .report.json import _clean

    atomic_write(path, json.dumps(_clean(doc), indent=1, ensure_ascii=False, allow_nan=False) + "\n")
    return Path(path)


def load_pruned_doc(doc: dict, **overrides):
    """A pyscf Mole from a pruned-basis document (keyword arguments override Mole fields)."""
    from pyscf import gto

    from .basis import eval_off

    eval_off()  # the document is user data: pyscf must not evaluate text in it

    try:
        kw = {"atom": doc["atoms"], "basis": doc["basis"], "unit": doc.get("unit", "angstrom"),
              "cart": bool(doc.get("cartesian", False)), "charge": int(doc.get("charge", 0)),
              "spin": int(doc.get("spin", 0)), "verbose": 0}
    except (KeyError, TypeError, ValueError) as exc:
        raise InputError(f"not a pruned-basis document ({exc.__class__.__name__}: {exc})") from None
    kw.update(overrides)
    return gto.M(**kw)


def load_pruned(path, **overrides):
    """A pyscf Mole from a pruned-basis JSON file (keyword arguments override Mole fields)."""
    try:
        doc = json.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise InputError(f"{path}: cannot read a pruned-basis file ({exc.__class__.__name__})") from None
    return load_pruned_doc(doc, **overrides)


# ---------------------------------------------------------------------- alternatives


def diffuse_element_options(S: np.ndarray, table, target: float) -> list[dict]:
    """For each element with diffuse shells: drop them on every atom of that element."""
    out = []
    func_el = np.array([str(table.elements[a - 1]) for a in table.func_atom])
    func_dif = table.shell_diffuse[table.func_shell]
    for el in sorted(set(func_el[func_dif])):
        drop = func_dif & (func_el == el)
        kept = np.flatnonzero(~drop)
        try:
            check_atoms_not_emptied(kept, table.func_atom - 1)
        except UsageError:
            continue
        low = smallest_eigenvalue(S, kept)
        shells = np.unique(table.func_shell[drop])
        out.append({
            "element": str(el),
            "removed": int(drop.sum()),
            "shells": len(shells),
            "shell_names": sorted({table.shell_name[s][-1] + f" {table.shell_exponent[s]:.4g}" for s in shells}),
            "smallest_after": low,
            "reaches_target": bool(low >= target),
        })
    return out


@dataclass
class RemedyPlan:
    """What each remedy removes and leaves; ``alternatives`` ranked, best first."""

    target: float
    needed: bool
    functions: Selection | None = None
    shells: Selection | None = None
    pruned: dict | None = None
    alternatives: list[dict] = field(default_factory=list)
    diffuse: list[dict] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)
    trial_scf: dict | None = None

    def as_dict(self, table=None) -> dict:
        out = {
            "target": self.target,
            "needed": self.needed,
            "alternatives": self.alternatives,
        }
        if self.functions is not None and table is not None:
            f = self.functions
            out["cholesky_functions"] = {
                "tolerance": f.tolerance,
                "smallest_kept": f.smallest_kept,
                "factorizations": f.factorizations,
                "kept": int(f.kept.size),
                "kept_by_pivoting": f.prefix,
                "added_back": f.added_back,
                "dropped": [function_record(table, int(i)) for i in f.dropped],
                "kept_functions_in_order": [int(i) + 1 for i in f.order],
            }
        if self.shells is not None and table is not None:
            s = self.shells
            out["cholesky_shells"] = {
                "chosen_by": ("shell pivoting" if s.search != "from-functions"
                              else "shells the function-level subset leaves whole"),
                "tolerance": s.tolerance,
                "smallest_kept": s.smallest_kept,
                "factorizations": s.factorizations,
                "kept": int(s.kept.size),
                "kept_by_pivoting": s.prefix,
                "added_back": s.added_back,
                "dropped_shells": [shell_record(table, int(i)) for i in s.dropped_shells],
            }
        out["diffuse_by_element"] = self.diffuse
        out["problems"] = self.problems
        out["trial_scf"] = self.trial_scf
        return out


def _best_shell_selection(S, table, target, functions, atoms, mode, problems,
                          shell_pivoting: bool = True) -> Selection | None:
    """The whole-shell kept set that drops fewer functions: shell pivoting, or the shells the
    function-level subset leaves untouched (both followed by the add-back pass).

    Without ``shell_pivoting`` only the cheap function-seeded set is tried (shell pivoting
    then runs only when that fails): its per-shell Python loop costs several
    eigendecompositions of S on a thousand functions."""
    found, why = [], None
    if shell_pivoting or functions is None:
        try:
            found.append(select_for_target(S, target, table.func_shell, atoms, verify=mode))
        except UsageError as exc:
            why = exc.message
    if functions is not None:
        seeded = shells_from_functions(S, functions, table.func_shell, verify=mode)
        if seeded is not None:
            try:
                check_atoms_not_emptied(seeded.kept, atoms, what=f"target {target:g}")
                found.append(seeded)
            except UsageError as exc:
                why = why or exc.message
    if not found and not shell_pivoting and functions is not None:
        return _best_shell_selection(S, table, target, None, atoms, mode, problems)
    if not found:
        problems.append(f"shell-pruned basis: {why or 'no whole-shell set reaches the target'}")
        return None
    return min(found, key=lambda s: s.n_dropped)  # ties: shell pivoting (listed first)


def _alt(kind, title, removed, unit, smallest, target, how, **extra) -> dict:
    return {"kind": kind, "title": title, "removed": removed, "unit": unit,
            "smallest_after": smallest, "reaches_target": bool(smallest is not None and smallest >= target),
            "how": how, **extra}


def plan_remedies(prep, recommendation, smallest: float, target: float, force: bool = False,
                  shell_pivoting: bool = True) -> RemedyPlan:
    """Work out every remedy for a prepared geometry and rank them.

    ``smallest`` is the full basis's smallest eigenvalue; when it already meets the
    target (and not ``force``) nothing is computed. Ranking: remedies that reach the
    target first, then fewest functions (or directions) removed, then the larger
    smallest eigenvalue.
    """
    target = check_target(target)
    S, table = prep.S, prep.table
    plan = RemedyPlan(target=target, needed=bool(smallest < target))
    if not plan.needed and not force:
        return plan
    n = table.n_functions
    need = REMEDY_COPIES * 8 * n * n
    from .large import available_bytes

    free = available_bytes()
    if need > free:
        plan.problems.append(f"remedies skipped: about {need / 1024 ** 3:.1f} GiB would be needed beside S, "
                             f"{free / 1024 ** 3:.1f} GiB is available")
        return plan
    mode = verify_mode(n)
    atoms = table.func_atom - 1

    rec = recommendation
    plan.alternatives.append(_alt(
        "canonical_orthogonalization", f"canonical orthogonalization at {rec.threshold:.1e}",
        rec.n_removed, "directions", rec.smallest_kept, target,
        "keep the basis; drop eigenvectors of S below the threshold (canonical orthogonalization section)",
        threshold=rec.threshold))
    try:
        plan.functions = select_for_target(S, target, atom_of_function=atoms, verify=mode)
        f = plan.functions
        plan.alternatives.append(_alt(
            "cholesky_functions", "pivoted-Cholesky subset of functions", f.n_dropped, "functions",
            f.smallest_kept, target, "drop single functions (not rotationally invariant)",
            tolerance=f.tolerance))
    except UsageError as exc:
        plan.problems.append(f"pivoted-Cholesky subset: {exc.message}")
    plan.shells = _best_shell_selection(S, table, target, plan.functions, atoms, mode, plan.problems,
                                        shell_pivoting)
    if plan.shells is not None:
        s = plan.shells
        try:
            plan.pruned = pruned_basis(prep, s.kept_shells, target, s.smallest_kept)
            plan.alternatives.append(_alt(
                "cholesky_shells", "shell-pruned basis (whole shells, pivoted Cholesky)", s.n_dropped,
                "functions", s.smallest_kept, target,
                "auditor prune writes it as a pyscf basis (JSON)",
                tolerance=s.tolerance, shells_removed=len(s.dropped_shells)))
        except UsageError as exc:
            plan.problems.append(f"shell-pruned basis: {exc.message}")
    plan.diffuse = diffuse_element_options(S, table, target)
    for opt in plan.diffuse:
        if opt["reaches_target"]:
            plan.alternatives.append(_alt(
                "drop_diffuse_element", f"drop the diffuse shells of {opt['element']} everywhere",
                opt["removed"], "functions", opt["smallest_after"], target,
                f"use the parent basis without augmentation for {opt['element']} (e.g. --basis-for)",
                element=opt["element"]))
    # Ties: the larger smallest eigenvalue (to 3 digits), then whole-shell remedies first.
    prefer = {"cholesky_shells": 0, "drop_diffuse_element": 1, "cholesky_functions": 2,
              "canonical_orthogonalization": 3}
    plan.alternatives.sort(key=lambda a: (not a["reaches_target"],
                                          a["removed"] if a["removed"] is not None else n,
                                          -float(f"{a['smallest_after'] or 0.0:.2e}"),
                                          prefer[a["kind"]]))
    for k, a in enumerate(plan.alternatives, 1):
        a["rank"] = k
    return plan


# ------------------------------------------------------------------------ entry points


@dataclass(frozen=True)
class RemedyOptions:
    """How remedies are worked out: ``target`` smallest eigenvalue (None: the policy's
    caution level), an opt-in trial SCF (``trial_scf`` "hf" or a functional name) with
    its size and time limits, ``force`` to compute even when nothing needs removing, and
    ``shell_pivoting`` for the thorough (slower) whole-shell search that `prune` uses."""

    target: float | None = None
    trial_scf: str | None = None
    trial_max_functions: int = 400
    trial_time_limit: float = 120.0
    force: bool = False
    shell_pivoting: bool = False


def make_plan(prep, recommendation, smallest: float, options: RemedyOptions, caution: float) -> RemedyPlan:
    """`plan_remedies` plus the opt-in trial SCF."""
    target = caution if options.target is None else options.target
    plan = plan_remedies(prep, recommendation, smallest, target, force=options.force,
                         shell_pivoting=options.shell_pivoting)
    if options.trial_scf:
        from .trial_scf import check_method, trial_scf

        if plan.needed or options.force:
            plan.trial_scf = trial_scf(prep, options.trial_scf, recommendation.threshold, plan.pruned,
                                       options.trial_max_functions, options.trial_time_limit)
        else:
            plan.trial_scf = {"method": check_method(options.trial_scf), "runs": [],
                              "skipped": "trial SCF skipped: the basis already meets the target, "
                                         "no remedy to compare"}
    return plan


def remedies_for(prep, recommendation, smallest: float, options: RemedyOptions | None, caution: float) -> dict:
    """The ``remedies`` part of an audit result (JSON-ready)."""
    plan = make_plan(prep, recommendation, smallest, options or RemedyOptions(), caution)
    return plan.as_dict(prep.table)


def prune_prepared(prep, policy=None, options: RemedyOptions | None = None):
    """Audit a prepared geometry and work out its pruned basis even when nothing must go.

    Returns (AuditResult with remedies, RemedyPlan). Raises UsageError when no shell-pruned
    basis reaches the target (for example because an atom would lose every function).
    """
    from dataclasses import replace

    from .api import audit_prepared
    from .policy import Policy

    policy = policy or Policy()
    options = replace(options or RemedyOptions(), force=True, shell_pivoting=True)
    check_target(policy.caution if options.target is None else options.target)
    result = audit_prepared(prep, policy, remedies=False)
    plan = make_plan(prep, result.recommendation, result.spectrum.smallest, options, policy.caution)
    if plan.pruned is None:
        from .errors import ResourceError

        memory = [p for p in plan.problems if p.startswith("remedies skipped")]
        if memory:
            raise ResourceError(memory[0])
        why = next((p for p in plan.problems if p.startswith("shell-pruned")), "no pruned basis found")
        raise UsageError(why)
    return replace(result, remedies=plan.as_dict(prep.table)), plan


def explain_markdown(result, plan: RemedyPlan, files: dict[str, str]) -> str:
    """The Markdown explanation written next to the pruned basis."""
    from .report.markdown import remedies_lines

    d = result.as_dict()
    inp, doc = d["input"], plan.pruned
    name = Path(inp["path"]).name
    lines = [
        f"# Pruned basis for {name}",
        "",
        (f"Basis {inp['basis']}; {inp['n_atoms']} atoms; target smallest eigenvalue of the unit-diagonal "
         f"overlap matrix {plan.target:.1e} (full basis: {d['spectrum']['smallest']:.3e})."),
        "",
        (f"The pruned basis keeps **{doc['n_functions']} of {doc['n_functions_full']}** functions and drops "
         f"{len(doc['dropped_shells'])} whole shell(s); its smallest eigenvalue is "
         f"{_fmt_num(doc['smallest_eigenvalue'])}. Every component of a shell is kept or dropped together, "
         "so the basis stays rotationally invariant. Shells were chosen by pivoted Cholesky over whole "
         "shells (Lehtola, J. Chem. Phys. 151, 241102 (2019)) at the target: the longest prefix of the pivot "
         "order whose overlap meets the target is kept, then the other shells are offered back one by one."),
        "",
        "## Files",
        "",
        (f"- `{files['basis']}`: the pruned basis for pyscf (`atoms` with one label per atom that needs its "
         "own basis, `basis` in pyscf's internal format, `dropped_shells` for reading)."),
        (f"- `{files['transform']}`: X (functions × kept directions) for canonical orthogonalization of the "
         f"full basis at {result.recommendation.threshold:.1e}, in pyscf's AO order; X^T S X = 1."),
        "",
        "## Using them",
        "",
        "```python",
        "from auditor.prune import load_pruned",
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
    lines += ["## Read before acting", ""] + [f"- {c}" for c in d["caveats"]] + [""]
    return "\n".join(lines)


def _fmt_num(x) -> str:
    return "not computed" if x is None else f"{x:.3e}"


def write_prune_outputs(result, plan: RemedyPlan, prep, out_dir: Path, stem: str) -> list[Path]:
    """Write DIR/<stem>.pruned.json, DIR/<stem>.X.npy and DIR/<stem>.prune.md."""
    from .report import atomic_write

    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    files = {"basis": f"{stem}.pruned.json", "transform": f"{stem}.X.npy", "explain": f"{stem}.prune.md"}
    paths = [write_pruned(plan.pruned, out_dir / files["basis"])]
    X = canonical_transform(prep, result.recommendation.threshold)
    buf = io.BytesIO()
    np.save(buf, X)
    atomic_write(out_dir / files["transform"], buf.getvalue())
    paths.append(out_dir / files["transform"])
    atomic_write(out_dir / files["explain"], explain_markdown(result, plan, files))
    paths.append(out_dir / files["explain"])
    return paths
