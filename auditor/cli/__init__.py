"""The command line: parsing and printing only; the work is done by the Python API.

One module per command; options that several commands share are declared once in
``options``. Heavy modules are imported inside the commands, so that ``auditor gate`` can
start its worker processes, and ``check`` and ``demo`` their figure helper
(`auditor.report.figures`), before numpy and pyscf load in this one.

May import everything below it (auditor.gate, auditor.report, auditor.pipeline, ...).
"""

from __future__ import annotations

import os
import sys
import warnings
from typing import Annotated

# numpy and scipy each bring their own OpenBLAS, whose threads spin for a while after every
# call; on a two-core machine a call into the other copy then stalls for up to ~0.1 s.
# Threads that go to sleep sooner remove the stall (measured: `check` on 5980 functions
# 8.8 s -> 7.9 s); results do not change. Set before numpy loads; a user's own value wins.
os.environ.setdefault("OPENBLAS_THREAD_TIMEOUT", "4")

import typer  # noqa: E402
import typer.rich_utils
from typer.exceptions import Abort, TyperException

from ..base.errors import EXIT_INTERNAL, EXIT_USAGE, failure
from . import check, demo, gate, ladder, prune
from .console import err, error_line

#: Width of --help when standard output is not a terminal (pipes, CI logs): fixed, so that
#: help wraps at the same places everywhere (between words, never inside '4-6,9'),
#: whatever COLUMNS says. TERMINAL_WIDTH, typer's own setting, still wins.
HELP_WIDTH = 100
if not sys.stdout.isatty() and not os.environ.get("TERMINAL_WIDTH"):
    typer.rich_utils.MAX_WIDTH = HELP_WIDTH

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
    """Console entry point: never a traceback unless AUDITOR_DEBUG is set; a usage error
    of the argument parser is one ``error:`` line too (exit code 2)."""
    if not os.environ.get("AUDITOR_DEBUG"):
        # library warnings (numpy, pyscf) are not ours to show: errors are one line each
        warnings.simplefilter("ignore")
    try:
        if sys.argv[1:2] == ["gate"]:
            # imported here, and only for gate: it starts the worker server before anything heavy loads
            from ..gate.workers import start_early

            start_early(sys.argv[1:])
        elif sys.argv[1:2] in (["check"], ["demo"]):
            check.start_figures_early(sys.argv[1:])
        try:
            code = app(standalone_mode=False)
        finally:
            check.stop_figures()
    except TyperException as exc:  # the argument parser's errors (typer's own click)
        sys.exit(_parser_error(exc))
    except (KeyboardInterrupt, Abort):
        err.print("interrupted", markup=False)
        sys.exit(130)
    except Exception as exc:
        if os.environ.get("AUDITOR_DEBUG"):
            raise
        message, code = failure(exc)  # a full disk, a folder made read-only mid-run, ... or a bug
        error_line(message + ("; set AUDITOR_DEBUG=1 to see the traceback" if code == EXIT_INTERNAL else ""))
        sys.exit(code)
    sys.exit(code if isinstance(code, int) else 0)


def _parser_error(exc: TyperException) -> int:
    """One ``error:`` line for an error of the argument parser (help when no arguments
    were given); returns the exit code (2 for a usage error)."""
    if type(exc).__name__ == "NoArgsIsHelpError":
        exc.show()  # type: ignore[attr-defined]  # prints the help
        return int(getattr(exc, "exit_code", EXIT_USAGE))
    ctx = getattr(exc, "ctx", None)
    where = f" (see '{ctx.command_path} --help')" if ctx is not None else ""
    error_line(exc.format_message() + where)
    return int(getattr(exc, "exit_code", EXIT_USAGE))
