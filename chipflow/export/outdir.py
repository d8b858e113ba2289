"""Output folders replaced as a whole: the folder is always entirely the old build or the new one.

A build writes a dozen files. A cleanroom must never receive a mask file of one build beside the
report of another, so :func:`staged_folder` gives the caller an empty staging folder and, when
the ``with`` block ends without an exception, puts its contents in place of the output folder's
in one atomic step. Any reader, at any instant, finds the previous build or the new one,
never a mix and never a partial folder, even if the build is killed (SIGKILL) at any point:

- **Folder swap** (the usual case: the output folder is new, empty, or a previous chipflow
  output). The staging folder is created beside the output folder and the two are exchanged by
  one atomic ``renameat2(RENAME_EXCHANGE)`` (Linux); the old folder is then removed, so no file
  of the previous build survives. Where the file system cannot exchange, the output folder is
  updated in place (below) rather than renamed aside and back, which would leave a moment
  with no folder at all.
- **In place** (the output folder is the current folder or holds it, as with ``-o .``; holds
  files that no chipflow build wrote; its parent cannot be written; or the file system cannot
  exchange two folders). The outputs live in a hidden build folder inside OUTDIR
  (``.chipflow-build-<id>``); ``.chipflow-current`` is a symbolic link to the build folder in
  use, and each output's name in OUTDIR is a relative symbolic link through it
  (``report.html -> .chipflow-current/report.html``). A new build is staged in a new hidden
  folder, the links for names it adds are made (they lead nowhere until the switch, so a
  reader finds no such file: the old state), and then ``.chipflow-current`` is switched to
  the new folder by renaming a new link over it, one atomic step after which every name
  leads into the new build. Names of the old build that the new one lacks then lead nowhere
  (absent: the new state) and are removed, with the old build folder. The user's own files
  are left alone; an output of a previous chipflow version (plain files listed in the
  ``.chipflow-outputs`` manifest), or a user's file of the same name as a new output, is
  first taken into the current build folder by a hard link and its name replaced by a link
  to the same bytes, which no reader can tell apart. A build killed at any point leaves the
  old state or the new one; the next build removes what it left behind. A file system
  without symbolic links is refused with one line (choose a new or empty folder).

  Why links rather than moving files one by one (the earlier design, under a journal): a
  reader between two moves saw a report without its mask; no sequence of renames of many
  names is atomic, but one rename of one link is. Why not a subfolder of OUTDIR alone: the
  outputs of ``-o .`` belong in the folder itself, where people look for them.

Every build into a folder holds a lock (``fcntl.flock`` on a hidden file beside the folder, or
inside it when the parent cannot be written), so a second build into the same folder fails
with one clear line instead of racing. The lock file and the staging folder are made inside
the scope that removes them, with SIGTERM and SIGINT held back for the few system calls
between making each and registering it, so a signal never leaves one behind. The lock dies
with its process, so the next build can remove the staging folders that killed builds left
behind. SIGTERM (like Ctrl-C) stops a build cleanly: the staging folder is removed and the
output folder stays as it was (a signal during the switch itself lets the switch finish).
Any ``OSError`` (full disk, read-only or immutable folder) becomes an
:class:`~chipflow.errors.ExportError`.

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

__all__ = ["staged_folder", "MANIFEST", "BuildLocked", "CURRENT"]

#: Hidden file listing the entries a build wrote into its output folder.
MANIFEST = ".chipflow-outputs"
#: In place: the link to the build folder in use (see the module notes).
CURRENT = ".chipflow-current"
_JOURNAL = ".chipflow-journal"  # in-place updates of earlier versions (rolled back if found)
_TAG = ".chipflow-"
_BUILD = f"{_TAG}build-"
_STAGE_RE = re.compile(r"\.chipflow-(stage|old|build|link)-\d+-[0-9a-z_]+$")
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
    if (target / CURRENT).is_symlink():
        return True  # already updated in place
    names = {p.name for p in target.iterdir() if not p.name.startswith(_TAG)}
    return bool(names - set(_manifest(target) or ()))


# -- signals: SIGTERM and Ctrl-C unwind, but not in the middle of a critical step -------------
_STATE: dict = {"depth": 0, "pending": None, "switched": False}


def _stop(signum: int) -> None:
    name = signal.Signals(signum).name
    if _STATE["switched"]:
        text = f"chipflow: stopped by {name}; the output folder holds the new build\n"
    else:
        text = f"chipflow: stopped by {name}; the output folder is left as it was\n"
    os.write(2, text.encode())
    raise SystemExit(128 + signum)


@contextlib.contextmanager
def _critical() -> Iterator[None]:
    """Hold SIGTERM and SIGINT back while a file is made and registered for clean-up (or
    the switch is made); a signal that came meanwhile stops the build right after."""
    _STATE["depth"] += 1
    try:
        yield
    finally:
        _STATE["depth"] -= 1
    if not _STATE["depth"] and _STATE["pending"] is not None:
        signum, _STATE["pending"] = _STATE["pending"], None
        _stop(signum)


@contextlib.contextmanager
def _signals_clean_up() -> Iterator[None]:
    """Turn SIGTERM and SIGINT (Ctrl-C) into an exit that unwinds, so that ``finally`` blocks
    remove the staging folder, with one line on stderr."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def stop(signum, frame):
        if _STATE["depth"]:
            _STATE["pending"] = signum
            return
        _stop(signum)

    _STATE.update(depth=0, pending=None, switched=False)
    previous = {sig: signal.signal(sig, stop) for sig in (signal.SIGTERM, signal.SIGINT)}
    try:
        yield
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)


