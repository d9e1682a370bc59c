"""Pivoted Cholesky, shell pivoting and target-driven selection (auditor.numerics.cholesky, auditor.remedies.subset)."""

from __future__ import annotations

import dataclasses
import itertools

import numpy as np
import pytest
from pyscf import gto

from auditor.base.errors import InputError, UsageError
from auditor.numerics.cholesky import (
    delete_from_factor,
    pivoted_cholesky,
    shell_pivoted_cholesky,
    shifted_pivoted_cholesky,
    smallest_from_factor,
)
from auditor.remedies.subset import check_atoms_not_emptied, select_for_target, shells_from_functions


def normalized_overlap(mol: gto.Mole) -> np.ndarray:
    S = mol.intor("int1e_ovlp")
    d = 1.0 / np.sqrt(np.diagonal(S))
    return S * d[:, None] * d[None, :]


def labels(mol: gto.Mole) -> tuple[np.ndarray, np.ndarray]:
    """Shell index and atom index (both 0-based) of every function."""
    loc = mol.ao_loc_nr()
    shell = np.repeat(np.arange(mol.nbas), np.diff(loc))
    atom = np.array([mol.bas_atom(s) for s in range(mol.nbas)])[shell]
    return shell, atom


def s_overlap(exps: np.ndarray, centres: np.ndarray) -> np.ndarray:
    """Overlap of normalized s Gaussians: (2 sqrt(ab)/(a+b))^(3/2) exp(-ab R^2/(a+b)).

    Reference: Gaussian product theorem, Boys, Proc. R. Soc. A 200, 542 (1950).
    """
    a, b = exps[:, None], exps[None, :]
    r2 = ((centres[:, None, :] - centres[None, :, :]) ** 2).sum(-1)
    return (2.0 * np.sqrt(a * b) / (a + b)) ** 1.5 * np.exp(-a * b * r2 / (a + b))


def random_s_overlap(n: int, seed: int) -> np.ndarray:
    """s Gaussians at random centres and exponents: no symmetry, so no pivot ties."""
    rng = np.random.default_rng(seed)
    return s_overlap(10.0 ** rng.uniform(-1.5, 0.5, n), rng.uniform(0.0, 4.0, (n, 3)))


@pytest.fixture(scope="module")
def dimer():
    """A compressed water dimer in d-aug-cc-pVDZ: diffuse shells on close atoms."""
    mol = gto.M(
        atom="""O 0 0 0; H 0.757 0.586 0; H -0.757 0.586 0;
                O 0.3 -0.2 2.2; H 1.0 0.4 2.3; H -0.5 0.3 2.5""",
        basis="d-aug-cc-pvdz",
        unit="Angstrom",
        verbose=0,
    )
    S = normalized_overlap(mol)
    shell, atom = labels(mol)
    return mol, S, shell, atom


def test_pyscf_s_overlap_matches_closed_form():
    # Reference: closed-form s-s overlap of normalized Gaussians (Boys 1950); checks the
    # fixture formula used by the even-tempered test below against the integral library.
    mol = gto.M(atom="He 0 0 0; He 0 0 0.9", basis={"He": [[0, [0.7, 1.0]], [0, [2.3, 1.0]]]}, unit="Bohr", verbose=0)
    centres = np.array([[0, 0, 0], [0, 0, 0], [0, 0, 0.9], [0, 0, 0.9]])
    expected = s_overlap(np.array([0.7, 2.3, 0.7, 2.3]), centres)
    assert np.allclose(normalized_overlap(mol), expected, atol=1e-12)


@pytest.mark.parametrize("method", ["lapack", "loop", "shell"])
def test_factor_reproduces_kept_block(dimer, method):
    # Reference: definition of the Cholesky factorization, L L^T = S[kept, kept], with L
    # lower triangular and a positive diagonal.
    _, S, shell, _ = dimer
    if method == "shell":
        res = shell_pivoted_cholesky(S, shell, 1e-3)
    else:
        res = pivoted_cholesky(S, 1e-3, method=method)
    p = res.pivots
    assert 0 < res.rank < S.shape[0]  # the tolerance really drops something here
    assert np.allclose(res.factor @ res.factor.T, S[np.ix_(p, p)], atol=1e-12)
    assert np.allclose(res.factor, np.tril(res.factor))
    assert np.all(np.diagonal(res.factor) > 0)
    assert sorted(np.concatenate([p, res.dropped]).tolist()) == list(range(S.shape[0]))


