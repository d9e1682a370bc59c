"""The periodic overlap: the pyscf.pbc Cell, the Monkhorst–Pack mesh, the lattice-summed S(k)
at every k-point and its spectrum, the lattice-sum convergence check and the memory guard.

S(k)_{mu nu} = sum_T exp(i k.T) <phi_mu | phi_nu(. - T)> from pyscf's normalized atomic
orbitals (the home-cell diagonal <phi_mu|phi_mu> is 1). S(k) is not rescaled per k: its
diagonal is the norm of a Bloch sum, which can nearly vanish for a diffuse function at some
k, and that is what the audit must see (docs/periodic.md).
"""

from __future__ import annotations

import contextlib
import io
from collections.abc import Callable
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

import numpy as np

from ..base.elements import ELEMENTS
from ..base.errors import InputError, ResourceError
from ..inputs.basis import BasisSpec, load_shells, thaw
from ..inputs.cell import Crystal
from .memory import available_bytes
from .spectrum import COUNT_LEVELS, cause_count, degeneracy_tolerance

if TYPE_CHECKING:
    from pyscf.pbc import gto as pbcgto

#: pyscf's cell.precision the audit starts from (pyscf's own default is 1e-8; overlap lattice
#: sums are cheap, and at 1e-8 truncated sums of diffuse sets give eigenvalues of -1e-9)
DEFAULT_PRECISION = 1e-12

#: each convergence check recomputes S(k) at the precision times this
TIGHTEN = 1e-2

#: at most this many tighter recomputations
MAX_CHECKS = 3

#: a unit-normalized AO has home-cell diagonal 1 to this (spherical shells; Cartesian d, f
#: components are scaled to it, as on the molecular path)
DIAGONAL_SLACK = 1e-10

_GIB = 1024.0**3
_HEADROOM = 512 * 1024**2

#: most k-points whose S(k) are held at once
MAX_BATCH = 16


def atom_labels(crystal: Crystal) -> list[str]:
    """pyscf atom labels: ghost atoms carry the 'ghost-' prefix."""
    return [("ghost-" + s) if g else s for s, g in zip(crystal.symbols, crystal.ghost)]


def cell_basis(crystal: Crystal, spec: BasisSpec) -> dict[str, list]:
    """pyscf's basis dictionary (label -> shells) of the crystal in ``spec``."""
    return {lab: thaw(load_shells(spec.for_element(el), el)) for lab, el in zip(atom_labels(crystal), crystal.symbols)}


def build_cell(crystal: Crystal, basis: dict[str, list], precision: float, cartesian: bool = False) -> pbcgto.Cell:
    """The pyscf.pbc Cell of ``crystal`` (ångström) with ``basis`` (label -> shells) at
    ``precision``. No pseudopotential: it does not enter the overlap."""
    from pyscf.pbc import gto as pbcgto  # pyscf is slow to import: only when a cell is built

    from ..inputs.basis import eval_off

    eval_off()
    labels = atom_labels(crystal)
    nelec = sum(ELEMENTS.index(s) + 1 for s, g in zip(crystal.symbols, crystal.ghost) if not g)
    cell = pbcgto.Cell()
    cell.atom = [(lab, tuple(float(x) for x in xyz)) for lab, xyz in zip(labels, crystal.coords)]
    cell.a = np.asarray(crystal.lattice, dtype=float)
    cell.unit = "Angstrom"
    cell.basis = basis
    cell.cart = cartesian
    cell.dimension = crystal.dimension
    cell.precision = float(precision)
    cell.spin = nelec % 2
    cell.verbose = 0
    try:
        # pyscf writes warnings on a 2D cell's vacuum to stderr whatever its verbosity: the audit
        # sums the same images (its image_overlap finding says when they matter)
        with contextlib.redirect_stderr(io.StringIO()):
            cell.build(dump_input=False, parse_arg=False)
    except Exception as exc:  # pyscf raises RuntimeError, ValueError, KeyError, ...
        text = str(exc).strip().splitlines()
        raise InputError(
            f"{crystal.source}: pyscf cannot build the cell ({text[0] if text else type(exc).__name__})"
        ) from None
    return cell


