"""The pruned basis: a pyscf-ready document that keeps only some whole shells."""

from __future__ import annotations

import json
from collections.abc import Iterable
from pathlib import Path

import numpy as np

from ..base.errors import InputError
from ..base.files import atomic_write
from ..base.jsonio import clean
from ..inputs.pruned import PRUNED_FORMAT
from ..numerics.overlap import FunctionTable
from .prepared import PreparedGeometry
from .subset import check_atoms_not_emptied


def function_record(table: FunctionTable, i: int) -> dict:
    """A function named by 1-based number and atom, element, shell, l and exponent."""
    s = int(table.func_shell[i])
    a = int(table.shell_atom[s])
    return {
        "function": i + 1,
        "atom": a,
        "element": table.elements[a - 1],
        "ghost": bool(table.ghost[a - 1]),
        "shell": table.shell_name[s],
        "component": table.func_component[i],
        "l": int(table.shell_l[s]),
        "exponent": float(table.shell_exponent[s]),
        "diffuse": bool(table.shell_diffuse[s]),
    }


def shell_record(table: FunctionTable, s: int) -> dict:
    """A shell named by atom, element, shell name, l, smallest exponent and size."""
    a = int(table.shell_atom[s])
    return {
        "atom": a,
        "element": table.elements[a - 1],
        "ghost": bool(table.ghost[a - 1]),
        "shell": table.shell_name[s],
        "l": int(table.shell_l[s]),
        "exponent": float(table.shell_exponent[s]),
        "diffuse": bool(table.shell_diffuse[s]),
        "functions": int(np.sum(table.func_shell == s)),
    }


def shell_entries(pm) -> list[tuple[int, int, list[list[float]]]]:
    """(0-based atom, l, [[exponent, coefficient], ...]) per contracted shell, in the
    order of the function table (each contraction of a pyscf shell is its own shell).
    Coefficients refer to normalized primitives, the convention of pyscf basis input."""
    out = []
    for b in range(pm.nbas):
        exps = pm.bas_exp(b)
        coeff = pm.bas_ctr_coeff(b)
        for c in range(pm.bas_nctr(b)):
            prims = [[float(e), float(x)] for e, x in zip(exps, coeff[:, c]) if x != 0.0]
            out.append((pm.bas_atom(b), pm.bas_angular(b), prims))
    return out


def atom_shell_keys(prep: PreparedGeometry, keep: np.ndarray | None = None) -> list[str]:
    """Per atom, a text that is equal for two atoms when they have the same basis data (as
    pyscf holds it per atom label) and keep the same of its shells (``keep``: a flag per
    shell, all by default)."""
    pm, table = prep.mole, prep.table
    data: dict[str, str] = {}
    out = []
    for i in range(prep.molecule.n_atoms):
        label = pm.atom_symbol(i)
        if label not in data:
            data[label] = repr(pm._basis.get(label))
        flags = "" if keep is None else np.packbits(keep[table.shell_atom == i + 1]).tobytes().hex()
        out.append(f"{data[label]}|{flags}")
    return out


def pruned_labels(prep: PreparedGeometry, keep: np.ndarray) -> list[str]:
    """pyscf atom labels of a pruning (``keep``: a flag per shell). Atoms with the same kept
    basis data share a label: the element ("H", "ghost-H") for the atoms like the first one
    that keeps every shell, else the element and the 1-based number of the first atom of the
    group ("H5", "ghost-H5"). pyscf treats atoms with one label as one kind, so the labels
    carry exactly the differences between the atoms' basis sets (pruned shells, and basis
    data read per atom from a checkpoint or QCSchema file)."""
    mol, table = prep.molecule, prep.table
    own = atom_shell_keys(prep, keep)
    plain: dict[str, str] = {}  # element label -> the kept data that goes by the bare label
    for i, (sym, ghost) in enumerate(zip(mol.symbols, mol.ghost)):
        if keep[table.shell_atom == i + 1].all():
            plain.setdefault(("ghost-" if ghost else "") + sym, own[i])
    labels: list[str] = []
    first: dict[tuple[str, str], str] = {}
    for i, (sym, ghost) in enumerate(zip(mol.symbols, mol.ghost)):
        base = ("ghost-" if ghost else "") + sym
        labels.append(base if plain.get(base) == own[i] else first.setdefault((base, own[i]), f"{base}{i + 1}"))
    return labels


def pruned_basis(
    prep: PreparedGeometry, kept_shells: Iterable[int], target: float | None = None, smallest: float | None = None
) -> dict:
    """The pyscf-ready document of a basis that keeps only ``kept_shells`` (0-based).

    Atoms are labelled by `pruned_labels`. Raises UsageError if an atom would keep no
    function.
    """
    mol, table = prep.molecule, prep.table
    keep = np.zeros(table.n_shells, dtype=bool)
    keep[np.asarray(list(kept_shells), dtype=int)] = True
    check_atoms_not_emptied(np.flatnonzero(keep[table.func_shell]), table.func_atom - 1, what="this pruning")
    entries = shell_entries(prep.mole)
    if len(entries) != table.n_shells:
        raise InputError("pyscf shells and the function table disagree; cannot write a pruned basis")
    atoms: list[list] = []
    basis: dict[str, list] = {}
    for i, (label, xyz) in enumerate(zip(pruned_labels(prep, keep), mol.coords)):
        atoms.append([label, [round(float(x), 10) for x in xyz]])
        if label not in basis:
            basis[label] = [[l, *prims] for s, (a, l, prims) in enumerate(entries) if a == i and keep[s]]
    dropped = [shell_record(table, int(s)) for s in np.flatnonzero(~keep)]
    return {
        "format": PRUNED_FORMAT,
        "source": mol.source,
        "basis_name": prep.spec.describe(),
        "unit": "angstrom",
        "cartesian": bool(prep.spec.cartesian),
        "charge": int(mol.charge),
        "spin": mol.spin,
        "target": target,
        "smallest_eigenvalue": smallest,
        "n_functions": int(np.sum(keep[table.func_shell])),
        "n_functions_full": table.n_functions,
        "atoms": atoms,
        "basis": basis,
        "dropped_shells": dropped,
    }


def write_pruned(doc: dict, path: Path) -> Path:
    atomic_write(path, json.dumps(clean(doc), indent=1, ensure_ascii=False, allow_nan=False) + "\n")
    return Path(path)
