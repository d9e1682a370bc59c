"""The memory guard: what an audit of N functions needs, what the machine has, and which spectrum path fits."""

from __future__ import annotations

import os

from ..base.errors import ResourceError, UsageError

#: size of the row blocks in which scans over S (bounds, findings) read it: a small,
#: fixed extra beside S whatever its size
SCAN_BYTES = 8 << 20

#: method="auto" uses the large path from this many basis functions on. Measured on this
#: 2-core machine (water clusters in aug-cc-pVTZ, spectrum step only, 2 December 2026):
#:   N       1012  1564  2024  2576  3036
#:   full s  0.12  0.63  0.84  1.95  2.93
#:   large s 0.12  0.21  0.41  0.62  1.01
#: The large path is faster from ~1500 on, but below ~3000 functions the full path costs
#: seconds and gives the complete spectrum (every count, gap and growth for the advice).
CROSSOVER_N = 3000


#: Default cap on the number of eigenpairs the large path computes.
DEFAULT_MAX_VECTORS = 400


METHODS = ("full", "large", "auto")


_GIB = 1024.0**3


#: Headroom kept free for Python, pyscf and the rest of the audit.
_HEADROOM_BYTES = 512 * 1024**2


#: audits estimated below this size skip the memory check (it reads /proc/meminfo)
_SMALL_BYTES = 64 * 1024**2


#: Temporary share of S the findings step takes on top (they read S in SCAN_BYTES row
#: blocks; what they keep grows with the number of functions, not its square).
_FINDINGS_FRACTION = 0.05


#: Blocks in the Krylov basis built from each restart block.
KRYLOV_DEPTH = 4
#: blocks the first pass may grow to before it restarts (measured, water clusters in
#: aug-cc-pVTZ: from the spectrum's start block, 5980 functions converge at five blocks in
#: one pass, 505 column solves, where four blocks need a restart, 808; 11960 at four; from a
#: random block, the smallest eigenvalue of the diffuse options at 5980 in 54 and 45 column
#: solves instead of 72 each)
KRYLOV_MAX_DEPTH = 6


def _block_size(k: int, n: int) -> int:
    """Columns of the restart block for k wanted eigenpairs."""
    return min(n, k + max(8, k // 8))


def estimate_bytes(n_functions: int, method: str, max_vectors: int = DEFAULT_MAX_VECTORS, min_vectors: int = 3) -> int:
    """Bytes an audit of ``n_functions`` needs for S plus its spectrum step.

    "full": S, the copy LAPACK overwrites, the divide-and-conquer workspace of about
    2 N^2 and the returned eigenvectors (measured peak: 5.1 copies of S at N = 11960).
    "large": S, the Krylov basis (4 blocks of N x p), the image of its newest block,
    the returned vectors, the m x m Ritz problem (m = 4p) and small workspaces
    (measured peak: 1.20 copies of S at N = 11960, 293 eigenpairs).
    Both: plus the temporaries of the findings step (see _FINDINGS_FRACTION).
    """
    n = int(n_functions)
    s = 8 * n * n
    findings = int(_FINDINGS_FRACTION * s) + 8 * SCAN_BYTES
    if method == "full":
        return max(5 * s, s + findings) + 64 * n
    if method == "large":
        k = min(n, max(max_vectors, min_vectors))
        p = _block_size(k, n)
        basis = 8 * n * ((KRYLOV_MAX_DEPTH + 2) * p + k + 64) + 2 * 8 * (KRYLOV_MAX_DEPTH * p) ** 2
        return s + max(basis, findings)  # the findings' scan of S runs before the spectrum step
    if method == "auto":
        return estimate_bytes(n, resolve_method(n, "auto"), max_vectors, min_vectors)
    raise UsageError(f"unknown spectrum method {method!r}; choose one of {', '.join(METHODS)}")


def available_bytes() -> int:
    """Memory the kernel reports as available (MemAvailable), else free physical pages."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")


def _extra_bytes(n_functions: int, method: str, max_vectors: int, s_built: bool) -> int:
    """Bytes still to be allocated: all of the estimate, or all but S once S exists."""
    need = estimate_bytes(n_functions, method, max_vectors)
    return need - 8 * n_functions * n_functions if s_built else need


def resolve_method(n_functions: int, method: str, available: int | None = None, s_built: bool = False) -> str:
    """Turn "auto" into "full" or "large": large from CROSSOVER_N on or when full does not fit."""
    if method not in METHODS:
        raise UsageError(f"unknown spectrum method {method!r}; choose one of {', '.join(METHODS)}")
    if method != "auto":
        return method
    if n_functions >= CROSSOVER_N:
        return "large"
    if available is None and estimate_bytes(n_functions, "full", DEFAULT_MAX_VECTORS) < _SMALL_BYTES:
        return "full"
    if available is None:
        available = available_bytes()
    if _extra_bytes(n_functions, "full", DEFAULT_MAX_VECTORS, s_built) + _HEADROOM_BYTES > available:
        return "large"
    return "full"


def check_memory(
    n_functions: int,
    method: str,
    available: int | None = None,
    max_vectors: int = DEFAULT_MAX_VECTORS,
    s_built: bool = False,
) -> int:
    """Raise ResourceError unless the audit fits; return the estimated bytes still needed.

    Call before S is built so that an impossible size ends with a message instead of
    the process being killed; with ``s_built`` the memory S already holds is not counted
    again (``available`` is then what is left beside S).
    """
    if available is None and estimate_bytes(n_functions, method, max_vectors) < _SMALL_BYTES:
        # a few tens of MB at most: not worth reading /proc/meminfo for every small molecule
        return _extra_bytes(n_functions, resolve_method(n_functions, method, None, s_built), max_vectors, s_built)
    if available is None:
        available = available_bytes()
    resolved = resolve_method(n_functions, method, available, s_built)
    needed = _extra_bytes(n_functions, resolved, max_vectors, s_built)
    if needed + _HEADROOM_BYTES > available:
        hint = ""
        if resolved == "full":
            large = _extra_bytes(n_functions, "large", max_vectors, s_built)
            if large + _HEADROOM_BYTES <= available:
                hint = f"; the large spectrum path needs about {large / _GIB:.1f} GB and would fit"
        what = "more" if s_built else ""
        raise ResourceError(
            f"overlap audit of {n_functions} basis functions ({resolved} spectrum) needs about "
            f"{needed / _GIB:.1f} GB of {what + ' ' if what else ''}memory but only "
            f"{available / _GIB:.1f} GB is available{hint}"
        )
    return needed
