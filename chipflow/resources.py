"""Guards before heavy steps: how much memory this process may use, and estimates against it.

Every step whose memory or time grows with its input (drawing a tree, meshing and factorising
a field, a Monte Carlo batch, a sweep grid) first estimates its peak memory and its time from
constants measured by the benchmarks (each step keeps its constants beside its code, with the
measurement they come from), then calls :func:`check_memory`: above :data:`MEMORY_SHARE` of
the memory this process may use it is refused in one line that says how big, the limit, and
``--allow-large`` (the library's ``allow_large=True``) to go on regardless.

The memory this process may use is the smallest of the machine's total memory, the process's
address-space and data-segment limits (``ulimit -v`` / ``-d``: ``RLIMIT_AS``,
``RLIMIT_DATA``) and the memory limit of its control group (``memory.max`` of cgroup v2, or
``memory.limit_in_bytes`` of v1, on its own group and every parent), whichever are set: a
job under a 6 GB limit on a 24 GB machine may use 6 GB, not 24.

Examples
--------
>>> est = Estimate("the field mesh", memory=3e9, seconds=40.0, detail="300,000 triangles")
>>> check_memory(est, memory=(2 * 2**30, "machine"))  # doctest: +ELLIPSIS
Traceback (most recent call last):
...
chipflow.errors.TooLargeError: the field mesh (300,000 triangles) needs about 3 GB ...
>>> check_memory(est, memory=(2 * 2**30, "x"), allow_large=True).seconds
40.0
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

from chipflow.errors import TooLargeError

__all__ = [
    "MEMORY_SHARE",
    "fits_memory",
    "Estimate",
    "memory_limit",
    "machine_memory",
    "check_memory",
    "size_text",
    "time_text",
    "limit_text",
]

#: Share of the memory this process may use that one step may need before it is refused.
MEMORY_SHARE = 0.75
_UNLIMITED = 2**60  # cgroup and rlimit "no limit" values are at least this large


@dataclass(frozen=True)
class Estimate:
    """What a heavy step will cost, about.

    Attributes
    ----------
    what : str
        The step, for messages ("the field mesh of mask.dxf").
    memory : float
        Peak memory [bytes].
    seconds : float
        Processor time on one core [s] (the benchmarks' machine).
    detail : str
        How big the step is in its own terms ("300,000 triangles").
    """

    what: str
    memory: float
    seconds: float
    detail: str = ""

    def text(self) -> str:
        """``the field mesh (300,000 triangles): about 3 GB and 40 s``."""
        size = f" ({self.detail})" if self.detail else ""
        return f"{self.what}{size}: about {size_text(self.memory)} and {time_text(self.seconds)}"


def size_text(value: float) -> str:
    """Bytes for people: ``3.1 GB``, ``171 MB``."""
    return f"{value / 1e9:.3g} GB" if value >= 1e9 else f"{value / 1e6:.3g} MB"


def time_text(seconds: float) -> str:
    """Seconds for people: ``40 s``, ``12 min``, ``3.2 h``, ``5 days``."""
    if seconds < 90:
        return f"{max(seconds, 0.1):.2g} s"
    if seconds < 5400:
        return f"{seconds / 60:.2g} min"
    if seconds < 172800:
        return f"{seconds / 3600:.2g} h"
    return f"{seconds / 86400:.3g} days"


def _binary(value: float) -> str:
    return f"{value / 2**30:.3g} GiB" if value >= 2**30 else f"{value / 2**20:.3g} MiB"


def machine_memory() -> int | None:
    """The machine's total memory [bytes] (``/proc/meminfo``, else ``sysconf``; None if
    unknown)."""
    try:
        with open("/proc/meminfo", encoding="ascii") as f:
            for line in f:
                if line.startswith("MemTotal:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    try:
        return int(os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES"))
    except (AttributeError, ValueError, OSError):
        return None


def _rlimits() -> list[tuple[int, str]]:
    try:
        import resource
    except ImportError:  # not on every platform
        return []
    out = []
    for name in ("RLIMIT_AS", "RLIMIT_DATA"):
        which = getattr(resource, name, None)
        if which is None:
            continue
        try:
            soft, _ = resource.getrlimit(which)
        except (OSError, ValueError):
            continue
        if 0 < soft < _UNLIMITED and soft != resource.RLIM_INFINITY:
            out.append((int(soft), name))
    return out


def _read_limit(path: Path) -> int | None:
    try:
        text = path.read_text("ascii").strip()
    except (OSError, UnicodeDecodeError):
        return None
    if not text.isdigit():
        return None  # "max": no limit
    value = int(text)
    return value if 0 < value < _UNLIMITED else None


def _cgroup_limits(root: Path = Path("/sys/fs/cgroup"), proc: Path = Path("/proc/self/cgroup")):
    """Memory limits of this process's control groups and their parents (v2 and v1)."""
    try:
        lines = proc.read_text("ascii").splitlines()
    except (OSError, UnicodeDecodeError):
        return []
    found = []
    for line in lines:
        parts = line.split(":", 2)
        if len(parts) != 3:
            continue
        controllers, group = parts[1], parts[2].strip().lstrip("/")
        if controllers == "":
            base, name = root, "memory.max"  # v2 (also under root/unified on hybrid systems)
            bases = [root, root / "unified"]
        elif "memory" in controllers.split(","):
            base, name = root / "memory", "memory.limit_in_bytes"
            bases = [base]
        else:
            continue
        for base in bases:
            # the group's own folder and its parents; a namespaced mount shows the group as
            # its root, which the walk reaches too
            steps = Path(group).parts
            for k in range(len(steps), -1, -1):
                value = _read_limit(base.joinpath(*steps[:k], name))
                if value is not None:
                    found.append((value, "cgroup"))
    return found


