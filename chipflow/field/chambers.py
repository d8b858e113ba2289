"""Chambers at the network's operating point: floor shear, resistance, residence, residual.

Each chamber's 2D basis fields (:func:`chipflow.layout.chamber.solve_chamber`) are weighted by
the pressures the solved network gives at its ports: the network's pressures at the mouths
plus, for each port, the pressure drop of its stub at the network's flow into the chamber
there (:func:`chipflow.layout.chamber.stub_pressures`). The flows of that 2D field through the
ports must equal the network's (its links are the chamber's conductances): their relative
difference is kept as the chamber's ``flow_residual``, a check of the solve and of the links.

The floor shear statistics are over the chamber's own floor (its outline less the pillars,
the channels' stubs left out): area-weighted p05, p50 and p95, and the shares of the floor
below, inside and above the cells' window.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from chipflow.field.shear import ShearStats

__all__ = [
    "ChamberRun",
    "chamber_runs",
    "chamber_dict",
    "ChamberSensitivity",
    "chamber_sensitivity",
    "perturbed_key",
    "floor_distribution",
]


@dataclass(frozen=True)
class ChamberRun:
    """One chamber at the operating point.

    Attributes
    ----------
    name : str
    key : ChamberKey
    stats : ShearStats
        Floor shear over the chamber's floor [Pa].
    flow : float
        Flow into the chamber through its inlet ports [m^3/s].
    pressure_in, pressure_out : float
        Mean pressure at its inlet and outlet mouths [Pa].
    resistance : float
        ``(pressure_in - pressure_out) / flow`` [Pa s/m^3] (a chamber between two channels:
        its resistance between the mouths).
    floor_area : float
        [m^2].
    residence_time : float
        Floor area times depth over the flow [s] (inf without flow).
    unsupported_span : float
        Diameter of the largest circle of roof touching no wall or pillar [m].
    pillar_count : int
    flow_residual : float
        Largest difference of a port's flow between the 2D field and the network, over the
        flow [1].
    link_fit_error : float
        Share of the chamber's conductances left out of its links [1].
    triangles : int
        Triangles of its 2D mesh.
    floor_map : tuple of numpy.ndarray
        ``(corners, shear)``: the (n, 3, 2) corners of its floor's triangles in its key frame
        [m] and their floor shear at the operating point [Pa] (for the shear map).
    """

    name: str
    key: Any
    stats: ShearStats
    flow: float
    pressure_in: float
    pressure_out: float
    resistance: float
    floor_area: float
    residence_time: float
    unsupported_span: float
    pillar_count: int
    flow_residual: float
    link_fit_error: float
    triangles: int
    floor_map: tuple = ()


def chamber_runs(chambers, solution, window=None) -> list[ChamberRun]:
    """Every chamber at the solved network's operating point.

    Parameters
    ----------
    chambers : sequence of (name, key, nodes)
        Each chamber's name, :class:`~chipflow.layout.chamber.ChamberKey` and the network
        node (index or name) of each port, as given to
        :func:`chipflow.layout.extract.with_chambers`.
    solution : chipflow.network.Solution
        The network with the chambers' links.
    window : ShearWindow or (float, float) or None
        The cells' floor shear window [Pa].
    """
    from chipflow.layout.chamber import (
        chamber_field,
        chamber_polygon,
        floor_stats,
        pillar_centres,
        solve_chamber,
        stub_pressures,
        unsupported_span,
    )

    if window is not None and not isinstance(window, tuple):
        window = (float(window.min), float(window.max))
    net = solution.network
    mu = solution.fluid.viscosity
    out = []
    for name, key, nodes in chambers:  # a handful of chambers
        index = np.array([net.node_index(n) for n in nodes])
        links = np.flatnonzero(
            (net.role == "chamber") & np.isin(net.node_a, index) & np.isin(net.node_b, index)
        )
        inflow = np.zeros(index.size)
        for k, node in enumerate(index):  # the ports of one chamber
            inflow[k] = solution.flow[links][net.node_a[links] == node].sum()
            inflow[k] -= solution.flow[links][net.node_b[links] == node].sum()
        p = solution.pressure[index]
        q = stub_pressures(key, p, inflow, mu)
        stats, flows = floor_stats(key, q, mu, window)
        inlet = np.array([port.side == 0 for port in key.ports])
        total = float(inflow[inlet].sum())
        scale = max(float(np.abs(inflow).max()), 1e-300)
        residual = float(np.abs(flows - inflow).max() / scale)
        p_in, p_out = float(p[inlet].mean()), float(p[~inlet].mean())
        sol = solve_chamber(key)
        volume = sol.floor_area * key.depth
        span = unsupported_span(chamber_polygon(key), key.grid)[0]
        floor = sol.mesh["floor"].astype(bool)
        corners = sol.mesh["points"][sol.mesh["triangles"][floor]]
        shear = chamber_field(key, q, mu).floor_shear[floor]
        out.append(
            ChamberRun(
                name=name,
                key=key,
                stats=stats,
                flow=total,
                pressure_in=p_in,
                pressure_out=p_out,
                resistance=(p_in - p_out) / total if total else float("inf"),
                floor_area=sol.floor_area,
                residence_time=volume / abs(total) if total else float("inf"),
                unsupported_span=span,
                pillar_count=int(len(pillar_centres(key))),
                flow_residual=residual,
                link_fit_error=sol.fit_error,
                triangles=int(len(sol.mesh["triangles"])),
                floor_map=(corners, shear),
            )
        )
    return out


def chamber_dict(run: ChamberRun, windowed: bool = True) -> dict[str, Any]:
    """A chamber's results, JSON-able SI values (an entry of ``results["chambers"]``);
    ``windowed`` False: no shear window applied (the window shares are then null)."""
    key, s = run.key, run.stats
    pillars = None
    if key.pillars is not None:
        d, p, pattern = key.pillars
        pillars = {"diameter": d, "pitch": p, "pattern": pattern, "count": run.pillar_count}
    return {
        "name": run.name,
        "width": key.width,
        "length": key.length,
        "depth": key.depth,
        "corner_radius": key.corner_radius,
        "taper": key.taper,
        "pillars": pillars,
        "ports": len(key.ports),
        "flow": run.flow,
        "pressure_in": run.pressure_in,
        "pressure_out": run.pressure_out,
        "resistance": run.resistance,
        "floor_area": run.floor_area,
        "residence_time": run.residence_time,
        "floor_shear": {"p05": s.p05, "p50": s.p50, "p95": s.p95},
        "inside_window": 1.0 - s.outside if windowed and s.area > 0 else None,
        "below_window": s.below if windowed else None,
        "above_window": s.above if windowed else None,
        "unsupported_span": run.unsupported_span,
        "flow_residual": run.flow_residual,
        "link_fit_error": run.link_fit_error,
        "mesh_triangles": run.triangles,
    }


# -- sensitivities for the Monte Carlo of tolerances (chipflow vary) ---------------------------
#: The steps of the 2D re-solves that give a chamber's sensitivities: a relative depth error
#: [-] and a width bias in grid steps (an even number, so every wall stays on the grid).
DEPTH_STEP = 0.05
WIDTH_STEPS = 2


@dataclass(frozen=True)
class ChamberSensitivity:
    """How a chamber's conductance and floor shear move with its mould level's depth error
    ``e`` and the mask's width bias ``b`` [m], from 2D re-solves of the perturbed chamber
    (:func:`chamber_sensitivity`): ``G = G0 (1 + e)^conductance_depth
    exp(conductance_width b)``, and the floor shear per unit flow likewise with the
    ``shear_*`` exponents (every percentile alike).

    In the Hele-Shaw limit of a wide, shallow chamber (H. Bruus, *Theoretical
    Microfluidics*, 2008, ch. 4) the conductance goes as ``h^3 W`` and the floor shear per unit
    flow as ``1 / (W h^2)``: exponents 3 and -2; the pillars' side walls and the chamber's
    own lower the depth exponent (about 2.7 for 150 um pillars 250 um apart in a 100 um deep
    chamber), and a width bias that shrinks the pillars widens every gap between them, which
    moves the conductance some ten times more than the chamber's width alone.

    Attributes
    ----------
    conductance_depth : float
        d ln G / d ln(1 + e) [-].
    conductance_width : float
        d ln G / d b [1/m].
    shear_depth : float
        d ln(tau / Q) / d ln(1 + e) [-].
    shear_width : float
        d ln(tau / Q) / d b [1/m].
    """

    conductance_depth: float
    conductance_width: float
    shear_depth: float
    shear_width: float


def perturbed_key(key, depth_factor: float = 1.0, bias: float = 0.0):
    """``key`` (a :class:`~chipflow.layout.chamber.ChamberKey`) as a mould ``depth_factor``
    times as deep and a mask whose every wall moves out by ``bias / 2`` [m] (``bias`` a whole
    even number of grid steps): the chamber and its ports wider by ``bias``, the pillars
    narrower by it, the ports at their offsets from the chamber's middle. The ports at the
    chamber's depth share its mould level; the others keep theirs."""
    import dataclasses

    from chipflow.layout.chamber import ChamberPort, chamber_key
    from chipflow.spec.chamber import ChamberShape, Pillars

    ports = [
        ChamberPort(
            p.side,
            p.offset + bias / 2,
            p.width + bias,
            p.depth * depth_factor if abs(p.depth - key.depth) <= 1e-12 else p.depth,
            p.mouth,
        )
        for p in key.ports
    ]
    pillars = None
    if key.pillars is not None:
        pillars = Pillars(key.pillars[0] - bias, key.pillars[1], key.pillars[2])
    shape = ChamberShape(key.width + bias, key.length, key.depth * depth_factor,
                         key.corner_radius, key.taper, pillars)  # fmt: skip
    out = chamber_key(shape, ports, key.grid, key.overlap)
    return dataclasses.replace(out, overlap=key.overlap)


