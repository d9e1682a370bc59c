"""Opt-in trial SCF: what a remedy costs in total energy.

Runs pyscf twice: the full basis with canonical orthogonalization at the target (our own
X, not pyscf's built-in cut), and the shell-pruned basis with nothing removed. Both are
variational in a subspace of the full basis, so both energies lie at or
above the full-basis energy; the difference between them is what choosing one remedy over
the other costs. Guarded by a size limit and a per-run time limit.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import TYPE_CHECKING, Any

from ..base.defaults import TRIAL_MAX_FUNCTIONS, TRIAL_TIME_LIMIT
from ..base.errors import UsageError
from ..inputs.pruned import load_pruned_doc
from .canonical import orthogonalizer
from .prepared import PreparedGeometry

if TYPE_CHECKING:
    from pyscf import gto

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


#: what a progress callback receives after every SCF cycle
Progress = Callable[[dict], None]


def run_scf(
    mol: gto.Mole,
    method: str,
    threshold: float,
    time_limit: float = TRIAL_TIME_LIMIT,
    conv_tol: float = 1e-9,
    progress: Progress | None = None,
    label: str = "",
) -> dict:
    """One SCF on pyscf Mole ``mol`` with canonical orthogonalization at ``threshold``
    (0 keeps every direction). Returns status ("done", "stopped" at the time limit, or
    "failed" with the error), convergence, cycles, energy and timing. ``progress`` gets
    {basis, cycle, energy, seconds} after every cycle."""
    from pyscf import dft, scf  # pyscf is slow to import: only when a trial SCF runs

    method = check_method(method)
    mf = scf.HF(mol) if method == "hf" else dft.KS(mol)
    if method != "hf":
        mf.xc = method
    mf.verbose = 0
    mf.conv_tol = conv_tol
    start = time.perf_counter()
    cycles = [0]

    def watch(envs: dict) -> None:
        cycles[0] += 1
        elapsed = time.perf_counter() - start
        if progress is not None:
            progress({"basis": label, "cycle": cycles[0], "energy": envs.get("e_tot"), "seconds": elapsed})
        if elapsed > time_limit:
            raise _OutOfTime

    out: dict[str, Any] = {"n_functions": int(mol.nao), "directions_removed": 0, "threshold": threshold}
    try:
        X = orthogonalizer(mol.intor_symmetric("int1e_ovlp"), threshold)
        out["directions_removed"] = int(mol.nao - X.shape[1])
        mf.check_linear_dependency = lambda s, verbose=None: X
        mf.callback = watch
        energy = mf.kernel()
    except _OutOfTime:
        return _run(out, "stopped", cycles[0], None, start, f"stopped at the time limit of {time_limit:g} s")
    except Exception as exc:  # numpy's LinAlgError, pyscf's RuntimeError, MemoryError, ...
        first = str(exc).strip().splitlines()[0][:120] if str(exc).strip() else ""
        return _run(out, "failed", cycles[0], None, start, f"failed: {type(exc).__name__}: {first}".rstrip(": "))
    if not mf.converged:
        note = f"did not converge in {cycles[0]} cycles (pyscf's max_cycle {mf.max_cycle}): the energy is not final"
        return {**_run(out, "done", cycles[0], float(energy), start, note), "converged": False}
    return {**_run(out, "done", cycles[0], float(energy), start, ""), "converged": True}


def _run(out: dict, status: str, cycles: int, energy: float | None, start: float, note: str) -> dict:
    return {
        **out,
        "status": status,
        "converged": False,
        "cycles": cycles,
        "energy": energy,
        "seconds": round(time.perf_counter() - start, 2),
        "note": note,
    }


def alert(run: dict) -> str | None:
    """The plain line a report and the terminal show for a run that did not finish well."""
    if run["status"] == "stopped":
        return f"The {run['basis']} run stopped at its time limit after {run['cycles']} cycle(s): no energy."
    if run["status"] == "failed":
        return f"The {run['basis']} run {run['note']}; the audit went on without it."
    if not run["converged"]:
        return f"The {run['basis']} run did not converge in {run['cycles']} cycles: its energy is not final."
    return None


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
    max_functions: int = TRIAL_MAX_FUNCTIONS,
    time_limit: float = TRIAL_TIME_LIMIT,
    progress: Progress | None = None,
) -> dict:
    """Full basis at ``threshold`` versus the pruned basis; energies in hartree and the
    difference in microhartree (only when both runs converged). Skipped, with the reason,
    above ``max_functions``. A run that stops at ``time_limit``, does not converge or fails
    is reported (``alerts``), never raised."""
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
        "alerts": [],
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
    runs = [("full basis, canonical orthogonalization", lambda: full, n, threshold)]
    if pruned_doc is not None:
        runs.append(("shell-pruned basis", lambda: load_pruned_doc(pruned_doc), pruned_doc["n_functions"], 0.0))
    for label, build, size, tau in runs:
        out["runs"].append({"basis": label, **_one_run(build, size, method, tau, time_limit, progress, label)})
    out["alerts"] = [a for a in (alert(r) for r in out["runs"]) if a]
    done = [r for r in out["runs"] if r["energy"] is not None and r["converged"]]
    if len(done) == 2:
        out["difference_microhartree"] = (done[1]["energy"] - done[0]["energy"]) * 1e6
    return out


def _one_run(
    build: Callable[[], gto.Mole],
    n_functions: int,
    method: str,
    tau: float,
    time_limit: float,
    progress: Progress | None,
    label: str,
) -> dict:
    """One run; building its Mole can fail too (reported like a failed run)."""
    start = time.perf_counter()
    try:
        mol = build()
    except Exception as exc:  # pyscf's RuntimeError for a basis it cannot build, ...
        first = str(exc).strip().splitlines()[0][:120] if str(exc).strip() else ""
        empty = {"n_functions": n_functions, "directions_removed": 0, "threshold": tau}
        return _run(empty, "failed", 0, None, start, f"failed: {type(exc).__name__}: {first}")
    return run_scf(mol, method, tau, time_limit, progress=progress, label=label)
