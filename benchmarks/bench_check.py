"""The whole `auditor check` as a user runs it, against a bare pyscf + numpy.linalg.eigh script.

Each measurement is a fresh process, timed from start to exit (imports included) with its
peak resident memory (the child's ru_maxrss). Water clusters in aug-cc-pVTZ (the recipe of
bench_large.py: 92 functions per water), at about 3000, 6000 and 12000 functions by default:

    python benchmarks/bench_check.py                         # 33, 65, 130 waters
    python benchmarks/bench_check.py --waters 33 65 --repeat 2

Printed per size: the bare script's time, `auditor check` with default options (remedies,
reports in all formats), `auditor check --no-remedies`, the ratios bare / check, and the peak
memory of each in units of one copy of S (8 N^2 bytes; check's figure helper process is not
included, see the last line printed). With --stages the command's stage
timings (from the API's stage callback, in-process) are printed as well; this process sets
OPENBLAS_THREAD_TIMEOUT=4 for them, as the command line does; the bare script and the
commands run with the environment the benchmark was started with.

Each measured process starts after a pause (--pause, 15 s by default). On the virtual machine
these figures come from, memory that a process frees goes back to the host within seconds, and
writing new memory for the first time costs seconds per GB (printed on the first line), while
a process started at once would reuse the memory the previous one freed at no cost: without the
pause, `check`, run right after the bare script, would get its memory for free.
"""

from __future__ import annotations

import argparse
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

# the in-process stage timings run as the command line does (auditor/cli/__init__.py: set
# before numpy loads); every child process gets the environment this one was started with
CHILD_ENV = dict(os.environ)
os.environ.setdefault("OPENBLAS_THREAD_TIMEOUT", "4")

sys.path.insert(0, str(Path(__file__).resolve().parent))
import clusters  # noqa: E402

BASIS = "aug-cc-pvtz"
BARE = """
import sys, numpy as np
from pyscf import gto
mol = gto.M(atom=sys.argv[1], basis=sys.argv[2], unit="Angstrom", verbose=0)
S = mol.intor_symmetric("int1e_ovlp")
d = 1.0 / np.sqrt(np.diag(S))
S *= d[:, None]; S *= d[None, :]
w, U = np.linalg.eigh(S)
print(mol.nao, w[0], int(np.sum(w < 1e-5)))
"""


def write_cluster(folder: Path, waters: int) -> Path:
    """The bench_large recipe: water_shape() turned by a QR draw, spacing 3.0 Å, seed 11."""
    cluster = clusters.water_cluster(waters, 3.0, 11, clusters.qr_turn(clusters.water_shape()))
    path = folder / f"waters{waters}.xyz"
    path.write_text(cluster.xyz(f"{waters} waters"))
    return path


def timed(cmd: list[str]) -> tuple[float, int, str]:
    """(seconds, peak RSS bytes, stdout) of one fresh child process, run through a small
    wrapper so that ru_maxrss belongs to this child alone."""
    wrapper = (
        "import resource, subprocess, sys, time; t = time.perf_counter(); "
        "p = subprocess.run(sys.argv[1:], capture_output=True, text=True); "
        "dt = time.perf_counter() - t; "
        "print(dt, resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss * 1024, p.returncode); "
        "print(p.stdout[-2000:])"
    )
    run = [sys.executable, "-c", wrapper, *cmd]
    out = subprocess.run(run, capture_output=True, text=True, check=True, env=CHILD_ENV).stdout
    head, _, rest = out.partition("\n")
    seconds, rss, _code = head.split()
    return float(seconds), int(rss), rest


def stages(xyz: Path) -> list[tuple[str, float]]:
    """In-process stage timings of the default audit (stage callback of the API)."""
    import auditor

    marks: list[tuple[str, float]] = []
    mol = auditor.load_molecules(xyz)[0]

    def note(step: str) -> None:
        marks.append((step, time.perf_counter()))

    prep = auditor.prepare(mol, auditor.make_spec(BASIS), stage=note)
    auditor.audit_prepared(prep, stage=note)
    marks.append(("end", time.perf_counter()))
    return [(a[0], b[1] - a[1]) for a, b in zip(marks, marks[1:])]


