"""The exponent cutoff for periodic systems: drop every primitive Gaussian whose exponent lies
below alpha_c (per element), drop shells left empty, renormalize the contractions, and search
alpha_c so that S(k) at every k-point of the mesh meets the target, removing as little as possible.

Dropping a primitive changes a contracted function instead of removing it, so interlacing
does not order the trials: every candidate is verified on the whole mesh."""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..numerics.periodic import KMesh, k_spectra
from .subset import TARGET_SLACK

#: most cells built and audited by one cutoff search
MAX_TRIALS = 60


def _prims(shell: list) -> tuple[int, int, list]:
    """(l, where the primitives start, the primitive rows) of one shell in pyscf's format
    (``[l, [e, c...], ...]``, or ``[l, kappa, [e, c...], ...]``)."""
    start = 2 if len(shell) > 1 and isinstance(shell[1], int) else 1
    return int(shell[0]), start, [list(p) for p in shell[start:]]


def primitive_overlap(l: int, exps: np.ndarray) -> np.ndarray:
    """Overlap of normalized primitive Gaussians of one l: (2 sqrt(ab)/(a+b))^(l+3/2)."""
    a, b = exps[:, None], exps[None, :]
    return (2.0 * np.sqrt(a * b) / (a + b)) ** (l + 1.5)


def truncate_shell(shell: list, cutoff: float) -> list[list]:
    """The shells left of ``shell`` when primitives with exponent below ``cutoff`` go:
    contraction columns left without primitives go, the others are renormalized (unit norm
    with coefficients of normalized primitives); [] when nothing is left."""
    l, start, prims = _prims(shell)
    kept = [p for p in prims if p[0] >= cutoff]
    if not kept:
        return []
    if len(kept) == len(prims):
        return [shell]
    exps = np.array([p[0] for p in kept], dtype=float)
    coef = np.array([p[1:] for p in kept], dtype=float).reshape(len(kept), -1)
    cols = [c for c in range(coef.shape[1]) if np.any(coef[:, c] != 0.0)]
    if not cols:
        return []
    M = primitive_overlap(l, exps)
    coef = coef[:, cols]
    norms = np.sqrt(np.einsum("pc,pq,qc->c", coef, M, coef))
    coef = coef / norms[None, :]
    head = list(shell[:start])
    return [head + [[float(e), *map(float, row)] for e, row in zip(exps, coef)]]


def truncate(shells: list, cutoff: float) -> list:
    """Every shell of an element's basis with primitives below ``cutoff`` dropped."""
    if cutoff <= 0.0:
        return [s for s in shells]
    return [t for s in shells for t in truncate_shell(s, cutoff)]


def exponents(shells: list) -> list[float]:
    """The distinct primitive exponents of an element's shells, ascending."""
    return sorted({float(p[0]) for s in shells for p in _prims(s)[2]})


