"""A progress bar for long runs, on a terminal only.

Shown on stderr when it is a terminal and the run lasts over a second (tqdm's ``delay``);
nothing at all when stderr is piped or the command prints JSON.
"""

from __future__ import annotations

import contextlib
import sys
from collections.abc import Callable, Iterator

__all__ = ["progress_bar"]


@contextlib.contextmanager
def progress_bar(
    what: str, quiet: bool = False, unit: str = "batch"
) -> Iterator[Callable[[int, int], None]]:
    """Yield a ``(done, total)`` callback that drives a bar on a terminal (else does nothing);
    ``unit`` names what is counted."""
    stream = sys.stderr
    if quiet or not getattr(stream, "isatty", lambda: False)():
        yield lambda done, total: None
        return
    from tqdm import tqdm

    bar = None

    def update(done: int, total: int) -> None:
        nonlocal bar
        if bar is None:
            bar = tqdm(
                total=total,
                desc=f"chipflow: {what}",
                unit=unit,
                delay=1.0,
                file=stream,
                leave=False,
            )
        bar.update(done - bar.n)

    try:
        yield update
    finally:
        if bar is not None:
            bar.close()
