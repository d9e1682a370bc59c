"""The two consoles of the command line and the one way it ends with an error.

Nothing that comes from an input (file names, element text, messages, policy-file
locations such as ``[basis."x"]``) is ever read as rich markup: errors go through
``error_line`` (a Text, not markup), other lines are printed with ``markup=False``.
"""

from __future__ import annotations

import sys
from typing import NoReturn

import typer
from rich.console import Console
from rich.text import Text

from ..base.errors import one_line


def _console(stderr: bool) -> Console:
    """Lines are not wrapped when the output is not a terminal (CI logs, pipes, files):
    an error line stays one line whatever its length; tables get 160 columns there."""
    tty = (sys.stderr if stderr else sys.stdout).isatty()
    return Console(stderr=stderr, highlight=False, width=None if tty else 160, soft_wrap=not tty)


err = _console(stderr=True)
out = _console(stderr=False)


def error_line(message: str, console: Console | None = None) -> None:
    """``error: message`` on standard error, as one line and never as markup."""
    (console or err).print(Text.assemble(("error:", "bold red"), " ", one_line(message)))


def fail(message: str, code: int) -> NoReturn:
    """Print ``error: message`` on standard error and exit with ``code``."""
    error_line(message)
    raise typer.Exit(code)
