"""Findings, causes, advice and verdicts on planted defects."""

import json

import numpy as np
import pytest

import auditor
from auditor.base.elements import BOHR_IN_ANGSTROM
from auditor.diagnosis.findings import MAX_CROWDING_FINDINGS
from auditor.inputs.basis import BasisSpec, parent_basis
from auditor.numerics.eigen import compute_spectrum
from auditor.pipeline.run import prepare
from auditor.remedies.canonical import advise, find_gap
from auditor.report.json_report import to_json
from helpers import WATER, make_molecule


def kinds(result):
    return {f.kind for f in result.findings}


def test_clean_water_passes(water):
    r = auditor.audit(water, "cc-pvdz")
    assert r.verdict == "pass"
    assert r.input.n_functions == 24  # cc-pVDZ: 14 on O, 5 on each H (Dunning 1989)
    assert not kinds(r) & {"coincident_atoms", "short_contact", "suspect_units", "duplicate_functions"}
    # condition number is lambda_max / lambda_min by definition
    assert r.spectrum.condition_number == pytest.approx(r.spectrum.largest / r.spectrum.smallest)


def test_spectrum_matches_numpy_eigvalsh(water):
    # reference: numpy.linalg.eigvalsh (LAPACK) of D^-1/2 S D^-1/2 built here from pyscf's raw S
    from auditor.numerics.overlap import build_mole

    spec = BasisSpec("aug-cc-pvtz", cartesian=True)
    pm = build_mole(water, spec)
    raw = pm.intor("int1e_ovlp")
    d = 1 / np.sqrt(np.diag(raw))
    ref = np.linalg.eigvalsh(raw * d[:, None] * d[None, :])
    r = auditor.audit(water, spec)
    assert r.spectrum.smallest == pytest.approx(ref[0], rel=1e-9)
    for key, count in r.spectrum.counts_below.items():
        assert count == int(np.sum(ref < float(key)))
    # Gershgorin's theorem: the bound never exceeds the smallest eigenvalue
    assert r.spectrum.gershgorin_bound <= ref[0] + 1e-12


@pytest.mark.parametrize("cartesian", [False, True])
def test_reused_mole_and_assembled_table_match_a_fresh_build(cartesian):
    # reference: a pyscf Mole built from scratch for each geometry (pyscf's own
    # ao_labels and shell data), against the reused Mole and the per-element tables
    from pyscf import gto

    from auditor.numerics.overlap import build_mole, function_table, mole_function_table, normalized_overlap

    symbols = ["O", "H", "H", "N", "H"]
    base = np.array(WATER[1] + [[2.9, 0.1, 0.0], [3.4, 0.9, 0.2]])
    spec = BasisSpec("aug-cc-pvdz", {"N": "cc-pvtz"}, cartesian)
    rng = np.random.default_rng(3)
    for _step in range(3):  # the first call builds the template, the next ones reuse it
        coords = base + rng.uniform(-0.1, 0.1, base.shape)
        mol = make_molecule(symbols, coords, ghost=[False, False, False, True, True])
        fresh = gto.M(
            atom=[("ghost-" + s if g else s, tuple(c)) for s, g, c in zip(symbols, mol.ghost, coords)],
            basis={"O": "aug-cc-pvdz", "H": "aug-cc-pvdz", "ghost-N": "cc-pvtz", "ghost-H": "aug-cc-pvdz"},
            unit="Angstrom",
            cart=cartesian,
            spin=0,
            verbose=0,
        )
        pm = build_mole(mol, spec)
        assert np.array_equal(normalized_overlap(pm), normalized_overlap(fresh))  # bit for bit
        got, ref = function_table(mol, spec), mole_function_table(fresh, mol, spec)
        for field in ("shell_atom", "shell_l", "shell_exponent", "shell_diffuse", "shell_first", "func_shell"):
            assert np.array_equal(getattr(got, field), getattr(ref, field)), field
        assert got.shell_name == ref.shell_name and got.func_component == ref.func_component


def test_cartesian_changes_count_and_spectrum(water):
    # Cartesian d shells have 6 components instead of 5 (the extra one is s-like, x^2+y^2+z^2)
    sph = auditor.audit(water, "cc-pvtz")
    cart = auditor.audit(water, "cc-pvtz", cartesian=True)
    n_d, n_f = 2 + 2 * 1, 1  # cc-pVTZ: O has 2d1f, each H has 1d
    assert cart.input.n_functions - sph.input.n_functions == n_d * 1 + n_f * 3
    assert cart.spectrum.smallest < sph.spectrum.smallest


