"""The field's budget: its triangles, time and peak memory, estimated before it is solved.

:func:`estimate_field` says, from the number of triangles the mesh will have
(:func:`chipflow.field.chip.estimate_triangles` of a drawing), which solver the field will use
(:func:`chipflow.field.solve.choose_solver`), how long the whole field step takes (mesh,
assembly, solve) and the peak memory of the process while it runs. ``chipflow build`` solves
the field by default when that estimate fits in :data:`DEFAULT_SECONDS` and
:data:`DEFAULT_BYTES` (:func:`field_by_default`); a guard before heavy steps can call
:func:`estimate_field` or :func:`estimate_layout_field` too.

The constants are measured by ``benchmarks/field.py`` (processor time and peak resident memory
of each solve in a fresh process, the demo and the 2^6 benchmark tree, 2026-12-04, on the
2-core machine while it was shared with other work, so the times are on the high side); update
them here, in this one place, when the field's speed or memory changes. The direct solve's fill
grows faster than its matrix, so its time and memory carry a power of the size beyond linear.

Guards before heavy steps (:mod:`chipflow.resources`) take :func:`field_estimate`, the same
estimate as an :class:`~chipflow.resources.Estimate`, of :func:`mask_triangles` for a drawing
read by ``chipflow analyse`` (measured there by ``benchmarks/heavy_steps.py``: 149-1,308 MB for
2,952-201,219 triangles of serpentines, 0.7-24.6 s with the channel table).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = [
    "DEFAULT_SECONDS",
    "DEFAULT_BYTES",
    "UNKNOWNS_PER_TRIANGLE",
    "FieldEstimate",
    "estimate_field",
    "estimate_layout_field",
    "field_estimate",
    "mask_triangles",
    "MESH_FILL",
    "field_by_default",
    "max_triangles",
]

#: ``chipflow build`` solves the field by default when it is estimated to take at most this
#: long [s] ...
DEFAULT_SECONDS = 10.0
#: ... and at most this much memory at its peak [bytes].
DEFAULT_BYTES = 1.0e9
#: Reduced unknowns of the Taylor-Hood system per triangle [-] (4.06-4.08 measured).
UNKNOWNS_PER_TRIANGLE = 4.08
#: Memory of the process before the field [bytes] (the build of a small chip).
BASE_BYTES = 200e6
#: Reference size of the power laws below [triangles].
_REFERENCE = 1.0e5
#: Direct solve, whole field step: processor time per triangle at the reference size [s]
#: (demo: about 6 s for 108k triangles, 2^6 tree: 9 s for 154k, mesh included) and its
#: growth exponent beyond linear [-].
DIRECT_SECONDS = 5.5e-5
DIRECT_SECONDS_GROWTH = 0.25
#: Direct solve: memory above the base per triangle at the reference size [bytes] (demo: 7.8
#: kB, 2^6 tree: 7.4 kB) and its growth exponent beyond linear [-].
DIRECT_BYTES = 7.6e3
DIRECT_BYTES_GROWTH = 0.0
#: Iterative solve, whole field step: processor time per triangle [s] (90-125 iterations
#: whatever the size; 194 us per triangle measured on the demo and the 2^6 tree, 165 us on
#: the 2^8 tree of 630k triangles, under load).
ITERATIVE_SECONDS = 1.8e-4
#: Iterative solve: memory above the base per triangle [bytes] (2.0 kB, median of the demo,
#: 2^6 and 2^8 in fresh processes; 979 MB in all at 630k triangles).
ITERATIVE_BYTES = 2.0e3
#: Triangles the mesh makes per equilateral triangle of its edge length tiling the area [-]
#: (measured 0.34-0.40; set above them, so the estimate errs on the large side).
MESH_FILL = 0.45


@dataclass(frozen=True)
class FieldEstimate:
    """What a field solve will cost.

    Attributes
    ----------
    triangles : int
        Triangles of the mesh, about.
    solver : str
        ``"direct"`` or ``"iterative"``.
    seconds : float
        Processor time of the whole field step (mesh, assembly, solve), about [s].
    peak_bytes : float
        Peak memory of the process during the field step, about [bytes].
    """

    triangles: int
    solver: str
    seconds: float
    peak_bytes: float

    def fits(self, seconds: float | None = None, peak_bytes: float | None = None) -> bool:
        """Whether the estimate stays within ``seconds`` [s] and ``peak_bytes`` [bytes]
        (by default :data:`DEFAULT_SECONDS` and :data:`DEFAULT_BYTES`)."""
        seconds = DEFAULT_SECONDS if seconds is None else seconds
        peak_bytes = DEFAULT_BYTES if peak_bytes is None else peak_bytes
        return self.seconds <= seconds and self.peak_bytes <= peak_bytes


def estimate_field(triangles: int, solver: str = "auto") -> FieldEstimate:
    """Time and peak memory of solving a field of ``triangles`` triangles.

    Parameters
    ----------
    triangles : int
        Triangles of the mesh (:func:`chipflow.field.chip.estimate_triangles`).
    solver : {"auto", "direct", "iterative"}
        As :func:`chipflow.field.solve.solve_field`; ``auto`` chooses by size.

    Examples
    --------
    >>> e = estimate_field(50_000)
    >>> e.solver, e.fits()
    ('direct', True)
    >>> e = estimate_field(110_000)   # the demo: about 1.04 GB at its peak
    >>> e.solver, e.fits()
    ('direct', False)
    >>> e = estimate_field(1_000_000)
    >>> e.solver, round(e.peak_bytes / 1e9, 1), e.fits()
    ('iterative', 2.2, False)
    """
    from chipflow.field.solve import choose_solver

    n = max(0, int(triangles))
    if solver == "auto":
        solver = choose_solver(int(UNKNOWNS_PER_TRIANGLE * n))
    if solver in ("direct", "splu", "spsolve"):
        scale = max(n, 1) / _REFERENCE
        seconds = DIRECT_SECONDS * n * scale**DIRECT_SECONDS_GROWTH
        extra = DIRECT_BYTES * n * scale**DIRECT_BYTES_GROWTH
        solver = "direct"
    else:
        seconds = ITERATIVE_SECONDS * n
        extra = ITERATIVE_BYTES * n
    return FieldEstimate(n, solver, float(seconds), float(BASE_BYTES + extra))


def estimate_layout_field(layout, across: float = 4.0) -> FieldEstimate:
    """:func:`estimate_field` of a drawn chip (``chipflow.layout.Layout``)."""
    from chipflow.field.chip import estimate_triangles

    return estimate_field(estimate_triangles(layout, across))


def field_by_default(layout) -> bool:
    """Whether ``chipflow build`` solves the field of ``layout`` without being asked: when
    :func:`estimate_layout_field` fits in :data:`DEFAULT_SECONDS` and :data:`DEFAULT_BYTES`."""
    return estimate_layout_field(layout).fits()


def max_triangles(seconds: float | None = None, peak_bytes: float | None = None) -> int:
    """The largest mesh whose :func:`estimate_field` fits in ``seconds`` [s] and
    ``peak_bytes`` [bytes] (by default :data:`DEFAULT_SECONDS` and :data:`DEFAULT_BYTES`).

    A default build meshes the chip and leaves the field out when the mesh came out larger
    than this (a drawing can mesh finer than :func:`estimate_field` expects).

    >>> 100_000 < max_triangles() < 200_000
    True
    """
    lo, hi = 0, 1 << 30
    while hi - lo > 1:  # the estimates grow with the triangles
        mid = (lo + hi) // 2
        lo, hi = (mid, hi) if estimate_field(mid).fits(seconds, peak_bytes) else (lo, mid)
    return lo


def field_estimate(triangles: float, what: str = "the field solve"):
    """:func:`estimate_field` as a guard's :class:`~chipflow.resources.Estimate`.

    >>> field_estimate(1_000_000).text()
    'the field solve (1,000,000 triangles): about 2.2 GB and 3 min'
    """
    from chipflow.resources import Estimate

    t = float(triangles)
    estimate = estimate_field(int(min(t, 1e15)))
    shown = f"{t:,.0f}" if t < 1e12 else f"{t:.3g}"
    return Estimate(what, estimate.peak_bytes, estimate.seconds, f"{shown} triangles")


def mask_triangles(geometry, depth: float, across: float = 4.0) -> float:
    """Triangles the field mesh of a drawn channel area will have, about (from above).

    Each outline's typical width is ``2 area / perimeter`` (a long channel's width; half a
    square chamber's side, so wide pieces count more triangles than they get); the mesh's
    edges there are ``min(width, 2 depth) / across`` long. The mesh makes about
    :data:`MESH_FILL` of the equilateral triangles of that edge that would tile the area
    (measured 0.34-0.40 on serpentines, benchmarks/heavy_steps.py), plus two per edge
    length along every outline.

    Parameters
    ----------
    geometry : shapely geometry
        Channel area [m].
    depth : float
        Channel depth [m].
    across : float
        Triangles across a channel.

    >>> import shapely
    >>> n = mask_triangles(shapely.box(0, 0, 20e-3, 200e-6), 50e-6)
    >>> 5_000 < n < 20_000   # the mesh has about 6,000
    True
    """
    import shapely

    parts = np.asarray(shapely.get_parts(geometry), dtype=object)
    if not len(parts):
        return 0.0
    area = shapely.area(parts)
    perimeter = shapely.length(parts)
    with np.errstate(divide="ignore", invalid="ignore"):
        width = np.where(perimeter > 0, 2.0 * area / perimeter, 0.0)
    edge = np.minimum(width, 2.0 * depth) / across
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        count = np.where(edge > 0, area / (np.sqrt(3.0) / 4.0 * edge**2), 0.0)
    # boundary triangles: at least two per edge length along every outline
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        rim = np.where(edge > 0, 2.0 * perimeter / edge, 0.0)
    return float(MESH_FILL * np.sum(count) + np.sum(rim))
