"""On-disk cache of field results per geometry: solve a junction or a piece once per machine.

A field result that depends only on a geometry and the solver's settings (a junction's
equivalent length, a piece's resistances) is a function of a hashable key; :func:`cached`
keeps its value, a few numbers or arrays, in a file named by a hash of the key, the settings
and :data:`MODEL_VERSION`, so that a second build of the same design, in any process, does no
field solve.

Where it lives: ``CHIPFLOW_FIELD_CACHE`` names a folder, or ``off`` turns the cache off; by
default it is ``field`` in the user's cache folder (``~/.cache/chipflow/field`` on Linux, the
folder of the unit cache, :mod:`chipflow.units`). ``chipflow cache info`` shows it and
``chipflow cache clear`` empties it.

Safe under concurrency without locks: an entry is written to a temporary file in the same
folder and renamed into place (atomic on POSIX and Windows), so a reader sees either no entry
or a whole one; two processes computing the same entry write the same value. An entry that
cannot be read (truncated, corrupt, another key) is ignored, computed again and rewritten.
Trouble with the folder itself (read-only, full disk) makes the cache a no-op, never an error:
the results are the same with or without it.
"""

from __future__ import annotations

import dataclasses
import hashlib
import os
import tempfile
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

__all__ = [
    "MODEL_VERSION",
    "CacheInfo",
    "cache_folder",
    "cache_info",
    "cached",
    "clear_cache",
    "key_digest",
]

#: Version of the field model (mesh, assembly, calibration, solve): part of every key. Change
#: it whenever a change of code changes a cached result.
MODEL_VERSION = "field-1"
_SUFFIX = ".npz"
_memory: dict[str, dict[str, Any]] = {}


def cache_folder() -> Path | None:
    """The folder of the field cache (None: turned off by ``CHIPFLOW_FIELD_CACHE=off``)."""
    setting = os.environ.get("CHIPFLOW_FIELD_CACHE", "")
    if setting.lower() in ("off", "0", "no", "false"):
        return None
    if setting:
        return Path(setting)
    import platformdirs  # a dependency of pint

    return platformdirs.user_cache_path("chipflow", appauthor=False) / "field"


def _canonical(value: Any) -> str:
    """A text that is the same exactly when the values are (floats exactly, by their hex)."""
    if isinstance(value, bool) or value is None:
        return repr(value)
    if isinstance(value, int | np.integer):
        return str(int(value))
    if isinstance(value, float | np.floating):
        return float(value).hex()
    if isinstance(value, str):
        return repr(value)
    if isinstance(value, bytes):
        return f"bytes({hashlib.sha256(value).hexdigest()})"
    if isinstance(value, np.ndarray):
        if value.dtype == object:
            return _canonical(value.tolist())
        data = np.ascontiguousarray(value)
        digest = hashlib.sha256(data.tobytes()).hexdigest()
        return f"array({data.dtype.str},{data.shape},{digest})"
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        fields = ",".join(
            f"{f.name}={_canonical(getattr(value, f.name))}" for f in dataclasses.fields(value)
        )
        return f"{type(value).__name__}({fields})"
    if isinstance(value, Mapping):
        items = sorted((_canonical(k), _canonical(v)) for k, v in value.items())
        return "{" + ",".join(f"{k}:{v}" for k, v in items) + "}"
    if isinstance(value, tuple | list):
        return "(" + ",".join(_canonical(v) for v in value) + ")"
    raise TypeError(f"cannot key the field cache by a {type(value).__name__}")


def key_digest(kind: str, key: Any, settings: Mapping[str, Any] | None = None) -> str:
    """The hash naming the entry of ``key`` of ``kind`` solved with ``settings``.

    Examples
    --------
    >>> a = key_digest("junction", (1e-4, 5e-5), {"across": 8.0})
    >>> a == key_digest("junction", (1e-4, 5e-5), {"across": 8.0})
    True
    >>> a == key_digest("junction", (1e-4, 5e-5), {"across": 4.0})
    False
    """
    text = f"{MODEL_VERSION}|{kind}|{_canonical(key)}|{_canonical(dict(settings or {}))}"
    return hashlib.sha256(text.encode()).hexdigest()


