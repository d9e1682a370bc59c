"""`auditor ladder`: the requested basis and its smaller published relatives at one geometry."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from ..base.errors import EXIT_USAGE, AuditorError, UsageError
from . import options as o
from .console import fail, out


# size: the signature declares one parameter per command-line option
def ladder(
    geometry: Annotated[Path, typer.Argument(help="Geometry file (every frame: the worst decides).")],
    out_dir: Annotated[
        Path, typer.Option("--out", "-o", help="Folder for <stem>.ladder.json, .ladder.md (.png) and .ladder.html.")
    ],
    basis: o.Basis = None,
    bases: Annotated[
        str | None, typer.Option("--bases", help="More bases to compare, comma-separated (e.g. def2-svp,6-31g*).")
    ] = None,
    fmt: Annotated[str, typer.Option("--format", "-f", help="json, md, html or all.")] = "all",
    target: o.Target = None,
    caution: o.Caution = 1e-5,
    fail_level: o.Fail = 1e-7,
    basis_for: o.BasisFor = None,
    cartesian: o.Cartesian = False,
    basis_source: o.BasisSource = "pyscf",
    unit: o.Unit = "angstrom",
    ghost: o.Ghost = None,
    frame: Annotated[
        int | None, typer.Option("--frame", help="Use this frame alone (1-based); default: every frame.")
    ] = None,
    quiet: o.Quiet = False,
) -> None:
    """Evaluate the requested basis and its smaller published relatives (calendar sets of an
    aug-cc basis, aug of d-aug, ma-def2 and def2 of a def2 set with diffuse functions, + of
    ++) plus --bases at this geometry, and name the largest relative that meets the target.

    Exit codes: 0 written, 2 usage error, 3 unreadable input, 4 too large, 5 internal error.
    """
    # heavy (numpy, pyscf, matplotlib): imported when the command runs, see the package docstring
    from ..base.files import protect
    from ..diagnosis.verdict import Policy
    from ..inputs.readers import load_molecules
    from ..pipeline.ladder import ladder as run
    from ..pipeline.run import make_spec, resolve_spec
    from ..report.ladder import LADDER_FORMATS, rung_rows, summary_sentence, write_ladder_reports
    from ..report.naming import report_stem

    if fmt not in LADDER_FORMATS:
        fail(f"--format must be one of {', '.join(LADDER_FORMATS)}, got {fmt!r}", EXIT_USAGE)
    try:
        o.check_unit(unit)
        spec = make_spec(basis, basis_for, cartesian, basis_source)
        policy = Policy(caution=caution, fail=fail_level)
        frames = load_molecules(geometry, unit=unit, ghost=ghost)
        if frame is not None and not 1 <= frame <= len(frames):
            raise UsageError(f"{geometry}: frame {frame} requested, file has {len(frames)} frame(s)")
        spec = resolve_spec(spec, frames[0])  # the basis name a QCSchema input carries
        if spec.data is not None:
            raise UsageError(
                f"{geometry}: the ladder needs a basis name; this input carries its basis data "
                f"(the {spec.data.origin}'s), which has no published relatives: give --basis"
            )
        chosen = frames if frame is None else [frames[frame - 1]]
        extra = [b.strip() for b in (bases or "").split(",") if b.strip()]
        report = run(chosen, spec, policy, target, extra)
        stem = report_stem(str(geometry), frame or 1, 1 if frame is None else len(frames))
        with protect([geometry, *spec.files()]):
            paths = write_ladder_reports(report, out_dir, fmt, stem)
    except AuditorError as exc:
        fail(exc.message, exc.exit_code)
    if not quiet:
        d = report.as_dict()
        out.print(summary_sentence(d), markup=False, soft_wrap=True)
        for row in rung_rows(d):
            out.print(f"  {row[0]:<28} {row[2]:>6} functions  smallest {row[3]:>10}  {row[6]}", markup=False)
        out.print("wrote " + ", ".join(str(p) for p in paths), markup=False)
    raise typer.Exit(0)
