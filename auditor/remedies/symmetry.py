"""Point-group symmetry of a geometry with its basis: which atoms are equivalent, and the
point group pyscf names.

The operations are found here, as permutations of the atoms: an orthogonal map (about the
centroid) that sends every atom to within ``SYMMETRY_TOLERANCE`` of an atom of the same kind.
Atoms are of one kind when they have the same element, the same basis and are both real or
both ghost atoms. The equivalent atoms are the orbits of those permutations; pruning them
together shell for shell keeps the symmetry of the full basis.

The group is named by pyscf (``pyscf.symm.geom.detect_symm``, which tells atoms apart by
their labels and basis sets) on the geometry averaged over the operations found, so that
pyscf's own tolerance (1e-5 bohr, partly applied to cosines) meets an exactly symmetric
geometry.
"""

from __future__ import annotations

from collections.abc import Hashable, Sequence
from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree

from ..base.elements import BOHR_IN_ANGSTROM
from ..numerics.overlap import FunctionTable

#: Largest distance (angstrom) between an atom moved by a symmetry operation and the atom it
#: lands on. Geometry files carry 4-6 decimals; optimized geometries are symmetric to about
#: 1e-4 angstrom when nobody symmetrized them.
SYMMETRY_TOLERANCE = 1e-3

#: Looser distance for the first match of a trial operation, before it is refined by a
#: least-squares fit over all atoms (the trial map is built from two atoms only).
_TRIAL_SLACK = 50.0


@dataclass(frozen=True)
class Symmetry:
    """The operations found (rotation matrices about the centroid, the atom permutation of
    each: atom i goes to ``perms[k][i]``) and the centroid."""

    rotations: tuple[np.ndarray, ...]
    perms: tuple[np.ndarray, ...]
    centroid: np.ndarray

    @property
    def order(self) -> int:
        return len(self.perms)


def _frame(u: np.ndarray, v: np.ndarray, hand: float) -> np.ndarray:
    """Orthonormal columns from u, v (Gram-Schmidt) and ``hand`` times their cross product."""
    e1 = u / np.linalg.norm(u)
    w = v - (v @ e1) * e1
    e2 = w / np.linalg.norm(w)
    return np.column_stack([e1, e2, hand * np.cross(e1, e2)])


def _match(Y: np.ndarray, tree: cKDTree, kinds: np.ndarray, tol: float) -> np.ndarray | None:
    """The permutation sending each row of Y to the nearest atom (the tree's points), when
    that atom is of the same kind and within ``tol``; None otherwise."""
    dist, perm = tree.query(Y, k=1, distance_upper_bound=tol)
    if not np.all(np.isfinite(dist)):
        return None
    perm = np.asarray(perm, dtype=np.intp)
    if np.any(kinds[perm] != kinds) or np.unique(perm).size != perm.size:
        return None
    return perm


def _refine(X: np.ndarray, perm: np.ndarray) -> np.ndarray:
    """The orthogonal R (det +-1) minimizing sum |R x_i - x_perm(i)|^2 (Kabsch, reflections allowed)."""
    u, _, vt = np.linalg.svd(X[perm].T @ X)
    return u @ vt


def _try(
    X: np.ndarray, tree: cKDTree, kinds: np.ndarray, R: np.ndarray, tol: float
) -> tuple[np.ndarray, np.ndarray] | None:
    perm = _match(X @ R.T, tree, kinds, _TRIAL_SLACK * tol)
    if perm is None:
        return None
    R = _refine(X, perm)
    perm = _match(X @ R.T, tree, kinds, tol)
    return None if perm is None else (R, perm)


def _references(X: np.ndarray, cands: list[np.ndarray], tol: float) -> tuple[int, int | None] | None:
    """Two atoms whose positions span a plane, each with as few candidate images as possible
    (None for a single point; second None for a linear molecule)."""
    r = np.linalg.norm(X, axis=1)
    off = [i for i in np.argsort([len(c) for c in cands], kind="stable") if r[i] > tol]
    if not off:
        return None
    a = int(off[0])
    for b in off[1:]:
        if np.linalg.norm(np.cross(X[a], X[b])) > tol * max(r[a], r[b]):
            return a, int(b)
    return a, None


def find_symmetry(coords: np.ndarray, kinds: Sequence[Hashable], tol: float = SYMMETRY_TOLERANCE) -> Symmetry:
    """Every orthogonal map (about the centroid) that sends each atom within ``tol`` angstrom
    of an atom of the same kind."""
    coords = np.asarray(coords, dtype=float)
    centroid = coords.mean(axis=0)
    X = coords - centroid
    kind_ids = np.unique(np.array([repr(k) for k in kinds]), return_inverse=True)[1]
    r = np.linalg.norm(X, axis=1)
    cands = [np.flatnonzero((kind_ids == kind_ids[i]) & (np.abs(r - r[i]) <= 2 * tol)) for i in range(len(X))]
    found: dict[bytes, tuple[np.ndarray, np.ndarray]] = {}
    refs = _references(X, cands, tol)
    tree = cKDTree(X)
    for R in _trial_maps(X, cands, refs):
        hit = _try(X, tree, kind_ids, R, tol)
        if hit is not None:
            found.setdefault(hit[1].tobytes(), hit)
    ident = np.arange(len(X))
    found.setdefault(ident.tobytes(), (np.eye(3), ident))
    ordered = sorted(found.values(), key=lambda h: (not np.array_equal(h[1], ident), h[1].tolist()))
    return Symmetry(tuple(h[0] for h in ordered), tuple(h[1] for h in ordered), centroid)


