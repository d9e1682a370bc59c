"""The whole-shell rule: what `check` costs with it, and what running shell pivoting as well
would add and gain.

For each input and target: the audit alone; the audit with remedies (what `check` does, the
one whole-shell rule of auditor.remedies.plan); shell pivoting of the same S on top (what
taking the better of both whole-shell sets would add); and the functions each set keeps.
Best of --repeat, seconds.

Inputs: pyridine (ASE's C5H5N) and water clusters of bench_prune's recipe (waters on a
2.9 Angstrom grid, fixed seed) in aug-cc-pVTZ.

Run:  python benchmarks/bench_whole_shells.py --waters 8 16 24 --targets 1e-5 1e-4
"""

from __future__ import annotations

import argparse
from functools import partial

import clusters
from timing import best_of


def parse() -> argparse.Namespace:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--waters", type=int, nargs="*", default=[8, 16, 24])
    ap.add_argument("--targets", type=float, nargs="+", default=[1e-5, 1e-4])
    ap.add_argument("--basis", default="aug-cc-pvtz")
    ap.add_argument("--repeat", type=int, default=3)
    return ap.parse_args()


def inputs(waters):
    import ase.build
    import numpy as np

    from auditor.inputs.geometry import Molecule, molecule_from_atoms

    yield "pyridine", molecule_from_atoms(ase.build.molecule("C5H5N"))
    for n in waters:
        c = clusters.water_cluster(n, 2.9, 0, clusters.qr_turn(clusters.WATER_ROUNDED))
        yield f"{n} waters", Molecule(c.symbols, np.asarray(c.coords), (False,) * len(c.symbols))


def main() -> None:
    args = parse()
    from auditor.numerics.cholesky import verify_mode
    from auditor.pipeline.run import audit_prepared, make_spec, prepare
    from auditor.remedies.plan import RemedyOptions
    from auditor.remedies.subset import select_for_target

    print("input          n  target   audit  check (rule)  + shell pivoting   kept: rule  shell pivoting  chosen by")
    for name, mol in inputs(args.waters):
        prep = prepare(mol, make_spec(args.basis))
        t = prep.table
        for target in args.targets:
            audit, _ = best_of(args.repeat, partial(audit_prepared, prep, remedies=False))
            check, r = best_of(args.repeat, partial(audit_prepared, prep, remedies=RemedyOptions(target=target)))
            mode = verify_mode(t.n_functions)
            search = partial(select_for_target, prep.S, target, t.func_shell, t.func_atom - 1, verify=mode)
            piv, sel = best_of(args.repeat, search)
            sh = r.remedies.cholesky_shells
            print(
                f"{name:10s} {t.n_functions:5d}  {target:.0e}  {audit:6.2f}  {check:12.2f}  "
                f"{piv:8.2f} ({(check + piv) / check:.1f}x)   {sh.kept:10d}  {sel.kept.size:14d}  {sh.chosen_by}",
                flush=True,
            )


if __name__ == "__main__":
    main()