def n_functions(shells: list, cartesian: bool = False) -> int:
    """Basis functions of an element's shells (every contraction column counts)."""
    total = 0
    for s in shells:
        l, _, prims = _prims(s)
        ncol = len(prims[0]) - 1 if prims else 0
        total += ncol * ((l + 1) * (l + 2) // 2 if cartesian else 2 * l + 1)
    return total


def cutoff_between(exps: list[float], level: int) -> float:
    """The cutoff that drops the ``level`` smallest exponents: the geometric middle of the
    largest dropped and the smallest kept (0 for level 0)."""
    if level <= 0:
        return 0.0
    return math.sqrt(exps[level - 1] * exps[level]) if level < len(exps) else exps[-1] * 2.0


@dataclass(frozen=True)
class ElementCut:
    """What the cutoff does to one element's basis."""

    element: str
    cutoff: float
    largest_removed: float | None
    smallest_kept: float
    primitives_removed: int
    shells_removed: int
    functions_removed: int

    def as_dict(self) -> dict:
        return dict(self.__dict__)


@dataclass(frozen=True)
class CutoffResult:
    """The cutoffs found: per element, the basis they leave (label -> shells is built by the
    caller), its functions, and the smallest eigenvalue over the mesh with them."""

    elements: list[ElementCut]
    levels: dict[str, int]
    n_functions: int
    n_functions_full: int
    smallest_after: float
    worst_k: int
    reaches_target: bool
    trials: int
    notes: list[str] = field(default_factory=list)

    @property
    def removed(self) -> int:
        return self.n_functions_full - self.n_functions


@dataclass
class CutoffSearch:
    """One search over per-element cutoff levels. ``bases`` holds each element's full shells;
    ``audit(shells_by_element)`` returns (smallest eigenvalue at the k-points asked, ...)."""

    bases: dict[str, list]
    counts: dict[str, int]  # atoms of each element (functions count once per atom)
    cartesian: bool
    make_cell: Callable[[dict[str, list]], Any]
    mesh: KMesh
    target: float
    trials: int = 0
    watch: list[int] = field(default_factory=list)  # k-points that failed before: tried first
    seen: dict[tuple, tuple[float, int]] = field(default_factory=dict)

    def shells(self, levels: dict[str, int]) -> dict[str, list]:
        ex = {el: exponents(sh) for el, sh in self.bases.items()}
        return {el: truncate(sh, cutoff_between(ex[el], levels[el])) for el, sh in self.bases.items()}

    def smallest(self, levels: dict[str, int]) -> tuple[float, int]:
        """Smallest eigenvalue over the mesh with these levels (and its k-point); the k-points
        that failed before are tried first, so a failing candidate costs one or two S(k)."""
        key = tuple(sorted(levels.items()))
        if key in self.seen:
            return self.seen[key]
        shells = self.shells(levels)
        if any(not s for s in shells.values()):
            self.seen[key] = (-math.inf, 0)
            return self.seen[key]
        self.trials += 1
        cell = self.make_cell(shells)
        goal = self.target * (1.0 - TARGET_SLACK)
        if self.watch:
            quick = KMesh(
                self.mesh.shape, self.mesh.kpts[self.watch], self.mesh.scaled[self.watch], np.arange(len(self.watch))
            )
            low = k_spectra(cell, quick).smallest
            if low.min() < goal:
                self.seen[key] = (float(low.min()), self.watch[int(np.argmin(low))])
                return self.seen[key]
        spectra = k_spectra(cell, self.mesh)
        result = (float(spectra.smallest.min()), spectra.worst)
        if result[0] < goal and result[1] not in self.watch:
            self.watch = ([result[1]] + self.watch)[:3]
        self.seen[key] = result
        return result

    def passes(self, levels: dict[str, int]) -> bool:
        return self.smallest(levels)[0] >= self.target * (1.0 - TARGET_SLACK)


def _global_levels(search: CutoffSearch, alpha: float) -> dict[str, int]:
    """Per-element levels of one cutoff ``alpha`` for every element."""
    return {el: int(np.searchsorted(exponents(sh), alpha, side="left")) for el, sh in search.bases.items()}


def search_cutoffs(search: CutoffSearch) -> dict[str, int] | None:
    """The per-element levels: first the smallest single cutoff (one alpha_c for every
    element, candidates the exponents of the basis, ascending) with which every k-point
    meets the target; then, element by element, each cutoff lowered step by step while the
    target still holds. None when no cutoff below emptying an element reaches the target."""
    union = sorted({e for sh in search.bases.values() for e in exponents(sh)})
    found = None
    for alpha in [0.0] + [math.nextafter(e, math.inf) for e in union]:
        if search.trials >= MAX_TRIALS:
            break
        levels = _global_levels(search, alpha)
        if any(levels[el] >= len(exponents(sh)) for el, sh in search.bases.items()):
            break
        if search.passes(levels):
            found = levels
            break
    if found is None:
        return None
    for el in sorted(found, key=lambda e: (-search.counts.get(e, 0), e)):
        while found[el] > 0 and search.trials < MAX_TRIALS:
            lower = {**found, el: found[el] - 1}
            if not search.passes(lower):
                break
            found = lower
    return found


def describe_cut(search: CutoffSearch, levels: dict[str, int]) -> list[ElementCut]:
    """What each element's level removes."""
    out = []
    for el, sh in sorted(search.bases.items()):
        ex = exponents(sh)
        lv = levels[el]
        cut = truncate(sh, cutoff_between(ex, lv))
        prims = sum(len(_prims(s)[2]) for s in sh) - sum(len(_prims(s)[2]) for s in cut)
        funcs = n_functions(sh, search.cartesian) - n_functions(cut, search.cartesian)
        out.append(
            ElementCut(
                element=el,
                cutoff=cutoff_between(ex, lv),
                largest_removed=ex[lv - 1] if lv else None,
                smallest_kept=ex[lv],
                primitives_removed=prims,
                shells_removed=len(sh) - len(cut),
                functions_removed=funcs,
            )
        )
    return out


def run_cutoff_search(search: CutoffSearch) -> CutoffResult | None:
    """`search_cutoffs` and the result it leads to (None when no cutoff reaches the target)."""
    levels = search_cutoffs(search)
    if levels is None:
        return None
    smallest, worst = search.smallest(levels)
    cuts = describe_cut(search, levels)
    full = sum(n_functions(sh, search.cartesian) * search.counts[el] for el, sh in search.bases.items())
    removed = sum(c.functions_removed * search.counts[c.element] for c in cuts)
    notes = [f"search stopped after {MAX_TRIALS} trials"] if search.trials >= MAX_TRIALS else []
    return CutoffResult(
        elements=cuts,
        levels=levels,
        n_functions=full - removed,
        n_functions_full=full,
        smallest_after=smallest,
        worst_k=worst,
        reaches_target=smallest >= search.target * (1.0 - TARGET_SLACK),
        trials=search.trials,
        notes=notes,
    )