def home_scale(cell: pbcgto.Cell) -> tuple[np.ndarray, float]:
    """(1/sqrt of the home-cell diagonal <phi_mu|phi_mu>, the largest deviation of that
    diagonal from 1). One scaling for every k, fixed by the basis, not by k."""
    d = np.diagonal(cell.intor("int1e_ovlp")).copy()  # Mole-level integral: no lattice sum
    return 1.0 / np.sqrt(d), float(np.max(np.abs(d - 1.0)))


@dataclass(frozen=True)
class KMesh:
    """A Γ-centred Monkhorst–Pack mesh: ``kpts`` Cartesian (1/bohr), ``scaled`` in units of
    the reciprocal vectors, ``partner[i]`` the index of -k_i (mod a reciprocal vector)."""

    shape: tuple[int, int, int]
    kpts: np.ndarray
    scaled: np.ndarray
    partner: np.ndarray

    @property
    def n(self) -> int:
        return int(self.kpts.shape[0])

    @property
    def computed(self) -> np.ndarray:
        """The k-points whose S(k) is built: one of each pair k, -k (S(-k) = S(k)*)."""
        return np.flatnonzero(self.partner >= np.arange(self.n))


def monkhorst_pack(cell: pbcgto.Cell, shape: tuple[int, int, int]) -> KMesh:
    """pyscf's Γ-centred Monkhorst–Pack mesh of ``shape`` points, with time-reversal partners."""
    kpts = np.asarray(cell.make_kpts(list(shape)), dtype=float).reshape(-1, 3)
    scaled = np.asarray(cell.get_scaled_kpts(kpts), dtype=float).reshape(-1, 3)
    n = np.asarray(shape)
    index = {tuple(np.rint(s * n).astype(int) % n): i for i, s in enumerate(scaled)}
    partner = np.array([index.get(tuple(np.rint(-s * n).astype(int) % n), i) for i, s in enumerate(scaled)])
    return KMesh(tuple(int(x) for x in shape), kpts, scaled, partner)  # type: ignore[arg-type]


def kpoint_overlaps(cell: pbcgto.Cell, kpts: np.ndarray, scale: np.ndarray) -> np.ndarray:
    """S(k) for each row of ``kpts`` (complex, shape (nk, N, N)), home-cell diagonal scaled to 1."""
    S = np.asarray(cell.pbc_intor("int1e_ovlp", hermi=1, kpts=kpts), dtype=complex)
    S = S.reshape(len(kpts), cell.nao, cell.nao)
    S *= scale[None, :, None]
    S *= scale[None, None, :]
    return S


@dataclass(frozen=True)
class KSpectra:
    """Every eigenvalue of S(k) at every k of the mesh (``values[k]`` ascending) and the
    Gershgorin lower bound min_i (S_ii - sum_j!=i |S_ij|) per k; ``bloch_norms`` the
    diagonal of S(k) (the norm of each function's Bloch sum) per k; ``precision`` and ``rcut``
    (bohr) of the lattice sums; ``diagonal_error`` the home-cell diagonal's largest
    deviation from 1 before scaling."""

    mesh: KMesh
    values: np.ndarray
    gershgorin: np.ndarray
    bloch_norms: np.ndarray  # (nk, N): the diagonal of S(k), the norm of each Bloch sum
    precision: float
    rcut: float
    diagonal_error: float
    worst_matrix: np.ndarray | None = None  # S(k) at the worst k-point, kept for its eigenvectors

    @property
    def smallest(self) -> np.ndarray:
        return self.values[:, 0]

    @property
    def largest(self) -> np.ndarray:
        return self.values[:, -1]

    @property
    def worst(self) -> int:
        """The k-point with the smallest eigenvalue (the first of ties)."""
        return int(np.argmin(self.values[:, 0]))

    @property
    def tolerance(self) -> float:
        """Rounding level of these eigenvalues (`degeneracy_tolerance` at the largest one)."""
        return degeneracy_tolerance(self.values.shape[1], float(self.values[:, -1].max()))

    def counts(self, level: float) -> np.ndarray:
        """Eigenvalues below ``level`` at each k."""
        return np.sum(self.values < level, axis=1)


