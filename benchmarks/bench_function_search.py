"""The search for single functions: pivoting on S - target*I (the default) against the prefix
search on S with its add-back pass (search="shifted"), each followed by the whole-shell set it
seeds (`shells_from_functions`).

Printed per input, basis and target: functions dropped by each function-level set, functions
dropped by the whole-shell set it seeds, and the seconds both steps took (one run each).

Inputs: water clusters of the bench_check recipe, pyridine (ASE's C5H5N) and the bundled
water octamer, acetamide and third frame of the water-dimer scan.

Run:  python benchmarks/bench_function_search.py --waters 8 16 24 33
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import ase.build
import clusters

import auditor
from auditor.inputs.geometry import molecule_from_atoms
from auditor.pipeline.run import make_spec, prepare
from auditor.remedies.subset import select_for_target, shells_from_functions

ROOT = Path(__file__).resolve().parents[1]
CASES = (("aug-cc-pvtz", 1e-5), ("aug-cc-pvtz", 1e-4), ("d-aug-cc-pvdz", 1e-5))


def inputs(waters: list[int], folder: Path) -> list[tuple[str, auditor.Molecule]]:
    out = []
    for n in waters:
        cluster = clusters.water_cluster(n, 3.0, 11, clusters.qr_turn(clusters.water_shape()))
        path = folder / f"waters{n}.xyz"
        path.write_text(cluster.xyz(f"{n} waters"))
        out.append((f"{n} waters", auditor.read_geometry(str(path))[0]))
    out.append(("pyridine", molecule_from_atoms(ase.build.molecule("C5H5N"))))
    for name, frame in (("water_octamer", 0), ("acetamide", 0), ("water_dimer_scan", 2)):
        out.append((name, auditor.read_geometry(str(ROOT / "example_geometries" / f"{name}.xyz"))[frame]))
    return out


def one(prep, target: float, search: str) -> tuple[int, int | None, float]:
    S, shells = prep.S, prep.table.func_shell
    verify = "lanczos" if S.shape[0] > 1000 else "eigvalsh"
    start = time.perf_counter()
    functions = select_for_target(S, target, verify=verify, search=search)
    whole = shells_from_functions(S, functions, shells, verify=verify)
    return functions.n_dropped, None if whole is None else whole.n_dropped, time.perf_counter() - start


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--waters", type=int, nargs="*", default=[8, 16, 24, 33])
    args = ap.parse_args()
    print(f"{'input':18s} {'basis':14s} target      N   prefix+add-back: fn shells s   S-tI pivoting: fn shells s")
    with tempfile.TemporaryDirectory() as tmp:
        for name, mol in inputs(args.waters, Path(tmp)):
            for basis, target in CASES:
                prep = prepare(mol, make_spec(basis))
                old, new = one(prep, target, "shifted"), one(prep, target, "auto")
                print(
                    f"{name:18s} {basis:14s} {target:.0e} {prep.table.n_functions:6d}   "
                    f"{old[0]:5d} {old[1]!s:>6} {old[2]:5.2f}   {new[0]:5d} {new[1]!s:>6} {new[2]:5.2f}",
                    flush=True,
                )


if __name__ == "__main__":
    main()
