"""The whole-shell remedies: the shell-pruned basis by the one whole-shell rule, with and
without the constraint that equivalent atoms are pruned alike (symmetry), and the point
groups pyscf detects for the full and the pruned basis."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..base.errors import UsageError
from .frames import joint_select, joint_shells_from_functions
from .prepared import PreparedGeometry
from .pruned_basis import atom_shell_keys, pruned_labels
from .subset import Selection, check_atoms_not_emptied
from .symmetry import SYMMETRY_TOLERANCE, Symmetry, common_symmetry, find_symmetry, orbits, point_group, shell_units

#: The one rule for a whole-shell set, the same in `check`, `prune`, the gate and the API:
#: the shells the function-level subset leaves whole, then the other shells offered back;
#: shell pivoting only when that yields nothing (no shell left whole, or an atom emptied).
#: Measured against the better of both sets (docs/numerics.md, "Whole shells"): as good or
#: better in five of eight cases, never more than seven functions worse, and shell
#: pivoting's per-shell Python loop made `check` 1.7-5.5 times slower.
WHOLE_SHELL_RULE = "shells the function-level subset leaves whole; shell pivoting when that yields nothing"


def whole_shell_selection(
    Ss: Sequence[np.ndarray],
    target: float,
    functions: Selection | None,
    units: np.ndarray,
    atoms: np.ndarray,
    mode: str,
    problems: list[str],
    what: str = "shell-pruned basis",
    consume: bool = False,
) -> Selection | None:
    """The whole-unit kept set by `WHOLE_SHELL_RULE` for every frame of ``Ss`` (worst first);
    ``units`` numbers the shell, or the set of symmetry-equivalent shells, of each function.
    ``consume``: this is the last use of ``functions.factor``, whose memory may be reused."""
    if functions is not None:
        seeded = joint_shells_from_functions(Ss, functions, units, verify=mode, consume=consume)
        if seeded is not None:
            try:
                check_atoms_not_emptied(seeded.kept, atoms, what=f"target {target:g}")
                return seeded
            except UsageError:
                pass
    try:
        return joint_select(Ss, target, units, atoms, verify=mode)
    except UsageError as exc:
        problems.append(f"{what}: {exc.message}")
        return None


def atom_kinds(prep: PreparedGeometry) -> list[tuple[str, bool, str]]:
    """What makes two atoms interchangeable: element, ghost or real, and basis data (which
    can differ between atoms of one element when a file carries it per atom)."""
    mol = prep.molecule
    return list(zip(mol.symbols, map(bool, mol.ghost), atom_shell_keys(prep)))


@dataclass(frozen=True)
class SymmetryFound:
    """The operations every frame shares, their sets of equivalent atoms (0-based), the
    whole-shell units they define, and each frame's own operations."""

    common: Symmetry
    atom_sets: list[list[int]]
    units: np.ndarray
    per_frame: list[Symmetry]

    @property
    def trivial(self) -> bool:
        return all(len(s) == 1 for s in self.atom_sets)


def find_frames_symmetry(preps: Sequence[PreparedGeometry]) -> SymmetryFound:
    """Symmetry of each frame (positions within `SYMMETRY_TOLERANCE`) and what they share."""
    kinds = atom_kinds(preps[0])
    per_frame = [find_symmetry(p.molecule.coords, kinds, SYMMETRY_TOLERANCE) for p in preps]
    common = common_symmetry(per_frame)
    sets = orbits(common, len(kinds))
    return SymmetryFound(common, sets, shell_units(preps[0].table, sets), per_frame)


def full_point_group(prep: PreparedGeometry, sym: Symmetry) -> str:
    """pyscf's point group of the full basis (atoms told apart by element, basis and ghost flag)."""
    return _labelled_point_group(prep, np.ones(prep.table.n_shells, dtype=bool), sym)


def pruned_point_group(prep: PreparedGeometry, kept: np.ndarray, sym: Symmetry) -> str:
    """pyscf's point group of the basis that keeps the functions ``kept``, its atoms labelled
    as in the pruned-basis document (atoms with different basis sets get different labels)."""
    keep = np.zeros(prep.table.n_shells, dtype=bool)
    keep[np.unique(prep.table.func_shell[kept])] = True
    return _labelled_point_group(prep, keep, sym)


def _labelled_point_group(prep: PreparedGeometry, keep: np.ndarray, sym: Symmetry) -> str:
    labels = pruned_labels(prep, keep)
    basis = dict(zip(labels, atom_shell_keys(prep, keep)))
    return point_group(labels, prep.molecule.coords, basis, sym)
