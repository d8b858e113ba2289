"""Output folders replaced as a whole: the folder is always entirely the old build or the new one.

A build writes a dozen files. A cleanroom must never receive a mask file of one build beside the
report of another, so :func:`staged_folder` gives the caller an empty staging folder and, when
the ``with`` block ends without an exception, puts it in place of the output folder in one
step:

- **Folder swap** (the usual case: the output folder is new, empty, or a previous chipflow
  output). The staging folder is created beside the output folder and the two are exchanged by
  one atomic ``renameat2(RENAME_EXCHANGE)`` (Linux); elsewhere the old folder is renamed aside
  and the new one renamed in. The old folder is then removed, so no file of the previous build
  survives.
- **In place** (the output folder is the current folder or holds it, as with ``-o .``; holds
  files that no chipflow build wrote; or its parent cannot be written). The staging folder is
  created inside the output folder, and a journal records the moves: the previous build's
  entries (listed in the ``.chipflow-outputs`` manifest) are moved aside, the new ones moved in,
  and the journal removed. Files that are not chipflow's are left alone. A build killed during
  the moves leaves the journal; the next build into that folder rolls the moves back first.

Every build into a folder holds a lock (``fcntl.flock`` on a hidden file beside the folder, or
inside it when the parent cannot be written), so a second build into the same folder fails
with one clear line instead of racing. The lock dies with its process, so the next build can
remove the staging folders that killed builds left behind. SIGTERM (like Ctrl-C) stops a build
cleanly: the staging folder is removed and the output folder stays as it was. Any ``OSError``
(full disk, read-only or immutable folder) becomes an :class:`~chipflow.errors.ExportError`.

Examples
--------
>>> import pathlib, tempfile
>>> target = pathlib.Path(tempfile.mkdtemp()) / "out"
>>> with staged_folder(target) as stage:
...     _ = (stage / "a.txt").write_text("first")
>>> with staged_folder(target) as stage:
...     _ = (stage / "b.txt").write_text("second")
>>> sorted(p.name for p in target.iterdir())   # a.txt of the first build is gone
['.chipflow-outputs', 'b.txt']
"""

from __future__ import annotations

import contextlib
import ctypes
import errno
import glob
import json
import os
import re
import shutil
import signal
import threading
from collections.abc import Iterator
from pathlib import Path

from chipflow.errors import ExportError

__all__ = ["staged_folder", "MANIFEST", "BuildLocked"]

#: Hidden file listing the entries a build wrote into its output folder.
MANIFEST = ".chipflow-outputs"
_JOURNAL = ".chipflow-journal"
_TAG = ".chipflow-"
_STAGE_RE = re.compile(r"\.chipflow-(stage|old)-\d+-[0-9a-z_]+$")
_RENAME_EXCHANGE = 2
_AT_FDCWD = -100


class BuildLocked(ExportError):
    """Another running build writes into the same output folder."""


def _why(exc: OSError) -> str:
    return exc.strerror or str(exc)


def _exchange(a: Path, b: Path) -> bool:
    """Swap two paths atomically (Linux ``renameat2``); False where the system cannot."""
    try:
        renameat2 = ctypes.CDLL(None, use_errno=True).renameat2
    except (AttributeError, OSError):
        return False
    renameat2.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p]
    renameat2.argtypes += [ctypes.c_uint]
    if renameat2(_AT_FDCWD, bytes(a), _AT_FDCWD, bytes(b), _RENAME_EXCHANGE) == 0:
        return True
    err = ctypes.get_errno()
    if err in (errno.ENOSYS, errno.EINVAL, errno.ENOTSUP):
        return False
    raise OSError(err, os.strerror(err), str(b))


def _writable(folder: Path) -> bool:
    return folder.is_dir() and os.access(folder, os.W_OK | os.X_OK)


def _manifest(folder: Path) -> list[str] | None:
    """Entries the previous build wrote into ``folder`` (None when it has no manifest)."""
    try:
        names = (folder / MANIFEST).read_text("utf-8").splitlines()
    except (OSError, UnicodeDecodeError):
        return None
    return [n for n in names if n and "/" not in n and n not in (".", "..")]


