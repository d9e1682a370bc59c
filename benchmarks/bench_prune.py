"""Target-driven pruning against one full eigendecomposition of the same overlap matrix.

Water clusters on a cubic grid (O-O 2.9 angstrom, fixed seed for orientations) in
aug-cc-pVTZ (92 functions per water). For each size the script times, best of --repeat:

* eigh: numpy.linalg.eigh of S (what the spectrum step does once);
* target searches of auditor.remedies.subset.select_for_target, function and shell level, with
  the kept set checked by eigvalsh or by Lanczos on the Cholesky factor;
* the tolerance bisection (one pivoted factorization per trial), for comparison.

Run:  python benchmarks/bench_prune.py --waters 6 12 24 32 --threads 1
"""

from __future__ import annotations

import argparse
import os
import sys

import clusters  # loads numpy only when used: main sets the BLAS threads first
from timing import best_of


def parse() -> argparse.Namespace:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--waters", type=int, nargs="+", default=[6, 12, 24, 32])
    ap.add_argument("--basis", default="aug-cc-pvtz")
    ap.add_argument("--target", type=float, default=1e-5)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--threads", type=int, default=1, help="BLAS threads (set before numpy loads)")
    ap.add_argument(
        "--skip-bisection-above",
        type=int,
        default=2500,
        help="skip the slow tolerance bisection above this many functions",
    )
    return ap.parse_args()


def water_cluster(count: int, spacing: float = 2.9, seed: int = 0):
    """Waters on a cubic grid, each turned by a random rotation (fixed seed); pyscf's atom list."""
    return clusters.water_cluster(count, spacing, seed, clusters.qr_turn(clusters.WATER_ROUNDED)).atom_list()


def main() -> None:
    args = parse()
    for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ[var] = str(args.threads)
    import numpy as np
    from pyscf import gto

    sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))
    from auditor.remedies.subset import select_for_target

    print(
        f"# basis {args.basis}, target {args.target:g}, BLAS threads {args.threads}, "
        f"best of {args.repeat}; times in seconds, ratio = time / eigh"
    )
    cols = (
        "waters",
        "n",
        "eigh",
        "fn+eigvalsh",
        "fn+lanczos",
        "shell+eigvalsh",
        "shell+lanczos",
        "bisect(fn)",
        "dropped fn/shell",
        "factorizations",
    )
    print(" | ".join(cols))
    for count in args.waters:
        mol = gto.M(atom=water_cluster(count), basis=args.basis, unit="Angstrom", verbose=0)
        S = mol.intor("int1e_ovlp")
        d = 1.0 / np.sqrt(np.diagonal(S))
        S = S * d[:, None] * d[None, :]
        n = S.shape[0]
        shell = np.repeat(np.arange(mol.nbas), np.diff(mol.ao_loc_nr()))
        t_eigh, _ = best_of(args.repeat, lambda S=S: np.linalg.eigh(S))
        runs = {}
        for name, sof, verify in (
            ("fn+eigvalsh", None, "eigvalsh"),
            ("fn+lanczos", None, "lanczos"),
            ("shell+eigvalsh", shell, "eigvalsh"),
            ("shell+lanczos", shell, "lanczos"),
        ):
            runs[name] = best_of(
                args.repeat, lambda S=S, sof=sof, verify=verify: select_for_target(S, args.target, sof, verify=verify)
            )
        if n <= args.skip_bisection_above:
            runs["bisect(fn)"] = best_of(1, lambda S=S: select_for_target(S, args.target, search="tolerance"))
        cells = [str(count), str(n), f"{t_eigh:.2f}"]
        for name in cols[3:8]:
            if name in runs:
                cells.append(f"{runs[name][0]:.2f} ({runs[name][0] / t_eigh:.2f})")
            else:
                cells.append("skipped")
        fn, sh = runs["fn+eigvalsh"][1], runs["shell+eigvalsh"][1]
        cells.append(f"{fn.n_dropped}/{sh.n_dropped}")
        facts = f"shifted {fn.factorizations}"
        if "bisect(fn)" in runs:
            facts += f", bisection {runs['bisect(fn)'][1].factorizations}"
        cells.append(facts)
        print(" | ".join(cells), flush=True)


if __name__ == "__main__":
    main()
