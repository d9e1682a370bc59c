"""The overlap computation held against sources outside the project."""

import numpy as np
import pytest
from scipy.optimize import brentq

from auditor.base.elements import BOHR_IN_ANGSTROM
from auditor.diagnosis.findings import gaussian_s_overlap
from auditor.inputs.basis import BasisSpec, load_shells
from auditor.numerics.eigen import compute_spectrum
from auditor.numerics.overlap import normalized_overlap
from auditor.pipeline.run import prepare
from helpers import make_molecule


def slater_1s_overlap(R):
    """Two 1s Slater functions, unit exponent, R bohr apart: e^-R (1 + R + R^2/3)
    (Mulliken, Rieke, Orloff & Orloff, J. Chem. Phys. 17, 1248 (1949))."""
    return np.exp(-R) * (1.0 + R + R**2 / 3.0)


def two_centre_overlap(basis, R_bohr, element="H"):
    from pyscf import gto

    mol = gto.M(
        atom=[(element, (0, 0, 0)), (element, (0, 0, R_bohr))],
        unit="Bohr",
        basis={element: basis},
        spin=None,
        verbose=0,
    )
    S = normalized_overlap(mol)
    return S[0, 1]


def test_slater_formula_half_point():
    # S(0) = 1, S -> 0, and S = 1/2 near R = 2.33 bohr (Mulliken et al. 1949 tables, from memory)
    assert slater_1s_overlap(0.0) == pytest.approx(1.0)
    assert slater_1s_overlap(60.0) < 1e-20
    assert brentq(lambda r: slater_1s_overlap(r) - 0.5, 1.0, 4.0) == pytest.approx(2.33, abs=0.01)


def test_sto6g_reproduces_slater_overlap():
    # STO-6G (Hehre, Stewart & Pople, J. Chem. Phys. 51, 2657 (1969)). pyscf tabulates it for
    # H with Slater exponent 1.24; exponents scale with zeta^2, so divide by 1.24^2 for zeta = 1.
    sto6g = [[0] + [[a / 1.24**2, c] for a, c in shell[1:]] for shell in load_shells("sto-6g", "H")]
    # The six-term fit reproduces the Slater overlap to about 1e-5 over 0-6 bohr (the
    # largest deviation, 1.5e-5, lies near R = 5 bohr where the fit's tail is weakest).
    worst = max(abs(two_centre_overlap(sto6g, R) - slater_1s_overlap(R)) for R in np.linspace(0.0, 6.0, 61))
    assert worst < 2e-5
    assert two_centre_overlap(sto6g, 0.0) == pytest.approx(1.0, abs=1e-14)


def test_h2_sto3g_overlap():
    # H2, STO-3G, R = 1.4 bohr: S12 = 0.6593 (Szabo & Ostlund, Modern Quantum Chemistry, from memory)
    mol = make_molecule(["H", "H"], [[0, 0, 0], [0, 0, 1.4 * BOHR_IN_ANGSTROM]])
    prep = prepare(mol, BasisSpec("sto-3g"))
    assert prep.S[0, 1] == pytest.approx(0.6593, abs=1e-4)


@pytest.mark.parametrize("a,b,R", [(1.0, 1.0, 0.5), (0.3, 2.5, 1.7), (0.025, 0.07, 3.0), (5.0, 0.1, 0.0)])
def test_closed_form_s_gaussian_overlap(a, b, R):
    # Gaussian product theorem (Boys, Proc. R. Soc. A 200, 542 (1950)):
    # (2 sqrt(ab)/(a+b))^(3/2) exp(-ab R^2/(a+b)); for a = b it is exp(-a R^2 / 2)
    closed = gaussian_s_overlap(a, b, R)
    if a == b:
        assert closed == pytest.approx(np.exp(-a * R**2 / 2))
    got = two_centre_overlap([[0, [a, 1.0]]], R, element="H") if a == b else None
    from pyscf import gto

    mol = gto.M(
        atom=[("H", (0, 0, 0)), ("He", (0, 0, R if R else 1e-9))],
        unit="Bohr",
        basis={"H": [[0, [a, 1.0]]], "He": [[0, [b, 1.0]]]},
        spin=1,
        verbose=0,
    )
    got = normalized_overlap(mol)[0, 1]
    assert got == pytest.approx(closed, rel=1e-10, abs=1e-14)


@pytest.mark.parametrize("basis,n_h,n_heavy", [("cc-pvtz", 14, 30), ("aug-cc-pvtz", 23, 46)])
def test_function_counts(basis, n_h, n_heavy):
    # cc-pVTZ: 14 (H) and 30 (B-Ne) spherical functions (Dunning, J. Chem. Phys. 90, 1007 (1989));
    # aug-cc-pVTZ: 23 and 46 (Kendall, Dunning & Harrison, J. Chem. Phys. 96, 6796 (1992)).
    for el, n in (("H", n_h), ("B", n_heavy), ("C", n_heavy), ("O", n_heavy), ("Ne", n_heavy)):
        mol = make_molecule([el], [[0, 0, 0]])
        assert prepare(mol, BasisSpec(basis)).table.n_functions == n, el


