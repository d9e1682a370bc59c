"""The two consoles of the command line and the one way it ends with an error.

Nothing that comes from an input (file names, element text, messages, policy-file
locations such as ``[basis."x"]``) is ever read as rich markup: errors go through
``error_line`` (a Text, not markup), other lines are printed with ``markup=False``.
"""

from __future__ import annotations

import sys
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any, NoReturn

import typer
from rich.console import Console
from rich.markup import escape
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


@contextmanager
def stage_display(enabled: bool = True) -> Iterator[Callable[[str, str], None] | None]:
    """A callback that shows, on a terminal, which step of which audit is running and for how
    long (rich; transient: nothing stays on screen). None when not enabled or not a terminal."""
    if not (enabled and err.is_terminal):
        yield None
        return
    from rich.progress import Progress, SpinnerColumn, TextColumn, TimeElapsedColumn

    columns = (SpinnerColumn(), TextColumn("{task.description}"), TimeElapsedColumn())
    with Progress(*columns, console=err, transient=True) as bar:
        tasks: dict[str, Any] = {}

        def on_stage(name: str, step: str) -> None:
            description = escape(f"{name}: {step}")
            if name not in tasks:
                for other in tasks.values():  # one audit at a time: the earlier ones are done
                    bar.remove_task(other)
                tasks.clear()
                tasks[name] = bar.add_task(description, total=None)
            else:
                bar.update(tasks[name], description=description)

        yield on_stage