def test_pivot_values_bound_and_stop(dimer):
    # Reference: a Schur-complement diagonal d_k = 1/(S_k^-1)_kk is >= lambda_min(S_k)
    # (Rayleigh quotient of S_k^-1); the factorization stops below the tolerance.
    _, S, _, _ = dimer
    tol = 1e-3
    res = pivoted_cholesky(S, tol)
    assert res.pivot_values.min() >= tol
    for k in (5, res.rank // 2, res.rank):
        sub = S[np.ix_(res.pivots[:k], res.pivots[:k])]
        assert res.pivot_values[k - 1] >= np.linalg.eigvalsh(sub)[0] - 1e-14


def test_lapack_loop_and_singleton_shells_agree():
    # Reference: full diagonal pivoting picks the largest Schur diagonal; three independent
    # implementations (LAPACK dpstrf, a plain loop, shell pivoting with one-function shells)
    # must give the same order on a matrix without ties.
    S = random_s_overlap(80, seed=3)
    a = pivoted_cholesky(S, 1e-3, method="lapack")
    b = pivoted_cholesky(S, 1e-3, method="loop")
    c = shell_pivoted_cholesky(S, np.arange(80), 1e-3)
    assert a.rank < 80
    assert np.array_equal(a.pivots, b.pivots)
    assert np.array_equal(a.pivots, c.pivots)
    assert np.allclose(a.factor, c.factor, atol=1e-10)


@pytest.mark.parametrize("shell_level", [False, True])
@pytest.mark.parametrize("search", ["shifted", "prefix", "tolerance"])
def test_kept_set_reaches_target_and_is_longest_prefix(dimer, shell_level, search):
    # Reference: numpy.linalg.eigvalsh on the kept block; the next function (or shell) in
    # the pivot order would take the kept set below target (so nothing longer qualifies).
    _, S, shell, _ = dimer
    target = 1e-3
    sof = shell if shell_level else None
    sel = select_for_target(S, target, sof, search=search, refine=False)
    kept = sel.kept
    assert sel.n_dropped > 0
    assert np.linalg.eigvalsh(S[np.ix_(kept, kept)])[0] >= target
    full = shell_pivoted_cholesky(S, shell, 0.0) if shell_level else pivoted_cholesky(S, 0.0)
    k = kept.size
    assert np.array_equal(np.sort(full.pivots[:k]), kept)
    step = np.bincount(shell)[full.shell_pivots[len(sel.kept_shells)]] if shell_level else 1
    longer = full.pivots[: k + step]
    assert np.linalg.eigvalsh(S[np.ix_(longer, longer)])[0] < target
    if shell_level:  # whole shells only
        assert set(shell[sel.kept]).isdisjoint(shell[sel.dropped])


def test_searches_agree_and_count_factorizations(dimer):
    _, S, _, _ = dimer
    for refine in (False, True):
        sels = {s: select_for_target(S, 1e-3, search=s, refine=refine) for s in ("shifted", "prefix", "tolerance")}
        for s in sels.values():
            assert np.array_equal(s.kept, sels["shifted"].kept)
        assert sels["shifted"].factorizations == 2 + refine
        assert sels["prefix"].factorizations == 1 + refine
        assert sels["tolerance"].factorizations > 2 + refine


@pytest.mark.parametrize("shell_level", [False, True])
def test_refined_set_meets_target_and_no_dropped_unit_fits(dimer, shell_level):
    # Reference: numpy.linalg.eigvalsh; after the add-back pass, adding any single dropped
    # function (or shell) takes the kept set below target, and the prefix is kept whole.
    _, S, shell, _ = dimer
    target = 1e-3
    sof = shell if shell_level else None
    sel = select_for_target(S, target, sof)
    plain = select_for_target(S, target, sof, refine=False)
    assert np.array_equal(np.sort(sel.order[: sel.prefix]), plain.kept)
    assert sel.n_dropped <= plain.n_dropped
    assert sel.kept.size == sel.prefix + sel.added_back
    assert np.linalg.eigvalsh(S[np.ix_(sel.kept, sel.kept)])[0] >= target
    units = [np.flatnonzero(shell == s) for s in sel.dropped_shells] if shell_level else [[i] for i in sel.dropped]
    assert units
    for u in units:
        trial = np.concatenate([sel.kept, u])
        assert np.linalg.eigvalsh(S[np.ix_(trial, trial)])[0] < target


def test_reported_tolerance_reproduces_kept_set(dimer):
    # Reference: definition of the stopping rule (largest remaining diagonal < tol).
    _, S, shell, _ = dimer
    for sof in (None, shell):
        sel = select_for_target(S, 1e-3, sof, search="shifted")
        again = pivoted_cholesky(S, sel.tolerance) if sof is None else shell_pivoted_cholesky(S, sof, sel.tolerance)
        assert np.array_equal(again.pivots, sel.order[: sel.prefix])


@pytest.mark.parametrize("target", [1e-2, 1e-3, 1e-4])
def test_shift_pivoted_set_meets_the_target_and_no_function_fits(dimer, target):
    # Reference: numpy.linalg.eigvalsh. The default search for single functions pivots on
    # S - target*I: the kept block meets the target, adding any dropped function alone takes
    # it below, the reported shift reproduces the set, and it is one factorization.
    _, S, _, _ = dimer
    sel = select_for_target(S, target)
    assert sel.search == "shift-pivoted" and sel.factorizations == 1 and sel.added_back == 0
    assert np.linalg.eigvalsh(S[np.ix_(sel.kept, sel.kept)])[0] >= target
    for j in sel.dropped:
        trial = np.append(sel.kept, j)
        assert np.linalg.eigvalsh(S[np.ix_(trial, trial)])[0] < target
    assert np.array_equal(shifted_pivoted_cholesky(S, sel.tolerance).pivots, sel.order)
    assert sel.tolerance < target


def test_shifted_pivoting_of_a_matrix_with_known_spectrum():
    # Reference: a 2 x 2 unit-diagonal block [[1, c], [c, 1]] has eigenvalues 1 - c and 1 + c.
    c = 0.999
    S = np.eye(3)
    S[0, 1] = S[1, 0] = c
    assert shifted_pivoted_cholesky(S, 0.5 * (1 - c)).rank == 3
    res = shifted_pivoted_cholesky(S, 2 * (1 - c))  # the pair cannot stay together
    assert res.rank == 2 and 2 in res.pivots and res.pivots[0] == 0


def test_fewest_drops_among_tolerances_tried(dimer):
    # Reference: brute force over a grid of tolerances, each checked by eigvalsh.
    _, S, _, _ = dimer
    target = 1e-3
    sel = select_for_target(S, target)
    drops = []
    for tol in np.logspace(np.log10(target), -0.01, 40):
        res = pivoted_cholesky(S, tol)
        if np.linalg.eigvalsh(S[np.ix_(res.pivots, res.pivots)])[0] >= target:
            drops.append(S.shape[0] - res.rank)
    assert drops and sel.n_dropped <= min(drops)


def test_drops_at_least_eigenvalues_below_target(dimer):
    # Reference: Cauchy interlacing; a principal submatrix of size m has
    # lambda_min <= lambda_(n-m+1) of S, so at least #(eigenvalues < target) must go.
    _, S, shell, _ = dimer
    w = np.linalg.eigvalsh(S)
    for target in (1e-2, 1e-3):
        below = int(np.sum(w < target))
        assert select_for_target(S, target).n_dropped >= below
        assert select_for_target(S, target, shell).n_dropped >= below


def test_planted_duplicate_shell_is_the_one_dropped():
    # Reference: an exact copy of a shell makes S exactly singular in one direction per
    # component; the copy or its original must go, and nothing else at a mild target.
    o = gto.basis.load("cc-pvdz", "O")
    planted = o + [o[3]]  # a second copy of the diffuse p shell [1, [0.2753, 1.0]]
    mol = gto.M(atom="O 0 0 0; H 0.757 0.586 0; H -0.757 0.586 0", basis={"O": planted, "H": "cc-pvdz"}, verbose=0)
    ref = gto.M(atom=mol.atom, basis="cc-pvdz", verbose=0)
    target = 1e-4
    assert np.linalg.eigvalsh(normalized_overlap(ref))[0] > target  # nothing else to drop
    S = normalized_overlap(mol)
    shell, _ = labels(mol)
    twins = [i for i in range(mol.nbas) if mol.bas_atom(i) == 0 and mol.bas_angular(i) == 1 and mol.bas_nprim(i) == 1]
    orig, copy = twins  # pyscf orders an atom's shells by l, so locate the pair
    assert np.allclose(S[np.ix_(shell == orig, shell == copy)], np.eye(3))

    sel = select_for_target(S, target, shell)
    assert len(sel.dropped_shells) == 1 and sel.dropped_shells[0] in (orig, copy)
    flat = select_for_target(S, target)
    assert flat.n_dropped == 3
    for a, b in zip(np.flatnonzero(shell == orig), np.flatnonzero(shell == copy)):
        assert (a in flat.dropped) != (b in flat.dropped)


def test_even_tempered_set_loses_more_as_ratio_approaches_one():
    # Reference: s-s overlap closed form (Boys 1950); adjacent overlap of an even-tempered
    # pair is (2 sqrt(beta)/(1+beta))^(3/2), which tends to 1 as beta -> 1, and the
    # spectrum degrades (Bardo & Ruedenberg, J. Chem. Phys. 59, 5956 (1973), from memory).
    target = 1e-5
    drops, sizes = [], []
    for beta in (3.0, 2.0, 1.5, 1.3, 1.15):
        n = int(np.floor(np.log(1e4) / np.log(beta))) + 1  # exponents 0.01 ... 100
        exps = 0.01 * beta ** np.arange(n)
        S = s_overlap(exps, np.zeros((n, 3)))
        adj = (2 * np.sqrt(beta) / (1 + beta)) ** 1.5
        assert np.allclose(np.diagonal(S, 1), adj)
        sel = select_for_target(S, target)
        assert np.linalg.eigvalsh(S[np.ix_(sel.kept, sel.kept)])[0] >= target
        assert sel.n_dropped >= int(np.sum(np.linalg.eigvalsh(S) < target))  # interlacing
        drops.append(sel.n_dropped)
        sizes.append(n)
    assert drops[0] == 0  # beta = 3 is well conditioned
    assert all(a <= b for a, b in itertools.pairwise(drops))
    assert drops[-1] > drops[1]
    assert sizes[-1] - drops[-1] < sizes[-1] * 0.8  # a dense set keeps a fraction only


def test_shell_selection_is_rotation_invariant(dimer):
    # Reference: real spherical harmonics of one shell rotate by an orthogonal matrix, so a
    # rotated molecule has S' = R S R^T with block-orthogonal R; the shell criterion
    # (smallest eigenvalue of a Schur block) is unchanged, so the same shells go.
    mol, S, shell, _ = dimer
    rng = np.random.default_rng(7)
    q, _ = np.linalg.qr(rng.normal(size=(3, 3)))
    xyz = mol.atom_coords(unit="Angstrom") @ q.T
    rot = gto.M(
        atom=[(mol.atom_symbol(i), xyz[i]) for i in range(mol.natm)], basis="d-aug-cc-pvdz", unit="Angstrom", verbose=0
    )
    a = select_for_target(S, 1e-3, shell)
    b = select_for_target(normalized_overlap(rot), 1e-3, labels(rot)[0])
    assert a.dropped_shells.size > 0
    assert np.array_equal(a.dropped_shells, b.dropped_shells)


def test_lanczos_check_matches_eigvalsh():
    # Reference: numpy.linalg.eigvalsh of the same matrix.
    S = random_s_overlap(320, seed=11)
    res = pivoted_cholesky(S, 1e-6)
    assert res.rank > 200  # the Lanczos path, not the small-matrix shortcut
    exact = np.linalg.eigvalsh(S[np.ix_(res.pivots, res.pivots)])[0]
    assert smallest_from_factor(res.factor) == pytest.approx(exact, rel=1e-7)
    sel = select_for_target(S, 1e-4, verify="lanczos")
    assert np.linalg.eigvalsh(S[np.ix_(sel.kept, sel.kept)])[0] >= 1e-4


@pytest.mark.parametrize("bad", [0.0, -1e-5, 1.5, float("nan"), float("inf"), "abc"])
def test_bad_target_is_a_usage_error(bad):
    with pytest.raises(UsageError, match="target"):
        select_for_target(np.eye(3), bad)


def test_target_one_is_allowed():
    S = random_s_overlap(20, seed=1)
    sel = select_for_target(S, 1.0)
    assert sel.kept.size >= 1
    assert np.linalg.eigvalsh(S[np.ix_(sel.kept, sel.kept)])[0] >= 1.0 - 1e-12


def test_unnormalized_overlap_is_an_input_error():
    with pytest.raises(InputError, match="unit diagonal"):
        select_for_target(np.diag([1.0, 2.0]), 1e-3)
    with pytest.raises(InputError):
        pivoted_cholesky(np.ones((2, 3)), 1e-3)
    for bad in (np.nan, np.inf, -np.inf):
        S = np.eye(3)
        S[0, 2] = S[2, 0] = bad
        with pytest.raises(InputError, match="NaN or infinite"):
            select_for_target(S, 1e-3)
    S = np.eye(3)
    S[0, 1], S[1, 0] = np.inf, -np.inf  # opposite infinities: their sum is NaN, still refused
    with pytest.raises(InputError, match="NaN or infinite"):
        pivoted_cholesky(S, 1e-3)


def test_emptying_an_atom_is_an_error():
    # Functions 0 and 2 are near copies, each on an atom of its own: one must go.
    S = np.array([[1.0, 0.1, 0.999999], [0.1, 1.0, 0.1], [0.999999, 0.1, 1.0]])
    atoms = np.array([0, 1, 2])
    with pytest.raises(UsageError, match="every basis function of atom [13]"):
        select_for_target(S, 1e-3, atom_of_function=atoms)
    sel = select_for_target(S, 1e-3, atom_of_function=atoms, exempt_atoms=(0, 2))
    assert sel.n_dropped == 1
    check_atoms_not_emptied(np.array([0, 2]), np.array([0, 0, 1, 1]))
    with pytest.raises(UsageError, match="atom 2"):
        check_atoms_not_emptied(np.array([0, 1]), np.array([0, 0, 1, 1]), what="x")


def test_shell_order_does_not_depend_on_panel_width(dimer):
    # Reference: the greedy pivot sequence is defined without blocking; the panel width only
    # changes when the trailing Schur complement is updated (and the rounding).
    _, S, shell, _ = dimer
    a = shell_pivoted_cholesky(S, shell, 1e-4, panel=4)
    b = shell_pivoted_cholesky(S, shell, 1e-4, panel=192)
    assert np.array_equal(a.shell_pivots, b.shell_pivots)
    assert np.allclose(a.factor, b.factor, atol=1e-10)


def test_shells_seeded_by_function_selection(dimer):
    # Reference: Cauchy interlacing (a subset of a set meeting the target meets it too) and
    # numpy.linalg.eigvalsh; whole shells only, and no dropped shell could be added back.
    _, S, shell, _ = dimer
    target = 1e-3
    fn = select_for_target(S, target)
    sel = shells_from_functions(S, fn, shell)
    clean = set(shell[fn.kept]) - set(shell[fn.dropped])
    assert set(shell[sel.order[: sel.prefix]]) == clean
    assert set(shell[sel.kept]).isdisjoint(shell[sel.dropped])
    assert np.linalg.eigvalsh(S[np.ix_(sel.kept, sel.kept)])[0] >= target
    assert sel.dropped_shells.size > 0
    for s in sel.dropped_shells:
        trial = np.concatenate([sel.kept, np.flatnonzero(shell == s)])
        assert np.linalg.eigvalsh(S[np.ix_(trial, trial)])[0] < target


@pytest.mark.parametrize("drop", [[], [0], [39], [3, 4, 17, 30], list(range(0, 40, 3))])
def test_factor_after_deleting_rows_and_columns(drop):
    # Reference: scipy.linalg.cholesky of the kept block itself (a factor with any diagonal
    # signs: compared through F F^T and the triangle, and |F| against the positive factor).
    import scipy.linalg

    A = random_s_overlap(40, 5) + 0.05 * np.eye(40)
    L = scipy.linalg.cholesky(A, lower=True)
    keep = np.setdiff1d(np.arange(40), drop)
    F = delete_from_factor(L, np.array(drop, dtype=int))
    ref = scipy.linalg.cholesky(A[np.ix_(keep, keep)], lower=True)
    assert np.allclose(F @ F.T, A[np.ix_(keep, keep)], atol=1e-13)
    assert np.array_equal(F, np.tril(F))
    assert np.allclose(np.abs(F), np.abs(ref), atol=1e-12)


def test_a_deleted_factor_grows_in_place_and_is_read_in_place():
    # Reference: numpy.linalg.eigvalsh and scipy.linalg.cholesky of the kept blocks. The
    # deleted factor is the leading block of a larger zeroed array; add_back writes its
    # extension into that array (no new N x N array), and the Lanczos check reads the
    # leading block in place.
    import scipy.linalg

    from auditor.remedies.subset import add_back

    n = 260  # above the size at which the check turns from eigvalsh to Lanczos
    rng = np.random.default_rng(7)  # a spread spectrum, so that Lanczos converges fast
    Q = np.linalg.qr(rng.standard_normal((n, n)))[0]
    A = (Q * np.logspace(-3, 1, n)) @ Q.T
    A = 0.5 * (A + A.T)
    L = scipy.linalg.cholesky(A, lower=True)
    drop = np.array([201, 230, 240, 255])
    F = delete_from_factor(L, drop, room=drop.size)
    assert F.base is not None and F.base.shape == (n, n) and not F.base[n - 4 :].any()
    order = np.setdiff1d(np.arange(n), drop)
    grown, sizes, G = add_back(A, order, [drop[:2], drop[2:]], 0.0, F, grow=True)
    assert sizes == [2, 2] and np.shares_memory(G, F)
    assert np.allclose(G @ G.T, A[np.ix_(grown, grown)], atol=1e-12)
    copied = add_back(A, order, [drop[:2], drop[2:]], 0.0, np.array(F), grow=False)[2]
    assert np.allclose(copied, G, atol=1e-14)
    assert abs(smallest_from_factor(G) - np.linalg.eigvalsh(A)[0]) <= 1e-10 * np.linalg.eigvalsh(A)[0]


@pytest.mark.parametrize("target", [1e-3, 1e-4])
def test_shells_from_the_carried_factor_equal_a_new_factorization(dimer, target):
    # The function-level search hands its factor on; dropping it must change nothing but
    # rounding: the same shells, the same smallest eigenvalue (numpy.linalg.eigvalsh).
    _, S, shell, _ = dimer
    fn = select_for_target(S, target)
    assert fn.factor is not None
    with_factor = shells_from_functions(S, fn, shell)
    without = shells_from_functions(S, dataclasses.replace(fn, factor=None), shell)
    assert np.array_equal(with_factor.kept, without.kept)
    assert with_factor.smallest_kept == pytest.approx(without.smallest_kept, rel=1e-9)


def test_smallest_eigenvalue_through_a_shared_core_equals_eigvalsh(monkeypatch):
    # Reference: numpy.linalg.eigvalsh of each kept block. Index sets that contain a common
    # core get their smallest eigenvalue from one factorization of the core plus the Schur
    # block of their other functions (the diffuse options and published relatives).
    from auditor.numerics import cholesky
    from auditor.numerics.cholesky import shared_core, smallest_eigenvalue_cached

    plain: list[int] = []  # the sets that took the plain path
    direct = cholesky.smallest_eigenvalue
    monkeypatch.setattr(cholesky, "smallest_eigenvalue", lambda S, idx: plain.append(len(idx)) or direct(S, idx))

    n = 420  # above the size where the check turns from eigvalsh to block Krylov
    rng = np.random.default_rng(11)
    Q = np.linalg.qr(rng.standard_normal((n, n)))[0]
    S = (Q * np.logspace(-4, 1, n)) @ Q.T
    S = 0.5 * (S + S.T)
    core = np.arange(0, n, 2)
    cache: dict = {("core", id(S)): shared_core(S, core)}
    for extra in (np.arange(1, n, 4), np.arange(3, n, 4), np.array([5, 7, 11])):
        idx = np.union1d(core, extra)
        got = smallest_eigenvalue_cached(S, idx, cache)
        ref = np.linalg.eigvalsh(S[np.ix_(idx, idx)])[0]
        assert abs(got - ref) <= 1e-9 * ref
    partial = np.arange(1, n, 3)  # does not contain the core: the plain path
    assert (
        abs(smallest_eigenvalue_cached(S, partial, cache) - np.linalg.eigvalsh(S[np.ix_(partial, partial)])[0]) < 1e-12
    )


@pytest.mark.parametrize("lq", [True, False], ids=["dtplqt", "dtpqrt-mirror"])
@pytest.mark.parametrize("drop", [[0], [39], [3, 4, 17, 30], list(range(0, 40, 3))])
def test_factor_after_deleting_in_place(drop, lq, monkeypatch):
    # Reference: scipy.linalg.cholesky of the kept block itself (through F F^T and |F|). The
    # in-place deletion works in the factor's own array, whatever lies beside it; by LAPACK's
    # dtplqt, or by dtpqrt on the mirror image where dtplqt is missing (forced here).
    import scipy.linalg

    from auditor.numerics import inplace
    from auditor.numerics.cholesky import delete_in_place

    if inplace._routine("dtplqt") is None and lq:
        pytest.skip("dtplqt not found in scipy's LAPACK here")
    if not lq:
        monkeypatch.setitem(inplace._ROUTINES, "dtplqt", None)

    A = random_s_overlap(40, 5) + 0.05 * np.eye(40)
    keep = np.setdiff1d(np.arange(40), drop)
    big = np.asfortranarray(np.random.default_rng(2).standard_normal((50, 50)))  # garbage around it
    big[:40, :40] = np.tril(scipy.linalg.cholesky(A, lower=True))
    F = delete_in_place(big[:40, :40], np.array(drop), chunk=7)
    ref = scipy.linalg.cholesky(A[np.ix_(keep, keep)], lower=True)
    assert np.shares_memory(F, big) and F.shape == (keep.size, keep.size)
    assert np.allclose(F @ F.T, A[np.ix_(keep, keep)], atol=1e-13)
    assert np.array_equal(F, np.tril(F))
    assert np.allclose(np.abs(F), np.abs(ref), atol=1e-12)


@pytest.mark.parametrize("target", [3e-2, 3e-3])  # deletion from the factor happens at these
def test_shells_from_a_consumed_factor_equal_those_from_a_kept_one(dimer, target):
    # The last whole-shell search may work in the function-level factor's memory: the same
    # kept set and smallest eigenvalue as with a copy (reference: the copying path).
    _, S, shell, _ = dimer
    fn = select_for_target(S, target, verify="lanczos")
    before = fn.factor.copy()
    kept = shells_from_functions(S, fn, shell, verify="lanczos")
    assert np.array_equal(fn.factor, before)
    used = shells_from_functions(S, fn, shell, verify="lanczos", consume=True)
    assert not np.array_equal(fn.factor, before)  # it did work in place
    assert np.array_equal(kept.kept, used.kept)
    assert abs(kept.smallest_kept - used.smallest_kept) <= 1e-10 * kept.smallest_kept


def test_diffuse_options_reuse_the_spectrum_shared_core(tmp_path, monkeypatch):
    # The large path hands its shared core (the non-diffuse functions' factor) to the
    # remedies, which use it and make none of their own; the options' smallest eigenvalues
    # equal the dense path's (reference: numpy.linalg.eigvalsh there, through the full path).
    import auditor
    from auditor.numerics import cholesky, factored
    from auditor.remedies import plan

    calls = {"made by the spectrum": 0, "made by the remedies": 0, "used": 0}

    def spy(module, name, key):
        real = getattr(module, name)

        def counted(*args):
            calls[key] += 1
            return real(*args)

        monkeypatch.setattr(module, name, counted)

    spy(factored, "shared_core", "made by the spectrum")
    spy(plan, "shared_core", "made by the remedies")
    spy(cholesky, "smallest_with_core", "used")
    xyz = tmp_path / "w2.xyz"
    atoms = ["O 0 0 0", "H 0.9572 0 0", "H -0.24 0.9266 0", "O 2.9 0.1 0.2", "H 3.8572 0.1 0.2", "H 2.66 1.0266 0.2"]
    xyz.write_text("7\nwater dimer + ghost O\n" + "\n".join(atoms + ["O 0.05 0 0"]) + "\n")
    full = auditor.audit(str(xyz), "aug-cc-pvdz", ghost="7", spectrum_method="full")
    assert calls == {"made by the spectrum": 0, "made by the remedies": 0, "used": 0}  # small: eigvalsh
    large = auditor.audit(str(xyz), "aug-cc-pvdz", ghost="7", spectrum_method="large")
    assert calls["made by the spectrum"] == 1 and calls["made by the remedies"] == 0 and calls["used"] >= 2
    options = [{d.element: d.smallest_after for d in r.remedies.diffuse_by_element} for r in (full, large)]
    assert options[0].keys() == options[1].keys() == {"H", "O"}
    for el, ref in options[0].items():
        assert abs(options[1][el] - ref) <= 1e-8 * ref


def test_a_factor_in_roomy_zeros_can_grow_in_place():
    # the factor handed to the remedies sits in a `roomy_zeros` array; the add-back finds its
    # room through the view's base (common practice: numpy views keep the array they view)
    from auditor.numerics.inplace import roomy_zeros
    from auditor.remedies.subset import _grown

    room = roomy_zeros(50)
    F = room[:30, :30]
    assert not F.any() and F.flags.writeable
    grown = _grown(F, 40)
    assert grown is not None and grown.shape == (40, 40) and np.shares_memory(grown, room)
    assert _grown(F, 51) is None  # no room beyond the array


def test_tplqt_in_place_is_the_lq_update_and_leaves_the_upper_triangle():
    # Reference: numpy products, L L^T = A A^T + B B^T for the L that LAPACK dtplqt leaves in
    # the lower triangle of A; the upper triangle (NaN here) is neither read nor written.
    from auditor.numerics import inplace

    if inplace._routine("dtplqt") is None:
        pytest.skip("dtplqt not found in scipy's LAPACK here")
    rng = np.random.default_rng(12)
    m, d = 70, 9
    A0 = np.tril(rng.standard_normal((m, m))) + 3 * np.eye(m)
    B0 = np.asfortranarray(rng.standard_normal((m, d)))
    big = np.full((m + 5, m + 5), np.nan, order="F")
    big[:m, :m][np.tril_indices(m)] = A0[np.tril_indices(m)]
    assert inplace.tplqt_in_place(big[:m, :m], B0.copy(order="F"))
    L = np.tril(big[:m, :m])
    assert np.allclose(L @ L.T, A0 @ A0.T + B0 @ B0.T, atol=1e-10)
    assert np.isnan(big[:m, :m][np.triu_indices(m, 1)]).all() and np.isnan(big[m:, :]).all()
