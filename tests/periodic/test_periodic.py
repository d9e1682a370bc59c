"""The periodic audit held to theory: Bloch's theorem (a supercell's Γ spectrum is the union of
the primitive cell's spectra at the folded k-points), a molecule in a large box, time reversal
and Hermiticity of S(k), normalized atomic orbitals, the exponent cutoff at zero, and the
lattice-sum check. Small cells and small meshes only."""

import numpy as np
import pytest

import auditor
from auditor.base.errors import ResourceError, UsageError
from auditor.inputs.basis import BasisSpec, load_shells, thaw
from auditor.inputs.cell import Crystal, default_kmesh, mesh_rows, parse_kmesh
from auditor.numerics import periodic as P
from auditor.numerics.overlap import build_mole, normalized_overlap
from auditor.pipeline.periodic import audit_cell
from auditor.remedies.cutoff import primitive_overlap, truncate
from helpers import WATER, make_molecule

# two H atoms in a simple cubic cell of 2.2 Å (a compressed, strongly overlapping lattice)
H2_CELL = Crystal(
    symbols=("H", "H"),
    coords=np.array([[0.0, 0.0, 0.0], [0.75, 0.2, 0.1]]),
    lattice=np.diag([2.2, 2.4, 2.6]),
    pbc=(True, True, True),
    ghost=(False, False),
    source="<h2 cell>",
)


def supercell(c: Crystal, reps: tuple[int, int, int]) -> Crystal:
    shifts = [np.array(n) @ c.lattice for n in np.ndindex(*reps)]
    coords = np.vstack([c.coords + s for s in shifts])
    return Crystal(
        symbols=c.symbols * len(shifts),
        coords=coords,
        lattice=c.lattice * np.array(reps)[:, None],
        pbc=c.pbc,
        ghost=c.ghost * len(shifts),
        source="<supercell>",
    )


def spectra(c: Crystal, basis: str, mesh, precision=1e-12):
    cell = P.build_cell(c, P.cell_basis(c, BasisSpec(basis)), precision)
    return P.k_spectra(cell, P.monkhorst_pack(cell, mesh)), cell


@pytest.mark.parametrize("reps", [(2, 1, 1), (2, 2, 2)])
def test_bloch_supercell_gamma_is_the_union_of_the_folded_k_points(reps):
    # Bloch's theorem (Ashcroft & Mermin, ch. 8): the supercell's Γ point folds the primitive
    # k-points k = n_i b_i / N_i, which is the Γ-centred N1 x N2 x N3 mesh
    prim, _ = spectra(H2_CELL, "cc-pvdz", reps)
    sup, _ = spectra(supercell(H2_CELL, reps), "cc-pvdz", (1, 1, 1))
    union = np.sort(prim.values.ravel())
    assert sup.values.shape == (1, union.size)
    assert np.max(np.abs(sup.values[0] - union)) < 1e-10
    assert union[0] < 0.5  # a real test: the lattice is compressed, S(k) far from the identity


def test_molecule_in_a_large_box_gives_the_molecular_overlap_at_gamma():
    # the images of a molecule in a 30 Å box do not overlap: S(Γ) is the molecular S (pyscf.gto)
    mol = make_molecule(*WATER)
    box = Crystal(mol.symbols, mol.coords + 15.0, np.eye(3) * 30.0, (True, True, True), mol.ghost)
    sp, cell = spectra(box, "cc-pvdz", (1, 1, 1))
    S_mol = normalized_overlap(build_mole(mol, BasisSpec("cc-pvdz")))
    S_gamma = P.overlap_at(cell, sp.mesh, 0)
    assert np.max(np.abs(S_gamma - S_mol)) < 1e-10
    assert np.max(np.abs(sp.values[0] - np.linalg.eigvalsh(S_mol))) < 1e-10


def test_time_reversal_translation_and_hermiticity():
    # real AOs: S(-k) = S(k)*; pyscf's Bloch sums carry exp(ik.T): S(k + G) = S(k); S(k) = S(k)^H
    _, cell = spectra(H2_CELL, "cc-pvdz", (1, 1, 1))
    k = np.array([0.31, -0.17, 0.23]) @ cell.reciprocal_vectors()
    G = cell.reciprocal_vectors()[0]
    scale, _ = P.home_scale(cell)
    S = P.kpoint_overlaps(cell, np.vstack([k, -k, k + G]), scale)
    assert np.max(np.abs(S[1] - S[0].conj())) < 1e-12
    assert np.max(np.abs(S[2] - S[0])) < 1e-12
    assert np.max(np.abs(S[0] - S[0].conj().T)) < 1e-13
    assert np.max(np.abs(S[0].imag)) > 1e-3  # complex indeed


def test_mirrored_k_points_match_a_direct_computation_and_aos_are_normalized():
    sp, cell = spectra(H2_CELL, "aug-cc-pvdz", (3, 2, 2))
    assert sp.diagonal_error < P.DIAGONAL_SLACK  # pyscf's AOs: <phi|phi> = 1 in the home cell
    assert sp.mesh.computed.size < sp.mesh.n  # time reversal halved the work
    scale, _ = P.home_scale(cell)
    S = P.kpoint_overlaps(cell, sp.mesh.kpts, scale)
    direct = np.linalg.eigvalsh(S)
    assert np.max(np.abs(direct - sp.values)) < 1e-12
    # the diagonal of S(k) is not 1: per-k rescaling would hide the Bloch sums that vanish
    assert sp.bloch_norms.min() < 0.5 and sp.bloch_norms.max() > 1.5


