"""`auditor demo`: audit the bundled examples and write the sample reports."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from ..base.errors import AuditorError
from . import options as o
from .console import fail, out


def demo(
    out_dir: Annotated[Path, typer.Option("--out", "-o", help="Folder for the sample reports.")] = Path("reports"),
    examples: Annotated[
        Path | None, typer.Option("--examples", help="Folder with examples.toml and the geometries.")
    ] = None,
) -> None:
    """Audit the bundled example geometries and write their reports (and an index)."""
    # heavy (numpy, pyscf, matplotlib): imported when the command runs, see the package docstring
    from ..gate.demo import find_examples, run_demo
    from ..report.terminal import print_summary

    try:
        o.start_run(out_dir, o.MAX_INPUT_MB)
        folder = examples or find_examples()
        outcome, index = run_demo(folder, out_dir)
    except AuditorError as exc:
        fail(exc.message, exc.exit_code)
    print_summary(outcome.results, [(p, m) for p, m, _ in outcome.errors], out)
    out.print(f"wrote {len(outcome.written)} report file(s) and {index}", markup=False)
    raise typer.Exit(0 if not outcome.errors else outcome.exit_code)
