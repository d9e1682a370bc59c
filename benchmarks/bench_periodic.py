"""Periodic benchmark: the periodic audit against a bare pyscf.pbc S(k) + numpy eigh loop.

The cell: two conventional diamond cells side by side (16 C, a = 3.567 Å; a geometry of our
own), cc-pVTZ, 480 basis functions, on a 4 x 4 x 4 Γ-centred Monkhorst–Pack mesh, lattice sums
at pyscf precision 1e-12 for both. Each measurement runs in a fresh subprocess so that its peak
resident memory (getrusage ru_maxrss) is its own; the figure given is the peak minus the RSS
after pyscf, numpy and the auditor are imported and the cell is built.

    python benchmarks/bench_periodic.py            # both, then the ratio
    python benchmarks/bench_periodic.py --repeat 2 # best of two runs each

"audit" times ``auditor.pipeline.periodic.prepare_cell`` plus ``audit_cell_prepared(...,
remedies=False)``: S(k) at one k of each pair (k, -k), every eigenvalue, the lattice-sum check
(a second pass at precision 1e-14), the worst k-point's eigenvectors, findings, causes and the
advice. "bare" times ``cell.pbc_intor('int1e_ovlp', kpts=...)`` at all 64 k-points and
``numpy.linalg.eigh`` on each (values and vectors, what a hand-written check would do).
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time

A = 3.567
BASIS = "cc-pvtz"
KMESH = (4, 4, 4)
PRECISION = 1e-12


def diamond_supercell():
    """Two conventional diamond cells along x: 16 carbon atoms (ångström)."""
    import numpy as np

    from auditor.inputs.cell import Crystal

    frac = np.array(
        [
            [0, 0, 0],
            [0, 0.5, 0.5],
            [0.5, 0, 0.5],
            [0.5, 0.5, 0],
            [0.25, 0.25, 0.25],
            [0.25, 0.75, 0.75],
            [0.75, 0.25, 0.75],
            [0.75, 0.75, 0.25],
        ]
    )
    coords = np.vstack([(frac + [i, 0, 0]) * A for i in range(2)])
    lattice = np.diag([2 * A, A, A])
    return Crystal(("C",) * 16, coords, lattice, (True, True, True), (False,) * 16, source="<diamond 2x1x1>")


def _rss() -> int:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


def child(kind: str) -> dict:
    import numpy as np

    from auditor.inputs.basis import BasisSpec
    from auditor.numerics import periodic as P
    from auditor.pipeline.periodic import audit_cell_prepared, prepare_cell

    crystal = diamond_supercell()
    spec = BasisSpec(BASIS)
    cell = P.build_cell(crystal, P.cell_basis(crystal, spec), PRECISION)
    base = _rss()
    t0 = time.perf_counter()
    if kind == "audit":
        prep = prepare_cell(crystal, spec, KMESH, PRECISION)
        result = audit_cell_prepared(prep, remedies=False)
        smallest = result.spectrum.smallest
        extra = {"used_precision": prep.convergence.used, "computed": int(prep.mesh.computed.size)}
    else:
        kpts = cell.make_kpts(list(KMESH))
        S = cell.pbc_intor("int1e_ovlp", hermi=1, kpts=kpts)
        smallest = min(float(np.linalg.eigh(s)[0][0]) for s in S)
        extra = {}
    seconds = time.perf_counter() - t0
    return {
        "kind": kind,
        "n": cell.nao,
        "seconds": seconds,
        "peak_mb": (_rss() - base) / 2**20,
        "smallest": smallest,
        **extra,
    }


def run(kind: str) -> dict:
    out = subprocess.run(
        [sys.executable, __file__, "--child", kind], capture_output=True, text=True, check=True, env=os.environ
    )
    return json.loads(out.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--child", choices=["audit", "bare"])
    ap.add_argument("--repeat", type=int, default=1)
    args = ap.parse_args()
    if args.child:
        print(json.dumps(child(args.child)))
        return
    print(f"load before: {os.getloadavg()[0]:.2f} (1-minute average), {os.cpu_count()} cores")
    best = {}
    for kind in ("audit", "bare"):
        runs = [run(kind) for _ in range(args.repeat)]
        best[kind] = min(runs, key=lambda r: r["seconds"])
        r = best[kind]
        print(
            f"{kind:5s}: N = {r['n']}, {r['seconds']:.2f} s, peak +{r['peak_mb']:.0f} MB, smallest {r['smallest']:.3e}"
            + (
                f", precision used {r['used_precision']:.0e}, S(k) at {r['computed']} of 64 k"
                if kind == "audit"
                else ""
            )
        )
    print(f"ratio audit / bare: {best['audit']['seconds'] / best['bare']['seconds']:.2f}")
    print(f"load after: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