def _in_place(target: Path) -> bool:
    """Whether ``target`` must be updated inside rather than swapped as a folder."""
    if not target.exists():
        return not _writable(target.parent)
    cwd = Path.cwd().resolve()
    if cwd == target or target in cwd.parents or not _writable(target.parent):
        return True
    names = {p.name for p in target.iterdir() if not p.name.startswith(_TAG)}
    return bool(names - set(_manifest(target) or ()))


@contextlib.contextmanager
def _lock(path: Path, target: Path) -> Iterator[None]:
    """Hold an exclusive lock on ``path`` (created if needed) or raise :class:`BuildLocked`
    naming the output folder ``target``."""
    import fcntl

    while True:
        fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            os.close(fd)
            raise BuildLocked(
                f"{target}: another chipflow build is writing this output folder (it holds "
                f"{path}); wait for it to finish or choose another folder"
            ) from None
        try:
            same = os.path.samestat(os.fstat(fd), os.stat(path))
        except FileNotFoundError:
            same = False
        if same:
            break
        os.close(fd)  # removed by the previous holder while we waited: lock the new file
    try:
        yield
    finally:
        with contextlib.suppress(OSError):
            os.unlink(path)
        os.close(fd)


@contextlib.contextmanager
def _signals_clean_up() -> Iterator[None]:
    """Turn SIGTERM and SIGINT (Ctrl-C) into an exit that unwinds, so that ``finally`` blocks
    remove the staging folder, with one line on stderr."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def stop(signum, frame):
        name = signal.Signals(signum).name
        os.write(2, f"chipflow: stopped by {name}; the output folder is left as it was\n".encode())
        raise SystemExit(128 + signum)

    previous = {sig: signal.signal(sig, stop) for sig in (signal.SIGTERM, signal.SIGINT)}
    try:
        yield
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)


def _remove_stale(folder: Path, prefix: str, target: Path) -> None:
    """Remove staging and set-aside folders of dead builds (the caller holds the lock).

    Where a build died between moving the old folder aside and the new one in (only without
    an atomic exchange), the old folder is first put back.
    """
    if not target.exists():
        aside = sorted(folder.glob(f"{glob.escape(prefix)}old-*"), key=lambda p: p.stat().st_mtime)
        if aside:
            os.rename(aside[-1], target)
    with contextlib.suppress(OSError):
        for entry in folder.iterdir():
            if entry.name.startswith(prefix) and _STAGE_RE.search(entry.name):
                shutil.rmtree(entry, ignore_errors=True)
    with contextlib.suppress(OSError):
        (target / f"{_JOURNAL}.tmp").unlink(missing_ok=True)  # a journal never completed


def _roll_back(target: Path) -> None:
    """Undo the moves of an in-place update that was killed part-way (see the module text)."""
    journal = target / _JOURNAL
    try:
        plan = json.loads(journal.read_text("utf-8"))
    except FileNotFoundError:
        return
    except (OSError, ValueError):
        plan = None
    if plan is not None:
        stage, old = target / plan["stage"], target / plan["old"]
        for name in plan["new"]:
            if not (stage / name).exists() and (target / name).exists():
                _remove(target / name)
        for name in plan["previous"]:
            if (old / name).exists() and not (target / name).exists():
                os.replace(old / name, target / name)
    journal.unlink()


def _remove(path: Path) -> None:
    if path.is_dir() and not path.is_symlink():
        shutil.rmtree(path)
    else:
        path.unlink()


def _fsync_dir(folder: Path) -> None:
    with contextlib.suppress(OSError):
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def _write_manifest(stage: Path) -> list[str]:
    names = sorted(p.name for p in stage.iterdir() if p.name != MANIFEST)
    (stage / MANIFEST).write_text("".join(f"{n}\n" for n in names), "utf-8")
    return names


def _swap_folder(stage: Path, target: Path, old: Path) -> None:
    """Put ``stage`` in place of ``target`` in one step; the previous folder is removed."""
    if not target.exists():
        os.rename(stage, target)
        return
    if _exchange(stage, target):
        shutil.rmtree(stage, ignore_errors=True)  # now holds the previous build
        return
    os.rename(target, old)
    os.rename(stage, target)
    shutil.rmtree(old, ignore_errors=True)


def _swap_in_place(stage: Path, target: Path, old: Path, names: list[str]) -> None:
    """Move the previous build's entries aside and the new ones in, under a journal."""
    previous = [n for n in (_manifest(target) or []) if (target / n).exists()]
    previous += [n for n in [*names, MANIFEST] if n not in previous and (target / n).exists()]
    new = [*names, MANIFEST]
    plan = {"stage": stage.name, "old": old.name, "previous": previous, "new": new}
    tmp = target / f"{_JOURNAL}.tmp"
    tmp.write_text(json.dumps(plan), "utf-8")
    os.replace(tmp, target / _JOURNAL)
    old.mkdir()
    for name in previous:
        os.replace(target / name, old / name)
    for name in new:
        os.replace(stage / name, target / name)
    _fsync_dir(target)
    (target / _JOURNAL).unlink()
    shutil.rmtree(old, ignore_errors=True)