@contextlib.contextmanager
def _lock(path: Path, target: Path) -> Iterator[None]:
    """Hold an exclusive lock on ``path`` (created if needed) or raise :class:`BuildLocked`
    naming the output folder ``target``. The lock file is made and registered for removal
    within one critical step, inside the scope that removes it."""
    import fcntl

    fd, mine = None, False
    try:
        with _critical():
            while True:
                fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
                try:
                    fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                except BlockingIOError:
                    os.close(fd)
                    fd = None
                    raise BuildLocked(
                        f"{target}: another chipflow build is writing this output folder (it "
                        f"holds {path}); wait for it to finish or choose another folder"
                    ) from None
                mine = True
                try:
                    same = os.path.samestat(os.fstat(fd), os.stat(path))
                except FileNotFoundError:
                    same = False
                if same:
                    break
                # removed by the previous holder while we waited: lock the new file
                os.close(fd)
                fd, mine = None, False
        yield
    finally:
        if mine:
            with contextlib.suppress(OSError):
                os.unlink(path)
        if fd is not None:
            os.close(fd)


def _remove_stale(folder: Path, prefix: str, target: Path) -> None:
    """Remove staging and set-aside folders of dead builds (the caller holds the lock).

    Where a build of an earlier version died between moving the old folder aside and the new
    one in, the old folder is first put back.
    """
    if not target.exists():
        aside = sorted(folder.glob(f"{glob.escape(prefix)}old-*"), key=lambda p: p.stat().st_mtime)
        if aside:
            os.rename(aside[-1], target)
    with contextlib.suppress(OSError):
        for entry in folder.iterdir():
            if entry.name.startswith(prefix) and _STAGE_RE.search(entry.name):
                if folder == target and entry.name.startswith(_BUILD) and _in_use(target, entry):
                    continue
                _remove(entry) if entry.is_symlink() else shutil.rmtree(entry, True)
    with contextlib.suppress(OSError):
        (target / f"{_JOURNAL}.tmp").unlink(missing_ok=True)  # a journal never completed


def _in_use(target: Path, build: Path) -> bool:
    """Whether ``build`` is the build folder ``.chipflow-current`` leads to."""
    try:
        return os.readlink(target / CURRENT) == build.name
    except OSError:
        return False


def _roll_back(target: Path) -> None:
    """Undo the moves of an in-place update of an earlier version that was killed part-way
    (moves under a journal)."""
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


def _swap_folder(stage: Path, target: Path) -> bool:
    """Put ``stage`` in place of ``target`` in one step (False: the system cannot exchange
    two folders; nothing was changed)."""
    if not target.exists():
        os.rename(stage, target)
        return True
    if _exchange(stage, target):
        shutil.rmtree(stage, ignore_errors=True)  # now holds the previous build
        return True
    return False


# -- in place: outputs as links through one switchable link ------------------------------------
def _link_text(name: str) -> str:
    return f"{CURRENT}/{name}"


def _is_our_link(path: Path) -> bool:
    try:
        return os.readlink(path) == _link_text(path.name)
    except OSError:
        return False


def _replace_by_link(target: Path, name: str, tag: str) -> None:
    """Make ``target/name`` a link through ``.chipflow-current`` (one atomic rename)."""
    tmp = target / f"{_TAG}link-{tag}"
    with contextlib.suppress(FileNotFoundError):
        tmp.unlink()
    os.symlink(_link_text(name), tmp)
    os.replace(tmp, target / name)


