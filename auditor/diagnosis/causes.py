"""Causes: the share of the near-null space carried by atoms, shells, angular momenta and diffuse shells."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..base.elements import L_LETTERS
from ..numerics.overlap import FunctionTable


@dataclass(frozen=True)
class Causes:
    """Share of the near-null space carried by atoms, shells, angular momenta."""

    n_vectors: int
    vectors_below: float
    #: eigenvalues below ``vectors_below`` (more than ``n_vectors`` when the large path capped
    #: the vectors it computed; fewer when a degenerate group was completed or none lies below)
    n_below: int | None
    atoms: list[dict]
    shells: list[dict]
    angular: list[dict]
    diffuse: dict


MAX_SHELLS_LISTED = 25


def attribute_causes(vectors: np.ndarray, table: FunctionTable, below: float, n_below: int | None = None) -> Causes:
    """Weight of every function in the span of ``vectors`` (orthonormal columns, whole
    degenerate groups), summed per atom, shell, angular momentum and diffuse/not; each
    list sums to 1. The weights are the diagonal of the projector onto that span (divided
    by its dimension), which does not depend on the choice of vectors inside it."""
    k = vectors.shape[1]
    w = np.einsum("ik,ik->i", vectors, vectors) / max(k, 1)
    n_atoms = len(table.elements)
    shell_w = np.bincount(table.func_shell, weights=w, minlength=table.n_shells)
    atom_w = np.bincount(table.shell_atom - 1, weights=shell_w, minlength=n_atoms)
    l_w = np.bincount(table.shell_l, weights=shell_w)
    dif_w = float(shell_w[table.shell_diffuse].sum())

    def r(x):
        return round(float(x), 6)

    atoms = [
        {"atom": int(a + 1), "element": table.elements[a], "ghost": bool(table.ghost[a]), "weight": r(atom_w[a])}
        for a in sorted(range(n_atoms), key=lambda a: (-atom_w[a], a))
        if atom_w[a] >= 5e-7
    ]
    shells = [
        {
            "shell": table.shell_label(s),
            "atom": int(table.shell_atom[s]),
            "element": table.elements[table.shell_atom[s] - 1],
            "l": L_LETTERS[table.shell_l[s]],
            "exponent": float(table.shell_exponent[s]),
            "diffuse": bool(table.shell_diffuse[s]),
            "weight": r(shell_w[s]),
        }
        for s in sorted(range(table.n_shells), key=lambda s: (-shell_w[s], s))[:MAX_SHELLS_LISTED]
    ]
    angular = [{"l": L_LETTERS[l], "weight": r(l_w[l])} for l in sorted(range(l_w.size), key=lambda l: (-l_w[l], l))]
    return Causes(k, below, n_below, atoms, shells, angular, {"diffuse": r(dif_w), "other": r(1.0 - dif_w)})