def _trial_maps(X: np.ndarray, cands: list[np.ndarray], refs: tuple[int, int | None] | None) -> list[np.ndarray]:
    """Orthogonal maps that send the reference atoms onto candidate images."""
    if refs is None:
        return [np.eye(3)]
    a, b = refs
    if b is None:  # linear: the identity and the inversion are the only atom permutations
        return [np.eye(3), -np.eye(3)]
    F = [_frame(X[a], X[b], h) for h in (1.0, -1.0)]
    out = []
    for a2 in cands[a]:
        for b2 in cands[b]:
            if a2 == b2 or abs(X[a2] @ X[b2] - X[a] @ X[b]) > 1e-2 * (1.0 + abs(X[a] @ X[b])):
                continue
            if np.linalg.norm(np.cross(X[a2], X[b2])) == 0.0:
                continue
            image = _frame(X[a2], X[b2], 1.0)
            out += [image @ F[0].T, image @ F[1].T]
    return out


def orbits(sym: Symmetry, n: int) -> list[list[int]]:
    """Sets of equivalent atoms (0-based, ascending), ordered by their first atom."""
    parent = list(range(n))

    def root(i: int) -> int:
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    for perm in sym.perms:
        for i, j in enumerate(perm):
            ri, rj = root(i), root(int(j))
            if ri != rj:
                parent[max(ri, rj)] = min(ri, rj)
    groups: dict[int, list[int]] = {}
    for i in range(n):
        groups.setdefault(root(i), []).append(i)
    return sorted(groups.values())


def common_symmetry(syms: Sequence[Symmetry]) -> Symmetry:
    """The operations (as permutations) every frame has; the first frame's rotations and centroid."""
    first = syms[0]
    shared = [k for k, p in enumerate(first.perms) if all(any(np.array_equal(p, q) for q in s.perms) for s in syms[1:])]
    return Symmetry(tuple(first.rotations[k] for k in shared), tuple(first.perms[k] for k in shared), first.centroid)


def symmetrized(coords: np.ndarray, sym: Symmetry) -> np.ndarray:
    """``coords`` averaged over the operations: x_i -> mean over g of R_g^T x_perm_g(i)."""
    X = np.asarray(coords, dtype=float) - sym.centroid
    acc = np.zeros_like(X)
    for R, perm in zip(sym.rotations, sym.perms):
        acc += X[perm] @ R
    return acc / sym.order + sym.centroid


def shell_units(table: FunctionTable, atom_sets: list[list[int]]) -> np.ndarray:
    """For each function the number of its unit: shell k of every atom of one equivalent set
    (the same element and basis, so the same shells in the same order), numbered 0, 1, ...
    in order of the first shell of each unit."""
    first_shell = {a: np.flatnonzero(table.shell_atom == a + 1) for group in atom_sets for a in group}
    unit_of_shell = np.full(table.n_shells, -1, dtype=np.int64)
    for group in atom_sets:
        lead = first_shell[group[0]]
        for a in group:
            shells = first_shell[a]
            if shells.size != lead.size:
                raise ValueError(f"atoms {group[0] + 1} and {a + 1} are equivalent but have different shells")
            unit_of_shell[shells] = lead  # provisional id: the lead atom's shell
    _, unit_of_shell = np.unique(unit_of_shell, return_inverse=True)
    return unit_of_shell[table.func_shell]


def point_group(labels: Sequence[str], coords: np.ndarray, basis: dict, sym: Symmetry) -> str:
    """The point group pyscf detects for atoms ``labels`` (pyscf labels, e.g. "H", "H5",
    "ghost-O") at ``coords`` (angstrom, averaged over ``sym``) with basis sets ``basis``
    (label -> anything comparable: pyscf tells atoms apart by label and basis)."""
    from pyscf.symm import geom  # pyscf is slow to import: only when remedies run

    xyz = symmetrized(coords, sym) / BOHR_IN_ANGSTROM
    atoms = [[lab, list(map(float, x))] for lab, x in zip(labels, xyz)]
    try:
        return str(geom.detect_symm(atoms, basis, verbose=0)[0])
    except Exception as exc:  # pyscf raises PointGroupSymmetryError, RuntimeError, ...
        return f"not detected ({type(exc).__name__})"
