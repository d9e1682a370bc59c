"""The two consoles of the command line and the one way it ends with an error."""

from __future__ import annotations

import sys
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any, NoReturn

import typer
from rich.console import Console
from rich.markup import escape

#: Lines are not wrapped when the output is not a terminal (CI logs, pipes, files).
err = Console(stderr=True, highlight=False, width=None if sys.stderr.isatty() else 160)
out = Console(highlight=False, width=None if sys.stdout.isatty() else 160)


def fail(message: str, code: int) -> NoReturn:
    """Print ``error: message`` on standard error and exit with ``code``."""
    err.print(f"[bold red]error:[/] {message}")
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
