"""Open a user's input file safely: regular files only, never more than a stated number of bytes.

A named pipe (FIFO) would block the reader forever, a device could be endless, and a file
of gigabytes would exhaust memory; :func:`read_regular` refuses each with a message that
names the problem (and the cap), which the caller reports as a finding for that path.
"""
from __future__ import annotations

import os
import stat
from pathlib import Path

#: O_NONBLOCK makes opening a named pipe return at once instead of waiting for a writer.
_OPEN_FLAGS = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_CLOEXEC", 0) | getattr(os, "O_BINARY", 0)


class InputFileError(Exception):
    """The file cannot be read; the text says why (without the path)."""


def size_text(n: int) -> str:
    """Return a byte count as short text in binary units ('256 MiB', '1.5 KiB', '12 bytes')."""
    for unit, factor in (("GiB", 1 << 30), ("MiB", 1 << 20), ("KiB", 1 << 10)):
        if n >= factor:
            value = n / factor
            return f"{value:.0f} {unit}" if value == int(value) else f"{value:.3g} {unit}"
    return f"{n} byte{'s' if n != 1 else ''}"


def _kind(mode: int) -> str:
    if stat.S_ISDIR(mode):
        return "a folder"
    if stat.S_ISFIFO(mode):
        return "a named pipe (FIFO)"
    if stat.S_ISSOCK(mode):
        return "a socket"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    return "not a regular file"


def read_regular(path: Path | str, limit: int) -> bytes:
    """Return the bytes of the regular file *path*, at most *limit* of them.

    Raise :class:`InputFileError` for anything that is not a regular file, a file larger
    than *limit* bytes, or an operating-system error.
    """
    try:
        fd = os.open(path, _OPEN_FLAGS)
    except IsADirectoryError:
        raise InputFileError("is a folder, not a file; not read") from None
    except OSError as exc:
        raise InputFileError(f"cannot be read: {exc.strerror or exc}") from None
    try:
        st = os.fstat(fd)
        if not stat.S_ISREG(st.st_mode):
            raise InputFileError(f"is {_kind(st.st_mode)}, not a regular file; not read")
        if st.st_size > limit:
            raise InputFileError(f"is {size_text(st.st_size)}, more than the {size_text(limit)} "
                                 "this file may have; not read")
        with os.fdopen(fd, "rb", buffering=0, closefd=False) as fh:
            parts = [fh.read(st.st_size)]  # one allocation of the size the file has now
            total = len(parts[0])
            while True:  # a short read, or a file that grows while being read
                chunk = fh.read(min(1 << 20, limit + 1 - total))
                if not chunk:
                    break
                parts.append(chunk)
                total += len(chunk)
                if total > limit:
                    raise InputFileError(f"is more than the {size_text(limit)} this file may have; not read")
        return parts[0] if len(parts) == 1 else b"".join(parts)
    except OSError as exc:
        raise InputFileError(f"cannot be read: {exc.strerror or exc}") from None
    finally:
        os.close(fd)
