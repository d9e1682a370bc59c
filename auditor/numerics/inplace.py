"""Factorizations of S - shift*I in one triangle of S while the other keeps S (no second N x N array)."""

from __future__ import annotations

import ctypes
import mmap
from pathlib import Path
from typing import Any

import numpy as np
import scipy
from scipy.linalg import cython_blas, cython_lapack, lapack


def _fortran_view(S: np.ndarray) -> np.ndarray:
    """S itself as a Fortran-ordered array (its transpose when S is C-ordered)."""
    if S.dtype != np.float64 or S.ndim != 2 or S.shape[0] != S.shape[1]:
        raise ValueError("S must be a square float64 array")
    if not S.flags.writeable:
        raise ValueError("the large path works in place and needs a writeable S")
    if S.flags.f_contiguous:
        return S
    if S.flags.c_contiguous:
        return S.T  # same memory; S is symmetric
    raise ValueError("the large path needs a contiguous S (C or Fortran order)")


def _restore_lower(A: np.ndarray, diag: np.ndarray, shift: float = 0.0, block: int = 64) -> None:
    """Overwrite the lower triangle of A with the mirror of its strict upper triangle.

    The diagonal becomes ``diag - shift``; no N x N temporary is made.
    """
    n = A.shape[0]
    for j0 in range(0, n, block):
        j1 = min(n, j0 + block)
        A[j1:, j0:j1] = A[j0:j1, j1:].T
        d = A[j0:j1, j0:j1]
        il = np.tril_indices(j1 - j0, -1)
        d[il] = d.T[il]
    np.fill_diagonal(A, diag - shift)


def _fortran_routine(module, name: str, n_args: int):
    """A BLAS/LAPACK routine of scipy's own library, callable with raw pointers."""
    capsule = module.__pyx_capi__[name]
    api = ctypes.pythonapi
    api.PyCapsule_GetName.restype = ctypes.c_char_p
    api.PyCapsule_GetName.argtypes = [ctypes.py_object]
    api.PyCapsule_GetPointer.restype = ctypes.c_void_p
    api.PyCapsule_GetPointer.argtypes = [ctypes.py_object, ctypes.c_char_p]
    return _pointer_routine(api.PyCapsule_GetPointer(capsule, api.PyCapsule_GetName(capsule)), n_args)


def _pointer_routine(address: int, n_args: int):
    """The Fortran routine at ``address``, called with ``n_args`` raw pointers."""
    return ctypes.CFUNCTYPE(None, *([ctypes.c_void_p] * n_args))(address)


def _vendored_routine(name: str, n_args: int):
    """LAPACK routine ``name`` (for example "dtplqt", which scipy's cython_lapack does not
    export) from the OpenBLAS that scipy's wheels bundle (LP64, symbols prefixed "scipy_",
    already loaded for scipy.linalg); None elsewhere (another build of scipy, another
    LAPACK), where the callers fall back on the routines cython_lapack has."""
    root = Path(scipy.__file__).parent
    for path in sorted([*root.parent.glob("scipy.libs/*openblas*"), *root.glob(".dylibs/*openblas*")]):
        try:
            address = ctypes.cast(getattr(ctypes.CDLL(str(path)), f"scipy_{name}_"), ctypes.c_void_p).value
        except (AttributeError, OSError):
            continue
        if address:
            return _pointer_routine(address, n_args)
    return None


_ROUTINES: dict[str, Any] = {}


def _routine(name: str):
    if not _ROUTINES:
        _ROUTINES.update(
            dgemm=_fortran_routine(cython_blas, "dgemm", 13),
            dsyrk=_fortran_routine(cython_blas, "dsyrk", 10),
            dtrsm=_fortran_routine(cython_blas, "dtrsm", 11),
            dpotrf=_fortran_routine(cython_lapack, "dpotrf", 5),
            dtrsv=_fortran_routine(cython_blas, "dtrsv", 8),
            dtpqrt=_fortran_routine(cython_lapack, "dtpqrt", 12),
        )
        _ROUTINES["dtplqt"] = _vendored_routine("dtplqt", 12)
    return _ROUTINES[name]


