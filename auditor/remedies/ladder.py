"""The ladder of named bases: the requested basis, its smaller published relatives
(`auditor.inputs.relatives`) and any the user lists, each evaluated at the same geometry
(every frame: the worst decides); the largest relative that meets the target is named.

A chemist would rather use a published, named and citable basis than a custom pruned one,
so the ranked remedies put "use basis X" first when X meets the target.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from ..base.elements import ELEMENTS
from ..base.errors import InputError
from ..inputs.basis import BasisSpec, load_shells, thaw
from ..inputs.geometry import Molecule
from ..inputs.relatives import Rung, published_check, relatives, rung_shells
from ..numerics.cholesky import smallest_eigenvalue, smallest_eigenvalue_cached
from ..numerics.eigen import compute_spectrum
from ..numerics.memory import check_memory
from ..numerics.overlap import normalized_overlap, pyscf_labels
from .prepared import PreparedGeometry
from .pruned_basis import shell_entries

if TYPE_CHECKING:
    from pyscf import gto


@dataclass(frozen=True)
class RungResult:
    """One basis of the ladder at this geometry: size, spectrum (worst frame), verdict."""

    basis: str
    kind: str  # "requested" | "calendar" | "named" | "user"
    how: str
    use_name: str  # the name to use it by: the published one when the rule-built shells match it
    published: str | None
    matches_published: bool | None
    published_check: list[dict] | None
    reference: str | None
    n_functions: int | None
    smallest: float | None
    largest: float | None
    condition_number: float | None
    counts_below: dict[str, int | None] | None
    smallest_by_frame: list[float] | None
    verdict: str | None  # "pass" | "caution" | "fail"; None when it could not be evaluated
    reaches_target: bool
    error: str | None


@dataclass(frozen=True)
class LadderResult:
    """The ladder: every rung, and the largest relative that meets the target."""

    requested: str
    target: float
    rungs: list[RungResult]
    chosen: str | None
    reason: str


def _verdict(smallest: float, caution: float, fail: float) -> str:
    return "fail" if smallest < fail else "caution" if smallest < caution else "pass"


def _rungs(spec: BasisSpec, bases: Sequence[str]) -> list[Rung]:
    requested = Rung(spec.default, "requested", spec.default, "the basis asked for")
    users = [Rung(b, "user", b, "listed with --bases") for b in bases if b.strip()]
    return [requested, *relatives(spec.default), *users]


def _element_shells(rung: Rung, spec: BasisSpec, element: str) -> list:
    if element in spec.per_element:  # per-element choices stay as they are on every rung
        return thaw(load_shells(spec.per_element[element], element, spec.source))
    return rung_shells(rung, element, spec.source)


def _mole(rung: Rung, mol: Molecule, spec: BasisSpec) -> gto.Mole:
    from pyscf import gto  # pyscf is slow to import: only when the ladder runs

    labels = pyscf_labels(mol)
    basis = {lab: _element_shells(rung, spec, lab.removeprefix("ghost-")) for lab in dict.fromkeys(labels)}
    nelec = sum(ELEMENTS.index(s) + 1 for s, g in zip(mol.symbols, mol.ghost) if not g)
    pm = gto.Mole()
    pm.atom = [(lab, tuple(map(float, xyz))) for lab, xyz in zip(labels, mol.coords)]
    pm.basis = basis
    pm.unit = "Angstrom"
    pm.cart = spec.cartesian
    pm.spin = nelec % 2
    pm.verbose = 0
    pm.build(dump_input=False, parse_arg=False)
    return pm


def _use_name(rung: Rung, check: list[dict] | None) -> tuple[str, bool | None]:
    if rung.published is None or check is None:
        return rung.name, None
    same = bool(check) and all(c["same_shells"] and c["functions"] == c["published_functions"] for c in check)
    return (rung.published if same else rung.name), same


def evaluate_rung(
    rung: Rung,
    molecules: Sequence[Molecule],
    spec: BasisSpec,
    target: float,
    levels: tuple[float, float],
    full: bool = True,
    within: tuple[Sequence[PreparedGeometry], dict] | None = None,
) -> RungResult:
    """Evaluate ``rung`` at every frame: the spectrum (``full``) or the smallest eigenvalue
    only; the worst frame's figures. An element the basis lacks is an error on the rung.
    ``within``: the prepared frames of the requested basis and a cache (as for
    `smallest_eigenvalue_cached`); a rung whose shells are all shells of that basis is then
    evaluated on their block of its S instead of a new overlap matrix."""
    elements = sorted(set(molecules[0].symbols) - set(spec.per_element))
    check = published_check(rung, elements, spec.source)
    use, same = _use_name(rung, check)
    base: dict[str, Any] = dict(
        basis=rung.name,
        kind=rung.kind,
        how=rung.how,
        use_name=use,
        published=rung.published,
        matches_published=same,
        published_check=check,
        reference=rung.reference,
    )
    try:
        figures = None if full or within is None else _figures_within(rung, molecules, spec, *within)
        if figures is None:
            figures = _figures(rung, molecules, spec, levels[0], full)
    except InputError as exc:
        return RungResult(
            **base,
            n_functions=None,
            smallest=None,
            largest=None,
            condition_number=None,
            counts_below=None,
            smallest_by_frame=None,
            verdict=None,
            reaches_target=False,
            error=exc.message,
        )
    low = figures["smallest"]
    return RungResult(
        **base,
        **figures,
        verdict=_verdict(low, *levels),
        reaches_target=bool(low >= target),
        error=None,
    )


def _figures(rung: Rung, molecules: Sequence[Molecule], spec: BasisSpec, caution: float, full: bool) -> dict:
    lows, largest, counts = [], 0.0, None
    n = 0
    for mol in molecules:
        pm = _mole(rung, mol, spec)
        n = int(pm.nao)
        check_memory(n, "auto")
        S = normalized_overlap(pm)
        if full:
            sp = compute_spectrum(S, vector_level=caution, method="auto")
            lows.append(sp.smallest)
            largest = max(largest, sp.largest)
            if counts is None or sp.smallest <= min(lows):
                counts = dict(sp.counts_below)
        else:
            lows.append(smallest_eigenvalue(S, np.arange(n)))
        del S
    low = min(lows)
    return {
        "n_functions": n,
        "smallest": low,
        "largest": largest if full else None,
        "condition_number": largest / low if full and low > 0 else None,
        "counts_below": counts,
        "smallest_by_frame": lows if len(lows) > 1 else None,
    }


def _figures_within(
    rung: Rung, molecules: Sequence[Molecule], spec: BasisSpec, preps: Sequence[PreparedGeometry], cache: dict
) -> dict | None:
    """The smallest eigenvalue of a rung whose basis is a subset of the prepared one (the
    same shells on every atom, a few left out): from the block of the prepared S, which is
    the rung's own unit-diagonal S up to the order of functions. None when it is not."""
    idx = subset_functions(_mole(rung, molecules[0], spec), preps[0], cache)
    if idx is None:
        return None
    lows = [smallest_eigenvalue_cached(p.S, idx, cache) for p in preps]
    return {
        "n_functions": int(idx.size),
        "smallest": min(lows),
        "largest": None,
        "condition_number": None,
        "counts_below": None,
        "smallest_by_frame": lows if len(lows) > 1 else None,
    }


