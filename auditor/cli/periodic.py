"""`auditor prune` for a periodic input: the exponent cutoff and the whole-shell subset at
every k-point of the mesh, written for pyscf.pbc."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import typer

from ..base.errors import AuditorError, UsageError
from .console import fail, out

if TYPE_CHECKING:
    from ..diagnosis.verdict import Policy
    from ..gate.periodic import PeriodicOptions
    from ..inputs.basis import BasisSpec
    from ..remedies.plan import RemedyOptions


def prune_cell_file(
    geometry: Path,
    spec: BasisSpec,
    policy: Policy,
    options: RemedyOptions,
    periodic: PeriodicOptions,
    unit: str,
    ghost: str | None,
    frame: int,
    out_dir: Path,
    quiet: bool,
) -> None:
    """Prune one frame of a periodic file; print and exit like the molecular prune."""
    # heavy (numpy, pyscf, matplotlib): imported when the command runs, see the package docstring
    from ..base.files import protect
    from ..inputs.cell import load_cells
    from ..pipeline.periodic import prepare_cell, prune_cell
    from ..report.naming import report_stem
    from ..report.periodic_prune import write_periodic_prune
    from ..report.terminal import print_remedies

    try:
        frames = load_cells(geometry, unit=unit, ghost=ghost)
        if not 1 <= frame <= len(frames):
            raise UsageError(f"{geometry}: frame {frame} requested, file has {len(frames)} frame(s)")
        prep = prepare_cell(frames[frame - 1], spec, periodic.kmesh, periodic.precision)
        result, plan = prune_cell(prep, policy, options)
        stem = report_stem(str(geometry), frame, len(frames))
        with protect([geometry, *spec.files()]):
            paths = write_periodic_prune(result, plan, out_dir, stem)
    except AuditorError as exc:
        fail(exc.message, exc.exit_code)
    if not quiet:
        cut = plan.cutoff
        if cut is not None:
            names = ", ".join(f"{c.element} below {c.cutoff:.4g}" for c in cut.elements if c.cutoff > 0) or "none"
            out.print(
                f"{geometry.name}: exponent cutoff ({names}) keeps {cut.n_functions} of {cut.n_functions_full} "
                f"functions; smallest eigenvalue over the {prep.mesh.n} k-points {cut.smallest_after:.3e} "
                f"(target {plan.target:.1e}, full basis {result.spectrum.smallest:.3e})",
                markup=False,
            )
        print_remedies([result], out, always=True)
        out.print("wrote " + ", ".join(str(p) for p in paths), markup=False)
    raise typer.Exit(0)
