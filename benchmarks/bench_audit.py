"""Full audit through the Python API vs a bare pyscf overlap + numpy.linalg.eigh.

Run by hand:  python benchmarks/bench_audit.py [--sizes 300 1000 2000]
Both sides build the same pyscf Mole from the same water cluster (a demo scenario of
our own); the ratio is audit time / bare time, measured in the same process and run,
best of a few repeats. The audit is timed without remedies (the diagnosis) and with
them (remedies are worked out only when the smallest eigenvalue is below the target).
"""

from __future__ import annotations

import argparse

import clusters
import numpy as np
from timing import best_of


def water_cluster(n_waters: int, spacing: float = 3.0, seed: int = 3):
    """ase Atoms of ``n_waters`` waters on a cubic grid, each turned about z then x (x runs fastest)."""
    return clusters.water_cluster(n_waters, spacing, seed, clusters.ase_zx_turn, fastest="x").ase_atoms()


def bare(atoms, basis):
    from pyscf import gto

    mol = gto.M(
        atom=[(s, tuple(p)) for s, p in zip(atoms.get_chemical_symbols(), atoms.positions)], basis=basis, verbose=0
    )
    S = mol.intor("int1e_ovlp")
    w, v = np.linalg.eigh(S)
    return w[0]


def full_audit(atoms, basis, remedies=True):
    import auditor

    return auditor.audit(atoms, basis, remedies=remedies)


def main():
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--basis", default="aug-cc-pvtz")
    ap.add_argument("--sizes", type=int, nargs="*", default=[4, 11, 22])  # waters: 368, 1012, 2024 functions
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    import pyscf.gto  # noqa: F401

    import auditor  # noqa: F401  (imports are not part of either timing)

    print(
        f"{'waters':>6} {'functions':>9} {'smallest':>9} {'bare s':>8} {'audit s':>8} {'ratio':>6} "
        f"{'+remedies s':>11} {'ratio':>6}"
    )
    for n in args.sizes:
        atoms = water_cluster(n)
        first = full_audit(atoms, args.basis)  # warm caches (basis parsing) for a fair comparison
        smallest, nf = first.spectrum.smallest, first.input.n_functions
        tb = best_of(args.repeats, lambda atoms=atoms: bare(atoms, args.basis))[0]
        ta = best_of(args.repeats, lambda atoms=atoms: full_audit(atoms, args.basis, remedies=False))[0]
        tr = best_of(args.repeats, lambda atoms=atoms: full_audit(atoms, args.basis))[0]
        print(f"{n:>6} {nf:>9} {smallest:>9.2e} {tb:>8.3f} {ta:>8.3f} {ta / tb:>6.2f} {tr:>11.3f} {tr / tb:>6.2f}")


if __name__ == "__main__":
    main()
