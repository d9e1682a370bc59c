"""The command line: parsing and printing only; the work is done by the Python API.

One module per command; options that several commands share are declared once in
``options``. Heavy modules are imported inside the commands, so that ``auditor gate`` can
start its worker processes before numpy and pyscf load in this one.

May import everything below it (auditor.gate, auditor.report, auditor.pipeline, ...).
"""

from __future__ import annotations

import os
import sys
from typing import Annotated

import typer

from ..base.errors import EXIT_INTERNAL
from . import check, demo, gate, ladder, prune
from .console import err

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    help="Audit Gaussian basis sets for near-linear dependence: overlap spectrum, causes, remedies.",
    pretty_exceptions_enable=False,
)
for command in (check.check, prune.prune, ladder.ladder, demo.demo, gate.gate):
    app.command()(command)


def _print_version(value: bool) -> None:
    if value:
        from .. import __version__

        print(f"auditor {__version__}")
        raise typer.Exit(0)


@app.callback()
def _options(
    version: Annotated[
        bool, typer.Option("--version", callback=_print_version, is_eager=True, help="Print the version and exit.")
    ] = False,
) -> None:
    """Audit Gaussian basis sets for near-linear dependence: overlap spectrum, causes, remedies."""


def main() -> None:
    """Console entry point: never a traceback unless AUDITOR_DEBUG is set."""
    try:
        if sys.argv[1:2] == ["gate"]:
            # imported here, and only for gate: it starts the worker server before anything heavy loads
            from ..gate.workers import start_early

            start_early(sys.argv[1:])
        app()
    except KeyboardInterrupt:
        err.print("interrupted")
        sys.exit(130)
    except Exception as exc:
        if os.environ.get("AUDITOR_DEBUG"):
            raise
        err.print(
            f"[bold red]error:[/] internal error ({type(exc).__name__}: {exc}); "
            "set AUDITOR_DEBUG=1 to see the traceback".splitlines()[0]
        )
        sys.exit(EXIT_INTERNAL)
