"""The two consoles of the command line and the one way it ends with an error."""

from __future__ import annotations

import sys
from typing import NoReturn

import typer
from rich.console import Console

#: Lines are not wrapped when the output is not a terminal (CI logs, pipes, files).
err = Console(stderr=True, highlight=False, width=None if sys.stderr.isatty() else 160)
out = Console(highlight=False, width=None if sys.stdout.isatty() else 160)


def fail(message: str, code: int) -> NoReturn:
    """Print ``error: message`` on standard error and exit with ``code``."""
    err.print(f"[bold red]error:[/] {message}")
    raise typer.Exit(code)
