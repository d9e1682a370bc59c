"""Periodic inputs in check's loop and in the gate: which files take the periodic path, their
audits one frame at a time, and the geometry record a gate item carries (with the lattice)."""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ..base.errors import UsageError
from ..inputs.cell import Crystal, has_cell, load_cells

if TYPE_CHECKING:
    from ..diagnosis.verdict import Policy
    from ..inputs.basis import BasisSpec
    from ..pipeline.result import AuditResult
    from ..remedies.plan import RemedyOptions


@dataclass(frozen=True)
class PeriodicOptions:
    """``kmesh`` along the file's lattice vectors (None: the default from the cell size) and
    the lattice-sum ``precision`` (None: the default); both apply to periodic inputs only."""

    kmesh: tuple[int, int, int] | None = None
    precision: float | None = None

    @property
    def asked(self) -> bool:
        return self.kmesh is not None or self.precision is not None

    def as_dict(self) -> dict:
        return {"kmesh": None if self.kmesh is None else list(self.kmesh), "precision": self.precision}


def is_periodic(path: str | Path) -> bool:
    """Whether ``path`` takes the periodic path (a cell file, or an XYZ with a Lattice)."""
    return has_cell(path)


def not_periodic(path: str | Path) -> UsageError:
    return UsageError(
        f"{path}: --kmesh and --precision apply to periodic inputs "
        "(CIF, extended XYZ with a Lattice, ...); this file has no cell"
    )


def periodic_results(
    path: Path,
    spec: BasisSpec,
    policy: Policy,
    unit: str,
    ghost: str | None,
    options: PeriodicOptions,
    remedies: bool | RemedyOptions,
) -> Iterator[AuditResult]:
    """The audit of every frame of a periodic file, one at a time."""
    # here, not at the top: the gate's parent reads inputs with this module before pyscf loads
    from ..pipeline.periodic import audit_cell_prepared, prepare_cell

    for crystal in load_cells(path, unit=unit, ghost=ghost):
        yield audit_cell_prepared(prepare_cell(crystal, spec, options.kmesh, options.precision), policy, remedies)


def crystal_geometry(c: Crystal) -> dict:
    """The record a gate item carries (and its cache key hashes): atoms plus the lattice,
    the periodic flags and the axis order."""
    return {
        "symbols": list(c.symbols),
        "coords": [[float(x) for x in row] for row in c.coords],
        "ghost": [bool(g) for g in c.ghost],
        "lattice": [[float(x) for x in row] for row in c.lattice],
        "pbc": [bool(p) for p in c.pbc],
        "axis_order": list(c.axis_order),
    }


def audit_crystal(
    crystal: Crystal, spec: BasisSpec, policy: Policy, options: PeriodicOptions, remedies: bool
) -> AuditResult:
    """One periodic gate item (worker side)."""
    from ..pipeline.periodic import audit_cell_prepared, prepare_cell

    return audit_cell_prepared(prepare_cell(crystal, spec, options.kmesh, options.precision), policy, remedies)


def crystal_from_geometry(g: dict, source: str, frame: int, n_frames: int) -> Crystal:
    """`crystal_geometry` read back (worker side)."""
    pbc = tuple(bool(p) for p in g["pbc"])
    order = tuple(int(a) for a in g["axis_order"])
    return Crystal(
        symbols=tuple(g["symbols"]),
        coords=np.asarray(g["coords"], dtype=float),
        lattice=np.asarray(g["lattice"], dtype=float),
        pbc=(pbc[0], pbc[1], pbc[2]),
        ghost=tuple(bool(x) for x in g["ghost"]),
        source=source,
        frame=frame,
        n_frames=n_frames,
        axis_order=(order[0], order[1], order[2]),
    )
