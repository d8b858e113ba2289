"""Run independent tasks here, in local processes, or on a Dask distributed cluster.

:func:`run_tasks` calls ``function(shared, item)`` for every item and returns the results in
the items' order. ``shared`` (the prepared network, the base design) is sent to each worker
once. Where a task runs never changes its result: the work is split into the same tasks
whichever way it is executed, so the same seed gives the same numbers locally and on a cluster.

- ``scheduler`` given: the tasks run on the existing ``dask.distributed`` cluster at that
  address (its workers need chipflow installed);
- otherwise ``workers`` local processes (default: one per CPU, at most one per task); one
  worker, or one task, runs in this process.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from typing import Any

from chipflow.errors import ChipflowError

__all__ = ["run_tasks", "default_workers"]

Progress = Callable[[int, int], None]

_SHARED: Any = None
#: How long to try to reach a Dask scheduler.
CONNECT_TIMEOUT = "10s"


def default_workers() -> int:
    """One worker per CPU available to this process."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on every platform
        return max(1, os.cpu_count() or 1)


def _remember(shared: Any) -> None:
    global _SHARED
    _SHARED = shared


def _call(function: Callable, item: Any) -> Any:
    return function(_SHARED, item)


def run_tasks(
    function: Callable[[Any, Any], Any],
    shared: Any,
    items: Sequence[Any],
    *,
    scheduler: str | None = None,
    workers: int | None = None,
    progress: Progress | None = None,
) -> list[Any]:
    """``[function(shared, item) for item in items]``, possibly in parallel.

    Parameters
    ----------
    function : callable
        A module-level function (it is sent to other processes by reference).
    shared : object
        Sent once to every worker.
    items : sequence
        One task each.
    scheduler : str, optional
        Address of a ``dask.distributed`` scheduler, e.g. ``tcp://10.0.0.5:8786``.
    workers : int, optional
        Local processes (ignored with ``scheduler``).
    progress : callable, optional
        Called with ``(done, total)`` tasks as they finish.

    Raises
    ------
    ChipflowError
        When the scheduler cannot be reached.
    """
    total = len(items)
    report = progress or (lambda done, total: None)
    if scheduler is not None:
        return _run_dask(function, shared, items, scheduler, report)
    n = min(default_workers() if workers is None else max(1, workers), total)
    if n <= 1:
        results = []
        for i, item in enumerate(items):
            results.append(function(shared, item))
            report(i + 1, total)
        return results
    out: list[Any] = [None] * total
    with ProcessPoolExecutor(max_workers=n, initializer=_remember, initargs=(shared,)) as pool:
        futures = {pool.submit(_call, function, item): i for i, item in enumerate(items)}
        for done, future in enumerate(as_completed(futures), start=1):
            out[futures[future]] = future.result()
            report(done, total)
    return out


def _run_dask(
    function: Callable, shared: Any, items: Sequence[Any], address: str, report: Progress
) -> list[Any]:
    try:
        from distributed import Client
        from distributed import as_completed as dask_completed
    except ImportError:  # pragma: no cover - a dependency
        raise ChipflowError(
            "--scheduler needs dask.distributed: pip install 'dask[distributed]'"
        ) from None
    if not address.strip():  # an empty address would start a new local cluster instead
        raise ChipflowError("--scheduler: give the address of a running Dask scheduler")
    try:
        client = Client(address, timeout=CONNECT_TIMEOUT, set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise ChipflowError(
            f"--scheduler {address}: cannot reach the Dask scheduler ({exc})"
        ) from None
    try:
        handle = client.scatter(shared, broadcast=True)
        futures = client.map(function, [handle] * len(items), list(items), pure=False)
        index = {f.key: i for i, f in enumerate(futures)}
        out: list[Any] = [None] * len(items)
        for done, future in enumerate(dask_completed(futures, loop=client.loop), start=1):
            out[index[future.key]] = future.result()
            report(done, len(items))
        return out
    finally:
        client.close()
