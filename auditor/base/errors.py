"""Errors that end an audit with a one-line message and a documented exit code."""

from __future__ import annotations

import errno

#: Exit codes of the command line (documented in docs/cli.md).
EXIT_OK = 0  # every geometry passed or earned a caution
EXIT_FAIL = 1  # at least one geometry failed the policy
EXIT_USAGE = 2  # bad options or arguments
EXIT_INPUT = 3  # a geometry or basis that cannot be read or understood
EXIT_RESOURCE = 4  # the job does not fit on this machine (memory guard, a full disk)
EXIT_INTERNAL = 5  # a bug in the auditor: please report it with the input


def one_line(text: str) -> str:
    """``text`` as one line: control characters (line breaks, escape sequences that a
    terminal would act on) shown as escapes, so that an error stays one line whatever
    a file name or a file's content holds."""
    if all(32 <= ord(c) != 127 for c in text):
        return text
    return "".join(c if 32 <= ord(c) != 127 else repr(c)[1:-1] if c != "\t" else " " for c in text)


class AuditorError(Exception):
    """Base class: carries a one-line message and the exit code it maps to."""

    exit_code = EXIT_INPUT

    def __init__(self, message: str) -> None:
        message = one_line(str(message))
        super().__init__(message)
        self.message = message

    def __str__(self) -> str:
        return self.message


class InputError(AuditorError):
    """A geometry, basis or option value that cannot be read or understood."""

    exit_code = EXIT_INPUT


class UsageError(AuditorError):
    """Options that contradict each other or are out of range."""

    exit_code = EXIT_USAGE


class ResourceError(AuditorError):
    """The requested audit would not fit in this machine's memory."""

    exit_code = EXIT_RESOURCE


def failure(exc: BaseException) -> tuple[str, int]:
    """One line and an exit code for an exception that ends one item's audit (the run goes on)."""
    if isinstance(exc, AuditorError):
        return exc.message, exc.exit_code
    if isinstance(exc, MemoryError):
        return "ran out of memory", EXIT_RESOURCE
    if isinstance(exc, OSError) and exc.errno in (errno.ENOSPC, errno.EDQUOT):
        where = f" (writing {one_line(str(exc.filename))})" if exc.filename else ""
        return f"no space left on the device{where}: free some space or choose another --out", EXIT_RESOURCE
    if isinstance(exc, OSError) and exc.errno in (errno.EACCES, errno.EPERM, errno.EROFS):
        where = f" {one_line(str(exc.filename))}" if exc.filename else ""
        return f"cannot write{where} ({exc.strerror})", EXIT_USAGE
    text = str(exc).splitlines()[0] if str(exc).strip() else ""
    return f"internal error ({type(exc).__name__}: {one_line(text)})", EXIT_INTERNAL