def _cholesky(A: np.ndarray, block: int = 384) -> int:
    """In-place Cholesky of the lower triangle of Fortran-ordered A; returns the LAPACK
    convention info (0 = success, j = the leading minor of order j is not positive).

    Left-looking and blocked, calling BLAS-3 on sub-blocks of A in place: a failure at
    column j costs about the work up to column j (LAPACK's right-looking dpotrf does
    most of the trailing updates first), and it avoids the dpotrf of scipy's bundled
    OpenBLAS, which crashed (segmentation fault) at N = 35000 on this machine.
    """
    n = A.shape[0]
    if not A.flags.f_contiguous:
        raise ValueError("Cholesky needs a Fortran-ordered array")
    c = ctypes
    ld = c.c_int(n)
    base = A.ctypes.data
    one, minus = c.c_double(1.0), c.c_double(-1.0)
    L, R, N, T = c.c_char(b"L"), c.c_char(b"R"), c.c_char(b"N"), c.c_char(b"T")
    info = c.c_int(0)
    ref = c.byref

    def at(i: int, j: int):
        return c.c_void_p(base + 8 * (i + j * n))

    gemm, syrk, trsm, potrf = (_routine(x) for x in ("dgemm", "dsyrk", "dtrsm", "dpotrf"))
    for k0 in range(0, n, block):
        k1 = min(n, k0 + block)
        kb, below = c.c_int(k1 - k0), c.c_int(n - k1)
        if k0 > 0:
            done = c.c_int(k0)
            # A11 -= L10 L10^T ; A21 -= L20 L10^T (columns left of the panel)
            syrk(ref(L), ref(N), ref(kb), ref(done), ref(minus), at(k0, 0), ref(ld), ref(one), at(k0, k0), ref(ld))
            if n > k1:
                gemm(
                    ref(N),
                    ref(T),
                    ref(below),
                    ref(kb),
                    ref(done),
                    ref(minus),
                    at(k1, 0),
                    ref(ld),
                    at(k0, 0),
                    ref(ld),
                    ref(one),
                    at(k1, k0),
                    ref(ld),
                )
        potrf(ref(L), ref(kb), at(k0, k0), ref(ld), ref(info))
        if info.value != 0:
            if info.value < 0:
                raise RuntimeError(f"dpotrf argument error {info.value}")
            return k0 + info.value
        if n > k1:  # L21 = A21 L11^-T
            trsm(
                ref(R), ref(L), ref(T), ref(N), ref(below), ref(kb), ref(one), at(k0, k0), ref(ld), at(k1, k0), ref(ld)
            )
    return 0


def _ldl_negative_count(A: np.ndarray) -> int:
    """Number of negative eigenvalues of the lower triangle of A, via LDL^T inertia.

    Sylvester's law of inertia: A = L D L^T has as many negative eigenvalues as D.
    D has 1x1 blocks and 2x2 blocks (marked by negative pivots in IPIV).
    """
    n = A.shape[0]
    lwork = int(lapack.dsytrf_lwork(n, lower=1)[0])
    _, ipiv, info = lapack.dsytrf(A, lower=1, lwork=max(lwork, 1), overwrite_a=1)
    if info < 0:
        raise RuntimeError(f"dsytrf argument error {info}")
    d = np.diagonal(A)
    two = np.flatnonzero(ipiv < 0)
    one = np.ones(n, dtype=bool)
    one[two] = False
    negative = int(np.count_nonzero(d[one] < 0.0))
    # With UPLO='L' a 2x2 block at (k, k+1) has ipiv[k] == ipiv[k+1] < 0.
    for k in two[::2].tolist():
        a, b, c = A[k, k], A[k + 1, k], A[k + 1, k + 1]
        det = a * c - b * b
        if det < 0.0:
            negative += 1
        elif det > 0.0:
            negative += 2 if a + c < 0.0 else 0
        else:
            negative += 1 if a + c < 0.0 else 0
    return negative


class _Triangles:
    """Holds S in the strict upper triangle of A (plus its diagonal) while the lower
    triangle is used for factorizations."""

    def __init__(self, A: np.ndarray):
        self.A = A
        self.diag = np.diagonal(A).copy()
        self.dirty = False

    def load(self, shift: float) -> np.ndarray:
        """Put S - shift*I into the lower triangle and return A for factorization."""
        if self.dirty or shift != 0.0:
            _restore_lower(self.A, self.diag, shift)
        self.dirty = True
        return self.A

    def restore(self) -> None:
        if self.dirty:
            _restore_lower(self.A, self.diag, 0.0)
            self.dirty = False


