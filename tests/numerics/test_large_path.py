"""The large-system spectrum path against the dense eigendecomposition."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.linalg import lapack

from auditor.base.errors import EXIT_RESOURCE, ResourceError
from auditor.numerics.eigen import compute_spectrum
from auditor.numerics.factored import large_spectrum
from auditor.numerics.inplace import _cholesky, _ldl_negative_count
from auditor.numerics.memory import _HEADROOM_BYTES, check_memory, estimate_bytes, resolve_method
from auditor.numerics.spectrum import COUNT_LEVELS, level_key

WATER = [("O", (0.0, 0.0, 0.0)), ("H", (0.9572, 0.0, 0.0)), ("H", (-0.2400, 0.9266, 0.0))]


def _shifted(atoms, v):
    return [(s, tuple(np.add(p, v))) for s, p in atoms]


TRIMER = WATER + _shifted(WATER, (2.9, 0.1, 0.2)) + _shifted(WATER, (0.3, 2.8, -0.4))


def overlap(atoms, basis: str) -> np.ndarray:
    """Unit-diagonal overlap from pyscf, made exactly symmetric."""
    from pyscf import gto

    mol = gto.M(atom=atoms, basis=basis, unit="Angstrom", verbose=0, spin=None)
    S = mol.intor_symmetric("int1e_ovlp")
    d = 1.0 / np.sqrt(np.diagonal(S).copy())
    S = S * np.outer(d, d)
    np.fill_diagonal(S, 1.0)
    return 0.5 * (S + S.T)


def trimer_with_ghost(distance: float, basis: str = "aug-cc-pvdz") -> np.ndarray:
    """Water trimer plus a ghost O ``distance`` Å from the first O: a planted near-duplicate."""
    return overlap(TRIMER + [("ghost-O", (distance, 0.0, 0.0))], basis)


def planted(n: int = 400, seed: int = 3) -> np.ndarray:
    """Q diag(lambda) Q^T with six planted small eigenvalues, scaled to unit diagonal."""
    rng = np.random.default_rng(seed)
    small = [3e-9, 4e-8, 2e-7, 7e-7, 2e-6, 3e-6]
    lam = np.concatenate([small, np.logspace(-3.5, 0.7, n - len(small))])
    Q, _ = np.linalg.qr(rng.standard_normal((n, n)))
    S = (Q * lam) @ Q.T
    d = 1.0 / np.sqrt(np.diagonal(S).copy())
    S = S * np.outer(d, d)
    return 0.5 * (S + S.T)


def reference(S):
    # reference: numpy.linalg.eigh (LAPACK syevd), on a copy
    return np.linalg.eigh(S.copy())


def check_counts(spec, w):
    """Every count the large path reports equals the count of the dense eigenvalues."""
    for t in COUNT_LEVELS:
        got = spec.counts_below[level_key(t)]
        if got is not None:
            assert got == int(np.searchsorted(w, t)), level_key(t)  # reference: numpy.linalg.eigh


def subspace_sine(V, U, k):
    """sin of the largest principal angle between span(V) and the first k columns of U."""
    return float(np.linalg.norm(U[:, k:].T @ V, 2))


@pytest.mark.parametrize("order", ["C", "F"])
def test_planted_synthetic_agrees_and_restores_S(order):
    S = np.asarray(planted(), order=order)
    S0 = S.copy()
    w, U = reference(S)
    spec = large_spectrum(S, 1e-5)
    assert np.array_equal(S, S0)  # the factorization triangle is restored from its mirror
    assert spec.method == "large" and not spec.complete
    k = spec.vectors.shape[1]
    assert k == int(np.searchsorted(w, 1e-5)) == 6
    # 1e-8 relative, or a few eps * ||S|| where that is larger: both methods are backward
    # stable, so tinier eigenvalues agree only to rounding (reference: numpy.linalg.eigh)
    m = spec.values.size  # the wanted pairs and a few more (where the group at the cut ends)
    tol = np.maximum(1e-8 * w[:m], 64 * np.finfo(float).eps * w[-1])
    assert np.all(np.abs(spec.values - w[:m]) <= tol)
    assert abs(spec.largest - w[-1]) <= 1e-7 * w[-1]  # reference: numpy.linalg.eigh
    check_counts(spec, w)
    # all eigenvalues below the vector level are computed: every decade below it is known
    assert all(spec.counts_below[level_key(t)] is not None for t in COUNT_LEVELS if t <= 1e-5)
    assert spec.counts_below["1e-03"] is None  # not computed, not guessed
    assert w[k] / w[k - 1] > 2.0  # a gap, so the near-null space is well defined
    assert subspace_sine(spec.vectors, U, k) < 1e-6  # projectors agree; reference: eigh
    assert spec.gershgorin_bound <= w[0]  # Gershgorin circle theorem


def test_ghost_atom_near_duplicate():
    S = trimer_with_ghost(0.001)
    w, U = reference(S)
    spec = large_spectrum(S, 1e-5)
    k = spec.vectors.shape[1]
    assert k == int(np.searchsorted(w, 1e-5)) == 22
    # lambda_min ~ 5e-11: both methods are backward stable, so they agree to a few
    # eps * ||S|| in absolute terms (reference: numpy.linalg.eigh)
    assert abs(spec.smallest - w[0]) <= 1e-13
    check_counts(spec, w)
    assert [spec.counts_below[level_key(t)] for t in COUNT_LEVELS[2:]] == [
        int(np.searchsorted(w, t)) for t in COUNT_LEVELS[2:]
    ]
    assert w[k] / w[k - 1] > 2.0
    assert subspace_sine(spec.vectors, U, k) < 1e-5  # reference: numpy.linalg.eigh


def test_well_separated_ghost_relative_accuracy_and_nulls():
    S = trimer_with_ghost(0.2)
    w, _ = reference(S)
    spec = large_spectrum(S, 1e-5, min_vectors=3)
    assert w[0] > 1e-6
    assert abs(spec.smallest - w[0]) <= 1e-8 * w[0]  # reference: numpy.linalg.eigh
    assert spec.vectors.shape[1] == 2  # the causes: exactly the two below 1e-5
    check_counts(spec, w)
    assert spec.counts_below["1e-05"] == 2  # Sylvester's law of inertia; eigh agrees
    # a count is known only up to the largest computed value, else unknown (never guessed)
    for t in COUNT_LEVELS:
        known = spec.counts_below[level_key(t)]
        assert known is None or known == int(np.searchsorted(w, t))
        assert (known is None) == (t > spec.values[-1] and t > 1e-5)


def test_cholesky_decision_when_nothing_below_level():
    S = trimer_with_ghost(0.5)
    w, _ = reference(S)
    assert w[0] > 1e-5
    info: dict = {}
    spec = large_spectrum(S, 1e-5, info=info)
    assert "t_inertia_tau" not in info  # the Cholesky attempt of S - tau I succeeded
    assert all(spec.counts_below[level_key(t)] == 0 for t in COUNT_LEVELS if t <= 1e-5)
    check_counts(spec, w)
    assert spec.counts_below["1e-04"] == 2  # computed values reach past 1e-4
    np.testing.assert_allclose(spec.values, w[: spec.values.size], rtol=1e-8)  # reference: numpy.linalg.eigh


def test_vector_cap_keeps_exact_counts():
    S = trimer_with_ghost(0.001, "aug-cc-pvtz")
    w, _ = reference(S)
    spec = large_spectrum(S, 1e-5, max_vectors=10)
    assert spec.vectors.shape[1] == 10
    assert spec.counts_below["1e-05"] == int(np.searchsorted(w, 1e-5)) == 45  # Sylvester
    check_counts(spec, w)
    # decades covered by the ten computed values are known, the others are not
    assert spec.counts_below["1e-10"] == int(np.searchsorted(w, 1e-10))
    assert spec.counts_below["1e-06"] is None
    np.testing.assert_allclose(spec.values, w[: spec.values.size], rtol=1e-6, atol=1e-14)


def test_exact_counts_by_inertia():
    S = planted(300, seed=5)
    w, _ = reference(S)
    spec = large_spectrum(S, 1e-5, exact_counts=True)
    expected = {level_key(t): int(np.searchsorted(w, t)) for t in COUNT_LEVELS}
    assert spec.counts_below == expected  # Sylvester's law of inertia; reference: eigh


def test_singular_overlap_from_coincident_ghost():
    S = trimer_with_ghost(0.0)
    w, _ = reference(S)
    info: dict = {}
    spec = large_spectrum(S, 1e-5, info=info)
    assert abs(spec.smallest) < 1e-12 and abs(w[0]) < 1e-12  # singular to rounding
    assert spec.counts_below["1e-05"] == int(np.searchsorted(w, 1e-5))
    assert spec.condition_number is None or spec.condition_number > 1e11


def test_inertia_with_two_by_two_pivots():
    rng = np.random.default_rng(7)
    n = 120
    B = rng.standard_normal((n // 2, n // 2))
    A = np.block([[np.zeros((n // 2, n // 2)), B], [B.T, 1e-3 * np.eye(n // 2)]])
    A = np.asfortranarray(A + np.diag(rng.uniform(-1e-3, 1e-3, n)))
    expected = int((np.linalg.eigvalsh(A) < 0).sum())  # reference: numpy eigvalsh
    _, ipiv, _ = lapack.dsytrf(A.copy(order="F"), lower=1)
    assert (ipiv < 0).any()  # the matrix really needs 2x2 pivots
    assert _ldl_negative_count(A) == expected  # Sylvester's law of inertia


def test_blocked_cholesky_matches_lapack_and_stops_where_it_does():
    rng = np.random.default_rng(11)
    n = 900  # three panels of the blocked factorization
    X = rng.standard_normal((n, n))
    S = np.asfortranarray(X @ X.T / n + 1e-2 * np.eye(n))
    upper = np.triu(S, 1).copy()
    A = S.copy(order="F")
    assert _cholesky(A) == 0
    ref, info = lapack.dpotrf(S.copy(order="F"), lower=1)  # reference: LAPACK dpotrf
    assert info == 0
    np.testing.assert_allclose(np.tril(A), np.tril(ref), atol=1e-12)
    assert np.array_equal(np.triu(A, 1), upper)  # the other triangle still holds S
    S[700, 700] = -1.0  # leading minor of order 701 is indefinite
    assert _cholesky(S.copy(order="F")) == lapack.dpotrf(S.copy(order="F"), lower=1)[1] == 701


def test_compute_spectrum_dispatch():
    S = trimer_with_ghost(0.2)
    assert compute_spectrum(S, 1e-5, method="large").method == "large"
    assert compute_spectrum(S, 1e-5, method="auto").method == "full"  # far below the crossover
    assert resolve_method(10**5, "auto", available=10**12) == "large"
    # below the crossover, "auto" goes large only when the full path would not fit
    fits = estimate_bytes(1000, "full") + _HEADROOM_BYTES
    assert resolve_method(1000, "auto", available=fits) == "full"
    assert resolve_method(1000, "auto", available=fits - 1) == "large"
    assert estimate_bytes(20000, "full") > 3 * estimate_bytes(20000, "large")


def test_memory_guard_refuses_impossible_size():
    with pytest.raises(ResourceError) as err:
        check_memory(2_000_000, "large")  # S alone would need ~32 TB
    msg = str(err.value)
    assert "needs about" in msg and "GB" in msg and "available" in msg
    assert err.value.exit_code == EXIT_RESOURCE


def test_memory_guard_names_needed_and_available():
    gib = 1024**3
    with pytest.raises(ResourceError) as err:
        check_memory(30000, "full", available=16 * gib)
    msg = str(err.value)
    assert "16.0 GB" in msg  # available, as given
    assert f"{estimate_bytes(30000, 'full') / gib:.1f} GB" in msg  # needed
    assert "large spectrum path" in msg  # 30000 functions fit on the large path
    # measured peaks of the large path: 1.09-1.20 copies of S (docs/benchmarks.md); the guard
    # must count at least S itself and stay below 1.4 copies
    needed = check_memory(30000, "large", available=16 * gib)
    assert 8 * 30000**2 < needed < 1.4 * 8 * 30000**2


def _write_trimer_with_ghost(path, distance):
    atoms = TRIMER + [("O", (distance, 0.0, 0.0))]
    lines = [f"{s} {x:.6f} {y:.6f} {z:.6f}" for s, (x, y, z) in atoms]
    path.write_text(f"{len(atoms)}\nwater trimer + ghost O\n" + "\n".join(lines) + "\n")
    return str(path)


def _ranking(entries, key):
    """Ranking by weight rounded to 1e-4, ties by name: near-equal weights may swap."""
    return [e[key] for e in sorted(entries, key=lambda e: (-round(e["weight"], 4), str(e[key])))]


def test_audit_causes_rank_the_same_on_both_paths(tmp_path):
    import auditor

    xyz = _write_trimer_with_ghost(tmp_path / "g.xyz", 0.05)
    full = auditor.audit(xyz, "aug-cc-pvdz", ghost="10", spectrum_method="full", remedies=False)
    large = auditor.audit(xyz, "aug-cc-pvdz", ghost="10", spectrum_method="large", remedies=False)
    assert large.spectrum.method == "large" and full.spectrum.method == "full"
    assert large.verdict == full.verdict
    assert large.causes.n_vectors == full.causes.n_vectors > 0
    assert _ranking(large.causes.atoms, "atom") == _ranking(full.causes.atoms, "atom")
    assert _ranking(large.causes.shells, "shell") == _ranking(full.causes.shells, "shell")
    for a, b in zip(
        sorted(large.causes.atoms, key=lambda e: e["atom"]), sorted(full.causes.atoms, key=lambda e: e["atom"])
    ):
        assert abs(a["weight"] - b["weight"]) < 1e-5  # reference: the full path (eigh)
    assert abs(large.spectrum.smallest - full.spectrum.smallest) <= 1e-8 * full.spectrum.smallest


def test_audit_refuses_before_building_S(tmp_path, monkeypatch):
    import auditor
    import auditor.numerics.memory
    import auditor.pipeline.run

    def must_not_build(*_):
        raise AssertionError("S was built although the memory guard should refuse")

    monkeypatch.setattr(auditor.numerics.memory, "available_bytes", lambda: 64 * 1024**2)
    monkeypatch.setattr(auditor.numerics.memory, "_SMALL_BYTES", 0)  # this molecule is small enough to skip the check
    monkeypatch.setattr(auditor.pipeline.run, "normalized_overlap", must_not_build)
    xyz = _write_trimer_with_ghost(tmp_path / "g.xyz", 0.5)
    with pytest.raises(ResourceError, match=r"needs about .* GB .* only 0\.1 GB is available"):
        auditor.audit(xyz, "aug-cc-pvdz", ghost="10", spectrum_method="large", remedies=False)


def test_cli_spectrum_option_large_matches_full(tmp_path):
    # the large path chosen from the command line gives the same smallest eigenvalue
    # as the dense path (reference: numpy.linalg.eigh via --spectrum full)
    import json

    from typer.testing import CliRunner

    from auditor.cli import app
    from helpers import WATER, write_xyz

    symbols, coords = WATER
    f = write_xyz(tmp_path / "w.xyz", symbols + ["H"], coords + [[0.0, 0.7572, -0.4392]])
    got = {}
    for method in ("full", "large"):
        res = CliRunner().invoke(
            app,
            ["check", str(f), "-b", "aug-cc-pvdz", "-o", str(tmp_path / method), "-f", "json", "--spectrum", method],
        )
        assert res.exit_code in (0, 1), res.output
        got[method] = json.loads((tmp_path / method / "w.json").read_text())["spectrum"]
    assert got["large"]["method"] == "large" and got["full"]["method"] == "full"
    assert got["large"]["smallest"] == pytest.approx(got["full"]["smallest"], rel=1e-8)
    assert CliRunner().invoke(app, ["check", str(f), "-b", "sto-3g", "--spectrum", "fast"]).exit_code == 2


def test_large_path_gives_max_X_only_where_certified():
    # reference: X = U_kept diag(lambda_kept)^-1/2 formed from numpy.linalg.eigh; the large
    # path reports max |X| of a candidate threshold only when its eigenvectors certify it
    from auditor.remedies.canonical import CANDIDATES

    S = trimer_with_ghost(0.05)
    w, U = reference(S)
    spec = large_spectrum(S, vector_level=1e-5)
    assert spec.beyond == 1e-5  # every eigenvalue below the level was computed
    certified = 0
    for t in CANDIDATES:
        removed = int(np.sum(w < t))
        got = spec.growth(removed)
        if got is None:
            continue
        certified += 1
        X = U[:, removed:] / np.sqrt(w[removed:])
        assert got == pytest.approx(np.abs(X).max(), rel=1e-4), t
    assert certified >= 1
    # with the vectors capped below the level, a figure is given only where it is certified
    capped = large_spectrum(trimer_with_ghost(0.05), vector_level=1e-3, max_vectors=3)
    assert int(np.sum(w < 1e-3)) > capped.values.size and capped.beyond is None
    for r in range(capped.values.size):
        got = capped.growth(r)
        if got is not None:
            assert got == pytest.approx(np.abs(U[:, r:] / np.sqrt(w[r:])).max(), rel=1e-4)
    assert capped.growth(capped.values.size) is None


def test_unconverged_iteration_is_refused_not_reported():
    # a Ritz pair that has not converged is not an eigenpair: the path must say so
    S = trimer_with_ghost(0.05)
    S0 = S.copy()
    with pytest.raises(ResourceError, match="did not converge"):
        large_spectrum(S, vector_level=1e-5, maxiter=1, tol=1e-300)
    assert np.array_equal(S, S0)  # S restored all the same


@pytest.mark.parametrize("distance", [0.001, 0.05, 0.2])
def test_count_by_pivoted_inertia_and_the_factor_handed_on(distance):
    # Reference: numpy.linalg.eigvalsh for the count below the level (Haynsworth inertia
    # additivity: the positive pivots' block plus the Schur complement of the rest), and an
    # independent shift-pivoted factorization of a copy of S for the factor handed on.
    from auditor.numerics.cholesky import FactorHandoff, shifted_pivoted_cholesky

    S = trimer_with_ghost(distance)
    w = np.linalg.eigvalsh(S)
    handoff = FactorHandoff()
    info: dict = {}
    spec = large_spectrum(S.copy(), 1e-5, handoff=handoff, info=info)
    assert "t_inertia_tau" in info  # the Cholesky attempt failed: the pivoted count ran
    assert spec.counts_below["1e-05"] == int(np.searchsorted(w, 1e-5)) > 0
    got = handoff.take()
    assert handoff.take() is None  # taken once
    ref = shifted_pivoted_cholesky(S, 1e-5)
    assert got is not None and got.tol == 1e-5
    assert np.array_equal(got.pivots, ref.pivots) and np.array_equal(got.dropped, ref.dropped)
    p = got.pivots
    assert np.allclose(got.factor @ got.factor.T, S[np.ix_(p, p)] - 1e-5 * np.eye(p.size), atol=1e-12)


def test_remedies_reuse_the_spectrum_factor_and_agree(tmp_path):
    # The function subset from the large path's handed-on factorization equals the one the
    # remedies find on their own (dense path), set for set (reference: the dense path).
    import auditor

    xyz = _write_trimer_with_ghost(tmp_path / "g.xyz", 0.05)
    runs = [auditor.audit(xyz, "aug-cc-pvdz", ghost="10", spectrum_method=m) for m in ("full", "large")]
    subsets = [next(a for a in r.remedies.alternatives if a.kind == "cholesky_functions") for r in runs]
    assert subsets[0].removed == subsets[1].removed > 0
    assert abs(subsets[0].smallest_after - subsets[1].smallest_after) <= 1e-9 * subsets[0].smallest_after
    assert subsets[1].tolerance == 1e-5 and subsets[0].tolerance == 1e-5 * (1 - 1e-12)


def test_a_target_other_than_the_caution_level_makes_its_own_factorization(tmp_path):
    # The handed-on factorization is at the caution level (1e-5); at another target the
    # remedies factor S themselves and agree with the dense path (reference: the dense path).
    import auditor
    from auditor.remedies.plan import RemedyOptions

    xyz = _write_trimer_with_ghost(tmp_path / "g.xyz", 0.05)
    opts = RemedyOptions(target=1e-4)
    runs = [auditor.audit(xyz, "aug-cc-pvdz", ghost="10", spectrum_method=m, remedies=opts) for m in ("full", "large")]
    subsets = [next(a for a in r.remedies.alternatives if a.kind == "cholesky_functions") for r in runs]
    assert subsets[0].removed == subsets[1].removed > 0
    assert subsets[0].tolerance == subsets[1].tolerance == 1e-4 * (1 - 1e-12)


def test_a_start_block_that_misses_an_eigenvector_still_finds_it():
    # The Ritz start block from the pivoted count is a guess; a start exactly orthogonal to
    # the smallest eigenvector must not lose it (the little random added to every start
    # column prevents that). A diagonal matrix keeps the orthogonality exact through every
    # solve; its eigenvalues are its diagonal (reference: the matrix itself).
    from auditor.numerics.krylov import _smallest_eigenpairs

    lam = np.concatenate([[3e-9, 4e-8, 2e-7, 7e-7, 2e-6, 3e-6], np.logspace(-3.5, 0.7, 394)])
    L = np.asfortranarray(np.diag(np.sqrt(lam)))
    start = np.eye(lam.size)[:, 1:40]  # the eigenvectors after the smallest one
    values, _ = _smallest_eigenpairs(L, 0.0, 6, 1e-5, 200, 0, {}, start=start)
    assert np.allclose(values, lam[:6], rtol=1e-8, atol=0.0)


def test_the_attempt_is_skipped_when_a_block_already_has_an_eigenvalue_below():
    # Cauchy interlacing: an eigenvalue of a principal block below tau means one of S below
    # tau (reference: numpy.linalg.eigvalsh); the count then comes from the pivoted
    # factorization alone and equals the dense count.
    from auditor.numerics.factored import _block_has_one_below
    from auditor.numerics.spectrum import gershgorin_radii

    S = overlap(TRIMER + [("ghost-O", (0.001, 0.0, 0.0))], "aug-cc-pvtz")
    w = np.linalg.eigvalsh(S)
    assert S.shape[0] >= 256 and _block_has_one_below(S.copy(), gershgorin_radii(S), 1e-5)
    assert w[0] < 1e-5
    info: dict = {}
    spec = large_spectrum(S.copy(), 1e-5, info=info)
    assert spec.counts_below["1e-05"] == int(np.searchsorted(w, 1e-5))
    assert not _block_has_one_below(np.eye(300), np.zeros(300), 1e-5)  # nothing below: no claim


@pytest.mark.parametrize("distance", [0.001, 0.05])
def test_eigenpairs_through_a_shared_core_agree_with_eigh(distance):
    # Reference: numpy.linalg.eigh. With a handoff and a core, S^-1 is applied by blocks in
    # the order (core, other functions): the core's factor, then the Schur complement of the
    # others. Values, counts and vectors (back in S's own order) are the same as eigh's.
    from auditor.numerics.cholesky import FactorHandoff

    S = trimer_with_ghost(distance)
    n, S0 = S.shape[0], S.copy()
    w, U = reference(S)
    others = np.union1d(np.arange(n - 23, n), np.arange(0, n, 7))  # the ghost O, and scattered ones
    core = np.setdiff1d(np.arange(n), others)
    handoff, info = FactorHandoff(), {}
    spec = large_spectrum(S, 1e-5, handoff=handoff, core=core, info=info)
    assert info["inverse"] == "core blocks" and info["shift"] == 0.0
    # the pivoted factor stays lent in the lower triangle of S's column-major view; the strict
    # upper triangle still holds S
    assert handoff.lending
    A, A0 = (S, S0) if S.flags.f_contiguous else (S.T, S0.T)
    upper = np.triu_indices(n, 1)
    assert np.array_equal(A[upper], A0[upper]) and not np.array_equal(S, S0)
    m = spec.values.size
    tol = np.maximum(1e-8 * w[:m], 64 * np.finfo(float).eps * w[-1])
    assert np.all(np.abs(spec.values - w[:m]) <= tol)
    check_counts(spec, w)
    k = spec.vectors.shape[1]
    assert k == int(np.searchsorted(w, 1e-5)) > 0
    j = max(i for i in range(1, k + 1) if w[i] / w[i - 1] > 2.0)  # a gap: a well-defined subspace
    assert subspace_sine(spec.vectors[:, :j], U, j) < 1e-5
    shared = handoff.take_core()  # kept for the remedies: the core's own factor
    assert shared is not None and np.array_equal(shared.core, core) and np.array_equal(shared.rest, others)
    L = np.tril(shared.L)
    assert np.allclose(L @ L.T, S0[np.ix_(core, core)], atol=1e-12)
    # its Schur complement (lower triangle; the upper is zero), against numpy.linalg.solve
    schur = S0[np.ix_(others, others)] - S0[np.ix_(others, core)] @ np.linalg.solve(
        S0[np.ix_(core, core)], S0[np.ix_(core, others)]
    )
    assert np.allclose(shared.schur, np.tril(schur), atol=1e-10)
    assert handoff.take_core() is None  # taken once
    # taking the factor copies it out and makes S whole; reference: an independent
    # shift-pivoted factorization of a copy of S
    from auditor.numerics.cholesky import shifted_pivoted_cholesky

    got, ref = handoff.take(), shifted_pivoted_cholesky(S0.copy(), 1e-5)
    assert np.array_equal(S, S0) and not handoff.lending
    assert got is not None and np.array_equal(got.pivots, ref.pivots)
    assert np.allclose(np.tril(got.factor), np.tril(ref.factor), atol=1e-12)
    handoff.release()
    assert handoff.take() is None


def test_without_a_handoff_the_core_is_not_used():
    # nothing would take the shared core: S^-1 comes from one Cholesky factor in S's own
    # memory, as before (reference for the values: numpy.linalg.eigh)
    S = trimer_with_ghost(0.05)
    w, _ = reference(S)
    info: dict = {}
    spec = large_spectrum(S, 1e-5, core=np.arange(0, S.shape[0], 2), info=info)
    assert info["inverse"] == "cholesky"
    assert abs(spec.smallest - w[0]) <= 1e-8 * w[0]


def test_gather_block_equals_fancy_indexing():
    # reference: numpy's own fancy indexing S[np.ix_(rows, cols)]
    from auditor.numerics.inplace import gather_block

    S = np.arange(600 * 600, dtype=float).reshape(600, 600)
    rng = np.random.default_rng(5)
    rows, cols = np.sort(rng.choice(600, 300, replace=False)), np.sort(rng.choice(600, 257, replace=False))
    for order in ("C", "F"):
        got = gather_block(np.asarray(S, order=order), rows, cols, chunk=64)
        assert np.array_equal(got, S[np.ix_(rows, cols)]) and got.flags.c_contiguous


@pytest.mark.parametrize("order", ["C", "F"])
def test_gather_symmetric_equals_fancy_indexing_in_either_order(order):
    # reference: numpy's own fancy indexing S[np.ix_(rows, cols)] of a symmetric S
    from auditor.numerics.inplace import gather_symmetric

    rng = np.random.default_rng(6)
    A = rng.standard_normal((400, 400))
    S = np.array(A + A.T, order=order)
    rows, cols = rng.choice(400, 290, replace=False), np.sort(rng.choice(400, 130, replace=False))
    got = gather_symmetric(S, rows, cols)
    assert np.array_equal(got, S[np.ix_(rows, cols)]) and got.flags.c_contiguous


def test_gather_triangle_is_the_lower_triangle_of_the_block():
    # reference: numpy's np.tril of the fancy-indexed block; the upper triangle is zero
    from auditor.numerics.inplace import gather_triangle

    rng = np.random.default_rng(8)
    A = rng.standard_normal((300, 300))
    S = A + A.T
    idx = np.sort(rng.choice(300, 123, replace=False))
    got = gather_triangle(S, idx)
    assert np.array_equal(got, np.tril(S[np.ix_(idx, idx)]))
    assert got.flags.f_contiguous and got.flags.writeable


def test_lower_copy_is_the_lower_triangle_with_room_to_grow():
    # reference: numpy's np.tril of the block; a leading block of a larger column-major array
    # as input, and the copy a leading block of a zeroed array of the order asked for
    from auditor.numerics.inplace import lower_copy

    rng = np.random.default_rng(9)
    big = np.asfortranarray(rng.standard_normal((200, 200)))
    got = lower_copy(big[:150, :150], 180)
    assert np.array_equal(got, np.tril(big[:150, :150]))
    assert got.base.shape == (180, 180) and not got.base[150:, :].any() and not got.base[:, 150:].any()
    assert np.array_equal(lower_copy(big), np.tril(big)) and lower_copy(big).flags.f_contiguous


def _lent(distance=0.05):
    """S of the trimer with a ghost, the large path run on it with a handoff and a core of
    scattered functions (so that the pivoted factor stays lent), and S's original."""
    from auditor.numerics.cholesky import FactorHandoff

    S = trimer_with_ghost(distance)
    n, S0 = S.shape[0], S.copy()
    core = np.setdiff1d(np.arange(n), np.union1d(np.arange(n - 23, n), np.arange(0, n, 7)))
    handoff = FactorHandoff()
    large_spectrum(S, 1e-5, handoff=handoff, core=core)
    assert handoff.lending and not np.array_equal(S, S0)
    return S, S0, core, handoff


