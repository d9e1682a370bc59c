"""Writing files safely: whole or not at all, and never over an input of the run."""

from __future__ import annotations

import itertools
import os
import re
import tempfile
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from pathlib import Path

from .errors import UsageError

_serial = itertools.count()


#: real paths of the inputs of the running command: never overwritten (see ``protect``)
_PROTECTED: set[str] = set()


#: temporary files that ``atomic_write`` makes: "." + target name + ".<pid>.<serial>.tmp"
TEMP_NAME = re.compile(r"^\.(?P<target>.+)\.\d+\.\d+\.tmp$")


@contextmanager
def protect(paths: Iterable[str | os.PathLike[str]]) -> Iterator[None]:
    """Within the block, ``atomic_write`` refuses to replace any of ``paths`` (the inputs
    of a run: geometry, basis and list files), so that an output folder that holds the
    inputs never costs the user a file."""
    added = {os.path.realpath(p) for p in paths} - _PROTECTED
    _PROTECTED.update(added)
    try:
        yield
    finally:
        _PROTECTED.difference_update(added)


def check_not_input(path: Path) -> None:
    """UsageError when ``path`` is one of the protected inputs."""
    if _PROTECTED and os.path.realpath(path) in _PROTECTED:
        raise UsageError(
            f"{path}: refusing to overwrite an input file with a report; choose another output folder (--out)"
        )


def check_output_dir(path: str | os.PathLike[str], option: str = "--out") -> None:
    """UsageError unless reports can be written in folder ``path``: it is a folder (or can
    be made in the nearest folder that exists) and a file can be created there. Checked
    before any work, so that a bad output location is one line, not one error per report."""
    target = Path(path)
    existing = target
    while not os.path.lexists(existing) and existing.parent != existing:
        existing = existing.parent
    if not existing.is_dir():
        what = "is not a folder" if existing == target else f"cannot be made: {existing} is not a folder"
        raise UsageError(f"{option} {target}: {what}")
    try:
        fd, probe = tempfile.mkstemp(prefix=".auditor-probe-", dir=existing)
        os.close(fd)
        os.unlink(probe)
    except OSError as exc:
        raise UsageError(f"{option} {target}: cannot write there ({exc.strerror or exc})") from None


def atomic_write(path: Path, data: str | bytes) -> None:
    """Write ``data`` to ``path`` through a temporary file and a rename, so that an
    interrupted run never leaves a half-written report. The file gets the usual
    permissions (0666 less the umask); missing parent folders are created."""
    path = Path(path)
    check_not_input(path)
    raw = data if isinstance(data, bytes) else data.encode("utf-8")
    tmp = path.parent / f".{path.name}.{os.getpid()}.{next(_serial)}.tmp"
    flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_CLOEXEC", 0)
    try:
        fd = os.open(tmp, flags, 0o666)
    except FileNotFoundError:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd = os.open(tmp, flags, 0o666)
    except FileExistsError:  # left by a killed process that had the same pid
        tmp.unlink()
        fd = os.open(tmp, flags, 0o666)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(raw)
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