def _read(path: Path, digest: str) -> dict[str, Any] | None:
    try:
        with np.load(path, allow_pickle=False) as data:
            if str(data["__digest__"]) != digest:
                return None
            return {
                name: (data[name] if data[name].ndim else data[name][()])
                for name in data.files
                if name != "__digest__"
            }
    except Exception:  # noqa: BLE001 - missing, truncated or corrupt: computed again
        return None


def _write(folder: Path, path: Path, digest: str, value: Mapping[str, Any]) -> None:
    try:
        folder.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=".tmp-", suffix=_SUFFIX, dir=folder)
        try:
            with os.fdopen(fd, "wb") as f:
                np.savez(f, __digest__=np.array(digest), **value)
            os.replace(tmp, path)
        except BaseException:
            Path(tmp).unlink(missing_ok=True)
            raise
    except OSError:
        pass  # a read-only or full cache folder: the result is still returned


def cached(
    kind: str,
    key: Any,
    compute: Callable[[], Mapping[str, Any]],
    settings: Mapping[str, Any] | None = None,
) -> dict[str, Any]:
    """The result of ``compute()`` for ``key``, from the cache when it holds it.

    Parameters
    ----------
    kind : str
        What is cached (``"junction"``, a piece's kind): part of the key.
    key : hashable
        The geometry: nested tuples, lists and mappings of numbers, strings and bytes (a
        shapely geometry's WKB), numpy arrays or frozen dataclasses of those. Floats are keyed
        exactly (round them first where nearly equal geometries should share an entry).
    compute : callable
        Returns the result as a mapping of names to numbers or numpy arrays (no objects).
    settings : mapping, optional
        Solver settings that change the result (mesh density, calibration constants): part of
        the key.

    Returns
    -------
    dict
        Names to floats, ints or numpy arrays, as ``compute`` returned them.
    """
    digest = key_digest(kind, key, settings)
    if digest in _memory:
        return dict(_memory[digest])
    folder = cache_folder()
    path = None if folder is None else folder / f"{digest}{_SUFFIX}"
    value = _read(path, digest) if path is not None else None
    if value is None:
        value = {name: np.asarray(v)[()] for name, v in compute().items()}
        failed = any(np.isnan(v).any() for v in value.values() if np.asarray(v).dtype.kind == "f")
        if path is not None and not failed:  # a failed solve (NaN) is tried again next run
            _write(folder, path, digest, value)
    _memory[digest] = value
    return dict(value)


@dataclass(frozen=True)
class CacheInfo:
    """Where the field cache is and what it holds.

    Attributes
    ----------
    folder : pathlib.Path or None
        None when the cache is turned off.
    entries : int
    size : int
        Bytes on disk.
    """

    folder: Path | None
    entries: int
    size: int


def _entries(folder: Path | None, *, temporary: bool = False) -> list[Path]:
    """The entry files (with ``temporary``, also those left half-written by killed runs)."""
    if folder is None or not folder.is_dir():
        return []
    return [
        p
        for p in folder.iterdir()
        if p.suffix == _SUFFIX and p.is_file() and (temporary or not p.name.startswith(".tmp-"))
    ]


def cache_info() -> CacheInfo:
    """The cache folder, its number of entries and their size."""
    folder = cache_folder()
    files = _entries(folder)
    return CacheInfo(folder, len(files), sum(p.stat().st_size for p in files))


def clear_cache() -> int:
    """Remove every entry of the field cache (and this process's copies); returns how many
    files were removed."""
    _memory.clear()
    removed = 0
    for path in _entries(cache_folder(), temporary=True):
        try:
            path.unlink()
            removed += 1
        except FileNotFoundError:
            pass  # removed by another process meanwhile
    return removed
