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

__all__ = ["run_tasks", "default_workers", "connect", "check_scheduler"]

Progress = Callable[[int, int], None]

_SHARED: Any = None
#: Seconds to resolve a scheduler's host name and to open a TCP connection to it.
PROBE_TIMEOUT = 3.0
#: Seconds for a reachable scheduler to answer as a Dask scheduler (another kind of server on
#: that port never does).
HANDSHAKE_TIMEOUT = 5.0
#: Address schemes of a Dask scheduler that chipflow connects to.
SCHEMES = ("tcp", "tls")


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


def _parse_address(address: str) -> tuple[str, str, int]:
    """``(scheme, host, port)`` of a scheduler address, or a ChipflowError in one line."""
    text = address.strip()
    if not text:  # an empty address would start a new local cluster instead
        raise ChipflowError("--scheduler: give the address of a running Dask scheduler")
    scheme, sep, rest = text.partition("://")
    if not sep:
        scheme, rest = "tcp", text
    if scheme == "inproc":  # a cluster inside this process (tests, notebooks)
        return scheme, rest, 0
    host, colon, port = rest.rstrip("/").rpartition(":")
    if scheme not in SCHEMES or not colon or not host or not port.isdigit():
        raise ChipflowError(
            f"--scheduler {address}: not a Dask scheduler address; give tcp://HOST:PORT "
            "(e.g. tcp://10.0.0.5:8786)"
        )
    number = int(port)
    if not 0 < number < 65536:
        raise ChipflowError(f"--scheduler {address}: port {number} is outside 1-65535")
    return scheme, host.strip("[]"), number


def _within(seconds: float, function: Callable[[], Any]) -> tuple[bool, Any]:
    """Run ``function`` in a daemon thread for at most ``seconds``: ``(finished, result or
    exception)``; a call that does not return in time is left behind (its thread dies with
    the process)."""
    import threading

    box: dict[str, Any] = {}

    def target() -> None:
        try:
            box["result"] = function()
        except BaseException as exc:  # noqa: BLE001 - reported to the caller
            box["error"] = exc

    thread = threading.Thread(target=target, daemon=True, name="chipflow-connect")
    thread.start()
    thread.join(seconds)
    if thread.is_alive():
        return False, None
    return True, box.get("error", box.get("result"))


def connect(address: str):
    """A ``distributed.Client`` for the scheduler at ``address``, within a bounded time.

    The address is checked first (``tcp://HOST:PORT``), then the host is resolved and a TCP
    connection opened within :data:`PROBE_TIMEOUT` seconds each, and the scheduler must
    answer within :data:`HANDSHAKE_TIMEOUT`: a bad, unreachable or wrong-protocol address is
    one ChipflowError line after a few seconds, never a hang.
    """
    try:
        from distributed import Client
    except ImportError:  # pragma: no cover - a dependency
        raise ChipflowError(
            "--scheduler needs dask.distributed: pip install 'dask[distributed]'"
        ) from None
    scheme, host, port = _parse_address(address)
    where = f"--scheduler {address}"
    if scheme == "inproc":
        url = address.strip()
    else:
        _probe(where, host, port)
        url = f"{scheme}://{host}:{port}"
    done, found = _within(HANDSHAKE_TIMEOUT, lambda: _identity(url))
    kind = found.get("type") if isinstance(found, dict) else None
    if not done or kind != "Scheduler":
        if not done:
            why = f"no answer within {HANDSHAKE_TIMEOUT:g} s"
        elif isinstance(found, MemoryError | ValueError | TypeError | KeyError):
            why = "it answers in another protocol"
        elif isinstance(found, BaseException):
            why = str(found) or type(found).__name__
        else:
            why = f"it is a {kind or 'server of another kind'}"
        raise ChipflowError(
            f"{where}: something listens there but does not answer as a Dask scheduler "
            f"({_one_line(why)}); is it the scheduler's address and port?"
        )
    done, client = _within(
        HANDSHAKE_TIMEOUT,
        lambda: Client(url, timeout=f"{HANDSHAKE_TIMEOUT - 1:g}s", set_as_default=False),
    )
    if not done or isinstance(client, BaseException):
        why = (
            f"no answer within {HANDSHAKE_TIMEOUT:g} s"
            if not done
            else (str(client) or type(client).__name__)
        )
        raise ChipflowError(
            f"{where}: something listens there but does not answer as a Dask scheduler "
            f"({_one_line(why)}); is it the scheduler's address and port?"
        )
    return client


def _probe(where: str, host: str, port: int) -> None:
    """Resolve ``host`` and open a TCP connection to it, each within PROBE_TIMEOUT."""
    import socket

    done, found = _within(PROBE_TIMEOUT, lambda: socket.getaddrinfo(host, port))
    if not done or isinstance(found, BaseException):
        why = "no answer" if not done else (getattr(found, "strerror", None) or str(found))
        raise ChipflowError(f"{where}: cannot resolve the host {host!r} ({why})")
    try:
        with socket.create_connection((host, port), timeout=PROBE_TIMEOUT):
            pass
    except OSError as exc:
        why = exc.strerror or str(exc) or type(exc).__name__
        raise ChipflowError(f"{where}: cannot reach the Dask scheduler ({why})") from None


def _identity(url: str) -> Any:
    """What the server at ``url`` says it is (Dask's ``identity`` call), or an exception."""
    import asyncio

    from distributed.core import rpc

    async def ask() -> Any:
        remote = rpc(url, timeout=HANDSHAKE_TIMEOUT - 1)
        try:
            return await asyncio.wait_for(remote.identity(), HANDSHAKE_TIMEOUT - 1)
        finally:
            await remote.close_rpc()

    return asyncio.run(ask())


def check_scheduler(address: str | None) -> None:
    """Refuse a scheduler address that is malformed, unreachable or not a Dask scheduler,
    before any work is done (one ChipflowError line within a few seconds)."""
    if address is None:
        return
    client = connect(address)
    _within(HANDSHAKE_TIMEOUT, client.close)


def _one_line(text: str) -> str:
    line = " ".join(text.split())
    return line if len(line) <= 160 else line[:157] + "..."


def _run_dask(
    function: Callable, shared: Any, items: Sequence[Any], address: str, report: Progress
) -> list[Any]:
    from distributed import as_completed as dask_completed

    client = connect(address)
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
        _within(HANDSHAKE_TIMEOUT, client.close)