def _through(key) -> tuple[float, float]:
    """The chamber's flow [m^3/s at 1 Pa s] and floor-shear median [Pa at 1 Pa s] with every
    inlet port at 1 Pa and every outlet at 0 (its mouths)."""
    from chipflow.layout.chamber import floor_stats, solve_chamber, stub_pressures

    sol = solve_chamber(key)
    inlet = np.array([p.side == 0 for p in key.ports])
    mouth = inlet.astype(float)
    inflow = sol.chamber @ mouth
    stats, _ = floor_stats(key, stub_pressures(key, mouth, inflow, 1.0), 1.0)
    return float(inflow[inlet].sum()), float(stats.p50)


def chamber_sensitivity(key) -> ChamberSensitivity:
    """The sensitivities of a chamber (see :class:`ChamberSensitivity`) from two 2D re-solves
    (kept in the field cache): its mould :data:`DEPTH_STEP` deeper, and its mask
    :data:`WIDTH_STEPS` grid steps wider."""
    q0, t0 = _through(key)
    q1, t1 = _through(perturbed_key(key, 1.0 + DEPTH_STEP))
    bias = WIDTH_STEPS * key.grid
    q2, t2 = _through(perturbed_key(key, 1.0, bias))
    step = np.log1p(DEPTH_STEP)
    return ChamberSensitivity(
        conductance_depth=float(np.log(q1 / q0) / step),
        conductance_width=float(np.log(q2 / q0) / bias),
        shear_depth=float(np.log((t1 / q1) / (t0 / q0)) / step),
        shear_width=float(np.log((t2 / q2) / (t0 / q0)) / bias),
    )


def floor_distribution(key, mouth_pressure, inflow, viscosity: float):
    """The area-weighted distribution of a chamber's floor shear at an operating point (the
    pressures at its mouths [Pa], the flows into it through its ports [m^3/s], ``viscosity``
    [Pa s]): ``(shear, share)``, the floor shear of its floor's triangles in rising order [Pa]
    and the share of the floor at or below each [1] (for the share inside a window at a
    scaled flow)."""
    from chipflow.layout.chamber import chamber_field, solve_chamber, stub_pressures

    q = stub_pressures(key, mouth_pressure, inflow, viscosity)
    field = chamber_field(key, q, viscosity)
    floor = solve_chamber(key).mesh["floor"].astype(bool)
    tau = field.floor_shear[floor]
    area = field.mesh.area[floor]
    order = np.argsort(tau, kind="stable")
    return tau[order], np.cumsum(area[order]) / area.sum()
