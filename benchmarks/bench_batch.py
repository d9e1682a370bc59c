"""Items per second of `auditor gate` against a naive loop, whole processes timed.

The set: small organic molecules of the G2 collection that ships with ASE (C, H, N, O, F
only), each copied with a random rotation and small random displacements until there
are --n of them, one XYZ file each. Three processes are timed on that set:

  naive  one Python process, default environment: for each file build the pyscf Mole,
         compute the overlap matrix and its eigenvalues (no audit at all)
  cold   auditor gate --jobs J with an empty cache (the full audit)
  warm   the same command again (every result comes from the cache)

Each of the three is run --repeat times, interleaved (naive, cold, warm, naive, ...),
and the best time of each is compared: on a shared machine the best run is the one least
disturbed by others.

    python benchmarks/bench_batch.py --n 500 --jobs 2 --basis aug-cc-pvtz --repeat 3
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

NAIVE = r"""
import sys
from pathlib import Path
import numpy as np
from pyscf import gto

Z = {"H": 1, "C": 6, "N": 7, "O": 8, "F": 9}
smallest = []
for path in sorted(Path(sys.argv[1]).glob("*.xyz")):
    lines = path.read_text().splitlines()
    atoms = [(p[0], tuple(map(float, p[1:4]))) for p in (ln.split() for ln in lines[2:2 + int(lines[0])])]
    mol = gto.M(atom=atoms, basis=sys.argv[2], spin=sum(Z[a] for a, _ in atoms) % 2, verbose=0)
    smallest.append(np.linalg.eigvalsh(mol.intor("int1e_ovlp"))[0])
print(len(smallest), min(smallest))
"""


def build_set(folder: Path, n: int, seed: int = 7) -> list[str]:
    """Write n XYZ files (G2 molecules, randomly rotated and displaced by up to 0.02 Å)."""
    from ase.collections import g2
    from scipy.spatial.transform import Rotation

    names = [m for m in g2.names if len(g2[m]) > 1 and set(g2[m].get_chemical_symbols()) <= {"H", "C", "N", "O", "F"}]
    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    for k in range(n):
        atoms = g2[names[k % len(names)]]
        pos = atoms.get_positions()
        pos = (pos - pos.mean(axis=0)) @ Rotation.random(random_state=rng.integers(1 << 31)).as_matrix().T
        pos += rng.uniform(-0.02, 0.02, pos.shape)
        body = "\n".join(f"{s} {x:.6f} {y:.6f} {z:.6f}" for s, (x, y, z) in zip(atoms.get_chemical_symbols(), pos))
        (folder / f"m{k:04d}_{names[k % len(names)]}.xyz").write_text(
            f"{len(atoms)}\n{names[k % len(names)]}\n{body}\n"
        )
    return names


def timed(cmd: list[str], env=None) -> tuple[float, subprocess.CompletedProcess]:
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True, env=env)
    return time.perf_counter() - t0, proc


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=500)
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--basis", default="aug-cc-pvtz")
    ap.add_argument("--workdir", type=Path, default=None, help="keep the set and outputs here")
    ap.add_argument("--repeat", type=int, default=3, help="runs of each; the best is reported")
    ap.add_argument(
        "--single-thread-reference",
        action="store_true",
        help="also time the naive loop with one BLAS/OpenMP thread (for reference)",
    )
    args = ap.parse_args()

    work = args.workdir or Path(tempfile.mkdtemp(prefix="auditor-bench-"))
    geoms, out, cache = work / "set", work / "out", work / "cache"
    for p in (geoms, out, cache):
        shutil.rmtree(p, ignore_errors=True)
    names = build_set(geoms, args.n)
    print(
        f"{args.n} molecules ({len(names)} distinct G2 species), basis {args.basis}, "
        f"{os.cpu_count()} cores, load average {os.getloadavg()[0]:.2f}"
    )
    (work / "naive.py").write_text(NAIVE)

    gate = [
        sys.executable,
        "-m",
        "auditor.cli",
        "gate",
        str(geoms),
        "--basis",
        args.basis,
        "--out",
        str(out),
        "--cache-dir",
        str(cache),
        "--jobs",
        str(args.jobs),
        "--quiet",
    ]
    runs: dict[str, list[float]] = {"naive": [], "cold": [], "warm": []}
    for _ in range(max(1, args.repeat)):
        shutil.rmtree(out, ignore_errors=True)
        shutil.rmtree(cache, ignore_errors=True)
        t, p_naive = timed([sys.executable, str(work / "naive.py"), str(geoms), args.basis])
        runs["naive"].append(t)
        t, p_cold = timed(gate)
        runs["cold"].append(t)
        cold_stats = json.loads((out / "run.json").read_text())
        t, p_warm = timed(gate)
        runs["warm"].append(t)
        warm_stats = json.loads((out / "run.json").read_text())
        for name, p in (("naive", p_naive), ("cold", p_cold), ("warm", p_warm)):
            if p.returncode not in (0, 1):
                sys.exit(f"{name} run failed ({p.returncode}): {p.stderr.strip()[-500:]}")
    t_naive, t_cold, t_warm = (min(runs[k]) for k in ("naive", "cold", "warm"))
    print(
        f"cold run: {cold_stats['computed']} audited, outcomes {cold_stats['outcomes']}; "
        f"warm run: {warm_stats['computed']} audited, {warm_stats['cached']} from the cache"
    )
    every = {k: " ".join(f"{t:.2f}" for t in v) for k, v in runs.items()}
    print(
        f"naive loop      {t_naive:8.2f} s  {args.n / t_naive:8.1f} items/s   "
        f"(runs: {every['naive']}; {p_naive.stdout.strip()})"
    )
    print(f"gate cold -j{args.jobs}   {t_cold:8.2f} s  {args.n / t_cold:8.1f} items/s   (runs: {every['cold']})")
    print(f"gate warm -j{args.jobs}   {t_warm:8.2f} s  {args.n / t_warm:8.1f} items/s   (runs: {every['warm']})")
    if args.single_thread_reference:
        one = {**os.environ, **{k: "1" for k in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")}}
        t_one, _ = timed([sys.executable, str(work / "naive.py"), str(geoms), args.basis], env=one)
        print(f"naive, 1 thread {t_one:8.2f} s  {args.n / t_one:8.1f} items/s   (reference only)")
    pair = lambda a, b: " ".join(f"{x / y:.2f}" for x, y in zip(runs[a], runs[b]))  # noqa: E731
    print(
        f"cold vs naive: {t_naive / t_cold:.2f}x faster, best against best (target >= 2); "
        f"run by run {pair('naive', 'cold')}"
    )
    print(
        f"warm vs cold:  {t_cold / t_warm:.2f}x faster, best against best (target >= 5); "
        f"run by run {pair('cold', 'warm')}"
    )
    print(
        f"load average after: {os.getloadavg()[0]:.2f}; files kept in {work}"
        if args.workdir
        else f"load average after: {os.getloadavg()[0]:.2f}"
    )
    if not args.workdir:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