def test_pasted_atom_is_named():
    symbols, coords = WATER
    mol = make_molecule(symbols + ["H"], coords + [[0.0, 0.7572, -0.4692]])
    r = auditor.audit(mol, "cc-pvdz")
    assert r.verdict == "fail"
    coinc = [f for f in r.findings if f.kind == "coincident_atoms"]
    assert coinc and set(coinc[0].atoms) == {2, 4}
    dup = [f for f in r.findings if f.kind == "duplicate_functions"]
    assert dup and set(dup[0].atoms) == {2, 4} and dup[0].severity == "error"
    # the null space lives on the two copies: they carry (almost) all the weight
    top = {a["atom"] for a in r.causes.atoms[:2]}
    assert top == {2, 4}
    assert r.causes.atoms[0]["weight"] + r.causes.atoms[1]["weight"] > 0.99


def test_ghost_close_to_atom_is_blamed():
    # a ghost H 0.03 Å from a real H duplicates its functions almost exactly
    symbols, coords = WATER
    mol = make_molecule(symbols + ["H"], coords + [[0.0, 0.7572, -0.4392]], ghost=[False] * 3 + [True])
    r = auditor.audit(mol, "aug-cc-pvdz")
    assert r.verdict in ("caution", "fail")
    near = [f for f in r.findings if f.kind == "near_singular"]
    assert near and set(near[0].atoms) == {2, 4}
    assert {r.causes.atoms[0]["atom"], r.causes.atoms[1]["atom"]} == {2, 4}
    assert r.input.ghost_atoms == (4,)
    # a ghost is not a nucleus: no geometry complaint about it
    assert "short_contact" not in kinds(r)


@pytest.mark.parametrize(
    "factor,expect", [(1 / BOHR_IN_ANGSTROM, "bohr read as ångström"), (BOHR_IN_ANGSTROM, "ångström read as bohr")]
)
def test_unit_mixup_detected(factor, expect):
    from ase.build import molecule

    m = molecule("CH3CH2OH")
    m.positions *= factor
    r = auditor.audit(m, "sto-3g")
    units = [f for f in r.findings if f.kind == "suspect_units"]
    assert units and expect in units[0].message
    assert r.verdict == "fail"


def test_unit_not_flagged_for_sane_or_noble_gas_geometries():
    from ase.build import molecule

    for name in ("CH3CH2OH", "C6H6", "H2O"):
        assert "suspect_units" not in kinds(auditor.audit(molecule(name), "sto-3g"))
    ar2 = make_molecule(["Ar", "Ar"], [[0, 0, 0], [0, 0, 3.76]])  # van der Waals dimer
    assert "suspect_units" not in kinds(auditor.audit(ar2, "sto-3g"))
    h2 = make_molecule(["H", "H"], [[0, 0, 0], [0, 0, 0.4]])  # one bond is no evidence of units
    assert "suspect_units" not in kinds(auditor.audit(h2, "sto-3g"))


def test_short_and_impossible_contacts():
    # C-O covalent-radius sum 1.42 Å (Cordero 2008): 0.5 Å is 35 % of it, 0.9 Å is 63 %
    r = auditor.audit(make_molecule(["C", "O"], [[0, 0, 0], [0, 0, 0.5]]), "sto-3g")
    assert [f.atoms for f in r.findings if f.kind == "impossible_contact"] == [(1, 2)]
    assert r.verdict == "fail" and r.verdict_finding == "impossible_contact"
    r = auditor.audit(make_molecule(["C", "O"], [[0, 0, 0], [0, 0, 0.9]]), "sto-3g")
    assert [f.atoms for f in r.findings if f.kind == "short_contact"] == [(1, 2)]
    assert r.verdict == "caution" or r.verdict_finding == "near_singular"
    # the policy moves both levels
    strict = auditor.Policy(contact_caution=0.8, contact_fail=0.7)
    r = auditor.audit(make_molecule(["C", "O"], [[0, 0, 0], [0, 0, 0.9]]), "sto-3g", policy=strict)
    assert r.verdict == "fail" and r.verdict_finding == "impossible_contact"


def test_diffuse_crowding_and_classification():
    # two waters pressed together in a doubly augmented basis
    symbols, coords = WATER
    c2 = np.array(coords) + [0.0, 0.0, 2.2]
    mol = make_molecule(symbols * 2, list(coords) + c2.tolist())
    r = auditor.audit(mol, "d-aug-cc-pvdz")
    crowd = [f for f in r.findings if f.kind == "diffuse_crowding"]
    assert crowd
    for f in crowd[:MAX_CROWDING_FINDINGS]:
        assert len(f.atoms) == 2 and f.details["overlap"] >= 0.92
    # the shells that d-aug adds to cc-pvdz are the diffuse ones
    prep = prepare(mol, BasisSpec("d-aug-cc-pvdz"))
    t = prep.table
    o1 = t.shell_atom == 1
    # O in d-aug-cc-pVDZ: 3s2p1d valence + 2s2p2d diffuse (Woon & Dunning 1994, from memory)
    assert int(np.sum(t.shell_diffuse & o1)) == 6
    assert r.causes.diffuse["diffuse"] > 0.5