def _current_build(target: Path, tag: str) -> Path:
    """The build folder ``.chipflow-current`` leads to, made (empty) when there is none."""
    link = target / CURRENT
    if link.is_symlink():
        here = target / os.readlink(link)
        if here.is_dir() and here.parent == target:
            return here
    empty = target / f"{_BUILD}{tag}_0"
    tmp = target / f"{_TAG}link-{tag}"
    with contextlib.suppress(FileNotFoundError):
        tmp.unlink()
    try:
        os.symlink(empty.name, tmp)
    except OSError as exc:
        raise ExportError(
            f"{target}: cannot update this folder in place atomically: its file system makes "
            f"no symbolic links ({_why(exc)}); choose a new or empty output folder"
        ) from None
    empty.mkdir()
    os.replace(tmp, link)
    return empty


def _adopt(target: Path, current: Path, name: str, tag: str) -> None:
    """Make ``target/name`` one of our links without changing what a reader finds there: a
    plain file (an earlier version's output, or the user's file of an output's name) is first
    hard-linked into the current build folder."""
    path = target / name
    if _is_our_link(path):
        return
    if path.is_symlink() or path.exists():
        if path.is_dir() and not path.is_symlink():
            raise ExportError(
                f"{path}: a folder where this build writes a file; move it or choose another "
                "output folder"
            )
        inside = current / name
        if not inside.exists():
            try:
                os.link(path, inside, follow_symlinks=False)
            except OSError:
                shutil.copy2(path, inside, follow_symlinks=False)
    _replace_by_link(target, name, tag)


def _switch_in_place(stage: Path, target: Path, names: list[str], tag: str) -> None:
    """Switch ``target`` to the build staged in ``stage`` (see the module notes)."""
    current = _current_build(target, tag)
    old_names = _manifest(current)
    if old_names is None:  # an earlier version's plain files, or none
        old_names = [n for n in (_manifest(target) or []) if (target / n).exists()]
    new_names = [*names, MANIFEST]
    for name in dict.fromkeys([*old_names, MANIFEST, *new_names]):
        if name in new_names or (target / name).exists() or (target / name).is_symlink():
            _adopt(target, current, name, tag)  # same bytes as before, through a link
    build = target / f"{_BUILD}{tag}"
    os.rename(stage, build)
    _fsync_dir(target)
    tmp = target / f"{_TAG}link-{tag}"
    with contextlib.suppress(FileNotFoundError):
        tmp.unlink()
    os.symlink(build.name, tmp)
    with _critical():
        os.replace(tmp, target / CURRENT)  # the switch: every name now leads into the new build
        _STATE["switched"] = True
    _fsync_dir(target)
    for name in set(old_names) - set(new_names):
        if _is_our_link(target / name):
            (target / name).unlink()
    for entry in target.iterdir():
        if entry.name.startswith(_BUILD) and entry != build:
            shutil.rmtree(entry, ignore_errors=True)


def _tidy_in_place(target: Path) -> None:
    """Remove links a killed in-place update left leading nowhere (the caller holds the
    lock): names the current build does not have."""
    if not (target / CURRENT).is_symlink():
        return
    keep = set(_manifest(target / CURRENT) or ())
    with contextlib.suppress(OSError):
        for entry in target.iterdir():
            if entry.name not in keep and _is_our_link(entry) and not entry.exists():
                entry.unlink()


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
                _roll_back(target)  # an in-place update of an earlier version killed part-way
                _remove_stale(target, _TAG, target)
                _tidy_in_place(target)
            if beside:
                _remove_stale(target.parent, f".{target.name}{_TAG}", target)
            inside = _in_place(target)
            if inside:
                target.mkdir(exist_ok=True)
            home, prefix = (target, _TAG) if inside else (target.parent, f".{target.name}{_TAG}")
            stage = home / f"{prefix}stage-{tag}"
            try:
                with _critical():
                    stage.mkdir()
                yield stage
                names = _write_manifest(stage)
                _fsync_dir(stage)
                if inside or not _swap_folder(stage, target):
                    if not inside:  # no exchange here: the new build goes in beside the old
                        stage = _restage(stage, target, tag)
                    _switch_in_place(stage, target, names, tag)
            finally:
                with contextlib.suppress(OSError):
                    if stage.is_dir():
                        shutil.rmtree(stage, ignore_errors=True)
                with contextlib.suppress(OSError):
                    (target / f"{_TAG}link-{tag}").unlink(missing_ok=True)
    except OSError as exc:
        name = f" {exc.filename}" if getattr(exc, "filename", None) else ""
        raise ExportError(
            f"{raw}: cannot write the output folder{name} ({_why(exc)}); it is left as it was"
        ) from None


def _restage(stage: Path, target: Path, tag: str) -> Path:
    """Move a staging folder made beside ``target`` into it (same file system: one rename),
    for an in-place update where two folders cannot be exchanged."""
    inside = target / f"{_TAG}stage-{tag}"
    os.rename(stage, inside)
    return inside