def memory_limit() -> tuple[int | None, str]:
    """The memory this process may use [bytes] and what sets it (see the module notes):
    ``"machine"``, ``"RLIMIT_AS"``, ``"RLIMIT_DATA"`` or ``"cgroup"``.

    Returns ``(None, "")`` when nothing is known.
    """
    candidates = []
    total = machine_memory()
    if total is not None:
        candidates.append((total, "machine"))
    candidates += _rlimits() + _cgroup_limits()
    if not candidates:
        return None, ""
    value, source = min(candidates, key=lambda c: c[0])
    return int(value), source


def fits_memory(estimate: Estimate, memory: tuple[int | None, str] | None = None) -> bool:
    """Whether ``estimate`` fits :data:`MEMORY_SHARE` of the memory this process may use
    (:func:`memory_limit`, or ``memory`` as ``(bytes, what sets it)``)."""
    limit, _ = memory_limit() if memory is None else memory
    return limit is None or estimate.memory <= MEMORY_SHARE * limit


def check_memory(
    estimate: Estimate,
    *,
    allow_large: bool = False,
    memory: tuple[int | None, str] | None = None,
    where: str = "",
    advice: str = "",
) -> Estimate:
    """Refuse a step that needs more than :data:`MEMORY_SHARE` of the memory this process
    may use.

    Parameters
    ----------
    estimate : Estimate
    allow_large : bool
        Go on regardless (``--allow-large``).
    memory : (int, str), optional
        The limit [bytes] and what sets it (default :func:`memory_limit`).
    where : str
        The input file, for the message.
    advice : str
        How to make the step smaller ("use fewer samples").

    Raises
    ------
    TooLargeError
        One line: the step and its size, its memory and time, the limit, what to do.
    """
    limit, source = memory_limit() if memory is None else memory
    if allow_large or fits_memory(estimate, (limit, source)):
        return estimate
    place = f"{where}: " if where else ""
    size = f" ({estimate.detail})" if estimate.detail else ""
    hint = f"{advice}, or " if advice else ""
    raise TooLargeError(
        f"{place}{estimate.what}{size} needs about {size_text(estimate.memory)} and "
        f"{time_text(estimate.seconds)}, more than {MEMORY_SHARE:.0%} of "
        f"{limit_text(limit, source)}; {hint}pass --allow-large to run it anyway"
    )


def limit_text(limit: float, source: str) -> str:
    """``this machine's 24 GiB`` or ``the 6 GiB this process may use (ulimit -v)``."""
    if source == "machine" or not source:
        return f"this machine's {_binary(limit)}"
    why = {
        "RLIMIT_AS": "its address-space limit, ulimit -v",
        "RLIMIT_DATA": "its data limit, ulimit -d",
        "cgroup": "its control group's memory limit",
    }.get(source, source)
    return f"the {_binary(limit)} this process may use ({why})"
