"""Self-test: benchmarks/clusters.py builds exactly the clusters that the benchmarks' own
builders built before it replaced them (symbols and coordinates bit for bit, and for
bench_large the XYZ text character for character).

    python benchmarks/check_clusters.py [--ref COMMIT]

The old builders are read with ``git show REF:benchmarks/<name>.py`` (REF: the last
commit that has them) and run side by side with the new ones, for every count up to
64 waters and for the counts each benchmark uses by default or in the README.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
OLD_REF = "3e6b955feb12bc758aa06be30c0f77c7174e98ad"  # the last commit with a builder in each benchmark
SMALL = range(65)
AUDIT_COUNTS = [*SMALL, 300, 1000, 2000]  # defaults 4, 11, 22; the docstring's 300, 1000, 2000
PRUNE_COUNTS = [*SMALL, 100, 500]  # README: 6, 12, 24, 32
LARGE_COUNTS = [*SMALL, 130, 380]  # round(N / 92) for N = 3000, 6000, 12000 and the 35000 demo


def old_module(ref: str, name: str) -> dict:
    """The namespace of benchmarks/<name>.py as it was at ``ref`` (its main is not run)."""
    source = subprocess.run(
        ["git", "show", f"{ref}:benchmarks/{name}.py"], cwd=HERE, capture_output=True, text=True, check=True
    ).stdout
    namespace = {"__name__": f"old_{name}", "__file__": str(HERE / f"{name}.py")}
    exec(compile(source, f"{ref}:benchmarks/{name}.py", "exec"), namespace)
    return namespace


def same_bits(a, b) -> bool:
    a, b = np.asarray(a), np.asarray(b)
    return a.dtype == b.dtype and a.shape == b.shape and a.tobytes() == b.tobytes()


def check_audit(old: dict) -> None:
    import bench_audit

    for n in AUDIT_COUNTS:
        a, b = old["water_cluster"](n), bench_audit.water_cluster(n)
        assert a.get_chemical_symbols() == b.get_chemical_symbols(), n
        assert same_bits(a.positions, b.positions), n
        assert sorted(a.arrays) == sorted(b.arrays), n
        assert same_bits(a.cell[:], b.cell[:]) and same_bits(a.pbc, b.pbc) and a.info == b.info, n


def check_prune(old: dict) -> None:
    import bench_prune

    for n in PRUNE_COUNTS:
        a, b = old["water_cluster"](n), bench_prune.water_cluster(n)
        assert [s for s, _ in a] == [s for s, _ in b], n
        assert [type(x) for _, p in a for x in p] == [type(x) for _, p in b for x in p], n
        assert same_bits([p for _, p in a], [p for _, p in b]), n


def check_large(old: dict) -> None:
    import bench_large

    for n in LARGE_COUNTS:
        assert old["water_cluster_xyz"](n) == bench_large.water_cluster_xyz(n), n


def check_draws() -> None:
    """bench_prune drew its rotations with rng.normal(size=(3, 3)), clusters.py with
    rng.standard_normal((3, 3)): the same numbers (0 + 1 * x), checked for a million waters."""
    for seed in (0, 11):
        a = np.random.default_rng(seed).normal(size=(10**6, 3, 3))
        b = np.random.default_rng(seed).standard_normal((10**6, 3, 3))
        assert same_bits(a, b), seed


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--ref", default=OLD_REF, help="a commit whose benchmarks still have their own builders")
    args = ap.parse_args()
    sys.path.insert(0, str(HERE))
    check_draws()
    print("draws: normal == standard_normal for seeds 0 and 11 (10^6 waters each)")
    for name, check, counts in (
        ("bench_audit", check_audit, AUDIT_COUNTS),
        ("bench_prune", check_prune, PRUNE_COUNTS),
        ("bench_large", check_large, LARGE_COUNTS),
    ):
        check(old_module(args.ref, name))
        print(f"{name}: identical for {len(counts)} counts (0..64, {', '.join(map(str, counts[65:]))})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