def test_releasing_a_lent_factor_makes_s_whole():
    # reference: S as it was before the large path ran (restored bit for bit)
    S, S0, _, handoff = _lent()
    handoff.release()
    assert np.array_equal(S, S0) and not handoff.lending and handoff.take() is None


def test_a_failure_after_the_loan_leaves_s_whole():
    # the Krylov step cannot converge (tol 1e-300): the error propagates, S is restored and
    # the handoff holds nothing (reference: S as it was)
    from auditor.numerics.cholesky import FactorHandoff

    S = trimer_with_ghost(0.05)
    n, S0 = S.shape[0], S.copy()
    core = np.setdiff1d(np.arange(n), np.arange(0, n, 7))
    handoff = FactorHandoff()
    with pytest.raises(ResourceError, match="did not converge"):
        large_spectrum(S, 1e-5, handoff=handoff, core=core, maxiter=1, tol=1e-300)
    assert np.array_equal(S, S0) and not handoff.lending and handoff.take() is None


def test_a_read_of_s_beyond_the_core_ends_the_loan_first():
    # A kept set without the whole core cannot be served by the shared core, so S itself is
    # read: the lender in the cache makes it whole first (reference: numpy.linalg.eigvalsh
    # of the block of the original S); the factor is still there to take afterwards.
    from auditor.numerics.cholesky import shifted_pivoted_cholesky, smallest_eigenvalue_cached

    S, S0, core, handoff = _lent()
    idx = np.setdiff1d(np.arange(S.shape[0]), core[:5])  # five core functions left out
    cache = {("core", id(S)): handoff.take_core(), ("lender", id(S)): handoff}
    got = smallest_eigenvalue_cached(S, idx, cache)
    assert got == pytest.approx(np.linalg.eigvalsh(S0[np.ix_(idx, idx)])[0], rel=1e-8)
    assert np.array_equal(S, S0) and not handoff.lending and ("lender", id(S)) not in cache
    factor, ref = handoff.take(), shifted_pivoted_cholesky(S0.copy(), 1e-5)
    assert factor is not None and np.array_equal(factor.pivots, ref.pivots)


