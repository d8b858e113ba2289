"""Atomic output folders: write everything aside, move it in only when all of it succeeded.

A build writes a dozen files. If any of them fails half-way (a full disk, a bug in one
exporter), the output folder must stay exactly as it was, so that a cleanroom never receives a
mask file from one build and a report from another. :func:`staged_folder` gives a temporary
folder next to the target; when the ``with`` block ends without an exception its files are
moved into the target one ``os.replace`` at a time (each move atomic on one file system), and
on an exception the temporary folder is removed and the target is untouched.

Examples
--------
>>> import pathlib, tempfile
>>> target = pathlib.Path(tempfile.mkdtemp()) / "out"
>>> with staged_folder(target) as stage:
...     _ = (stage / "a.txt").write_text("complete")
>>> sorted(p.name for p in target.iterdir())
['a.txt']
"""

from __future__ import annotations

import contextlib
import os
import shutil
import tempfile
from collections.abc import Iterator
from pathlib import Path

from chipflow.errors import ExportError

__all__ = ["staged_folder"]


@contextlib.contextmanager
def staged_folder(target: str | Path) -> Iterator[Path]:
    """Yield a temporary folder whose files replace those of ``target`` on success.

    Files already in ``target`` that the build does not write are left alone; files the build
    writes replace their namesakes. Sub-folders are not supported (outputs are flat).
    """
    target = Path(target)
    if target.exists() and not target.is_dir():
        raise ExportError(f"{target}: exists and is not a folder; choose another output folder")
    parent = target.resolve().parent
    try:
        parent.mkdir(parents=True, exist_ok=True)
        stage = Path(tempfile.mkdtemp(prefix=f".{target.name}-", dir=parent))
    except OSError as exc:
        raise ExportError(f"{target}: cannot create the output folder ({exc.strerror})") from None
    try:
        yield stage
        files = sorted(p for p in stage.iterdir() if p.is_file())
        target.mkdir(exist_ok=True)
        for path in files:
            os.replace(path, target / path.name)
    finally:
        shutil.rmtree(stage, ignore_errors=True)
