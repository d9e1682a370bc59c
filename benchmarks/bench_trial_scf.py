"""How long the trial SCF takes at the sizes it accepts (up to --trial-max-functions, 400).

For water clusters in aug-cc-pVDZ (41 functions per water) and pyridine in aug-cc-pVTZ, time
each run of auditor.remedies.trial_scf.trial_scf (full basis with canonical orthogonalization
at the target, and the shell-pruned basis) for HF and B3LYP, with no time limit. The default
--trial-seconds is chosen from these figures (docs/numerics.md, "Trial SCF").

Run:  python benchmarks/bench_trial_scf.py --waters 2 5 7 9 --methods hf b3lyp
"""

from __future__ import annotations

import argparse
import time

import clusters


def parse() -> argparse.Namespace:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--waters", type=int, nargs="*", default=[2, 5, 7, 9])
    ap.add_argument("--methods", nargs="+", default=["hf", "b3lyp"])
    ap.add_argument("--pyridine", action="store_true", help="also pyridine in aug-cc-pVTZ (391 functions)")
    ap.add_argument("--target", type=float, default=1e-4)
    return ap.parse_args()


def inputs(args):
    import numpy as np

    from auditor.inputs.geometry import Molecule

    for n in args.waters:
        c = clusters.water_cluster(n, 2.9, 0, clusters.qr_turn(clusters.WATER_ROUNDED))
        yield f"{n} waters", Molecule(c.symbols, np.asarray(c.coords), (False,) * len(c.symbols)), "aug-cc-pvdz"
    if args.pyridine:
        import ase.build

        from auditor.inputs.geometry import molecule_from_atoms

        yield "pyridine", molecule_from_atoms(ase.build.molecule("C5H5N")), "aug-cc-pvtz"


def main() -> None:
    args = parse()
    from auditor.pipeline.run import audit_prepared, make_spec, prepare
    from auditor.remedies.plan import RemedyOptions, make_plan
    from auditor.remedies.trial_scf import trial_scf

    print("input         n  method   run                                      cycles  converged  seconds")
    for name, mol, basis in inputs(args):
        prep = prepare(mol, make_spec(basis))
        r = audit_prepared(prep, remedies=False)
        from auditor.numerics.eigen import compute_spectrum

        spec = compute_spectrum(prep.S, vector_level=1e-5, method="full")
        plan = make_plan(prep, r.recommendation, spec, RemedyOptions(target=args.target, force=True), 1e-5)
        for method in args.methods:
            t = time.perf_counter()
            out = trial_scf(prep, method, args.target, plan.pruned, max_functions=10**6, time_limit=1e9)
            total = time.perf_counter() - t
            for run in out["runs"]:
                print(
                    f"{name:10s} {prep.table.n_functions:4d}  {method:7s}  {run['basis']:40s} {run['cycles']!s:>6}  "
                    f"{run['converged']!s:>9}  {run['seconds']:7.1f}",
                    flush=True,
                )
            print(f"{'':10s} {'':4s}  {method:7s}  {'both runs':40s} {'':6s}  {'':9s}  {total:7.1f}", flush=True)


if __name__ == "__main__":
    main()
