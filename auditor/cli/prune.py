"""`auditor prune`: write a shell-pruned basis, the matrix X and an explanation."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from ..base.defaults import TRIAL_MAX_FUNCTIONS, TRIAL_TIME_LIMIT
from ..base.errors import AuditorError, UsageError
from . import options as o
from .console import fail, out
from .periodic import prune_cell_file


# size: the signature declares one parameter per command-line option
def prune(
    geometry: Annotated[Path, typer.Argument(help="A geometry file (XYZ, PDB, SDF, QCSchema, pyscf checkpoint, ...).")],
    out_dir: Annotated[
        Path, typer.Option("--out", "-o", help="Folder for <stem>.pruned.json, <stem>.X.npy and <stem>.prune.md.")
    ],
    target: Annotated[
        float | None,
        typer.Option("--target", help="Smallest eigenvalue the pruned basis must reach (default: the caution level)."),
    ] = None,
    basis: o.Basis = None,
    basis_for: o.BasisFor = None,
    cartesian: o.Cartesian = False,
    basis_source: o.BasisSource = "pyscf",
    unit: o.Unit = "angstrom",
    ghost: o.Ghost = None,
    input_format: o.InputFormat = None,
    frame: Annotated[
        int | None,
        typer.Option(
            "--frame", help="Prune for this frame alone (1-based); default: one basis for every frame of the file."
        ),
    ] = None,
    caution: Annotated[float, typer.Option("--caution", help="Caution level (the default target).")] = 1e-5,
    fail_level: Annotated[float, typer.Option("--fail", help="Fail level (bounds the advised threshold).")] = 1e-7,
    export: Annotated[
        str | None,
        typer.Option(
            "--export",
            help="Also write the basis for other programs through basis_set_exchange: comma-separated writer "
            "formats, all, or none (default nwchem,gaussian94,psi4,orca,molpro,cfour,turbomole).",
        ),
    ] = None,
    trial_scf: o.TrialScf = None,
    trial_max_functions: o.TrialMaxFunctions = TRIAL_MAX_FUNCTIONS,
    trial_seconds: o.TrialSeconds = TRIAL_TIME_LIMIT,
    kmesh: o.KMesh = None,
    precision: o.Precision = None,
    quiet: o.Quiet = False,
    max_input_mb: o.MaxInputMb = o.MAX_INPUT_MB,
) -> None:
    """Write a shell-pruned basis that reaches a target smallest eigenvalue (in every frame of
    a multi-frame file, unless --frame picks one), the canonical orthogonalization matrix X,
    and a Markdown explanation.

    Exit codes: 0 written, 2 usage error (bad target, a pruning that empties an atom, a broken geometry),
    3 unreadable input, 4 too large, 5 internal error. Periodic inputs (CIF, extended XYZ with a Lattice,
    ...) get the exponent cutoff and the whole-shell subset at every k-point (`auditor.cli.periodic`).
    """
    # heavy (numpy, pyscf, matplotlib): imported when the command runs, see the package docstring
    from ..base.files import protect
    from ..diagnosis.verdict import Policy
    from ..gate.periodic import is_periodic, not_periodic
    from ..inputs.readers import load_molecules
    from ..pipeline.frames import prepare_frames, prune_frames
    from ..pipeline.run import make_spec
    from ..remedies.export import parse_formats
    from ..report.naming import report_stem
    from ..report.pruned_files import write_prune_outputs
    from ..report.terminal import print_remedies

    try:
        o.check_unit(unit)
        o.check_input_format(input_format)
        options = o.remedy_options(target, trial_scf, trial_max_functions, trial_seconds, quiet)
        formats = parse_formats(export)
        spec = make_spec(basis, basis_for, cartesian, basis_source)
        policy = Policy(caution=caution, fail=fail_level)
        o.start_run(out_dir, max_input_mb)
        periodic = o.periodic_options(kmesh, precision)
        if is_periodic(geometry):
            prune_cell_file(geometry, spec, policy, options, periodic, unit, ghost, frame or 1, out_dir, quiet)
        if periodic.asked:
            raise not_periodic(geometry)
        frames = load_molecules(geometry, unit=unit, ghost=ghost, input_format=input_format)
        if frame is not None and not 1 <= frame <= len(frames):
            raise UsageError(f"{geometry}: frame {frame} requested, file has {len(frames)} frame(s)")
        preps = prepare_frames(frames if frame is None else [frames[frame - 1]], spec)
        try:
            results, plan = prune_frames(preps, policy, options)
        finally:
            o.end_progress(options)
        stem = report_stem(str(geometry), frame or 1, 1 if frame is None else len(frames))
        with protect([geometry, *spec.files()]):
            paths, exported = write_prune_outputs(results, plan, preps, out_dir, stem, formats)
    except AuditorError as exc:
        named = str(geometry) in exc.message or exc.message.startswith("--")  # the file, or an option
        fail(exc.message if named else f"{geometry}: {exc.message}", exc.exit_code)
    if not quiet:
        doc = plan.pruned or {}  # prune_frames raises when no pruned basis was found
        every = (
            f" in every one of {len(results)} frames (frame {plan.deciding_frame} decides)" if len(results) > 1 else ""
        )
        out.print(
            f"{geometry.name}: kept {doc['n_functions']} of {doc['n_functions_full']} functions, "
            f"dropped {len(doc['dropped_shells'])} shell(s); smallest eigenvalue "
            f"{doc['smallest_eigenvalue']:.3e}{every} (target {plan.target:.1e}, full basis "
            f"{min(r.spectrum.smallest for r in results):.3e})",
            markup=False,
        )
        print_remedies(results, out, always=True)
        for rec in exported:
            what = f"{rec.file}: read back: {rec.checked}" if rec.written else f"{rec.format}: {rec.note}"
            out.print(f"  {what}", markup=False, soft_wrap=True)
        out.print("wrote " + ", ".join(str(p) for p in paths), markup=False)
    raise typer.Exit(0)
