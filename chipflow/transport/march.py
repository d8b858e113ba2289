"""A species along every channel of a solved network: the 1D march and the mixing at nodes.

Each channel carries the bulk (mixing-cup) concentration ``c_b`` from its upstream to its
downstream end:

    Q dc_b/dx = w (J_roof - J_floor)          (rectangular channels)
    Q dc_b/dx = pi d k (c_ambient - c_b)      (gas-permeable round tubing)

with the floor uptake ``J_floor`` of the seeded cells at the floor concentration and the
roof's permeation ``J_roof = k_p (c_ambient - c_roof)``, ``k_p = P / (t H)`` (permeability over
roof thickness and solubility). Floor and roof concentrations follow from the bulk through
the transfer of :mod:`chipflow.transport.transfer`: with the floor, roof and cross resistances
``R_f``, ``R_r``, ``B``,

    c_floor = c_b - R_f J_floor - B J_roof,    c_roof = c_b + R_r J_roof + B J_floor,

one quadratic for the floor (:func:`chipflow.transport.species.floor_concentration`). Axial
diffusion is left out: the bulk moves by advection only (its error is of order ``Da / Pe^2``
of the inlet concentration, negligible for ``Pe = U h / D`` above a few).

The march takes exponential midpoint steps (the linearised flux integrated exactly over each
step, so a fast uptake cannot overshoot) on stations ``s = (k / N)^2`` of the channel length,
crowded at the entrance where the concentration layer starts. All channels of one wave march
together.

Nodes mix their inflows weighted by flow. Pressure-driven flow runs from high to low
pressure, so the flow graph has no directed cycle (networks with loops included): its nodes are
resolved in topological waves, each wave one vectorised march of the channels whose upstream
node is known. Channels without flow (below 1e-12 of the largest) are stagnant: they carry
nothing and their floor is given the balance of roof and uptake alone (none without a roof),
the worst case.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from chipflow.errors import ChipflowError
from chipflow.transport.species import Species, floor_concentration, uptake_flux, uptake_slope
from chipflow.transport.transfer import (
    cross_resistance,
    graetz_coordinate,
    plate_limits,
    robin_sherwood,
    tube_sherwood,
)

__all__ = [
    "ChannelSet",
    "SpeciesTransport",
    "march_network",
    "march_channels",
    "STEPS",
    "PROFILE_STATIONS",
]

#: March steps per channel.
STEPS = 48
#: Stations along each channel where the profile is kept (fractions of its length).
PROFILE_STATIONS = np.linspace(0.0, 1.0, 17)
#: Flows below this fraction of the largest are stagnant.
STAGNANT = 1e-12
_ROBIN_ITERATIONS = 2


@dataclass(frozen=True)
class ChannelSet:
    """The channels of a solved network as transport sees them (arrays, SI units).

    Attributes
    ----------
    upstream, downstream : numpy.ndarray of int
        End nodes in the direction of the flow.
    flow : numpy.ndarray
        Flow magnitude [m^3/s].
    length, width, depth : numpy.ndarray
        [m]; a round tube holds its inner diameter in ``width`` and ``depth``.
    round : numpy.ndarray of bool
        Round tubing.
    shear_rate : numpy.ndarray
        Floor shear rate [1/s] (floor-centre wall shear over viscosity).
    seeded : numpy.ndarray of bool
        Cells on the floor.
    wall : numpy.ndarray
        Gas conductance of the roof (rectangular) or of the tube wall per inner wall area
        (round) [m/s], ``P / (t H)``; 0 where impermeable.
    port_inflow, port_outflow : numpy.ndarray
        Flow entering and leaving the network at each node [m^3/s] (>= 0).
    """

    upstream: np.ndarray
    downstream: np.ndarray
    flow: np.ndarray
    length: np.ndarray
    width: np.ndarray
    depth: np.ndarray
    round: np.ndarray
    shear_rate: np.ndarray
    seeded: np.ndarray
    wall: np.ndarray
    port_inflow: np.ndarray
    port_outflow: np.ndarray

    @property
    def n_channels(self) -> int:
        return int(self.flow.size)

    @property
    def n_nodes(self) -> int:
        return int(self.port_inflow.size)

    @property
    def floor_area(self) -> np.ndarray:
        """Seeded floor area of each channel [m^2] (0 for unseeded channels and tubing)."""
        return np.where(self.seeded & ~self.round, self.width * self.length, 0.0)


@dataclass(frozen=True)
class SpeciesTransport:
    """A species on every channel and node.

    Attributes
    ----------
    species : Species
    node : numpy.ndarray
        Mixed concentration at each node [mol/m^3] (NaN where no liquid flows through).
    inlet, outlet : numpy.ndarray
        Bulk concentration at each channel's upstream and downstream end [mol/m^3].
    floor_min : numpy.ndarray
        Lowest floor concentration along each channel [mol/m^3] (the bulk for tubing).
    below_critical : numpy.ndarray
        Share of each channel's length whose floor lies below the species' critical
        concentration [-] (0 without one).
    uptake : numpy.ndarray
        Moles taken up by each channel's floor [mol/s].
    wall_influx : numpy.ndarray
        Moles entering through each channel's roof or tube wall [mol/s].
    bulk, floor : numpy.ndarray
        (n_channels, len(PROFILE_STATIONS)) profiles along each channel [mol/m^3].
    stagnant : numpy.ndarray of bool
    moles_in, moles_out : float
        Moles per second entering and leaving at the ports [mol/s].
    residual : float
        ``(in + wall - out - uptake) / in``: the balance of the whole network [-].
    waves : int
        Topological waves marched.
    """

    species: Species
    node: np.ndarray
    inlet: np.ndarray
    outlet: np.ndarray
    floor_min: np.ndarray
    below_critical: np.ndarray
    uptake: np.ndarray
    wall_influx: np.ndarray
    bulk: np.ndarray
    floor: np.ndarray
    stagnant: np.ndarray
    moles_in: float
    moles_out: float
    residual: float
    waves: int


def _phi1(z: np.ndarray) -> np.ndarray:
    """``(exp(z) - 1) / z``, 1 at z = 0."""
    small = np.abs(z) < 1e-8
    safe = np.where(small, 1.0, z)
    return np.where(small, 1.0 + 0.5 * z, np.expm1(safe) / safe)


def wall_geometry(xhat, hd, wall) -> tuple[np.ndarray, ...]:
    """What the transfer at Graetz coordinates ``xhat`` needs whatever the concentration: the
    floor's flux and concentration Sherwood limits, the cross resistance ``B`` and the roof's
    resistance ``R_r`` [s/m] (``hd = h / D`` [s/m], ``wall`` the roof conductance [m/s])."""
    s_flux, s_conc = plate_limits(xhat)
    roof_r = hd / robin_sherwood(s_flux, s_conc, wall * hd)
    return s_flux, s_conc, hd * cross_resistance(xhat), roof_r


def _wall_state(cb, geometry, hd, uptake, km, wall, ambient):
    """Net flux into the liquid per floor area and its slope in ``cb``, the floor concentration
    and the floor and roof fluxes, at bulk ``cb`` (``geometry`` from :func:`wall_geometry`)."""
    s_flux, s_conc, cross, roof_r = geometry
    denom = 1.0 + wall * roof_r
    drive = ambient - cb
    ce = cb - cross * wall * drive / denom
    dce = np.where(ce > 0.0, 1.0 + cross * wall / denom, 0.0)
    shift = cross * cross * wall / denom
    sh = s_flux
    for _ in range(_ROBIN_ITERATIONS):
        cf, _ = floor_concentration(ce, hd / sh - shift, uptake, km)
        sh = robin_sherwood(s_flux, s_conc, uptake_slope(cf, uptake, km) * hd)
    resistance = hd / sh - shift
    cf, slope = floor_concentration(ce, resistance, uptake, km)
    # on a dry floor (zero-order uptake faster than transfer) the cells take what arrives
    wet = cf > 0.0
    j_floor = np.where(wet, uptake_flux(cf, uptake, km), ce / resistance)
    dj_floor = np.where(wet, uptake_slope(cf, uptake, km) * slope, 1.0 / resistance) * dce
    j_roof = wall * (drive - cross * j_floor) / denom
    dj_roof = wall * (-1.0 - cross * dj_floor) / denom
    return j_roof - j_floor, dj_roof - dj_floor, cf, j_floor, j_roof


def _below(a: np.ndarray, b: np.ndarray, level: float) -> np.ndarray:
    """Share of each linear segment from ``a`` to ``b`` lying below ``level``."""
    lo, hi = np.minimum(a, b), np.maximum(a, b)
    span = np.where(hi > lo, hi - lo, 1.0)
    return np.where(hi < level, 1.0, np.where(lo >= level, 0.0, (level - lo) / span))


def _grid() -> np.ndarray:
    return (np.arange(STEPS + 1) / STEPS) ** 2


def _profile_weights(grid: np.ndarray):
    idx = np.clip(np.searchsorted(grid, PROFILE_STATIONS, side="right"), 1, grid.size - 1)
    t = (PROFILE_STATIONS - grid[idx - 1]) / (grid[idx] - grid[idx - 1])
    return idx, t


def march_channels(
    inlet: np.ndarray,
    flow: np.ndarray,
    length: np.ndarray,
    width: np.ndarray,
    depth: np.ndarray,
    shear_rate: np.ndarray,
    uptake: np.ndarray,
    wall: np.ndarray,
    species: Species,
) -> dict[str, np.ndarray]:
    """March rectangular channels from their inlet concentrations (vectorised over channels).

    Parameters
    ----------
    inlet : numpy.ndarray
        Bulk concentration entering each channel [mol/m^3].
    flow, length, width, depth, shear_rate : numpy.ndarray
        [m^3/s], [m], [m], [m], [1/s]; flows must be positive.
    uptake : numpy.ndarray
        Largest floor uptake [mol/(m^2 s)] (0 where unseeded).
    wall : numpy.ndarray
        Roof conductance [m/s] (0: impermeable).
    species : Species

    Returns
    -------
    dict
        ``outlet``, ``floor_min``, ``below`` (share of length below the critical value),
        ``uptake`` and ``wall_influx`` [mol/s], ``bulk`` and ``floor`` profiles at
        :data:`PROFILE_STATIONS`.
    """
    grid = _grid()
    d = species.diffusivity
    ambient = 0.0 if species.ambient is None else species.ambient
    km = species.km
    hd = depth / d
    a = width / flow
    c = np.asarray(inlet, float).copy()
    n = c.size
    bulk = np.empty((n, grid.size))
    floor = np.empty((n, grid.size))
    taken = np.zeros(n)
    let_in = np.zeros(n)

    # the transfer's geometry at every station and step midpoint, once for the whole march
    points = np.empty(2 * STEPS + 1)
    points[0::2], points[1::2] = grid, 0.5 * (grid[1:] + grid[:-1])
    xhat = graetz_coordinate(np.outer(length, points), d, shear_rate[:, None], depth[:, None])
    geometry = wall_geometry(xhat, hd[:, None], wall[:, None])

    def at(j):
        return tuple(g[:, j] for g in geometry)

    for k in range(STEPS):  # march steps (the channels are vectorised)
        dx = length * (grid[k + 1] - grid[k])
        g0, dg0, cf0, _, _ = _wall_state(c, at(2 * k), hd, uptake, km, wall, ambient)
        bulk[:, k] = c
        floor[:, k] = c if k == 0 else cf0
        half = c + a * g0 * 0.5 * dx * _phi1(a * dg0 * 0.5 * dx)
        gm, dgm, _, jf, jr = _wall_state(
            np.maximum(half, 0.0), at(2 * k + 1), hd, uptake, km, wall, ambient
        )
        new = np.maximum(c + a * gm * dx * _phi1(a * dgm * dx), 0.0)
        # split the step's change between floor and roof in proportion to their fluxes
        net = width * dx * (jr - jf)
        moved = flow * (new - c)
        ratio = np.where(np.abs(net) > 0.0, moved / np.where(net == 0.0, 1.0, net), 1.0)
        taken += width * dx * jf * ratio
        let_in += width * dx * jr * ratio
        c = new
    _, _, cf_end, _, _ = _wall_state(c, at(2 * STEPS), hd, uptake, km, wall, ambient)
    bulk[:, -1] = c
    floor[:, -1] = cf_end
    below = np.zeros(n)
    if species.critical is not None:
        seg = _below(floor[:, 1:-1], floor[:, 2:], species.critical)
        below = (seg * np.diff(grid[1:])).sum(axis=1) / (1.0 - grid[1])
    idx, t = _profile_weights(grid)
    return {
        "outlet": c,
        "floor_min": floor[:, 1:].min(axis=1),
        "below": below,
        "uptake": taken,
        "wall_influx": let_in,
        "bulk": bulk[:, idx - 1] * (1 - t) + bulk[:, idx] * t,
        "floor": floor[:, idx - 1] * (1 - t) + floor[:, idx] * t,
    }


def _tubes(inlet, flow, length, diameter, wall, species: Species) -> dict[str, np.ndarray]:
    """Round tubing: exchange through the wall only, exact exponential approach to ambient."""
    ambient = 0.0 if species.ambient is None else species.ambient
    d = species.diffusivity
    liquid = tube_sherwood(wall * diameter / d) * d / diameter
    with np.errstate(divide="ignore"):
        k = np.where(wall > 0.0, 1.0 / (1.0 / np.where(wall > 0, wall, 1.0) + 1.0 / liquid), 0.0)
    rate = np.pi * diameter * k * length / flow
    out = ambient + (inlet - ambient) * np.exp(-rate)
    bulk = ambient + (inlet - ambient)[:, None] * np.exp(-np.outer(rate, PROFILE_STATIONS))
    return {
        "outlet": out,
        "floor_min": np.minimum(inlet, out),
        "below": np.zeros(inlet.size),
        "uptake": np.zeros(inlet.size),
        "wall_influx": flow * (out - inlet),
        "bulk": bulk,
        "floor": bulk.copy(),
    }


def _still(inlet, species: Species) -> dict[str, np.ndarray]:
    """Channels with nothing to exchange: the concentration stays."""
    n = inlet.size
    prof = np.repeat(inlet[:, None], PROFILE_STATIONS.size, axis=1)
    below = np.zeros(n)
    if species.critical is not None:
        below = (inlet < species.critical).astype(float)
    return {
        "outlet": inlet.copy(),
        "floor_min": inlet.copy(),
        "below": below,
        "uptake": np.zeros(n),
        "wall_influx": np.zeros(n),
        "bulk": prof,
        "floor": prof.copy(),
    }


def march_network(channels: ChannelSet, species: Species) -> SpeciesTransport:
    """The species on every channel of a network, nodes resolved in topological waves.

    Parameters
    ----------
    channels : ChannelSet
    species : Species
        The ports' inflow enters at ``species.inlet``.

    Returns
    -------
    SpeciesTransport

    Raises
    ------
    ChipflowError
        When the flow graph has a directed cycle (a flow field that no pressure field gives).
    """
    ch = channels
    n, n_nodes = ch.n_channels, ch.n_nodes
    q_max = float(ch.flow.max(initial=0.0))
    stagnant = ~(ch.flow > STAGNANT * q_max) if q_max > 0 else np.ones(n, bool)
    active = ~stagnant
    seeded_uptake = np.where(ch.seeded & ~ch.round, species.uptake, 0.0)
    wall = ch.wall if species.ambient is not None else np.zeros(n)

    moles = ch.port_inflow * species.inlet
    volume = ch.port_inflow.astype(float).copy()
    pending = np.bincount(ch.downstream[active], minlength=n_nodes)
    resolved = pending == 0
    node = np.full(n_nodes, np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        node[resolved] = np.where(volume[resolved] > 0, moles[resolved] / volume[resolved], np.nan)

    stations = PROFILE_STATIONS.size
    out = {
        "inlet": np.full(n, np.nan),
        "outlet": np.full(n, np.nan),
        "floor_min": np.full(n, np.nan),
        "below": np.zeros(n),
        "uptake": np.zeros(n),
        "wall_influx": np.zeros(n),
        "bulk": np.full((n, stations), np.nan),
        "floor": np.full((n, stations), np.nan),
    }
    done = stagnant.copy()
    waves = 0
    while not done.all():  # one pass per topological wave, channels vectorised
        ready = ~done & resolved[ch.upstream]
        if not ready.any():
            raise ChipflowError(
                "transport: the flow has a directed cycle, which no pressure field gives; "
                "check the network's ports"
            )
        waves += 1
        idx = np.flatnonzero(ready)
        c_in = node[ch.upstream[idx]]
        tube = ch.round[idx]
        exchange = ~tube & ((seeded_uptake[idx] > 0) | (wall[idx] > 0))
        porous = tube & (wall[idx] > 0)
        for kind, mask in (("march", exchange), ("tube", porous), ("still", ~exchange & ~porous)):
            if mask.any():  # three kinds of channel
                rows = idx[mask]
                out["inlet"][rows] = c_in[mask]
                found = _one_kind(kind, rows, c_in[mask], ch, seeded_uptake, wall, species)
                for key, value in found.items():
                    out[key][rows] = value
        done[idx] = True
        np.add.at(moles, ch.downstream[idx], ch.flow[idx] * out["outlet"][idx])
        np.add.at(volume, ch.downstream[idx], ch.flow[idx])
        pending -= np.bincount(ch.downstream[idx], minlength=n_nodes)
        newly = (pending == 0) & ~resolved
        node[newly] = moles[newly] / volume[newly]
        resolved |= newly

    if stagnant.any():
        _stagnant(out, stagnant, node, ch, seeded_uptake, wall, species)

    moles_in = float(np.sum(ch.port_inflow * species.inlet))
    # a port that only stagnant channels reach lets (next to) nothing leave
    leaving = (ch.port_outflow > 0) & np.isfinite(node)
    moles_out = float(np.sum(ch.port_outflow[leaving] * node[leaving]))
    active_rows = ~stagnant
    taken = float(out["uptake"][active_rows].sum())
    let_in = float(out["wall_influx"][active_rows].sum())
    scale = max(moles_in + abs(let_in), 1e-300)
    residual = (moles_in + let_in - moles_out - taken) / scale
    return SpeciesTransport(
        species=species,
        node=node,
        inlet=out["inlet"],
        outlet=out["outlet"],
        floor_min=out["floor_min"],
        below_critical=out["below"],
        uptake=out["uptake"],
        wall_influx=out["wall_influx"],
        bulk=out["bulk"],
        floor=out["floor"],
        stagnant=stagnant,
        moles_in=moles_in,
        moles_out=moles_out,
        residual=float(residual),
        waves=waves,
    )


def _one_kind(kind, rows, c_in, ch: ChannelSet, uptake, wall, species: Species) -> dict:
    """March one kind of channel: "march" (cells or a permeable roof), "tube" (permeable
    tubing) or "still" (nothing to exchange)."""
    if kind == "march":
        return march_channels(
            c_in, ch.flow[rows], ch.length[rows], ch.width[rows], ch.depth[rows],
            ch.shear_rate[rows], uptake[rows], wall[rows], species,
        )  # fmt: skip
    if kind == "tube":
        return _tubes(c_in, ch.flow[rows], ch.length[rows], ch.width[rows], wall[rows], species)
    return _still(c_in, species)


def _stagnant(out, stagnant, node, ch: ChannelSet, uptake, wall, species: Species) -> None:
    """Channels without flow: the richer end's concentration, the floor at the balance of roof
    and uptake (zero without a roof when cells take up)."""
    rows = np.flatnonzero(stagnant)
    ends = np.stack([node[ch.upstream[rows]], node[ch.downstream[rows]]])
    richer = np.fmax(ends[0], ends[1])  # NaN only where both ends are unknown
    c = np.where(np.isnan(richer), species.inlet, richer)
    ambient = 0.0 if species.ambient is None else species.ambient
    v, k = uptake[rows], wall[rows]
    # k (ca - c) = V c / (Km + c)  ->  the floor quadratic with c_e = ca, R = 1/k
    with np.errstate(divide="ignore"):
        balance, _ = floor_concentration(
            np.full(rows.size, ambient),
            np.where(k > 0, 1.0 / np.where(k > 0, k, 1.0), 1.0),
            v,
            species.km,
        )
    floor = np.where(v > 0, np.where(k > 0, balance, 0.0), c)
    out["inlet"][rows] = c
    out["outlet"][rows] = c
    out["floor_min"][rows] = floor
    out["bulk"][rows] = c[:, None]
    out["floor"][rows] = floor[:, None]
    if species.critical is not None:
        out["below"][rows] = (floor < species.critical).astype(float)
