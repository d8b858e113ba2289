"""Input files read with a size cap decided before a byte is read.

``/dev/zero``, ``/dev/urandom``, a FIFO or a socket given as a design file never end: reading
them to check their size afterwards exhausts memory or hangs. :func:`read_capped` looks at
the path first: only regular files are read (a stream, FIFO, device or folder is refused in
one line), their size is compared with the cap from the file system, and the file is then read
with a bound of one byte over the cap, so a file that grows while it is read is refused too.
Every reader of a user's file goes through it: design files (:mod:`chipflow.spec.reader`),
pump waveforms (:mod:`chipflow.spec.waveform`) and masks for ``chipflow analyse``
(:mod:`chipflow.spec.mask_dxf`).

Examples
--------
>>> read_capped("/dev/zero", 1000, "design file")  # doctest: +ELLIPSIS
Traceback (most recent call last):
...
chipflow.errors.SpecError: /dev/zero: is a character device, not a file: give a design file
"""

from __future__ import annotations

import os
import stat
from pathlib import Path

from chipflow.errors import SpecError

__all__ = ["read_capped", "check_regular_file", "MAX_WAVEFORM_BYTES", "MAX_MASK_BYTES"]

#: Largest pump waveform CSV [bytes]: one period of samples; real ones are a few kB.
MAX_WAVEFORM_BYTES = 10_000_000
#: Largest mask DXF read by ``chipflow analyse`` [bytes]: a chip of thousands of channels
#: writes some MB; far larger drawings could not be meshed and solved in memory anyway.
MAX_MASK_BYTES = 100_000_000

_KINDS = (
    (stat.S_ISDIR, "a folder"),
    (stat.S_ISFIFO, "a pipe (FIFO)"),
    (stat.S_ISCHR, "a character device"),
    (stat.S_ISBLK, "a block device"),
    (stat.S_ISSOCK, "a socket"),
)


def _kind(mode: int) -> str:
    for test, words in _KINDS:
        if test(mode):
            return words
    return "not a regular file"


def check_regular_file(path: str | Path, limit: int, what: str) -> int:
    """The size [bytes] of ``path``, refused unless it is a regular file of at most ``limit``
    bytes (a SpecError naming the path and what was expected)."""
    path = Path(path)
    try:
        info = os.stat(path)
    except FileNotFoundError:
        raise SpecError(f"{path}: no such {what}") from None
    except OSError as exc:
        raise SpecError(f"{path}: cannot be read ({exc.strerror})") from None
    if not stat.S_ISREG(info.st_mode):
        raise SpecError(f"{path}: is {_kind(info.st_mode)}, not a file: give a {what}")
    if info.st_size > limit:
        raise SpecError(
            f"{path}: {info.st_size:,} bytes is too large for a {what} (at most {limit:,})"
        )
    return int(info.st_size)


def read_capped(path: str | Path, limit: int, what: str) -> bytes:
    """The bytes of a regular file of at most ``limit`` bytes (else a SpecError).

    Parameters
    ----------
    path : str or path-like
    limit : int
        Largest size accepted [bytes].
    what : str
        What the file is ("design file", "waveform file"), for the messages.
    """
    path = Path(path)
    check_regular_file(path, limit, what)
    try:
        # O_NONBLOCK: a path swapped for a FIFO after the check cannot block the open
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    except OSError as exc:
        raise SpecError(f"{path}: cannot be read ({exc.strerror})") from None
    try:
        if not stat.S_ISREG(os.fstat(fd).st_mode):
            raise SpecError(f"{path}: is {_kind(os.fstat(fd).st_mode)}, not a file")
        with os.fdopen(fd, "rb", closefd=False) as f:
            raw = f.read(limit + 1)
    except OSError as exc:
        raise SpecError(f"{path}: cannot be read ({exc.strerror})") from None
    finally:
        os.close(fd)
    if len(raw) > limit:
        raise SpecError(f"{path}: too large for a {what} (more than {limit:,} bytes)")
    return raw
