"""`auditor check`: audit geometries in one basis and write their reports."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Annotated

import typer

from ..base.defaults import TRIAL_MAX_FUNCTIONS, TRIAL_TIME_LIMIT
from ..base.errors import EXIT_USAGE, AuditorError
from . import options as o
from .console import error_line, fail, out, stage_display


# size: the signature declares one parameter per command-line option
def check(
    geometry: Annotated[
        list[str],
        typer.Argument(
            help="Geometry files, folders (searched recursively), glob patterns, or @LIST files "
            "(every frame is audited)."
        ),
    ],
    basis: o.Basis = None,
    basis_for: o.BasisFor = None,
    cartesian: o.Cartesian = False,
    basis_source: o.BasisSource = "pyscf",
    unit: o.Unit = "angstrom",
    ghost: o.Ghost = None,
    input_format: o.InputFormat = None,
    fragments: o.Fragments = None,
    out_dir: Annotated[Path, typer.Option("--out", "-o", help="Folder for the reports.")] = Path("audit_reports"),
    fmt: Annotated[
        str,
        typer.Option(
            "--format", "-f", help="json, md (with PNG figures beside it), html (self-contained page) or all."
        ),
    ] = "all",
    caution: o.Caution = 1e-5,
    fail_level: Annotated[
        float, typer.Option("--fail", help="Smallest eigenvalue below which the verdict is fail.")
    ] = 1e-7,
    spectrum: o.Spectrum = "auto",
    target: o.Target = None,
    write_x: Annotated[
        bool,
        typer.Option(
            "--write-x",
            help="Also write <stem>.X.npy: X for canonical orthogonalization at the advised threshold "
            "(pyscf AO order, X^T S X = 1).",
        ),
    ] = False,
    trial_scf: o.TrialScf = None,
    trial_max_functions: o.TrialMaxFunctions = TRIAL_MAX_FUNCTIONS,
    trial_seconds: o.TrialSeconds = TRIAL_TIME_LIMIT,
    no_remedies: Annotated[
        bool,
        typer.Option(
            "--no-remedies", help="Verdict only: skip the remedies (pivoted-Cholesky subsets, pruned basis) for speed."
        ),
    ] = False,
    kmesh: o.KMesh = None,
    precision: o.Precision = None,
    quiet: o.Quiet = False,
    max_input_mb: o.MaxInputMb = o.MAX_INPUT_MB,
) -> None:
    """Audit each geometry in one basis; write DIR/<stem>.json, .md and .html per frame.
    Periodic inputs (CIF, extended XYZ with a Lattice, ...) are audited at every k-point;
    multi-frame files also get DIR/<stem>.scan.*; --fragments (or fragments in the file)
    adds the counterpoise combinations.

    Exit codes: 0 pass or caution, 1 fail, 2 usage error, 3 unreadable input, 4 too large, 5 internal error.
    """
    # heavy (numpy, pyscf, matplotlib): imported when the command runs, see the package docstring
    from ..diagnosis.verdict import Policy
    from ..gate.serial import audit_paths
    from ..pipeline.run import make_spec
    from ..report.terminal import print_remedies, print_summary
    from ..report.writers import FORMATS

    if fmt not in FORMATS:
        fail(f"--format must be one of {', '.join(FORMATS)}, got {fmt!r}", EXIT_USAGE)
    try:
        spec = make_spec(basis, basis_for, cartesian, basis_source)
        policy = Policy(caution=caution, fail=fail_level)
        o.check_unit(unit)
        o.check_ghost(ghost)
        o.check_input_format(input_format)
        o.check_fragments(fragments)
        remedies = (
            False if no_remedies else o.remedy_options(target, trial_scf, trial_max_functions, trial_seconds, quiet)
        )
        o.check_spectrum_method(spectrum)
        periodic = o.periodic_options(kmesh, precision)
        o.start_run(out_dir, max_input_mb)
    except AuditorError as exc:
        fail(exc.message, exc.exit_code)
    with stage_display(enabled=not quiet) as on_stage:
        outcome = audit_paths(
            geometry,
            spec,
            policy,
            out_dir,
            fmt,
            unit=unit,
            ghost=ghost,
            remedies=remedies,
            spectrum_method=spectrum,
            on_stage=on_stage,
            periodic=periodic,
            input_format=input_format,
            fragments=fragments,
            write_x=write_x,
        )
    o.end_progress(remedies)
    for _, message, _ in outcome.errors:
        error_line(message)
    if not quiet:
        print_summary(outcome.results, [(p, m) for p, m, _ in outcome.errors], out)
        print_remedies(outcome.results, out)
        if outcome.written:
            out.print(f"wrote {len(outcome.written)} report file(s) to {out_dir}/", markup=False)
    raise typer.Exit(outcome.exit_code)


def start_figures_early(argv: list[str]) -> None:
    """Start the figure helper (`auditor.report.figures`) before anything heavy loads, when
    the command will draw figures: not for --help or --format json."""
    if any(a in ("--help", "-h") for a in argv) or _format_asked(argv) == "json":
        return
    from ..report.figures import start_helper  # standard library only

    start_helper()


def stop_figures() -> None:
    """Stop the figure helper, if `start_figures_early` started one."""
    figures = sys.modules.get("auditor.report.figures")  # not imported: nothing was started
    if figures is not None:
        figures.stop_helper()


def _format_asked(argv: list[str]) -> str | None:
    """The value of --format/-f in ``argv``, if given (the last one wins, as in the parser)."""
    found = None
    for i, a in enumerate(argv):
        if a in ("--format", "-f") and i + 1 < len(argv):
            found = argv[i + 1]
        elif a.startswith("--format="):
            found = a.split("=", 1)[1]
        elif a.startswith("-f") and len(a) > 2 and not a.startswith("--"):
            found = a[2:]
    return found
