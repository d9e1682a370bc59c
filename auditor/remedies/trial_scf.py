"""Opt-in trial SCF: what a remedy costs in total energy.

Runs pyscf twice: the full basis with canonical orthogonalization at the advised
threshold (our own X, not pyscf's built-in cut), and the shell-pruned basis with nothing
removed. Both are variational in a subspace of the full basis, so both energies lie at or
above the full-basis energy; the difference between them is what choosing one remedy over
the other costs. Guarded by a size limit and a per-run time limit.
"""

from __future__ import annotations

import time
from typing import TYPE_CHECKING, Any

from numpy.linalg import LinAlgError

from ..base.errors import UsageError
from ..inputs.pruned import load_pruned_doc
from .canonical import orthogonalizer
from .prepared import PreparedGeometry

if TYPE_CHECKING:
    from pyscf import gto

MAX_FUNCTIONS = 400
TIME_LIMIT = 120.0  # seconds per SCF run
HF_NAMES = ("hf", "scf", "rhf", "uhf")


class _OutOfTime(Exception):
    pass


def check_method(method: str) -> str:
    """Normalize the method name; UsageError for a functional pyscf does not know."""
    name = method.strip().lower()
    if name in HF_NAMES:
        return "hf"
    from pyscf.dft import libxc  # pyscf is slow to import: only when a trial SCF is asked for

    try:
        libxc.parse_xc(name)
    except (KeyError, ValueError, TypeError, RuntimeError):
        raise UsageError(f"--trial-scf: {method!r} is neither hf nor a functional pyscf knows") from None
    return name


def run_scf(
    mol: gto.Mole, method: str, threshold: float, time_limit: float = TIME_LIMIT, conv_tol: float = 1e-9
) -> dict:
    """One SCF on pyscf Mole ``mol`` with canonical orthogonalization at ``threshold``
    (0 keeps every direction). Returns convergence, cycles, energy and timing."""
    from pyscf import dft, scf  # pyscf is slow to import: only when a trial SCF runs

    method = check_method(method)
    mf = scf.HF(mol) if method == "hf" else dft.KS(mol)
    if method != "hf":
        mf.xc = method
    mf.verbose = 0
    mf.conv_tol = conv_tol
    S_raw = mol.intor_symmetric("int1e_ovlp")
    X = orthogonalizer(S_raw, threshold)
    mf.check_linear_dependency = lambda s, verbose=None: X
    start = time.perf_counter()

    def watch(envs):
        if time.perf_counter() - start > time_limit:
            raise _OutOfTime

    mf.callback = watch
    out = {"n_functions": int(mol.nao), "directions_removed": int(mol.nao - X.shape[1]), "threshold": threshold}
    try:
        energy = mf.kernel()
    except _OutOfTime:
        return {
            **out,
            "status": "stopped",
            "converged": False,
            "cycles": getattr(mf, "cycles", None),
            "energy": None,
            "seconds": round(time.perf_counter() - start, 2),
            "note": f"stopped after the time limit of {time_limit:g} s",
        }
    return {
        **out,
        "status": "done",
        "converged": bool(mf.converged),
        "cycles": getattr(mf, "cycles", None),
        "energy": float(energy),
        "seconds": round(time.perf_counter() - start, 2),
        "note": "",
    }


def scf_mole(prep: PreparedGeometry) -> gto.Mole:
    """The prepared pyscf Mole with the molecule's charge and spin (the audit ignores them)."""
    m = prep.mole.copy()
    m.charge = int(prep.molecule.charge)
    m.spin = prep.molecule.spin
    m.build(dump_input=False, parse_arg=False)
    return m


def trial_scf(
    prep: PreparedGeometry,
    method: str,
    threshold: float,
    pruned_doc: dict | None,
    max_functions: int = MAX_FUNCTIONS,
    time_limit: float = TIME_LIMIT,
) -> dict:
    """Full basis at ``threshold`` versus the pruned basis; energies in hartree and the
    difference in microhartree. Skipped, with the reason, above ``max_functions``."""
    method = check_method(method)
    n = prep.table.n_functions
    out: dict[str, Any] = {
        "method": method,
        "max_functions": max_functions,
        "time_limit_seconds": time_limit,
        "runs": [],
        "difference_microhartree": None,
        "reminder": "Removing directions changes total energies, and thresholds are judgement calls: "
        "compare energies only between runs that removed the same directions.",
    }
    if n > max_functions:
        out["skipped"] = (
            f"trial SCF skipped: {n} basis functions exceed the limit of {max_functions} "
            "(raise it with --trial-max-functions)"
        )
        return out
    out["skipped"] = None
    try:
        full = scf_mole(prep)
    except RuntimeError as exc:  # pyscf: electron count and spin do not fit
        out["skipped"] = f"trial SCF skipped: pyscf rejected charge/spin ({str(exc).splitlines()[0]})"
        return out
    runs = [("full basis, canonical orthogonalization", full, threshold)]
    if pruned_doc is not None:
        runs.append(("shell-pruned basis", load_pruned_doc(pruned_doc), 0.0))
    for label, mol, tau in runs:
        try:
            res = run_scf(mol, method, tau, time_limit)
        except (LinAlgError, ValueError, ArithmeticError, RuntimeError) as exc:
            # pyscf could not run this SCF (e.g. its initial guess needs an S that
            # coincident atoms make singular): said in the section, the audit goes on
            why = str(exc).strip().splitlines()[0] if str(exc).strip() else ""
            out["skipped"] = f"trial SCF failed on the {label} ({type(exc).__name__}: {why})"
            break
        out["runs"].append({"basis": label, **res})
    done = [r for r in out["runs"] if r["energy"] is not None]
    if len(done) == 2:
        out["difference_microhartree"] = (done[1]["energy"] - done[0]["energy"]) * 1e6
    return out