def _gershgorin(S: np.ndarray) -> np.ndarray:
    a = np.abs(S)
    diag = np.real(np.diagonal(S, axis1=1, axis2=2))
    return np.min(diag - (a.sum(axis=2) - np.diagonal(a, axis1=1, axis2=2)), axis=1)


def k_spectra(cell: pbcgto.Cell, mesh: KMesh, batch: int | None = None) -> KSpectra:
    """The spectrum of S(k) at every k of ``mesh``; S(k) is built for one k of each pair
    (k, -k) only, the partner's eigenvalues are the same (S(-k) = S(k)*, real AOs)."""
    n = cell.nao
    todo = mesh.computed
    batch = batch or plan_batch(n, mesh.n, todo.size)
    scale, diag_err = home_scale(cell)
    values = np.empty((mesh.n, n))
    norms = np.empty((mesh.n, n))
    gersh = np.empty(mesh.n)
    worst: tuple[float, np.ndarray | None] = (np.inf, None)
    for start in range(0, todo.size, batch):
        idx = todo[start : start + batch]
        S = kpoint_overlaps(cell, mesh.kpts[idx], scale)
        gersh[idx] = _gershgorin(S)
        norms[idx] = np.real(np.diagonal(S, axis1=1, axis2=2))
        values[idx] = np.linalg.eigvalsh(S)
        low = int(np.argmin(values[idx, 0]))
        if values[idx[low], 0] < worst[0]:
            worst = (float(values[idx[low], 0]), S[low].copy())
        del S
    values[mesh.partner[todo]] = values[todo]
    gersh[mesh.partner[todo]] = gersh[todo]
    norms[mesh.partner[todo]] = norms[todo]
    spectra = KSpectra(mesh, values, gersh, norms, float(cell.precision), float(cell.rcut), diag_err, worst[1])
    if spectra.worst not in todo:  # the worst is a mirrored k-point: its S(k) is the conjugate
        return replace(spectra, worst_matrix=None if worst[1] is None else worst[1].conj())
    return spectra


def worst_vectors(spectra: KSpectra, cell: pbcgto.Cell, level: float) -> tuple[np.ndarray, np.ndarray, float]:
    """(eigenvalues, the cause eigenvectors (complex columns), rounding tolerance) of S(k)
    at the worst k-point: those below ``level``, else the smallest group, whole degenerate groups."""
    S = spectra.worst_matrix
    if S is None:
        S = overlap_at(cell, spectra.mesh, spectra.worst)
    values, vectors = np.linalg.eigh(S)
    tol = degeneracy_tolerance(values.size, float(values[-1]))
    m = cause_count(values, level, tol)
    return values, np.ascontiguousarray(vectors[:, :m]), tol


def smallest_kept(cell: pbcgto.Cell, mesh: KMesh, kept: np.ndarray) -> tuple[float, int]:
    """(smallest eigenvalue of S(k)[kept, kept] over the mesh, its k-point), S(k) built in
    batches (one pyscf call per batch: the lattice set-up is most of the cost of one k)."""
    scale, _ = home_scale(cell)
    todo = mesh.computed
    batch = plan_batch(cell.nao, mesh.n, todo.size)
    low = np.empty(mesh.n)
    for start in range(0, todo.size, batch):
        idx = todo[start : start + batch]
        S = kpoint_overlaps(cell, mesh.kpts[idx], scale)
        low[idx] = np.linalg.eigvalsh(S[:, kept[:, None], kept[None, :]])[:, 0]
    low[mesh.partner[todo]] = low[todo]
    return float(low.min()), int(np.argmin(low))


