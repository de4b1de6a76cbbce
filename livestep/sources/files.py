"""Opening recordings and raw captures safely, and saying why one cannot be read.

Only regular files are opened: a FIFO, a device or a socket could block a reader forever
or never end. A damaged or truncated gzip file, or a read error, becomes one line naming
the file and where it stopped.
"""

from __future__ import annotations

import gzip
import os
import stat
import zlib
from pathlib import Path
from typing import BinaryIO

from livestep.errors import InputError

__all__ = ["READ_ERRORS", "open_file", "read_error"]

#: What reading a damaged or vanishing file can raise (``gzip.BadGzipFile`` is an
#: ``OSError``; a truncated gzip raises ``EOFError``, a corrupt one ``zlib.error``).
READ_ERRORS: tuple[type[BaseException], ...] = (OSError, EOFError, zlib.error)

_NOT_A_FILE = ((stat.S_ISFIFO, "a FIFO (named pipe)"), (stat.S_ISCHR, "a character device"),
               (stat.S_ISBLK, "a block device"), (stat.S_ISSOCK, "a socket"))


def open_file(path: str | Path) -> BinaryIO:
    """Open a recording or raw capture for reading, decompressing gzip. Only a regular file
    is opened: a FIFO, a device (``/dev/zero``, a serial port) or a socket is refused with
    one line (reading one could block forever or never end), as are a missing file and a
    folder."""
    p = Path(path)
    try:
        mode = os.stat(p).st_mode
    except FileNotFoundError:
        raise InputError(f"{p}: no such file") from None
    except OSError as exc:
        raise InputError(f"{p}: cannot open ({exc.strerror})") from None
    if stat.S_ISDIR(mode):
        raise InputError(f"{p}: is a directory, not a recording")
    for test, kind in _NOT_A_FILE:
        if test(mode):
            raise InputError(f"{p}: is {kind}, not a file; livestep reads recordings and"
                             " captures from regular files (a serial port: live or watch)")
    try:  # non-blocking open: a file swapped for a FIFO since the check cannot block
        fd = os.open(p, os.O_RDONLY | os.O_NONBLOCK | getattr(os, "O_CLOEXEC", 0))
    except OSError as exc:
        raise InputError(f"{p}: cannot open ({exc.strerror})") from None
    if not stat.S_ISREG(os.fstat(fd).st_mode):
        os.close(fd)
        raise InputError(f"{p}: not a regular file")
    os.set_blocking(fd, True)
    raw = open(fd, "rb")  # noqa: SIM115 - returned to the caller, who closes it
    try:
        magic = raw.peek(2)[:2]
    except OSError as exc:
        raw.close()
        raise InputError(f"{p}: cannot read ({exc.strerror})") from None
    if magic == b"\x1f\x8b":
        return gzip.GzipFile(fileobj=raw)  # type: ignore[return-value]
    return raw


def read_error(path: Path, exc: BaseException, where: str) -> InputError:
    """The one-line error for a file that stops being readable ``where``."""
    kind = "damaged gzip data" if isinstance(exc, EOFError | zlib.error | gzip.BadGzipFile) \
        else "read error"
    detail = exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc)
    return InputError(f"{path}: {kind} {where} ({detail})")