def first_touch_seconds_per_gb(size: int = 1 << 29) -> float:
    """Seconds per GB to write new memory for the first time, here (a fresh array): the
    machine's state, which each measured process pays for all the memory it uses."""
    import numpy as np  # here: OPENBLAS_THREAD_TIMEOUT is set above before numpy loads

    t = time.perf_counter()
    np.ones(size // 8)
    return (time.perf_counter() - t) / (size / 1e9)


def measure(xyz: Path, work: Path, repeat: int, pause: float) -> dict[str, tuple[float, int]]:
    auditor_cmd = [shutil.which("auditor") or "auditor", "check", str(xyz), "-b", BASIS]
    runs = {
        "bare": [sys.executable, "-c", BARE, str(xyz), BASIS],
        "check": [*auditor_cmd, "-o", str(work / "full"), "-q"],
        "verdict": [*auditor_cmd, "-o", str(work / "verdict"), "-q", "--no-remedies"],
    }
    best: dict[str, tuple[float, int]] = {}
    for _ in range(repeat):  # interleaved, best of the repeats
        for name, cmd in runs.items():
            time.sleep(pause)  # memory the last process freed goes back to the host (see --pause)
            seconds, rss, _ = timed(cmd)
            if name not in best or seconds < best[name][0]:
                best[name] = (seconds, rss)
    return best


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--waters", type=int, nargs="+", default=[33, 65, 130])
    ap.add_argument("--repeat", type=int, default=1)
    ap.add_argument("--stages", action="store_true", help="also print the in-process stage timings")
    ap.add_argument(
        "--pause",
        type=float,
        default=15.0,
        help="seconds to wait before each measured process (default 15): on a virtual machine that "
        "returns freed memory to its host, a process started at once reuses the memory the last "
        "one freed, which costs nothing to touch, while new memory does; the wait gives every "
        "process new memory",
    )
    args = ap.parse_args()
    base_rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # before the probe's array
    time.sleep(args.pause)
    print(
        f"{time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}, load {os.getloadavg()[0]:.2f}, {os.cpu_count()} cores, "
        f"first touch of new memory {first_touch_seconds_per_gb():.2f} s/GB, pause {args.pause:g} s"
    )
    print(
        f"{'waters':>6} {'N':>6} {'bare s':>8} {'check s':>8} {'ratio':>6} {'verdict s':>9} {'ratio':>6} "
        f"{'peak bare':>9} {'peak check':>10} {'peak verdict':>12}  (peaks in copies of S)"
    )
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        for waters in args.waters:
            xyz = write_cluster(work, waters)
            n = 92 * waters
            best = measure(xyz, work, args.repeat, args.pause)
            s = 8.0 * n * n
            (tb, mb), (tc, mc), (tv, mv) = best["bare"], best["check"], best["verdict"]
            print(
                f"{waters:>6} {n:>6} {tb:>8.1f} {tc:>8.1f} {tb / tc:>6.2f} {tv:>9.1f} {tb / tv:>6.2f} "
                f"{mb / s:>9.2f} {mc / s:>10.2f} {mv / s:>12.2f}",
                flush=True,
            )
            if args.stages:
                for step, dt in stages(xyz):
                    print(f"{'':>14}{dt:8.2f} s  {step}")
    print(
        f"load after: {os.getloadavg()[0]:.2f}; peak RSS includes the interpreter and imports "
        f"(about {base_rss:.0f} MB in this process); "
        "the figure helper that check starts (auditor.report.figures, about 110 MB resident, 70 MB "
        "of it its own) is a separate process and not in check's peak"
    )


if __name__ == "__main__":
    main()