def overlap_at(cell: pbcgto.Cell, mesh: KMesh, k: int) -> np.ndarray:
    """S(k) at one k-point of ``mesh`` (home-cell diagonal 1)."""
    return kpoint_overlaps(cell, mesh.kpts[k : k + 1], home_scale(cell)[0])[0]


def estimate_bytes(n: int, n_kpts: int, batch: int) -> int:
    """Bytes the periodic spectrum needs: per k-point of a batch, pyscf's S(k) and the copy
    the eigensolver overwrites plus its workspace (3 complex N x N); one S(k) and its
    eigenvectors at the worst k (4); every eigenvalue at every k."""
    return 16 * n * n * (3 * batch + 4) + 8 * n * n_kpts * 2


def plan_batch(n: int, n_kpts: int, n_computed: int, available: int | None = None) -> int:
    """How many k-points to hold at once (at most MAX_BATCH); ResourceError when not even one fits."""
    need_one = estimate_bytes(n, n_kpts, 1)
    if available is None and need_one * MAX_BATCH < 64 * 1024**2:
        return min(MAX_BATCH, max(1, n_computed))
    free = (available_bytes() if available is None else available) - _HEADROOM
    if need_one > free:
        raise ResourceError(
            f"periodic overlap audit of {n} basis functions at {n_kpts} k-points needs about "
            f"{need_one / _GIB:.1f} GB of memory but only {max(free, 0) / _GIB:.1f} GB is available"
        )
    extra = 16 * n * n * 3
    return int(max(1, min(MAX_BATCH, n_computed, 1 + (free - need_one) // extra)))


def check_memory(n: int, n_kpts: int, available: int | None = None) -> int:
    """The k-point batch that fits (ResourceError before anything is built when none does)."""
    return plan_batch(n, n_kpts, n_kpts, available)


@dataclass(frozen=True)
class Convergence:
    """The lattice-sum check: the spectrum at ``used`` agreed with the one at ``checked_at``
    (``converged``) to ``tolerance``; ``steps`` every precision tried, with the smallest
    eigenvalue over the mesh and the largest shift of any eigenvalue from the previous one."""

    requested: float
    used: float
    checked_at: float | None
    converged: bool
    tolerance: float
    steps: tuple[dict, ...]


def converged_spectra(
    make_cell: Callable[[float], Any], shape: tuple[int, int, int], precision: float, max_checks: int = MAX_CHECKS
) -> tuple[KSpectra, Convergence, Any, KMesh]:
    """S(k) spectra at ``precision``, checked against ``precision * TIGHTEN``: when any
    eigenvalue at any k moves by more than rounding (`KSpectra.tolerance`), the tighter
    spectrum replaces it and is checked in turn, at most ``max_checks`` times. Returns
    (the spectra kept, the check, their cell, the mesh)."""
    cell = make_cell(precision)
    mesh = monkhorst_pack(cell, shape)
    current = k_spectra(cell, mesh)
    steps = [
        {"precision": precision, "rcut_bohr": current.rcut, "smallest": float(current.smallest.min()), "shift": None}
    ]
    for _ in range(max_checks):
        p = current.precision * TIGHTEN
        tighter_cell = make_cell(p)
        tighter = k_spectra(tighter_cell, mesh)
        shift = float(np.max(np.abs(tighter.values - current.values)))
        tol = max(current.tolerance, tighter.tolerance)
        steps.append(
            {"precision": p, "rcut_bohr": tighter.rcut, "smallest": float(tighter.smallest.min()), "shift": shift}
        )
        if shift <= tol:
            return current, Convergence(precision, current.precision, p, True, tol, tuple(steps)), cell, mesh
        current, cell = tighter, tighter_cell
    tol = current.tolerance
    return current, Convergence(precision, current.precision, None, False, tol, tuple(steps)), cell, mesh


def count_levels(spectra: KSpectra) -> dict[str, np.ndarray]:
    """Eigenvalues below each decade level (1e-3 ... 1e-10), per k."""
    from .spectrum import level_key

    return {level_key(t): spectra.counts(t) for t in COUNT_LEVELS}