def roomy_zeros(n: int) -> np.ndarray:
    """A zeroed n x n Fortran-ordered array whose untouched pages take no memory: anonymous
    mmap on small pages. numpy asks for transparent huge pages on large arrays, which fault
    in 2 MiB at the first write; a factor written in a corner of this array (with room to
    grow) would then hold all of it (measured at 5980 functions: copying a factor into it
    0.85-0.95 s against 0.10 s here)."""
    if n == 0:
        return np.zeros((0, 0), order="F")
    if hasattr(mmap, "MAP_PRIVATE"):
        # private: reading a page never written maps the shared zero page; the default
        # (shared, shmem-backed) memory allocated a page for every read of the zero triangle
        buf = mmap.mmap(-1, 8 * n * n, flags=mmap.MAP_PRIVATE | mmap.MAP_ANONYMOUS)
    else:
        buf = mmap.mmap(-1, 8 * n * n)
    if hasattr(mmap, "MADV_NOHUGEPAGE"):
        buf.madvise(mmap.MADV_NOHUGEPAGE)
    # one 2-D array on the buffer: views of it keep it as their base (`_grown` looks there)
    return np.ndarray((n, n), dtype=np.float64, buffer=buf, order="F")


def lower_copy(A: np.ndarray, order: int | None = None) -> np.ndarray:
    """The lower triangle of the column-major square A (a leading block of a larger array
    is fine) as the leading block of a new `roomy_zeros` array of ``order`` (A's by default;
    larger leaves room to grow in place): its upper triangle stays zero and takes no memory."""
    m = A.shape[0]
    out = roomy_zeros(m if order is None else order)[:m, :m]
    for j in range(m):  # columns are contiguous in Fortran order
        out[j:, j] = A[j:, j]
    return out


def gather_triangle(S: np.ndarray, idx: np.ndarray) -> np.ndarray:
    """The lower triangle of the symmetric S[np.ix_(idx, idx)], in a `roomy_zeros` array
    (column-major) whose upper triangle stays zero and takes no memory: Cholesky and dsyrk
    read and write one triangle only. Column j is read from S's row idx[j] (contiguous when
    S is C-ordered; S is symmetric)."""
    out = roomy_zeros(idx.size)
    for j in range(idx.size):
        out[j:, j] = S[idx[j], idx[j:]]
    return out


def gather_block(S: np.ndarray, rows: np.ndarray, cols: np.ndarray, chunk: int = 256) -> np.ndarray:
    """S[np.ix_(rows, cols)], C-ordered, gathered ``chunk`` rows at a time (whole rows, then
    their columns): measured at 5980 functions, the non-diffuse block in 0.10 s against
    np.ix_'s 0.37 s (memory already in use; new memory costs both the same)."""
    out = np.empty((rows.size, cols.size))
    for r0 in range(0, rows.size, chunk):
        np.take(S[rows[r0 : r0 + chunk]], cols, axis=1, out=out[r0 : r0 + chunk])
    return out