@contextlib.contextmanager
def staged_folder(target: str | os.PathLike) -> Iterator[Path]:
    """Yield an empty staging folder that replaces ``target`` as a whole on success.

    Parameters
    ----------
    target : str or path-like
        The output folder (created if needed; ``"."`` is the current folder).

    Yields
    ------
    pathlib.Path
        The staging folder; write every output into it (files or sub-folders).

    Raises
    ------
    ExportError
        ``target`` is a file, cannot be created or written (with the system's reason), or
        another build holds its lock (:class:`BuildLocked`). On any error, and on SIGTERM or
        Ctrl-C, the staging folder is removed and ``target`` is left as it was.
    """
    raw = Path(target)
    if raw.exists() and not raw.is_dir():
        raise ExportError(f"{raw}: exists and is not a folder; choose another output folder")
    try:
        target = raw.resolve()
    except OSError as exc:  # e.g. the current folder was deleted
        raise ExportError(f"{raw}: cannot locate the output folder ({_why(exc)})") from None
    if target.parent == target:
        raise ExportError(f"{raw}: the root folder cannot be an output folder")
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        beside = _writable(target.parent)
        if not beside:
            target.mkdir(exist_ok=True)
    except OSError as exc:
        raise ExportError(f"{raw}: cannot create the output folder ({_why(exc)})") from None
    # one lock per output folder whichever way it is then updated: beside it, or inside it
    # where its parent cannot be written
    lock_path = target.parent / f".{target.name}{_TAG}lock" if beside else target / f"{_TAG}lock"
    tag = f"{os.getpid()}-{os.urandom(4).hex()}"
    try:
        with _signals_clean_up(), _lock(lock_path, target):
            if target.is_dir():
                _roll_back(target)  # an in-place update killed part-way
                _remove_stale(target, _TAG, target)
            if beside:
                _remove_stale(target.parent, f".{target.name}{_TAG}", target)
            inside = _in_place(target)
            if inside:
                target.mkdir(exist_ok=True)
            home, prefix = (target, _TAG) if inside else (target.parent, f".{target.name}{_TAG}")
            stage, old = home / f"{prefix}stage-{tag}", home / f"{prefix}old-{tag}"
            stage.mkdir()
            try:
                yield stage
                names = _write_manifest(stage)
                _fsync_dir(stage)
                if inside:
                    _swap_in_place(stage, target, old, names)
                else:
                    _swap_folder(stage, target, old)
            finally:
                if inside and (target / _JOURNAL).exists():
                    with contextlib.suppress(OSError, KeyError):
                        _roll_back(target)  # a move failed part-way: put the old build back
                shutil.rmtree(stage, ignore_errors=True)
                if not (inside and (target / _JOURNAL).exists()):
                    shutil.rmtree(old, ignore_errors=True)
    except OSError as exc:
        name = f" {exc.filename}" if getattr(exc, "filename", None) else ""
        raise ExportError(
            f"{raw}: cannot write the output folder{name} ({_why(exc)}); it is left as it was"
        ) from None
