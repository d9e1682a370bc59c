"""Reading user files safely: regular files only, a size limit before reading, UTF-8 text
with the line of the first undecodable byte named, and plain ASCII numbers.

Input is data: nothing read here is ever evaluated.
"""

from __future__ import annotations

import os
import re
import stat
from pathlib import Path

from .errors import InputError

#: Default size limit of one input text file (geometry, list of paths); the command line's
#: --max-input-mb changes it for the run (``set_input_limit``).
MAX_INPUT_BYTES = 64 << 20
#: the hint an oversize message gives
LIMIT_HINT = "--max-input-mb raises it"

_limit = [MAX_INPUT_BYTES]


def input_limit() -> int:
    """The size limit of one input file in bytes (MAX_INPUT_BYTES unless set)."""
    return _limit[0]


def set_input_limit(megabytes: float | None) -> None:
    """Set the size limit of input files for this process (None: the default)."""
    _limit[0] = MAX_INPUT_BYTES if megabytes is None else int(megabytes * 2**20)


#: A plain decimal number in ASCII: optional sign, digits with an optional point, optional
#: exponent (E or D, as Fortran writes it). No underscores, no other scripts' digits.
NUMBER = re.compile(r"[+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eEdD][+-]?[0-9]+)?")


def plain_float(token: str) -> float:
    """``token`` as a float if it is a plain ASCII number, else ValueError (float() alone
    accepts '1_0', 'nan', 'infinity' and digits of other scripts)."""
    if not NUMBER.fullmatch(token):
        raise ValueError(token)
    return float(token.replace("d", "e").replace("D", "e"))


def check_regular_file(path: Path, what: str = "file") -> os.stat_result:
    """The file's status, or InputError unless ``path`` is a regular file (FIFOs, devices,
    sockets and folders are refused before anything is opened: reading them can block
    forever or never end)."""
    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror})") from None
    except ValueError:  # a NUL character in the name
        raise InputError(f"{path!r}: not a usable file name") from None
    if stat.S_ISDIR(st.st_mode):
        raise InputError(f"{path}: is a folder, expected a {what}")
    if not stat.S_ISREG(st.st_mode):
        raise InputError(f"{path}: not a regular file (a pipe, device or socket), expected a {what}")
    return st


def _mib(n: int) -> str:
    return f"{n / 2**20:.1f}".removesuffix(".0")


def read_bytes(path: str | Path, what: str = "file", limit: int | None = None, hint: str = LIMIT_HINT) -> bytes:
    """The bytes of a regular file of at most ``limit`` bytes (default ``input_limit()``;
    InputError otherwise). ``hint``: how to raise the limit, for the message."""
    path = Path(path)
    limit = input_limit() if limit is None else limit
    st = check_regular_file(path, what)
    if st.st_size > limit:
        raise InputError(
            f"{path}: {st.st_size / 2**20:.1f} MiB is larger than the limit of "
            f"{_mib(limit)} MiB for a {what}" + (f" ({hint})" if hint else "")
        )
    try:
        # O_NONBLOCK: if the file was swapped for a FIFO after the check, open does not wait
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_CLOEXEC", 0))
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror})") from None
    with os.fdopen(fd, "rb") as fh:
        if not stat.S_ISREG(os.fstat(fh.fileno()).st_mode):
            raise InputError(f"{path}: not a regular file, expected a {what}")
        data = fh.read(limit + 1)
    if len(data) > limit:
        raise InputError(f"{path}: larger than the limit of {_mib(limit)} MiB for a {what}")
    return data


def decode_text(data: bytes, path: str | Path) -> str:
    """UTF-8 text (a leading byte-order mark is dropped), or InputError naming the line of
    the first byte that is not UTF-8."""
    if data.startswith(b"\xef\xbb\xbf"):
        data = data[3:]
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data.count(b"\n", 0, exc.start) + 1
        raise InputError(
            f"{path}:{line}: not UTF-8 text (byte 0x{data[exc.start]:02x}); save the file as UTF-8"
        ) from None


def read_text(path: str | Path, what: str = "file", limit: int | None = None, hint: str = LIMIT_HINT) -> str:
    """UTF-8 text of a regular file of at most ``limit`` bytes (default ``input_limit()``)."""
    return decode_text(read_bytes(path, what, limit, hint), path)
