"""Atomic file writing shared by the exporters."""

from __future__ import annotations

import os
from collections.abc import Callable
from pathlib import Path

from chipflow.errors import ExportError

__all__ = ["atomic_write"]


def atomic_write(path: str | os.PathLike, write: Callable[[Path], None], what: str) -> Path:
    """Write a file through a temporary file in the same folder, then rename it into place.

    A reader never sees a half-written file, and a failed write leaves any old file intact.

    Parameters
    ----------
    path : str or path-like
        Final file name.
    write : callable
        Called with the temporary path; must create that file.
    what : str
        What is written ("DXF mask file", ...), for messages.
    """
    path = Path(path)
    if not path.parent.is_dir():
        raise ExportError(f"{path}: cannot write the {what}: folder {path.parent} does not exist")
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    try:
        write(tmp)
        os.replace(tmp, path)
    except OSError as exc:
        raise ExportError(f"{path}: cannot write the {what} ({exc.strerror or exc})") from None
    finally:
        if tmp.exists():
            tmp.unlink()
    return path
