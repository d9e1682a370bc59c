"""The unit-diagonal overlap matrix and the table of its functions, via pyscf."""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from typing import TYPE_CHECKING

import numpy as np

from ..base.elements import ELEMENTS
from ..base.errors import InputError
from ..inputs.basis import BasisSpec, is_diffuse, load_shells, thaw
from ..inputs.geometry import Molecule, check_molecule

if TYPE_CHECKING:
    from pyscf import gto


@dataclass(frozen=True)
class FunctionTable:
    """Who is who among the basis functions and their shells.

    Shell arrays are indexed by contracted shell (every contraction of a
    generally contracted pyscf shell counts as its own shell); function arrays by
    basis function in pyscf's AO order. Atom numbers are 1-based.
    """

    shell_atom: np.ndarray  # (n_shells,) 1-based atom number
    shell_l: np.ndarray  # (n_shells,) angular momentum
    shell_exponent: np.ndarray  # (n_shells,) smallest exponent with a non-negligible coefficient
    shell_diffuse: np.ndarray  # (n_shells,) bool
    shell_name: tuple[str, ...]  # e.g. "3p" (numbered per atom and l, like 1s 2s 2p 3d)
    shell_first: np.ndarray  # (n_shells,) index of its first function
    func_shell: np.ndarray  # (n_functions,) shell index of each function
    func_component: tuple[str, ...]  # e.g. "px", "dxy", "f-1"
    elements: tuple[str, ...]  # element per atom (index atom-1)
    ghost: tuple[bool, ...]  # ghost flag per atom

    @property
    def n_functions(self) -> int:
        return int(self.func_shell.size)

    @property
    def n_shells(self) -> int:
        return int(self.shell_atom.size)

    @property
    def func_atom(self) -> np.ndarray:
        return self.shell_atom[self.func_shell]

    @property
    def func_diffuse(self) -> np.ndarray:
        return self.shell_diffuse[self.func_shell]

    @property
    def non_diffuse(self) -> np.ndarray:
        """Indices of the functions of non-diffuse shells: the set every diffuse option and
        published relative without diffuse shells keeps (`auditor.numerics.cholesky.SharedCore`)."""
        return np.flatnonzero(~self.func_diffuse)

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


def build_mole(mol: Molecule, spec: BasisSpec) -> gto.Mole:
    """pyscf Mole with the molecule's atoms (ångström) and the resolved basis.

    Charge and spin are set only so that pyscf accepts the electron count: the
    overlap does not depend on them. Molecules with the same atom labels and basis
    reuse one built Mole (the basis set-up is most of the cost of a small molecule);
    only the coordinates are replaced, which gives the same integrals bit for bit.
    """
    check_molecule(mol)  # a Molecule made by hand may hold anything
    if spec.data is not None:
        return _explicit_mole(mol, spec)
    labels = tuple(pyscf_labels(mol))
    template = _mole_template(labels, tuple(spec.for_element(s) for s in mol.symbols), spec.cartesian, spec.source)
    if mol.bohr is not None:  # the file's own numbers, not a round trip through ångström
        return template.set_geom_(np.asarray(mol.bohr, dtype=float), unit="Bohr", inplace=False)
    coords = np.asarray(mol.coords, dtype=float)
    return template.set_geom_(coords, unit="Angstrom", inplace=False)


def _explicit_mole(mol: Molecule, spec: BasisSpec) -> gto.Mole:
    """pyscf Mole with the basis data an input carries (a checkpoint's, a QCSchema
    document's), one label per atom so that every atom gets exactly its own shells; the
    coordinates in bohr as the file gave them when it did."""
    from pyscf import gto  # pyscf is slow to import: only when a Mole is built

    data = spec.data
    if data is None or len(data.atoms) != mol.n_atoms:
        raise InputError(f"{mol.source}: the basis data do not match the {mol.n_atoms} atoms")
    labels = [("ghost-" if g else "") + f"{s}{i + 1}" for i, (s, g) in enumerate(zip(mol.symbols, mol.ghost))]
    bohr = mol.bohr is not None
    coords = np.asarray(mol.bohr if bohr else mol.coords, dtype=float)
    nelec = sum(ELEMENTS.index(s) + 1 for s, g in zip(mol.symbols, mol.ghost) if not g)
    pm = gto.Mole()
    pm.atom = [(lab, tuple(float(x) for x in xyz)) for lab, xyz in zip(labels, coords)]
    pm.basis = {lab: thaw(shells) for lab, shells in zip(labels, data.atoms)}
    pm.unit = "Bohr" if bohr else "Angstrom"
    pm.cart = data.cartesian
    pm.charge = 0
    pm.spin = nelec % 2
    pm.verbose = 0
    try:
        pm.build(dump_input=False, parse_arg=False)
    except Exception as exc:  # pyscf raises RuntimeError, ValueError, ... on basis data it cannot use
        raise InputError(f"{mol.source}: pyscf cannot use the basis data ({type(exc).__name__})") from None
    return pm


