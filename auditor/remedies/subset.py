"""The target search: the largest set of functions (or whole shells) whose overlap keeps its
smallest eigenvalue at or above a target, found along a pivoted-Cholesky order.

Everything here is a pure function on numpy arrays. ``S`` is the overlap matrix scaled to
unit diagonal. Pivoted Cholesky follows Lehtola, J. Chem. Phys. 151, 241102 (2019): the
pivot order picks a numerically independent subset of functions.

Two facts drive the target search:

* The pivot order does not depend on the tolerance; a lower tolerance only extends the
  order. So every kept set a tolerance can produce is a prefix of one pivot order.
* Adding a function to a set can only lower the smallest eigenvalue of its overlap (Cauchy
  interlacing). So the prefixes that meet a target form an initial run, and the longest
  one is the leading block of ``S[p, p] - target * I`` that is positive definite, which one
  ordinary Cholesky factorization finds (LAPACK reports the first leading minor that fails).

For single functions one factorization does better still: pivoting on ``S - target * I``
itself keeps only positive pivots, so the kept block stays above the target, and stops where
no function left could be added alone (`auditor.numerics.cholesky.shifted_pivoted_cholesky`).
On water clusters in aug-cc-pVTZ it drops as few or fewer functions than the prefix search with
its add-back pass (3036 functions: 17 against 19; 5980: 112 against 114) in a third of the time.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg
from scipy.linalg import lapack

from ..base.errors import UsageError
from ..numerics.cholesky import (
    CholeskyResult,
    _shell_index_lists,
    _smallest,
    check_overlap,
    delete_from_factor,
    delete_in_place,
    deletion_is_cheaper,
    pivoted_cholesky,
    shell_pivoted_cholesky,
    shifted_pivoted_cholesky,
    smallest_from_factor,
)
from ..numerics.inplace import column_major, solve_lower_view

#: Relative rounding allowance at the target: lambda_min >= target * (1 - slack) passes.
#: Without it a target of exactly 1 would fail on diagonals of 1 - 1e-16.
TARGET_SLACK = 1e-12

#: ``verify`` given as a bool: True is the dense check, False none.
_VERIFY_ALIASES: dict[bool | str, bool | str] = {True: "eigvalsh", False: "none"}


#: The search for single functions: one pivoted Cholesky of S - target*I
#: (`auditor.numerics.cholesky.shifted_pivoted_cholesky`).
SHIFT_PIVOTED = "shift-pivoted"


@dataclass(frozen=True)
class Selection:
    """A kept set of functions meeting a target smallest eigenvalue.

    ``kept`` and ``dropped`` are ascending 0-based function indices; ``order`` is the
    kept set in pivot order, its first ``prefix`` entries the pivoted-Cholesky prefix and
    the last ``added_back`` those offered back afterwards. ``tolerance`` is a
    pivoted-Cholesky tolerance that yields exactly the prefix (for the "shift-pivoted"
    search: the shift at which that search keeps this set, the target less `TARGET_SLACK`, or
    the target itself when the spectrum's factorization was reused). ``factorizations`` counts
    Cholesky factorizations (pivoted, plain or incremental) and ``eigen_checks`` the
    eigenvalue computations the search used.
    """

    kept: np.ndarray
    dropped: np.ndarray
    order: np.ndarray
    smallest_kept: float
    target: float
    tolerance: float
    factorizations: int
    eigen_checks: int
    search: str
    kept_shells: np.ndarray | None = None
    dropped_shells: np.ndarray | None = None
    notes: list[str] = field(default_factory=list)
    prefix: int = 0
    added_back: int = 0
    #: the lower factor of S[order, order] - factor_shift*I when the search made it, for
    #: `shells_from_functions`; callers release it when done
    factor: np.ndarray | None = field(default=None, compare=False, repr=False)
    #: the shift of ``factor``: the target (shift-pivoted search) or the target less `TARGET_SLACK`
    factor_shift: float = 0.0

    @property
    def n_dropped(self) -> int:
        return int(self.dropped.size)


def check_target(target: float) -> float:
    """Return ``target`` as float, or raise UsageError unless 0 < target <= 1."""
    try:
        value = float(target)
    except (TypeError, ValueError):
        raise UsageError(f"target smallest eigenvalue must be a number, got {target!r}") from None
    if not np.isfinite(value) or value <= 0.0 or value > 1.0:
        raise UsageError(f"target smallest eigenvalue must lie in (0, 1] for a unit-diagonal overlap, got {target!r}")
    return value


def check_atoms_not_emptied(
    kept: np.ndarray,
    atom_of_function: np.ndarray | Sequence[int],
    exempt_atoms: Iterable[int] = (),
    what: str = "this selection",
) -> None:
    """Raise UsageError if ``kept`` holds no function of an atom that had some.

    Atoms are 0-based in ``atom_of_function`` and named 1-based in the message;
    ``exempt_atoms`` (0-based, e.g. ghost atoms) may be emptied.
    """
    atoms = np.asarray(atom_of_function)
    had = set(np.unique(atoms).tolist())
    has = set(np.unique(atoms[np.asarray(kept, dtype=int)]).tolist())
    emptied = sorted(had - has - {int(a) for a in exempt_atoms})
    if emptied:
        names = ", ".join(str(a + 1) for a in emptied)
        raise UsageError(
            f"{what} would remove every basis function of atom {names}; "
            "lower the target or fix the geometry (coincident or duplicated atoms?)"
        )


def _verify_mode(verify: bool | str) -> bool | str:
    """The check ``verify`` asks for: "eigvalsh" for True, "none" for False, else as given."""
    return _VERIFY_ALIASES.get(verify, verify)


def _factorize(S: np.ndarray, tol: float, shells: np.ndarray | None) -> CholeskyResult:
    if shells is None:
        return pivoted_cholesky(S, tol)
    return shell_pivoted_cholesky(S, shells, tol)


def _shell_record(res: CholeskyResult) -> tuple[np.ndarray, np.ndarray]:
    """The chosen shells and their criteria of a shell-pivoted factorization."""
    if res.shell_pivots is None or res.shell_values is None:
        raise ValueError("not a shell-pivoted factorization")
    return res.shell_pivots, res.shell_values


def _prefix_ends(res: CholeskyResult, shells: np.ndarray | None) -> np.ndarray:
    """Allowed kept-set sizes along the pivot order (0 and every shell boundary)."""
    if shells is None:
        return np.arange(res.rank + 1)
    sizes = np.bincount(np.asarray(shells))[res.shell_pivots]
    return np.concatenate([[0], np.cumsum(sizes)])


def _reproducing_tol(res: CholeskyResult, k: int, shells: np.ndarray | None) -> float:
    """A tolerance at which the same pivoting stops after exactly ``k`` kept functions."""
    vals = res.pivot_values if shells is None else _shell_record(res)[1]
    j = int(np.searchsorted(_prefix_ends(res, shells), k))  # pivots (functions or shells) kept
    if j >= vals.size:
        return res.tol
    if j == 0:
        return float(np.nextafter(vals[0], np.inf))
    if vals[j] < vals[j - 1]:
        return float(np.sqrt(vals[j - 1] * vals[j])) if vals[j] > 0 else float(vals[j - 1])
    return float(vals[j - 1])  # a tie: no tolerance separates the two pivots


def select_for_target(
    S: np.ndarray,
    target: float,
    shell_of_function: np.ndarray | Sequence[int] | None = None,
    atom_of_function: np.ndarray | Sequence[int] | None = None,
    exempt_atoms: Iterable[int] = (),
    search: str = "auto",
    verify: bool | str = "eigvalsh",
    refine: bool = True,
    pivoted: CholeskyResult | None = None,
) -> Selection:
    """Keep as many functions as possible while the kept overlap has lambda_min >= target.

    "auto" means "shift-pivoted" for single functions: one pivoted Cholesky of S - target*I
    stopped at its first pivot that is not positive (`shifted_pivoted_cholesky`), which leaves
    nothing that could be added back. For whole units (``shell_of_function``) it means
    "shifted"; these searches keep the longest prefix of the pivot order that meets the target:

    "shifted" (a pivoted factorization at tol=target, then one Cholesky of S[p, p] - target*I
    whose first failing leading minor ends the prefix), "prefix" (bisection over its length)
    or "tolerance" (bisection on log10(tol)). ``verify`` ("eigvalsh" or True, "lanczos",
    "none" or False) checks the kept set's smallest eigenvalue, with ``numpy.linalg.eigvalsh`` on the kept block or with
    `smallest_from_factor` on its Cholesky factor, and shortens the set if rounding let
    it slip below target. With ``refine`` the units left out of the prefix are offered back
    one by one, in pivot order, and kept while the set meets the target (``added_back``
    counts them). With ``atom_of_function`` a selection that would leave a non-exempt atom
    without functions raises UsageError. Shell ties go to the lower shell index.
    ``pivoted``: a `shifted_pivoted_cholesky` of S made already (by the spectrum step).
    """
    target = check_target(target)
    goal = target * (1.0 - TARGET_SLACK)
    mode = _verify_mode(verify)
    if mode not in ("eigvalsh", "lanczos", "none"):
        raise ValueError(f"unknown verify mode {verify!r}")
    S = check_overlap(S)
    n = S.shape[0]
    shells = None if shell_of_function is None else np.asarray(shell_of_function)
    if shells is not None:
        _shell_index_lists(shells, n)
    search = search if search != "auto" else "shifted" if shells is not None else SHIFT_PIVOTED
    pivoted = pivoted if search == SHIFT_PIVOTED and _within_slack(pivoted, target) else None
    level = goal if pivoted is None else pivoted.tol  # the shift of the factors found
    found = _find_prefix(S, level, shells, search, refine, pivoted)
    notes: list[str] = []
    order, blocks = found.res.pivots[: found.k].copy(), list[int]()
    factor = found.prefix_factor if found.maximal else None
    if refine and 0 < found.k < n and not found.maximal:
        order, blocks, factor = _offer_back(S, found, order, shells, goal)
    if mode != "none" and not (found.checked and not blocks):
        order = _verified(S, found, order, blocks, factor, level, goal, mode, notes)
    if order.size == 0:
        raise UsageError(f"no kept set reaches target {target:g}")
    kept = np.sort(order)
    if atom_of_function is not None:
        check_atoms_not_emptied(kept, atom_of_function, exempt_atoms, f"target {target:g}")
    chosen = _selection(found, order, kept, n, target, search, shells, notes)
    if factor is None or factor.shape[0] < order.size:
        return chosen
    return dataclasses.replace(chosen, factor=factor[: order.size, : order.size], factor_shift=level)


def _within_slack(pivoted: CholeskyResult | None, target: float) -> bool:
    """Whether ``pivoted`` was made at a shift in [target * (1 - TARGET_SLACK), target]."""
    return pivoted is not None and target * (1.0 - TARGET_SLACK) <= pivoted.tol <= target


@dataclass
class _Prefix:
    """The longest prefix of a pivot order that meets the goal, and what finding it cost.

    ``k`` is the prefix length (a kept-set size in ``ends``, the allowed sizes along
    ``res.pivots``); ``smallest`` is its smallest eigenvalue when ``checked`` (else NaN);
    ``prefix_factor`` the lower Cholesky factor of ``S[p[:k], p[:k]] - goal*I`` when the
    search made it for the add-back pass.
    """

    res: CholeskyResult
    k: int
    ends: np.ndarray
    factorizations: int
    eigen_checks: int
    smallest: float = np.nan
    checked: bool = False
    prefix_factor: np.ndarray | None = None
    maximal: bool = False  # no unit left out could be added alone: no add-back pass


def _find_prefix(
    S: np.ndarray, goal: float, shells: np.ndarray | None, search: str, refine: bool, pivoted: CholeskyResult | None
) -> _Prefix:
    """The longest prefix of the pivot order at or above ``goal``, found as ``search`` says
    (``pivoted``: the "shift-pivoted" factorization at ``goal``, when made already)."""
    if search == "tolerance":
        res, k, facts, eigs, smallest = _search_tolerance(S, goal, shells)
        # every trial already ran eigvalsh on its kept set
        return _Prefix(res, k, _prefix_ends(res, shells), facts, eigs, smallest, checked=True)
    if search == SHIFT_PIVOTED:
        if shells is not None:
            raise ValueError(f"search {SHIFT_PIVOTED!r} selects single functions, not shells")
        if pivoted is None or pivoted.factor is None:
            pivoted = shifted_pivoted_cholesky(S, goal)
        factor, res = pivoted.factor, dataclasses.replace(pivoted, factor=None)
        return _Prefix(res, res.rank, np.arange(res.rank + 1), 1, 0, prefix_factor=factor, maximal=True)
    if search == "shifted":
        return _search_shifted(S, goal, shells, refine)
    if search == "prefix":
        return _search_prefix(S, goal, shells)
    raise ValueError(f"unknown search {search!r}")


def _search_shifted(S: np.ndarray, goal: float, shells: np.ndarray | None, refine: bool) -> _Prefix:
    """One pivoted factorization at tol=goal, then one Cholesky of ``S[p, p] - goal*I``:
    its first failing leading minor ends the longest passing prefix.

    With ``refine`` (and a prefix that is neither empty nor everything) the factor of the
    prefix is kept for the add-back pass and the pivoted factor released.
    """
    n = S.shape[0]
    res = _factorize(S, goal, shells)
    ends = _prefix_ends(res, shells)
    p = res.pivots
    shifted = S[np.ix_(p, p)]
    shifted[np.diag_indices_from(shifted)] -= goal
    info = lapack.dpotrf(shifted.T, lower=1, overwrite_a=1, clean=0)[1]
    good = p.size if info == 0 else int(info) - 1
    k = int(ends[np.searchsorted(ends, good, side="right") - 1])
    prefix_factor = None
    if refine and 0 < k < n:
        # the leading k x k block of this factor is the factor of S[p[:k], p[:k]] - goal*I
        # that the add-back pass extends: keep it (one N x N array at a time)
        res = dataclasses.replace(res, factor=None)
        prefix_factor = shifted.T[:k, :k]  # a view: copying it would hold two N x N arrays
        for j in range(1, k):  # LAPACK left the upper triangle as it was
            prefix_factor[:j, j] = 0.0
    else:
        del shifted
    return _Prefix(res, k, ends, 2, 0, prefix_factor=prefix_factor)


def _search_prefix(S: np.ndarray, goal: float, shells: np.ndarray | None) -> _Prefix:
    """One pivoted factorization at tol=goal, then bisection over the prefix length with
    eigvalsh checks."""
    res = _factorize(S, goal, shells)
    ends = _prefix_ends(res, shells)
    p = res.pivots
    eigs = 0
    lo, hi = 0, ends.size - 1  # ends[lo] passes (empty set); find the last passing index
    while lo < hi:
        mid = (lo + hi + 1) // 2
        eigs += 1
        if _smallest(S, p[: ends[mid]]) >= goal:
            lo = mid
        else:
            hi = mid - 1
    return _Prefix(res, int(ends[lo]), ends, 1, eigs)


def _offer_back(
    S: np.ndarray, found: _Prefix, order: np.ndarray, shells: np.ndarray | None, goal: float
) -> tuple[np.ndarray, list[int], np.ndarray | None]:
    """The add-back pass after the prefix ``order``: `add_back` over the units left out."""
    # The add-back pass works on the factor of S[order, order] - goal*I, and a prefix of
    # its result serves every check after it: release the N x N pivoted factor first.
    found.res = dataclasses.replace(found.res, factor=None)
    groups = _leftover_groups(found.res, found.k, shells, S.shape[0])
    added = add_back(S, order, groups, goal, found.prefix_factor)
    found.factorizations += 1
    return added


def _verified(
    S: np.ndarray,
    found: _Prefix,
    order: np.ndarray,
    blocks: list[int],
    factor: np.ndarray | None,
    level: float,
    goal: float,
    mode: bool | str,
    notes: list[str],
) -> np.ndarray:
    """Check the kept set ``order`` and shorten it until its smallest eigenvalue is at or
    above ``goal``: first by the groups added back (``blocks``, popped), then along the
    pivot order. Updates ``found`` (``smallest``, ``k``, ``eigen_checks``) and ``notes``.

    ``factor`` is the factor of ``S[order, order] - level*I`` from the search, if any.
    """
    pivoted = found.res.factor
    while order.size:
        if mode == "lanczos" and factor is not None:
            # order is a prefix of the factor's order. The factor of S[order, order] - level*I
            # exists, so this value is at least level >= goal: here it is reported, not
            # checked (only the dense eigvalsh check can shorten the set).
            found.smallest = level + smallest_from_factor(factor[: order.size, : order.size])
        elif mode == "lanczos" and pivoted is not None:
            found.smallest = smallest_from_factor(pivoted[: found.k, : found.k])
        else:
            found.smallest = _smallest(S, order)
        found.eigen_checks += 1
        if found.smallest >= goal:
            break
        # Rounding in a positive-definiteness test can admit a set a hair below target.
        if blocks:
            order = order[: order.size - blocks.pop()]
        else:
            found.k = int(found.ends[np.searchsorted(found.ends, found.k, side="left") - 1])
            order = found.res.pivots[: found.k].copy()
        notes.append("shortened after the eigenvalue check (rounding at the target)")
    return order


def _selection(
    found: _Prefix,
    order: np.ndarray,
    kept: np.ndarray,
    n: int,
    target: float,
    search: str,
    shells: np.ndarray | None,
    notes: list[str],
) -> Selection:
    """The Selection for the kept set ``order`` (``kept`` the same, ascending) of n functions."""
    kept_shells = dropped_shells = None
    if shells is not None:
        kept_shells = np.unique(shells[kept])
        dropped_shells = np.setdiff1d(np.arange(int(shells.max()) + 1), kept_shells)
    return Selection(
        kept=kept,
        dropped=np.setdiff1d(np.arange(n), kept),
        order=order,
        smallest_kept=float(found.smallest),
        target=target,
        tolerance=found.res.tol if search == SHIFT_PIVOTED else _reproducing_tol(found.res, found.k, shells),
        factorizations=found.factorizations,
        eigen_checks=found.eigen_checks,
        search=search,
        kept_shells=kept_shells,
        dropped_shells=dropped_shells,
        notes=notes,
        prefix=found.k,
        added_back=order.size - found.k,
    )


def shells_from_functions(
    S: np.ndarray,
    functions: Selection,
    shell_of_function: np.ndarray | Sequence[int],
    verify: bool | str = "eigvalsh",
    consume: bool = False,
) -> Selection | None:
    """A whole-shell kept set seeded by a function-level selection.

    Keeps the shells none of whose functions ``functions`` drops (a subset of its kept set,
    so at or above its target by Cauchy interlacing), then offers the other shells back as
    `select_for_target` does; None when no shell is clean. ``consume``: work in the memory
    of ``functions.factor``, which is lost."""
    S = check_overlap(S)
    n = S.shape[0]
    shells = np.asarray(shell_of_function)
    groups = _shell_index_lists(shells, n)
    target = functions.target
    goal = target * (1.0 - TARGET_SLACK)
    mode = _verify_mode(verify)
    bad = set(shells[functions.dropped].tolist())
    seed = [s for s in dict.fromkeys(shells[functions.order].tolist()) if s not in bad]
    if not seed:
        return None
    order, L = _seed(functions, shells, bad, groups, seed, consume)
    k = order.size
    level = functions.factor_shift if L is not None else goal  # the shift of L and of its extension
    order, blocks, factor = add_back(S, order, [groups[s] for s in sorted(bad)], level, L, grow=L is not None)
    smallest, eigs = np.nan, 0
    notes: list[str] = []
    while mode != "none":
        if mode == "lanczos" and factor is not None:
            smallest = level + smallest_from_factor(factor[: order.size, : order.size])
        else:
            smallest = _smallest(S, order)
        eigs += 1
        if smallest >= goal or not blocks:
            break
        order = order[: order.size - blocks.pop()]
        notes.append("shortened after the eigenvalue check (rounding at the target)")
    if mode != "none" and smallest < goal:
        return None
    kept = np.sort(order)
    kept_shells = np.unique(shells[kept])
    return Selection(
        kept=kept,
        dropped=np.setdiff1d(np.arange(n), kept),
        order=order,
        smallest_kept=float(smallest),
        target=target,
        tolerance=functions.tolerance,
        factorizations=functions.factorizations + 1,
        eigen_checks=functions.eigen_checks + eigs,
        search="from-functions",
        kept_shells=kept_shells,
        dropped_shells=np.setdiff1d(np.arange(len(groups)), kept_shells),
        notes=notes,
        prefix=k,
        added_back=order.size - k,
    )


def _seed(
    functions: Selection,
    shells: np.ndarray,
    bad: set[int],
    groups: list[np.ndarray],
    seed: list[int],
    consume: bool,
) -> tuple[np.ndarray, np.ndarray | None]:
    """The functions of the clean shells ``seed``, and the factor of their shifted block
    when the function-level factor gives it more cheaply than a new factorization: made in
    that factor's own array when the caller gives it up (``consume``), else in a new one
    with room for every function of the ``bad`` shells (`add_back` grows it in place)."""
    if functions.factor is not None:
        at_bad = np.flatnonzero(np.isin(shells[functions.order], sorted(bad)))
        if deletion_is_cheaper(functions.order.size, at_bad):
            kept = np.delete(functions.order, at_bad)
            if consume and column_major(functions.factor):
                return kept, delete_in_place(functions.factor, at_bad)
            return kept, delete_from_factor(functions.factor, at_bad, sum(groups[s].size for s in bad))
    return np.concatenate([groups[s] for s in seed]), None


def _leftover_groups(res: CholeskyResult, k: int, shells: np.ndarray | None, n: int) -> list[np.ndarray]:
    """Units not in the kept prefix: the rest of the pivot order, then those never pivoted."""
    if shells is None:
        rest = np.concatenate([res.pivots[k:], res.dropped])
        return [np.array([i]) for i in rest]
    groups = _shell_index_lists(shells, n)
    j = int(np.searchsorted(_prefix_ends(res, shells), k))
    shell_pivots = _shell_record(res)[0]
    later = [int(s) for s in shell_pivots[j:]]
    never = sorted(set(range(len(groups))) - {int(s) for s in shell_pivots})
    return [groups[s] for s in later + never]


def add_back(
    S: np.ndarray,
    order: np.ndarray,
    groups: list[np.ndarray],
    goal: float,
    L: np.ndarray | None = None,
    grow: bool = False,
) -> tuple[np.ndarray, list[int], np.ndarray | None]:
    """Greedily append each group (in turn) while ``S[kept, kept] - goal*I`` stays positive
    definite, by extending its Cholesky factor (``L``, lower, when the caller has it). A
    group that fails once can never fit later (adding functions only lowers the smallest
    eigenvalue), so one pass leaves no dropped group that could be added. Returns (order,
    sizes of the added groups, factor of ``S[order, order] - goal*I``). With ``grow``, L is
    the leading block of a column-major array of the caller's (`delete_from_factor`,
    `delete_in_place`), and the factor is written into it when it has room."""
    if not groups:
        return order, [], L
    A = None
    if L is None:
        A = S[np.ix_(order, order)]
        A[np.diag_indices_from(A)] -= goal
        try:  # A is symmetric: its transpose is the Fortran-ordered array LAPACK factors in place
            L = scipy.linalg.cholesky(A.T, lower=True, overwrite_a=True, check_finite=False)
        except np.linalg.LinAlgError:
            return order, [], None
    cand = np.concatenate(groups)
    starts = np.cumsum([0] + [g.size for g in groups])
    # Rows of the growing factor for every candidate column, block by block.
    W = [_solve_lower(L, S[np.ix_(order, cand)])]
    kept = [order]
    sizes: list[int] = []
    tails: list[tuple[np.ndarray, np.ndarray]] = []
    for gi, g in enumerate(groups):
        grown = extend_rows(S, W, g, cand, slice(starts[gi], starts[gi + 1]), goal)
        if grown is None:
            continue
        rows, Wg, Cc = grown
        W.append(rows)
        kept.append(g)
        sizes.append(g.size)
        tails.append((Wg, Cc))
    order = np.concatenate(kept)
    if not tails:
        return order, sizes, L
    k = L.shape[0]
    factor = _grown(L, order.size) if grow else None
    if factor is None:
        factor = np.zeros((order.size, order.size), order="F")
        factor[:k, :k] = L
    del L, A  # the same memory (L is A's transpose, factored in place)
    for Wg, Cc in tails:
        d = Cc.shape[0]
        factor[:k, k : k + d] = 0.0  # above the new rows: the array's old contents
        factor[k : k + d, : Wg.shape[0]] = Wg.T
        factor[k : k + d, k : k + d] = Cc
        k += d
    return order, sizes, factor


def _grown(L: np.ndarray, size: int) -> np.ndarray | None:
    """The leading size x size block of the column-major array whose leading block L is,
    when it has that room; else None."""
    full = L.base
    if full is None or full.ndim != 2:
        return None
    full = full if full.flags.f_contiguous else full.T
    same = full.flags.f_contiguous and full.ctypes.data == L.ctypes.data and full.strides == L.strides
    return full[:size, :size] if same and min(full.shape) >= size else None


def _solve_lower(L: np.ndarray, B: np.ndarray) -> np.ndarray:
    """L^-1 B for a lower factor L, read in place when it is column-major (or a leading block
    of such an array), so that no copy of it is made."""
    if column_major(L):
        X = np.asfortranarray(B)
        solve_lower_view(L, X)
        return X
    return scipy.linalg.solve_triangular(L, B, lower=True, check_finite=False)


def extend_rows(
    S: np.ndarray, W: list[np.ndarray], g: np.ndarray, cand: np.ndarray, cols: slice, goal: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """Append group ``g`` (the candidates at ``cols``) to a growing factor of S[kept, kept] -
    goal*I whose rows for every candidate column are the blocks ``W``: (the new rows for every
    candidate, the group's columns of W stacked, the factor of its Schur block), or None when
    the grown block is not positive definite."""
    Wg = np.vstack([w[:, cols] for w in W])
    C = S[np.ix_(g, g)] - Wg.T @ Wg
    C[np.diag_indices_from(C)] -= goal
    try:
        Cc = scipy.linalg.cholesky(C, lower=True, check_finite=False)
    except np.linalg.LinAlgError:
        return None
    rhs = S[np.ix_(g, cand)]
    for w in W:  # Wg^T @ vstack(W), without copying W into one array per group
        rhs -= w[:, cols].T @ w
    return scipy.linalg.solve_triangular(Cc, rhs, lower=True, check_finite=False), Wg, Cc


def _search_tolerance(
    S: np.ndarray, target: float, shells: np.ndarray | None, max_steps: int = 60
) -> tuple[CholeskyResult, int, int, int, float]:
    """Bisection on log10(tol) in [target, first pivot]; each trial factorizes and checks."""
    facts = eigs = 0

    def trial(tol: float) -> tuple[CholeskyResult, float]:
        nonlocal facts, eigs
        res = _factorize(S, tol, shells)
        facts += 1
        eigs += 1
        return res, _smallest(S, res.pivots)

    res_lo, low = trial(target)
    if low >= target:
        return res_lo, res_lo.rank, facts, eigs, low
    first = (res_lo.pivot_values if shells is None else _shell_record(res_lo)[1])[0]
    ends = _prefix_ends(res_lo, shells)
    lo, hi = np.log10(target), np.log10(first)
    res_hi, high = trial(first)
    if high < target:  # a lone first shell below target (e.g. a Cartesian shell and target near 1)
        return res_hi, 0, facts, eigs, np.inf
    for _ in range(max_steps):
        gap = np.searchsorted(ends, res_lo.rank) - np.searchsorted(ends, res_hi.rank)
        if gap <= 1 or hi - lo < 1e-12:
            break
        mid = 0.5 * (lo + hi)
        res_mid, val = trial(10.0**mid)
        if val >= target:
            hi, res_hi, high = mid, res_mid, val
        else:
            lo, res_lo = mid, res_mid
    return res_hi, res_hi.rank, facts, eigs, high
