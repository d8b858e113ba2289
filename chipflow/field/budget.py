"""What a field solve will cost, decided before meshing.

The field mesh grades its triangles to a quarter of the local channel width and to half the
depth (:mod:`chipflow.field.mesh`), and the sparse LU of its Taylor-Hood system fills in
with the number of triangles. A drawing read in the wrong units, a depth of 1 nm, or a
chamber a kilometre across asks for billions of triangles; :func:`field_estimate` says so
before a single one is made, and :func:`chipflow.resources.check_memory` refuses it above 75 %
of the memory this process may use.

The constants are measured (``benchmarks/field.py``, 2026-12-02, the README's field table,
and ``benchmarks/heavy_steps.py``): the whole field step (mesh, assembly, LU, shear) peaked at
861 MB for 109,126 triangles, 1,485 MB for 153,013 and 9,273 MB for 955,252, and took 5.9,
13.8 and 107 s of processor time. A straight line through them has a slope of 9.9 kB per
triangle. ``chipflow analyse`` of serpentines (benchmarks/heavy_steps.py, 2026-12-04, an idle
machine) peaked at 149-1,308 MB for 2,952-201,219 triangles (5.8 kB per triangle) and took
0.7-24.6 s (up to 0.12 ms per triangle, the channel table included).
:data:`BYTES_PER_TRIANGLE` and :data:`SECONDS_PER_TRIANGLE` are set a little above every
measurement, so the estimate errs on the large side.
"""

from __future__ import annotations

import numpy as np

from chipflow.resources import Estimate

__all__ = [
    "BYTES_PER_TRIANGLE",
    "BASE_BYTES",
    "SECONDS_PER_TRIANGLE",
    "field_estimate",
    "mask_triangles",
    "MESH_FILL",
]

#: Peak memory of the field step per mesh triangle [bytes] (measured: 7.9-9.9 kB).
BYTES_PER_TRIANGLE = 10_000
#: Peak memory of the field step before its triangles [bytes] (the imports and the drawing).
BASE_BYTES = 200e6
#: Processor time of the field step per triangle [s] (measured: 54-112 us, growing slowly
#: with the mesh as the LU fills in).
SECONDS_PER_TRIANGLE = 120e-6
#: Triangles the mesh makes per equilateral triangle of its edge length tiling the area [-]
#: (measured 0.34-0.40; set above them, so the estimate errs on the large side).
MESH_FILL = 0.45


def field_estimate(triangles: float, what: str = "the field solve") -> Estimate:
    """Memory and time of a field solve of about ``triangles`` triangles.

    >>> field_estimate(109_126).text()
    'the field solve (109,126 triangles): about 1.29 GB and 13 s'
    """
    t = float(triangles)
    shown = f"{t:,.0f}" if t < 1e12 else f"{t:.3g}"
    return Estimate(what, BASE_BYTES + BYTES_PER_TRIANGLE * t, SECONDS_PER_TRIANGLE * t,
                    f"{shown} triangles")  # fmt: skip


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