@lru_cache(maxsize=512)  # a Mole of a small molecule holds a few kB
def _mole_template(labels: tuple[str, ...], names: tuple[str, ...], cartesian: bool, source: str) -> gto.Mole:
    from pyscf import gto  # pyscf is slow to import: only when a Mole is built

    basis: dict[str, list] = {}
    for lab, name in zip(labels, names):
        el = lab.removeprefix("ghost-")
        basis[lab] = thaw(load_shells(name, el, source))
    nelec = sum(ELEMENTS.index(lab) + 1 for lab in labels if not lab.startswith("ghost-"))
    pm = gto.Mole()
    pm.atom = [(lab, (0.0, 0.0, 0.1 * i)) for i, lab in enumerate(labels)]  # replaced by set_geom_
    pm.basis = basis
    pm.unit = "Angstrom"
    pm.cart = cartesian
    pm.charge = 0
    pm.spin = nelec % 2
    pm.verbose = 0
    pm.build(dump_input=False, parse_arg=False)
    return pm


def function_table(mol: Molecule, spec: BasisSpec) -> FunctionTable:
    """Label every function of ``mol`` in ``spec``, in pyscf's AO order (atom by atom),
    assembled from one labelled single-atom table per element."""
    parts = [_element_table(el, spec.for_element(el), spec.cartesian, spec.source) for el in mol.symbols]
    n_sh = np.cumsum([0] + [p.n_shells for p in parts])
    n_fn = np.cumsum([0] + [p.n_functions for p in parts])
    cat = np.concatenate
    return FunctionTable(
        shell_atom=cat([np.full(p.n_shells, a + 1, dtype=np.int64) for a, p in enumerate(parts)]),
        shell_l=cat([p.shell_l for p in parts]),
        shell_exponent=cat([p.shell_exponent for p in parts]),
        shell_diffuse=cat([p.shell_diffuse for p in parts]),
        shell_name=tuple(x for p in parts for x in p.shell_name),
        shell_first=cat([p.shell_first + n_fn[a] for a, p in enumerate(parts)]),
        func_shell=cat([p.func_shell + n_sh[a] for a, p in enumerate(parts)]),
        func_component=tuple(x for p in parts for x in p.func_component),
        elements=tuple(mol.symbols),
        ghost=tuple(mol.ghost),
    )


@lru_cache(maxsize=256)
def _element_table(el: str, name: str, cartesian: bool, source: str) -> FunctionTable:
    from pyscf import gto  # pyscf is slow to import: only when a Mole is built

    atom = Molecule((el,), np.zeros((1, 3)), (False,))
    pm = gto.Mole()
    pm.atom = [(el, (0.0, 0.0, 0.0))]
    pm.basis = {el: thaw(load_shells(name, el, source))}
    pm.cart = cartesian
    pm.spin = (ELEMENTS.index(el) + 1) % 2
    pm.verbose = 0
    pm.build(dump_input=False, parse_arg=False)
    return mole_function_table(pm, atom, BasisSpec(name, {}, cartesian, source))


def mole_function_table(pm: gto.Mole, mol: Molecule, spec: BasisSpec) -> FunctionTable:
    """Label every function of pyscf Mole ``pm`` (built from ``mol`` with ``spec``)."""
    ao_labels = pm.ao_labels(fmt=False)
    shell_atom: list[int] = []
    shell_l: list[int] = []
    shell_exp: list[float] = []
    shell_dif: list[bool] = []
    shell_name: list[str] = []
    shell_first: list[int] = []
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
            shell_dif.append(is_diffuse(spec.for_element(el), el, l, amin, spec.source))
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


def normalized_overlap(pm: gto.Mole) -> np.ndarray:
    """S with unit diagonal, D^-1/2 S D^-1/2, scaled in place (one N x N array)."""
    S = pm.intor_symmetric("int1e_ovlp")
    d = 1.0 / np.sqrt(np.diagonal(S).copy())
    S *= d[:, None]
    S *= d[None, :]
    np.fill_diagonal(S, 1.0)
    return S