def test_parent_basis_names():
    assert parent_basis("aug-cc-pVTZ") == "cc-pvtz"
    assert parent_basis("d-aug-cc-pvdz") == "cc-pvdz"
    assert parent_basis("def2-TZVPPD") == "def2-tzvpp"
    assert parent_basis("6-311++G**") == "6-311g**"
    assert parent_basis("6-31+G*") == "6-31g*"
    assert parent_basis("cc-pvtz") is None


def test_gap_recommendation_on_planted_spectrum():
    # a spectrum with three eigenvalues near 1e-9 and the rest above 1e-4: the cut goes in the gap
    rng = np.random.default_rng(1)
    lam = np.r_[0.9e-9, 2e-9, 3e-9, np.geomspace(1.2e-4, 3.0, 40)]  # none exactly at a candidate threshold
    q, _ = np.linalg.qr(rng.standard_normal((lam.size, lam.size)))
    S = (q * lam) @ q.T
    spec = compute_spectrum(S, vector_level=1e-5)
    gap = find_gap(spec.values)
    assert 3e-9 < gap[0] < 1e-4
    rec = advise(spec, default_threshold=1e-6, min_kept=1e-7)
    assert rec.n_removed == 3
    assert rec.smallest_kept == pytest.approx(1.2e-4, rel=1e-6)
    # largest element of X = U Lambda^-1/2 over the kept set, computed directly
    w, U = np.linalg.eigh(S)
    X = U[:, w >= rec.threshold] / np.sqrt(w[w >= rec.threshold])
    assert rec.max_transform_element == pytest.approx(np.abs(X).max(), rel=1e-6)
    by_t = {c.threshold: c.n_removed for c in rec.candidates}
    assert by_t[1e-4] == 3 and by_t[1e-9] == 1


def _overlap(symbols, coords, basis):
    from auditor.numerics.overlap import build_mole, normalized_overlap

    return normalized_overlap(build_mole(make_molecule(symbols, coords), BasisSpec(basis)))


_DIMER = (WATER[0] * 2, WATER[1] + [[x + 2.9, y, z] for x, y, z in WATER[1]])
_PASTED = (_DIMER[0] + ["H"], _DIMER[1] + [[0.0, 0.7572, -0.4692]])  # a second H on top of H2


@pytest.mark.parametrize(
    "symbols, coords, basis",
    [
        (*_DIMER, "aug-cc-pvtz"),  # clean, a few hundred functions
        (*_PASTED, "aug-cc-pvtz"),  # exactly singular: a degenerate null space
        (*_DIMER, "d-aug-cc-pvtz"),  # doubly augmented: many small eigenvalues
    ],
)
def test_selective_spectrum_matches_dense_eigh(symbols, coords, basis):
    # reference: numpy.linalg.eigh (LAPACK syevd) of the same overlap matrix
    from auditor.numerics.dense import _SELECTIVE_FROM, _selective, full_spectrum
    from auditor.numerics.spectrum import max_transform_element
    from auditor.remedies.canonical import CANDIDATES

    S = _overlap(symbols, coords, basis)
    assert S.shape[0] >= _SELECTIVE_FROM and _selective(S, 1e-5) is not None  # the path under test ran
    spec = full_spectrum(S, vector_level=1e-5)
    w, U = np.linalg.eigh(S)
    assert np.allclose(spec.values, w, rtol=0, atol=1e-13)
    k = spec.vectors.shape[1]
    assert k >= 1 and np.allclose(spec.vectors.T @ spec.vectors, np.eye(k), atol=1e-10)
    if w[k] - w[k - 1] > 1e-6 * w[k]:  # the near-null space is well defined: same span as eigh's
        P, Q = spec.vectors @ spec.vectors.T, U[:, :k] @ U[:, :k].T
        assert np.abs(P - Q).max() < 1e-8
    # max |X| of canonical orthogonalization at every candidate, against X formed densely
    for t in CANDIDATES:
        keep = w >= t
        X = U[:, keep] / np.sqrt(w[keep])
        got = max_transform_element(spec.values, spec.growth_by_column, int(np.sum(~keep)))
        assert got == pytest.approx(np.abs(X).max(), rel=1e-6), t


def test_growth_without_enough_columns_is_not_guessed():
    # two computed columns, the third eigenvalue small enough that an uncomputed column could win
    values = np.array([1e-4, 2e-4, 3e-4, 1.0])
    assert max_transform_element_of(values, np.array([0.5, 0.5]), 0) is None
    # ... and certified once the computed maximum reaches the bound 1/sqrt(lambda_m)
    assert max_transform_element_of(values, np.array([1.0, 0.5]), 0) == pytest.approx(100.0)
    assert max_transform_element_of(values, np.array([0.5, 0.5, 0.5, 0.5]), 1) == pytest.approx(0.5 / np.sqrt(2e-4))


