"""Command line: parsing and printing only; the work is done by the Python API."""
from __future__ import annotations

import sys
from pathlib import Path
from typing import List, Optional

import typer
from rich.console import Console

from .errors import EXIT_INTERNAL, EXIT_USAGE, AuditorError

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    help="Audit Gaussian basis sets for near-linear dependence: overlap spectrum, causes, remedies.",
    pretty_exceptions_enable=False,
)
err = Console(stderr=True, highlight=False, width=None if sys.stderr.isatty() else 160)
out = Console(highlight=False, width=None if sys.stdout.isatty() else 160)


def _fail(message: str, code: int) -> None:
    err.print(f"[bold red]error:[/] {message}")
    raise typer.Exit(code)


@app.command()
def check(
    geometry: List[Path] = typer.Argument(..., help="XYZ / extended XYZ files (every frame is audited)."),
    basis: str = typer.Option(..., "--basis", "-b", help="Basis name pyscf knows, or a basis file (NWChem format)."),
    basis_for: Optional[List[str]] = typer.Option(None, "--basis-for", help="Per-element basis, ELEMENT=BASIS; repeatable."),
    cartesian: bool = typer.Option(False, "--cartesian", help="Cartesian instead of spherical d, f, ... shells."),
    unit: str = typer.Option("angstrom", "--unit", help="Unit of the coordinates in the files: angstrom or bohr."),
    ghost: Optional[str] = typer.Option(None, "--ghost", help="Atoms (1-based) that carry functions only, e.g. 4-6,9."),
    out_dir: Path = typer.Option(Path("audit_reports"), "--out", "-o", help="Folder for the reports."),
    fmt: str = typer.Option("all", "--format", "-f", help="json, md or all."),
    caution: float = typer.Option(1e-5, "--caution", help="Smallest eigenvalue below which the verdict is caution."),
    fail: float = typer.Option(1e-7, "--fail", help="Smallest eigenvalue below which the verdict is fail."),
    quiet: bool = typer.Option(False, "--quiet", "-q", help="Print nothing but errors."),
):
    """Audit each geometry in one basis; write DIR/<stem>.json and .md per frame.

    Exit codes: 0 pass or caution, 1 fail, 2 usage error, 3 unreadable input, 4 too large,
    5 internal error.
    """
    from .api import make_spec
    from .policy import Policy
    from .report.terminal import print_summary
    from .runner import FORMATS, audit_paths

    if fmt not in FORMATS:
        _fail(f"--format must be one of {', '.join(FORMATS)}, got {fmt!r}", EXIT_USAGE)
    try:
        spec = make_spec(basis, basis_for, cartesian)
        policy = Policy(caution=caution, fail=fail)
        if unit.lower() not in ("angstrom", "bohr"):
            _fail(f"--unit must be angstrom or bohr, got {unit!r}", EXIT_USAGE)
        if ghost:
            from .geometry import parse_atom_numbers
            parse_atom_numbers(ghost)
    except AuditorError as exc:
        _fail(exc.message, exc.exit_code)
    outcome = audit_paths(geometry, spec, policy, out_dir, fmt, unit=unit, ghost=ghost)
    for _, message, _ in outcome.errors:
        err.print(f"[bold red]error:[/] {message}")
    if not quiet:
        print_summary(outcome.results, [(p, m) for p, m, _ in outcome.errors], out)
        if outcome.written:
            out.print(f"wrote {len(outcome.written)} report file(s) to {out_dir}/")
    raise typer.Exit(outcome.exit_code)


@app.command()
def demo(
    out_dir: Path = typer.Option(Path("reports"), "--out", "-o", help="Folder for the sample reports."),
    examples: Optional[Path] = typer.Option(None, "--examples", help="Folder with examples.toml and the geometries."),
):
    """Audit the bundled example geometries and write their reports (and an index)."""
    from .demo import find_examples, run_demo
    from .report.terminal import print_summary

    try:
        folder = examples or find_examples()
        outcome, index = run_demo(folder, out_dir)
    except AuditorError as exc:
        _fail(exc.message, exc.exit_code)
    print_summary(outcome.results, [(p, m) for p, m, _ in outcome.errors], out)
    out.print(f"wrote {len(outcome.written)} report file(s) and {index}")
    raise typer.Exit(0 if not outcome.errors else outcome.exit_code)


def main() -> None:
    """Console entry point: never a traceback unless AUDITOR_DEBUG is set."""
    import os

    try:
        app()
    except KeyboardInterrupt:
        err.print("interrupted")
        sys.exit(130)
    except Exception as exc:
        if os.environ.get("AUDITOR_DEBUG"):
            raise
        err.print(f"[bold red]error:[/] internal error ({type(exc).__name__}: {exc}); "
                  "set AUDITOR_DEBUG=1 to see the traceback".splitlines()[0])
        sys.exit(EXIT_INTERNAL)


if __name__ == "__main__":
    main()