def test_the_audit_leaves_s_whole_and_finds_what_the_dense_path_finds(tmp_path):
    # the findings read S before its spectrum lends a triangle; after the whole audit with
    # remedies S is whole again (reference: the overlap matrix built anew, and the dense path)
    from auditor.inputs.readers import load_molecules
    from auditor.pipeline.run import audit_prepared, make_spec, prepare

    mol = load_molecules(_write_trimer_with_ghost(tmp_path / "g.xyz", 0.05), ghost="10")[0]
    runs = []
    for method in ("large", "full"):
        prep = prepare(mol, make_spec("aug-cc-pvdz"), method)
        S0 = prep.S.copy()
        runs.append(audit_prepared(prep, spectrum_method=method))
        assert np.array_equal(prep.S, S0)
    assert [f.kind for f in runs[0].findings] == [f.kind for f in runs[1].findings]
    assert [f.message for f in runs[0].findings[1:]] == [f.message for f in runs[1].findings[1:]]


def test_refusing_a_broken_geometry_ends_the_loan(tmp_path):
    # prune refuses a broken geometry after its spectrum: S must be whole again all the same
    # (reference: the overlap matrix as prepared). The verdict is set broken by hand here; a
    # trimer with a ghost atom is what makes the large path lend its factor.
    from dataclasses import replace

    from auditor.base.errors import UsageError
    from auditor.diagnosis.verdict import Policy
    from auditor.inputs.readers import load_molecules
    from auditor.pipeline.run import audit_core, make_spec, prepare, refuse_broken

    mol = load_molecules(_write_trimer_with_ghost(tmp_path / "g.xyz", 0.05), ghost="10")[0]
    prep = prepare(mol, make_spec("aug-cc-pvdz"), "large")
    S0 = prep.S.copy()
    core = audit_core(prep, Policy(), "large", for_remedies=True)
    assert core.spectrum.handoff is not None and core.spectrum.handoff.lending
    broken = replace(core, result=replace(core.result, verdict_finding="coincident_atoms"))
    with pytest.raises(UsageError):
        refuse_broken(broken)
    assert np.array_equal(prep.S, S0) and not core.spectrum.handoff.lending