def max_transform_element_of(values, colmax, n_removed):
    # colmax: max_i |U_ij| of the formed columns (no degenerate groups here)
    from auditor.numerics.spectrum import max_transform_element

    return max_transform_element(values, np.asarray(colmax) / np.sqrt(values[: len(colmax)]), n_removed)


def test_no_gap_uses_default():
    lam = np.geomspace(1e-8, 2.0, 60)  # evenly spread: no gap a decade wide
    S = np.diag(lam)
    rec = advise(compute_spectrum(S, vector_level=1e-5), default_threshold=1e-6, min_kept=1e-7)
    assert rec.threshold == 1e-6
    assert rec.n_removed == int(np.sum(lam < 1e-6))


def test_policy_levels_move_the_verdict(water):
    r = auditor.audit(water, "aug-cc-pvdz")
    lam = r.spectrum.smallest
    assert (
        auditor.audit(water, "aug-cc-pvdz", policy=auditor.Policy(caution=lam * 10, fail=lam / 10)).verdict == "caution"
    )
    assert (
        auditor.audit(water, "aug-cc-pvdz", policy=auditor.Policy(caution=lam * 100, fail=lam * 10)).verdict == "fail"
    )
    with pytest.raises(auditor.UsageError):
        auditor.Policy(caution=1e-8, fail=1e-5)


def test_json_schema_and_determinism(water):
    a = to_json(auditor.audit(water, "aug-cc-pvdz", basis_for={"H": "cc-pvdz"}))
    b = to_json(auditor.audit(water, "aug-cc-pvdz", basis_for=["H=cc-pvdz"]))
    assert a == b
    d = json.loads(a)
    assert d["schema"] == "auditor-report/1"
    assert set(d["input"]) >= {"path", "basis", "n_atoms", "n_functions"}
    assert set(d["spectrum"]) >= {"smallest", "largest", "condition_number", "counts_below"}
    assert list(d["spectrum"]["counts_below"]) == [f"1e-{k:02d}" for k in range(3, 11)]
    assert d["verdict"] in ("pass", "caution", "fail")
    assert set(d["causes"]) >= {"atoms", "shells"}
    assert set(d["recommendation"]) >= {"threshold", "n_removed"}
    for f in d["findings"]:
        assert set(f) >= {"kind", "severity", "atoms", "message"}
    assert abs(sum(a["weight"] for a in d["causes"]["atoms"]) - 1.0) < 1e-4
    # per-element override: H gets cc-pVDZ (5 functions), O aug-cc-pVDZ (23 functions)
    assert d["input"]["n_functions"] == 23 + 2 * 5


def test_api_accepts_mole_atoms_and_path(tmp_path, water):
    from ase import Atoms
    from pyscf import gto

    from helpers import write_xyz

    symbols, coords = WATER
    p = write_xyz(tmp_path / "w.xyz", symbols, coords)
    r_path = auditor.audit(p, "cc-pvdz")
    r_ase = auditor.audit(Atoms(symbols, positions=coords), "cc-pvdz")
    pm = gto.M(atom=list(zip(symbols, map(tuple, coords))), basis="cc-pvdz", verbose=0)
    r_mole = auditor.audit(pm)
    for r in (r_ase, r_mole):
        assert r.spectrum.smallest == pytest.approx(r_path.spectrum.smallest, rel=1e-10)
        assert r.input.n_functions == r_path.input.n_functions
    # the Mole's ghost atoms are recognized
    pm2 = gto.M(atom="O 0 0 0; H 0 0.76 0.59; ghost-H 0 -0.76 0.59", basis="cc-pvdz", spin=1, verbose=0)
    assert auditor.audit(pm2).input.ghost_atoms == (3,)


def test_chunked_diffuse_maxima_equal_direct_blocks():
    # the memory-light chunked scan must equal max |S| over each pair of shells, computed directly
    from auditor.diagnosis.findings import _diffuse_block_maxima

    symbols, coords = WATER
    mol = make_molecule(symbols * 2, list(coords) + (np.array(coords) + [0.0, 0.0, 2.6]).tolist())
    prep = prepare(mol, BasisSpec("aug-cc-pvdz"))
    t, S = prep.table, prep.S
    shells = np.flatnonzero(t.shell_diffuse)
    direct = np.array([[np.abs(S[np.ix_(t.func_shell == i, t.func_shell == j)]).max() for j in shells] for i in shells])
    for chunk in (2**25, 4000, 64):
        assert np.array_equal(_diffuse_block_maxima(S, t, shells, chunk), direct)