def subset_functions(small: gto.Mole, prep: PreparedGeometry, cache: dict | None = None) -> np.ndarray | None:
    """The functions of ``prep`` (ascending) whose shells make up the basis of ``small``, when
    every shell of ``small`` is a shell of the same atom in ``prep`` (same l, exponents and
    coefficients, bit for bit); else None. ``cache`` keeps the prepared basis's shell index
    between rungs (it is the same for every rung)."""
    key = ("shell index", id(prep.mole))
    index = None if cache is None else cache.get(key)
    if index is None:
        index = {}
        for s, (atom, l, prims) in enumerate(shell_entries(prep.mole)):
            index.setdefault((atom, l, repr(prims)), []).append(s)
        if cache is not None:
            cache[key] = index
    free = {k: list(v) for k, v in index.items()}  # this rung takes shells out of its own copy
    chosen = []
    for atom, l, prims in shell_entries(small):
        spare = free.get((atom, l, repr(prims)))
        if not spare:
            return None
        chosen.append(spare.pop(0))
    return np.flatnonzero(np.isin(prep.table.func_shell, chosen))


def run_ladder(
    molecules: Sequence[Molecule],
    spec: BasisSpec,
    target: float,
    levels: tuple[float, float],
    bases: Sequence[str] = (),
) -> LadderResult:
    """Every rung (the requested basis, its relatives, ``bases``) with its full spectrum."""
    rungs = [evaluate_rung(r, molecules, spec, target, levels) for r in _rungs(spec, bases)]
    first = rungs[0]
    if first.reaches_target and first.smallest is not None:
        why = (
            f"{first.basis} itself reaches the target {target:.1e} (smallest eigenvalue {first.smallest:.2e}); "
            "the relatives are shown for comparison"
        )
        return LadderResult(spec.default, target, rungs, first.basis, why)
    return LadderResult(spec.default, target, rungs, *_choose(rungs[1:], target))


def _choose(candidates: Sequence[RungResult], target: float) -> tuple[str | None, str]:
    """The relative with the most functions that meets the target, and why."""
    ok = [r for r in candidates if r.reaches_target and r.n_functions is not None]
    if not ok:
        return None, f"no smaller relative reaches the target {target:.1e}"
    best = max(ok, key=lambda r: r.n_functions or 0)
    return best.use_name, (
        f"{best.use_name} is the largest relative ({best.n_functions} functions) whose smallest eigenvalue "
        f"{best.smallest:.2e} reaches the target {target:.1e}"
    )


def named_basis_remedy(
    preps: Sequence[PreparedGeometry], spec: BasisSpec, target: float, levels: tuple[float, float], cache: dict
) -> LadderResult | None:
    """For the remedies: the relatives evaluated largest first (smallest eigenvalue only)
    until one meets the target, on blocks of the frames' S where they can be (``cache``
    shared with the other remedies). None when the basis has no relatives the auditor knows."""
    molecules = [p.molecule for p in preps]
    rungs = relatives(spec.default)
    if not rungs or _is_file(spec.default):
        return None
    out: list[RungResult] = []
    for rung in rungs:
        res = evaluate_rung(rung, molecules, spec, target, levels, full=False, within=(preps, cache))
        out.append(res)
        if res.reaches_target:
            break
    return LadderResult(spec.default, target, out, *_choose(out, target))


def _is_file(name: str) -> bool:
    """Whether the basis is a file (files have no published relatives)."""
    return Path(name).expanduser().is_file()
