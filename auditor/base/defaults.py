"""Defaults that the command line and the Python API share, here so that the command line
can name them without importing the numerics (it starts gate workers before numpy loads)."""

from __future__ import annotations

#: environment variables that size the thread pools of BLAS/OpenMP libraries (pinned in
#: worker and helper processes)
THREAD_VARS = (
    "OMP_NUM_THREADS",
    "OPENBLAS_NUM_THREADS",
    "MKL_NUM_THREADS",
    "VECLIB_MAXIMUM_THREADS",
    "NUMEXPR_NUM_THREADS",
)
#: the trial SCF runs only for bases up to this many functions
TRIAL_MAX_FUNCTIONS = 400
#: seconds per trial SCF run. Measured (benchmarks/bench_trial_scf.py, docs/benchmarks.md): near
#: the size limit a run took up to 357 s (9 waters in aug-cc-pVDZ, 369 functions, HF) and 309 s
#: (pyridine in aug-cc-pVTZ, 391 functions, HF) on a shared two-core machine; pyscf computes the
#: integrals anew every cycle above about 250 functions (direct SCF), so time grows fast with size.
TRIAL_TIME_LIMIT = 900.0