def _primitive(centre, powers, a):
    def f(x, y, z):
        dx, dy, dz = x - centre[0], y - centre[1], z - centre[2]
        return dx ** powers[0] * dy ** powers[1] * dz ** powers[2] * np.exp(-a * (dx * dx + dy * dy + dz * dz))

    return f


CART = {1: [(1, 0, 0), (0, 1, 0), (0, 0, 1)], 2: [(2, 0, 0), (1, 1, 0), (1, 0, 1), (0, 2, 0), (0, 1, 1), (0, 0, 2)]}


@pytest.mark.parametrize("la,lb,a,b", [(1, 1, 0.8, 0.5), (1, 2, 0.6, 0.9), (2, 2, 0.7, 0.4)])
def test_quadrature_p_and_d_elements(la, lb, a, b):
    # Independent check: normalized Cartesian overlaps by numerical quadrature on a
    # uniform grid (scipy.integrate.trapezoid), against the auditor's unit-diagonal S.
    from pyscf import gto
    from scipy.integrate import trapezoid

    A, B = np.array([0.0, 0.0, 0.0]), np.array([0.4, -0.3, 0.9])
    mol = gto.M(
        atom=[("H", A), ("He", B)],
        unit="Bohr",
        cart=True,
        spin=1,
        verbose=0,
        basis={"H": [[la, [a, 1.0]]], "He": [[lb, [b, 1.0]]]},
    )
    S = normalized_overlap(mol)
    g = np.linspace(-7.5, 8.5, 161)
    X, Y, Z = np.meshgrid(g, g, g, indexing="ij")

    def integral(f):
        return trapezoid(trapezoid(trapezoid(f, g, axis=2), g, axis=1), g)

    fa = [_primitive(A, p, a)(X, Y, Z) for p in CART[la]]
    fb = [_primitive(B, p, b)(X, Y, Z) for p in CART[lb]]
    na = [np.sqrt(integral(f * f)) for f in fa]
    nb = [np.sqrt(integral(f * f)) for f in fb]
    n1 = len(fa)
    for i, f in enumerate(fa):
        for j, h in enumerate(fb):
            ref = integral(f * h) / (na[i] * nb[j])
            assert S[i, n1 + j] == pytest.approx(ref, abs=1e-7), (i, j)


def even_tempered_S(alpha, beta, n):
    from pyscf import gto

    basis = [[0, [alpha * beta**k, 1.0]] for k in range(n)]
    mol = gto.M(atom=[("H", (0, 0, 0))], basis={"H": basis}, spin=1, verbose=0)
    return normalized_overlap(mol)


def test_even_tempered_set():
    # Adjacent overlaps of one-centre s Gaussians, exponents a*beta^k: (2 sqrt(beta)/(1+beta))^(3/2)
    # (closed form above at R = 0); the spectrum degrades as beta -> 1
    # (Bardo & Ruedenberg, J. Chem. Phys. 59, 5956 (1973), from memory).
    smallest = []
    for beta in (3.0, 2.0, 1.5, 1.2):
        S = even_tempered_S(0.01, beta, 12)
        expected = (2 * np.sqrt(beta) / (1 + beta)) ** 1.5
        assert np.allclose(np.diagonal(S, 1), expected, rtol=1e-10)
        smallest.append(compute_spectrum(S, vector_level=1e-5).smallest)
    assert all(x > y for x, y in zip(smallest, smallest[1:]))
    assert smallest[-1] < 1e-8 < smallest[0]


def test_coincident_atoms_give_zero_eigenvalue():
    # Two identical centres carry identical functions: S has an exact null vector
    # (linear algebra), zero to rounding.
    mol = make_molecule(["O", "H", "H"], [[0, 0, 0], [0, 0.76, 0.59], [0, 0.76, 0.59]])
    spec = compute_spectrum(prepare(mol, BasisSpec("cc-pvdz")).S, vector_level=1e-5)
    assert abs(spec.smallest) < 1e-12
    assert spec.counts_below["1e-10"] == 5  # every H function is doubled: 5 functions in cc-pVDZ H


@pytest.mark.parametrize(
    "name,element", [("cc-pvtz", "O"), ("aug-cc-pvtz", "H"), ("aug-cc-pvtz", "C"), ("6-31+g*", "O")]
)
def test_exponents_agree_with_basis_set_exchange(name, element):
    # A second basis library (basis_set_exchange, MolSSI) holds the same exponents per l.
    bse = pytest.importorskip("basis_set_exchange")
    from auditor.base.elements import ELEMENTS

    z = ELEMENTS.index(element) + 1
    ref: dict[int, set] = {}
    for shell in bse.get_basis(name, elements=[z])["elements"][str(z)]["electron_shells"]:
        ls = shell["angular_momentum"]
        for l in ls if len(ls) > 1 else ls * 1:
            ref.setdefault(l, set()).update(round(float(e), 6) for e in shell["exponents"])
    ours: dict[int, set] = {}
    for shell in load_shells(name, element):
        ours.setdefault(shell[0], set()).update(float(p[0]) for p in shell[1:])
    assert sorted(ours) == sorted(ref)
    for l in ref:  # the two libraries round some exponents differently in the 8th digit
        assert np.allclose(sorted(ours[l]), sorted(ref[l]), rtol=1e-6), l
