"""The size guard: how big a drawing will be, decided before drawing it.

A tree of 2^18 bed channels needs more than 12 GB while it is drawn and written; on a smaller
machine it would swap or be killed part-way. :func:`check_size` estimates the channels, the
mask vertices and the peak memory of the whole build from the sized design, and refuses, in
one line that says how big, what limit and how to go on, a build that needs more than
:data:`MEMORY_SHARE` of the memory this process may use (read at run time: the machine's, or
less under a ``ulimit`` or a control group's limit, see :func:`chipflow.resources.memory_limit`).

The per-channel constants are measured by ``benchmarks/memory_per_channel.py`` (the benchmark
trees of ``benchmarks/pipeline.py``, a whole build: sizing, drawing, solving, checks, DXF,
GDSII, previews, report); update them here, in this one place, when the build's memory changes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from chipflow.errors import TooLargeError
from chipflow.resources import MEMORY_SHARE as RESOURCE_SHARE
from chipflow.resources import limit_text, memory_limit

__all__ = [
    "BYTES_PER_CHANNEL",
    "BASE_BYTES",
    "VERTICES_PER_CHANNEL",
    "MEMORY_SHARE",
    "SizeEstimate",
    "estimate_size",
    "total_memory",
    "check_size",
    "count_vertices",
]

#: Peak memory of a whole build per drawn channel [bytes] (measured 2026-12-02 between 2^8 and
#: 2^12 bed channels with benchmarks/memory_per_channel.py: 14 830; it predicts 3.1 GB at 2^16
#: bed channels, where 3.2 GB was observed; measured again 2026-12-04 with the drawing engine:
#: 15 122 bytes and 177 MB, against 14 684 bytes and 172 MB for the drawing before it, side by
#: side on the same machine).
BYTES_PER_CHANNEL = 15_200
#: Peak memory of a build before its channels [bytes] (same measurement).
BASE_BYTES = 177e6
#: Mask vertices per drawn channel [-] (same measurement).
VERTICES_PER_CHANNEL = 30
#: Share of the memory this process may use that a build may need before it is refused [-].
MEMORY_SHARE = RESOURCE_SHARE


@dataclass(frozen=True)
class SizeEstimate:
    """How big a build will be.

    Attributes
    ----------
    channels : int
        Drawn channels (every level of the tree).
    vertices : int
        Mask vertices, about.
    memory : float
        Peak memory of the whole build, about [bytes].
    """

    channels: int
    vertices: int
    memory: float


def estimate_size(channels: int) -> SizeEstimate:
    """The estimate for a tree of ``channels`` drawn channels.

    >>> round(estimate_size(786_430).memory / 1e9, 1)   # 2^18 bed channels
    12.1
    """
    channels = int(channels)
    return SizeEstimate(
        channels, channels * VERTICES_PER_CHANNEL, BASE_BYTES + channels * BYTES_PER_CHANNEL
    )


def total_memory() -> int | None:
    """The memory this process may use [bytes]: the machine's total, or less where a
    ``ulimit`` or a control group sets a lower limit (None if unknown; see
    :func:`chipflow.resources.memory_limit`)."""
    return memory_limit()[0]


def check_size(
    channels: int, *, allow_large: bool = False, memory: int | None = None, where: str = ""
) -> SizeEstimate:
    """Refuse a build that needs more memory than the machine can spare.

    Parameters
    ----------
    channels : int
        Drawn channels of the tree (sum of the level counts).
    allow_large : bool
        Go on regardless (the command line's ``--allow-large``).
    memory : int, optional
        The memory this process may use [bytes] (default: :func:`total_memory`).
    where : str
        The design file, for the message.

    Raises
    ------
    TooLargeError
        How big, what limit, and the option to go on.

    >>> check_size(3070, memory=8 * 2**30).channels
    3070
    >>> check_size(2**21, memory=8 * 2**30)  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    chipflow.errors.TooLargeError: 2,097,152 channels (about 62,914,560 mask vertices) need ...
    """
    size = estimate_size(channels)
    source = "machine"
    if memory is None:
        memory = total_memory()
        source = memory_limit()[1] if memory is not None else ""
    if allow_large or memory is None:
        return size
    limit = MEMORY_SHARE * memory
    if size.memory > limit:
        place = f"{where}: " if where else ""
        raise TooLargeError(
            f"{place}{size.channels:,} channels (about {size.vertices:,} mask vertices) need "
            f"about {_bytes(size.memory, 1e9, 'GB', 1e6, 'MB')} to draw and write, more than "
            f"{MEMORY_SHARE:.0%} of {limit_text(memory, source)}"
            "; use fewer generations or bed channels, or pass --allow-large to build anyway"
        )
    return size


def _bytes(value: float, big: float, big_unit: str, small: float, small_unit: str) -> str:
    return f"{value / big:.3g} {big_unit}" if value >= big else f"{value / small:.3g} {small_unit}"


def count_vertices(layout) -> int:
    """Vertices of every mask layer of a drawn layout [-]."""
    import shapely

    return int(sum(np.sum(shapely.get_num_coordinates(layer.geometry)) for layer in layout.layers))
