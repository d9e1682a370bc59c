"""The unit-diagonal overlap matrix and the table of its functions, via pyscf."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .basis import BasisSpec, is_diffuse, load_shells, thaw
from .geometry import ELEMENTS, Molecule

L_LETTERS = "spdfghiklm"


@dataclass(frozen=True)
class FunctionTable:
    """Who is who among the basis functions and their shells.

    Shell arrays are indexed by contracted shell (every contraction of a
    generally contracted pyscf shell counts as its own shell); function arrays by
    basis function in pyscf's AO order. Atom numbers are 1-based.
    """

    shell_atom: np.ndarray      # (n_shells,) 1-based atom number
    shell_l: np.ndarray         # (n_shells,) angular momentum
    shell_exponent: np.ndarray  # (n_shells,) smallest exponent with a non-negligible coefficient
    shell_diffuse: np.ndarray   # (n_shells,) bool
    shell_name: tuple[str, ...]  # e.g. "3p" (numbered per atom and l, like 1s 2s 2p 3d)
    shell_first: np.ndarray     # (n_shells,) index of its first function
    func_shell: np.ndarray      # (n_functions,) shell index of each function
    func_component: tuple[str, ...]  # e.g. "px", "dxy", "f-1"
    elements: tuple[str, ...]   # element per atom (index atom-1)
    ghost: tuple[bool, ...]     # ghost flag per atom

    @property
    def n_functions(self) -> int:
        return int(self.func_shell.size)

    @property
    def n_shells(self) -> int:
        return int(self.shell_atom.size)

    @property
    def func_atom(self) -> np.ndarray:
        return self.shell_atom[self.func_shell]

    def function_label(self, i: int) -> str:
        s = int(self.func_shell[i])
        a = int(self.shell_atom[s])
        return f"{self.elements[a - 1]}{a} {self.shell_name[s]}{self.func_component[i].lstrip(self.shell_name[s][-1:])}"

    def shell_label(self, s: int) -> str:
        a = int(self.shell_atom[s])
        ghost = " (ghost)" if self.ghost[a - 1] else ""
        return f"{self.elements[a - 1]}{a}{ghost} {self.shell_name[s]}"


def pyscf_labels(mol: Molecule) -> list[str]:
    """pyscf atom labels: ghost atoms carry the 'ghost-' prefix."""
    return [("ghost-" + s) if g else s for s, g in zip(mol.symbols, mol.ghost)]


def resolve_basis(mol: Molecule, spec: BasisSpec) -> dict[str, list]:
    """pyscf basis dictionary for every label in ``mol`` (raises InputError on gaps)."""
    out: dict[str, list] = {}
    for el in sorted(set(mol.symbols)):
        shells = thaw(load_shells(spec.for_element(el), el))
        out[el] = shells
        out["ghost-" + el] = shells
    return out


def build_mole(mol: Molecule, spec: BasisSpec):
    """pyscf Mole with the molecule's atoms (ångström) and the resolved basis.

    Charge and spin are set only so that pyscf accepts the electron count: the
    overlap does not depend on them.
    """
    from pyscf import gto

    basis = resolve_basis(mol, spec)
    atoms = [(lab, tuple(map(float, xyz))) for lab, xyz in zip(pyscf_labels(mol), mol.coords)]
    nelec = sum(ELEMENTS.index(s) + 1 for s, g in zip(mol.symbols, mol.ghost) if not g)
    pm = gto.Mole()
    pm.atom = atoms
    pm.basis = basis
    pm.unit = "Angstrom"
    pm.cart = spec.cartesian
    pm.charge = 0
    pm.spin = nelec % 2
    pm.verbose = 0
    pm.build(dump_input=False, parse_arg=False)
    return pm


def function_table(pm, mol: Molecule, spec: BasisSpec) -> FunctionTable:
    """Label every function of pyscf Mole ``pm`` (built from ``mol`` with ``spec``)."""
    ao_labels = pm.ao_labels(fmt=False)
    shell_atom, shell_l, shell_exp, shell_dif, shell_name, shell_first = [], [], [], [], [], []
    func_shell: list[int] = []
    func_comp: list[str] = []
    f = 0
    for b in range(pm.nbas):
        ia = pm.bas_atom(b)
        l = pm.bas_angular(b)
        exps = pm.bas_exp(b)
        coeff = pm.bas_ctr_coeff(b)
        ncomp = (l + 1) * (l + 2) // 2 if pm.cart else 2 * l + 1
        el = mol.symbols[ia]
        for c in range(pm.bas_nctr(b)):
            col = np.abs(coeff[:, c])
            used = exps[col > 1e-8 * col.max()] if col.max() > 0 else exps
            amin = float(used.min())
            s = len(shell_atom)
            shell_atom.append(ia + 1)
            shell_l.append(l)
            shell_exp.append(amin)
            shell_dif.append(is_diffuse(spec.for_element(el), el, l, amin))
            shell_name.append(ao_labels[f][2])
            shell_first.append(f)
            for k in range(ncomp):
                func_shell.append(s)
                func_comp.append(ao_labels[f + k][2][-1:] + ao_labels[f + k][3] if l else "s")
            f += ncomp
    return FunctionTable(
        shell_atom=np.asarray(shell_atom, dtype=np.int64),
        shell_l=np.asarray(shell_l, dtype=np.int64),
        shell_exponent=np.asarray(shell_exp, dtype=float),
        shell_diffuse=np.asarray(shell_dif, dtype=bool),
        shell_name=tuple(shell_name),
        shell_first=np.asarray(shell_first, dtype=np.int64),
        func_shell=np.asarray(func_shell, dtype=np.int64),
        func_component=tuple(func_comp),
        elements=tuple(mol.symbols),
        ghost=tuple(mol.ghost),
    )


def normalized_overlap(pm) -> np.ndarray:
    """S with unit diagonal, D^-1/2 S D^-1/2, scaled in place (one N x N array)."""
    S = pm.intor_symmetric("int1e_ovlp")
    d = 1.0 / np.sqrt(np.diagonal(S).copy())
    S *= d[:, None]
    S *= d[None, :]
    np.fill_diagonal(S, 1.0)
    return S