def gather_symmetric(S: np.ndarray, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
    """S[np.ix_(rows, cols)] of a symmetric S held in either order, C-ordered: `gather_block`
    on its row-major form (S itself, or S.T, the same matrix)."""
    return gather_block(S if S.flags.c_contiguous else S.T, rows, cols)


def column_major(F: np.ndarray) -> bool:
    """Whether F is a column-major float64 matrix or a leading block of one (unit row stride)."""
    return F.dtype == np.float64 and F.ndim == 2 and F.strides[0] == 8 and F.strides[1] >= 8 * max(1, F.shape[0])


def solve_lower_view(F: np.ndarray, B: np.ndarray, transpose: bool = False) -> None:
    """B = F^-1 B (or F^-T B) in place for the lower triangle of F (BLAS dtrsm).

    F may be a leading block of a larger column-major array (it is read in place, with
    that array's leading dimension: no copy); B must be Fortran-ordered with F's rows.
    """
    r = F.shape[0]
    if F.shape == (r, r) and B.shape[0] == r and (r == 0 or B.size == 0):
        return  # nothing to solve (an empty array's strides say nothing)
    if not (column_major(F) and F.shape[1] == r and B.flags.f_contiguous and B.shape[0] == r):
        raise ValueError("needs a column-major square F and a Fortran-ordered B with its rows")
    c = ctypes
    ref = c.byref
    L, op, N = c.c_char(b"L"), c.c_char(b"T" if transpose else b"N"), c.c_char(b"N")
    m, cols, lda, ldb = c.c_int(r), c.c_int(B.shape[1]), c.c_int(F.strides[1] // 8), c.c_int(r)
    pa, pb = c.c_void_p(F.ctypes.data), c.c_void_p(B.ctypes.data)
    if B.shape[1] == 1:  # one vector: the level-2 routine is the faster one
        _routine("dtrsv")(ref(L), ref(op), ref(N), ref(m), pa, ref(lda), pb, ref(c.c_int(1)))
        return
    one = c.c_double(1.0)
    _routine("dtrsm")(ref(L), ref(L), ref(op), ref(N), ref(m), ref(cols), ref(one), pa, ref(lda), pb, ref(ldb))


def mirror_triangle(A: np.ndarray, upward: bool, block: int = 256) -> None:
    """Move the lower triangle of the square block A onto its upper one, transposed
    (``upward``), or the upper onto the lower; the triangle moved from is zeroed. The
    diagonal stays. A may be a block of a larger array (done in place, block by block)."""
    n = A.shape[0]
    for j0 in range(0, n, block):
        j1 = min(n, j0 + block)
        if upward:
            A[j0:j1, j1:] = A[j1:, j0:j1].T
            A[j1:, j0:j1] = 0.0
        else:
            A[j1:, j0:j1] = A[j0:j1, j1:].T
            A[j0:j1, j1:] = 0.0
        d = A[j0:j1, j0:j1]
        lower = np.tril_indices(j1 - j0, -1)
        if upward:
            d.T[lower] = d[lower]
            d[lower] = 0.0
        else:
            d[lower] = d.T[lower]
            d.T[lower] = 0.0


def tplqt_in_place(A: np.ndarray, B: np.ndarray) -> bool:
    """LAPACK dtplqt with a rectangular B: the L of the LQ factorization of [A B] into the
    lower triangle of A, in place, so that L L^T = A A^T + B B^T (A square, lower and
    column-major, possibly a block of a larger array; B Fortran-ordered, with A's rows; B is
    overwritten). The upper triangle of A is not touched. False, with nothing done, when
    the routine is not available (`_vendored_routine`)."""
    m, d = A.shape[0], B.shape[1]
    if not (column_major(A) and A.shape[1] == m and B.flags.f_contiguous and B.shape[0] == m):
        raise ValueError("needs a column-major square A and a Fortran-ordered B with its rows")
    routine = _routine("dtplqt")
    if routine is None:
        return False
    if m > 0 and d > 0:
        _triangular_pentagonal(routine, "dtplqt", (m, d), A, B, m)
    return True


def _triangular_pentagonal(routine, name: str, mn: tuple[int, int], A: np.ndarray, B: np.ndarray, k: int) -> None:
    """Call LAPACK dtpqrt or dtplqt (the same arguments: M, N, L = 0 (B rectangular), the
    block size, A, LDA, B, LDB = B's rows, T, LDT, WORK, INFO) with blocks of at most 32
    over k, the order of A."""
    nb = min(32, k)
    T = np.empty((nb, k), order="F")
    work = np.empty(nb * k)
    c = ctypes
    ref = c.byref
    info = c.c_int(0)
    ints = [c.c_int(x) for x in (*mn, 0, nb)]
    lda, ldb, ldt = c.c_int(A.strides[1] // 8), c.c_int(B.shape[0]), c.c_int(nb)
    ptr = [c.c_void_p(x.ctypes.data) for x in (A, B, T, work)]
    routine(*(ref(x) for x in ints), ptr[0], ref(lda), ptr[1], ref(ldb), ptr[2], ref(ldt), ptr[3], ref(info))
    if info.value != 0:
        raise RuntimeError(f"{name} failed (info {info.value})")


def tpqrt_in_place(A: np.ndarray, B: np.ndarray) -> None:
    """LAPACK dtpqrt with a rectangular B: the R of the QR factorization of [A; B] into the
    upper triangle of A, in place (A square and column-major, possibly a block of a larger
    array; B Fortran-ordered, with A's columns; B is overwritten)."""
    t, d = A.shape[0], B.shape[0]
    if not (column_major(A) and A.shape[1] == t and B.flags.f_contiguous and B.shape[1] == t):
        raise ValueError("needs a column-major square A and a Fortran-ordered B with its columns")
    if t > 0 and d > 0:
        _triangular_pentagonal(_routine("dtpqrt"), "dtpqrt", (d, t), A, B, t)