def test_cutoff_at_zero_is_the_full_basis_and_cut_contractions_are_normalized():
    shells = thaw(load_shells("aug-cc-pvdz", "C"))
    assert truncate(shells, 0.0) == shells
    cut = truncate(shells, 0.53)
    assert all(p[0] >= 0.53 for s in cut for p in s[1:])
    changed = [s for s in cut if s not in shells]
    assert changed
    for s in changed:  # every cut contraction has unit norm: c^T M c = 1 (normalized primitives)
        exps = np.array([p[0] for p in s[1:]])
        coef = np.array([p[1:] for p in s[1:]])
        norms = np.einsum("pc,pq,qc->c", coef, primitive_overlap(s[0], exps), coef)
        assert np.allclose(norms, 1.0, atol=1e-12)
    full, _ = spectra(H2_CELL, "aug-cc-pvdz", (2, 1, 1))
    basis = {"H": truncate(thaw(load_shells("aug-cc-pvdz", "H")), 0.0)}
    cell = P.build_cell(H2_CELL, basis, 1e-12)
    again = P.k_spectra(cell, P.monkhorst_pack(cell, (2, 1, 1)))
    assert np.array_equal(again.values, full.values)


DIAMOND = Crystal(
    symbols=("C", "C"),
    coords=np.array([[0.0, 0.0, 0.0], [0.89175, 0.89175, 0.89175]]),
    lattice=np.array([[0.0, 1.7835, 1.7835], [1.7835, 0.0, 1.7835], [1.7835, 1.7835, 0.0]]),
    pbc=(True, True, True),
    ghost=(False, False),
    source="<diamond>",
)


def test_loose_lattice_sums_are_caught_and_never_reported_as_physics():
    # at precision 1e-10 diamond in aug-cc-pVDZ has an eigenvalue of about -7e-12 at Γ: truncated
    # sums (S(k) is a Gram matrix, positive semidefinite); the check moves on to 1e-12
    r = audit_cell(DIAMOND, "aug-cc-pvdz", kmesh=(2, 2, 2), precision=1e-10, remedies=False)
    d = r.as_dict()
    conv = d["periodic"]["precision"]
    assert conv["requested"] == 1e-10 and conv["used"] == 1e-12 and conv["converged"]
    assert conv["steps"][0]["smallest"] < -1e-12
    assert d["spectrum"]["smallest"] > -conv["tolerance"]
    kinds = {f["kind"] for f in d["findings"]}
    assert "lattice_sum_unconverged" in kinds and "negative_eigenvalue" not in kinds
    assert d["verdict"] == "fail" and d["periodic"]["worst"]["k"] == 1  # Γ
    assert "image_overlap" in kinds


def test_kmesh_parsing_default_and_vacuum_axis():
    assert parse_kmesh("4,4,4") == (4, 4, 4) and parse_kmesh("2x3x1") == (2, 3, 1) and parse_kmesh(None) is None
    with pytest.raises(UsageError):
        parse_kmesh("4,4")
    assert default_kmesh(DIAMOND) == (6, 6, 6)  # ceil(12 Å / 2.52 Å) = 5, made even
    slab = Crystal(("H",), np.zeros((1, 3)), np.diag([3.0, 3.0, 20.0]), (True, True, False), (False,))
    assert default_kmesh(slab) == (4, 4, 1)
    with pytest.raises(UsageError):
        mesh_rows(slab, (4, 4, 2))


def test_memory_guard_counts_k_points():
    with pytest.raises(ResourceError):
        P.check_memory(20000, 64, available=2 * 1024**3)
    assert P.plan_batch(100, 64, 32, available=8 * 1024**3) == P.MAX_BATCH


def test_canonical_orthogonalization_is_ranked_at_the_target_with_the_bound():
    # Reference: numpy.linalg.eigvalsh of pyscf.pbc's S(k) at every k-point (as in the test
    # above); at the target canonical orthogonalization removes, at each k, the eigenvalues
    # below it, so the most at one k-point is both its count and the interlacing bound.
    target = 1e-3
    r = audit_cell(H2_CELL, "aug-cc-pvdz", kmesh=(2, 2, 2), remedies=auditor.RemedyOptions(target=target))
    sp, cell = spectra(H2_CELL, "aug-cc-pvdz", (2, 2, 2))
    scale, _ = P.home_scale(cell)
    direct = np.linalg.eigvalsh(P.kpoint_overlaps(cell, sp.mesh.kpts, scale))
    counts = (direct < target).sum(axis=1)
    canon = next(a for a in r.remedies.alternatives if a.kind == "canonical_orthogonalization")
    assert counts.max() > 0 and r.remedies.lower_bound == canon.removed == counts.max()
    assert canon.threshold == target and canon.reaches_target
    assert canon.smallest_after == pytest.approx(direct[direct >= target].min(), rel=1e-9)
    assert all(a.removed >= counts.max() for a in r.remedies.alternatives if a.removed is not None)
