"""The transport step of a build: oxygen and solutes along every channel, and the dosing delay.

:func:`run_transport` reads the solved network (flows, floor shear) and the design's culture
and transport settings, marches oxygen and every declared solute through the network
(:mod:`chipflow.transport.march`), times the arrival of a step change at the supply
(:mod:`chipflow.transport.dispersion`) and gathers per level what the report and results.json
show. It never solves the hydraulics again.

Definitions (Roy, Baskaran, Tilles, Yarmush & Toner, Ann Biomed Eng 29 (2001) 947, frame the
balance with these two numbers):

- Peclet number ``Pe = U h / D``: transport along the channel by the flow against diffusion
  across its depth;
- Damkohler number ``Da = V h / (D c_0)``: the cells' largest uptake ``V`` (density x uptake per
  cell) against what diffusion across the depth brings at the chip's inlet concentration
  ``c_0``. ``Da`` near 1 or above: the floor runs short across the depth, whatever the flow.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from chipflow.network.solver import Solution
from chipflow.network.summary import level_groups, series_chains
from chipflow.spec.culture import Culture
from chipflow.spec.transport import TransportSpec
from chipflow.transport.dispersion import Dosing, dosing
from chipflow.transport.march import (
    PROFILE_STATIONS,
    ChannelSet,
    SpeciesTransport,
    march_network,
)
from chipflow.transport.oxygen import INCUBATOR_TEMPERATURE, o2_solubility
from chipflow.transport.species import Species

__all__ = [
    "TransportRun",
    "run_transport",
    "channel_set",
    "oxygen_species",
    "DOSE_DIFFUSIVITY",
    "DOSE_SOURCE",
]

#: Diffusivity of the dosed compound when the design declares no solute [m^2/s]: a small drug
#: molecule in water at 37 degC (a few hundred daltons; from memory, order of magnitude).
DOSE_DIFFUSIVITY = 5e-10
DOSE_SOURCE = "a small drug molecule in water at 37 degC, about 5e-10 m^2/s (from memory)"


@dataclass(frozen=True)
class TransportRun:
    """Everything transport found.

    Attributes
    ----------
    channels : ChannelSet
        The network as transport saw it.
    oxygen : SpeciesTransport
    solutes : tuple of SpeciesTransport
    dose : Dosing
        Arrival of a step change at the supply (of the first solute, or a small molecule).
    chip_inlet : float
        Oxygen entering the chip (after the supply tubing) [mol/m^3].
    cells : bool
        Whether the design declares cells (then the oxygen checks run).
    results : dict
        The ``transport`` entry of results.json (SI values).
    field : FieldTransport or None
        The oxygen map on the field mesh (:mod:`chipflow.transport.field`), when solved.
    """

    channels: ChannelSet
    oxygen: SpeciesTransport
    solutes: tuple[SpeciesTransport, ...]
    dose: Dosing
    chip_inlet: float
    cells: bool
    results: dict[str, Any] = field(repr=False)
    field: Any = field(default=None, repr=False)

    def columns(self) -> dict[str, np.ndarray]:
        """Per-channel columns of channels.csv: ``o2_in``, ``o2_out``, ``o2_floor_min``
        [mol/m^3] (no floor value for tubing)."""
        ox = self.oxygen
        return {
            "o2_in": ox.inlet,
            "o2_out": ox.outlet,
            "o2_floor_min": np.where(self.channels.round, np.nan, ox.floor_min),
        }


def _kelvin(temperature: float | None) -> float:
    """The fluid's temperature [K]; a fluid given without one is taken at 37 degC."""
    return INCUBATOR_TEMPERATURE if temperature is None else float(temperature)


def oxygen_species(culture: Culture, temperature: float | None) -> Species:
    """Oxygen as the design declares it, at the fluid ``temperature`` [K] (None: 37 degC):
    supplied at ``o2_inlet`` (or in equilibrium with the incubator gas), taken up by the cells
    only when the design declares them."""
    temperature = _kelvin(temperature)
    equilibrium = float(o2_solubility(temperature)) * culture.o2_ambient
    supply = equilibrium if culture.o2_inlet is None else culture.o2_inlet
    return Species(
        "oxygen",
        culture.o2_diffusivity,
        supply,
        uptake=culture.cell_density * culture.o2_consumption if culture.cells else 0.0,
        km=culture.o2_km,
        ambient=equilibrium,
        critical=culture.o2_critical if culture.cells else None,
    )


def _seeded(network, seeded: str) -> np.ndarray:
    chip = ~network.round
    bed = np.isin(network.role, ("bed", "chamber"))  # a chamber's links carry its floor
    if seeded == "bed" and bed.any():
        return bed
    return chip


def channel_set(solution: Solution, culture: Culture, spec: TransportSpec) -> ChannelSet:
    """The network of ``solution`` as transport sees it: flow directions, floor shear rates,
    seeded floors and the gas conductances of roof and tubing walls (``P / (t H)``)."""
    net = solution.network
    flow = np.asarray(solution.flow, float)
    forward = flow >= 0
    h = float(o2_solubility(_kelvin(solution.fluid.temperature)))
    wall = np.zeros(net.n_channels)
    if spec.roof_permeability > 0 and spec.roof_thickness:
        wall[~net.round] = spec.roof_permeability / (spec.roof_thickness * h)
    d = net.width
    tubes = net.round & (net.role == "tubing")
    if spec.tubing_permeability > 0 and spec.tubing_outer_diameter:
        # thick-walled cylinder: flux per inner wall area 2 P / (d ln(d_o / d)) per pressure
        wall[tubes] = (
            2.0 * spec.tubing_permeability
            / (d[tubes] * np.log(spec.tubing_outer_diameter / d[tubes]) * h)
        )  # fmt: skip
    if spec.tubes:
        names = net.channel_names()
        for i in np.flatnonzero(net.round):  # hand-written tubing, a few tubes
            if names[i] in spec.tubes:
                perm, outer = spec.tubes[names[i]]
                wall[i] = 2.0 * perm / (d[i] * np.log(outer / d[i]) * h)
    inflow = np.zeros(net.n_nodes)
    outflow = np.zeros(net.n_nodes)
    for node, q in solution.port_flow.items():  # the ports: a handful
        i = net.node_index(node)
        inflow[i] += max(q, 0.0)
        outflow[i] += max(-q, 0.0)
    return ChannelSet(
        upstream=np.where(forward, net.node_a, net.node_b),
        downstream=np.where(forward, net.node_b, net.node_a),
        flow=np.abs(flow),
        length=net.length,
        width=net.width,
        depth=net.depth,
        round=net.round,
        shear_rate=np.asarray(solution.wall_shear_floor, float) / solution.fluid.viscosity,
        seeded=_seeded(net, culture.seeded) & ~net.round,
        wall=wall,
        port_inflow=inflow,
        port_outflow=outflow,
    )


def _where(net, i: int) -> dict[str, Any]:
    return {
        "channel": net.channel_name(int(i)),
        "role": str(net.role[i]),
        "generation": int(net.generation[i]),
    }


def _chip_inlet(net, ox: SpeciesTransport) -> float:
    names = net.node_names
    if "inlet" in names:
        value = ox.node[names.index("inlet")]
        if np.isfinite(value):
            return float(value)
    return float(ox.species.inlet)


def _level_entries(solution, ch, ox, species, c0, groups) -> list[dict[str, Any]]:
    net = solution.network
    u = np.abs(solution.mean_velocity)
    area = ch.floor_area
    rows = []
    for role, generation, m in groups:  # a handful of levels
        head, tail = _chain_ends(net, m)
        seeded = area[m].sum()
        below = (ox.below_critical[m] * area[m]).sum()
        share = None
        if species.critical is not None and seeded > 0:
            share = float(below / seeded)
        uptake = species.uptake if ch.seeded[m].any() else 0.0
        h = float(net.depth[m].mean())
        rows.append(
            {
                "generation": int(generation),
                "role": str(role),
                "count": int(head.size),
                "o2_in": float(np.mean(ox.inlet[head])),
                "o2_out": float(np.mean(ox.outlet[tail])),
                "o2_floor_min": float(np.min(ox.floor_min[m])),
                "peclet": float(u[m].mean() * h / species.diffusivity),
                "damkohler": float(uptake * h / (species.diffusivity * c0)) if c0 > 0 else None,
                "hypoxic_fraction": share,
                "seeded_area": float(seeded),
            }
        )
    return rows


def _chain_ends(net, m: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The first and last channel of each chain of segments in series of a level (a mesh
    bed's bed channel, :func:`chipflow.network.summary.series_chains`; the level's channels
    themselves where they are not in series). A chain's segments are in the level's order."""
    chain = series_chains(net, m)
    order = np.argsort(chain, kind="stable")
    per = np.bincount(chain)
    return m[order[np.r_[0, np.cumsum(per)[:-1]]]], m[order[np.cumsum(per) - 1]]


def _along_chains(net, m: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Per-channel profiles at :data:`PROFILE_STATIONS` (len(m), stations) of a level whose
    channels are chains of equally many segments in series, as profiles along whole chains
    (chains, stations), interpolated at the same fractions of each chain's length; the
    profiles as given where the level's channels are not in series."""
    chain = series_chains(net, m)
    per = np.bincount(chain)
    if per.size == m.size or np.any(per != per[0]):
        return values
    k, s = per.size, int(per[0])
    order = np.argsort(chain, kind="stable")
    length = net.length[m][order].reshape(k, s)
    start = np.cumsum(length, axis=1) - length
    x = (start[:, :, None] + length[:, :, None] * PROFILE_STATIONS).reshape(k, -1)
    v = values[order].reshape(k, -1)
    at = PROFILE_STATIONS[None, :] * length.sum(axis=1)[:, None]
    out = np.empty((k, PROFILE_STATIONS.size))
    for j in range(PROFILE_STATIONS.size):  # a handful of stations, vectorised over chains
        i = np.clip((x < at[:, j : j + 1]).sum(axis=1), 1, x.shape[1] - 1)
        x0, x1 = x[np.arange(k), i - 1], x[np.arange(k), i]
        f = np.where(x1 > x0, (at[:, j] - x0) / np.where(x1 > x0, x1 - x0, 1.0), 0.0)
        out[:, j] = v[np.arange(k), i - 1] * (1 - f) + v[np.arange(k), i] * f
    return out


def _profile(ox: SpeciesTransport, groups, net) -> dict[str, Any]:
    levels = []
    for _, _, m in groups:  # levels
        bulk = _along_chains(net, m, ox.bulk[m])
        floor = _along_chains(net, m, ox.floor[m])
        levels.append(
            {
                "bulk": bulk.mean(axis=0).tolist(),
                "floor": floor.mean(axis=0).tolist(),
                "floor_lowest": floor.min(axis=0).tolist(),
            }
        )
    return {"stations": PROFILE_STATIONS.tolist(), "levels": levels}


def _dosing_entry(net, ch: ChannelSet, dose: Dosing, groups, name: str, source: str) -> dict:
    chip = ~ch.round & (ch.flow > 0)
    bed = chip & (net.role == "bed")
    pool = bed if bed.any() else chip
    out: dict[str, Any] = {
        "solute": name,
        "diffusivity": dose.diffusivity,
        "source": source,
        "levels": [
            {
                "generation": int(g),
                "role": str(r),
                "t50": float(np.max(dose.t50[m])),
                "t90": float(np.max(dose.t90[m])),
            }
            for r, g, m in groups  # levels
        ],
        "slowest": None,
        "residual": dose.residual,
    }
    if pool.any():
        i = int(np.flatnonzero(pool)[np.argmax(dose.t90[pool])])
        out["slowest"] = {
            **_where(net, i),
            "t50": float(dose.t50[i]),
            "t90": float(dose.t90[i]),
            "tubing_t50": float(dose.tubing_t50[i]),
            "tubing_t90": float(dose.tubing_t90[i]),
            "tubing_share": float(dose.tubing_t50[i] / dose.t50[i]) if dose.t50[i] > 0 else 0.0,
        }
    return out


def _context(solution, culture: Culture, species: Species, c0: float, groups) -> dict | None:
    """The lumped numbers of earlier versions, kept as context: the time to diffuse across the
    bed's depth against its residence time, and the share of the inlet oxygen its cells would
    use if the floor saw the inlet concentration."""
    net = solution.network
    beds = [m for role, _, m in groups if role == "bed"]
    if not beds or not culture.cells:
        return None
    m = beds[0]
    h = float(net.depth[m].mean())
    area = float((net.width[m] * net.length[m]).sum())
    chain = series_chains(net, m)  # a mesh bed's channels are chains of segments
    per = np.bincount(chain)
    q = float((np.bincount(chain, weights=np.abs(solution.flow[m])) / per).sum())
    residence = np.bincount(chain, weights=solution.residence_time[m])
    return {
        "diffusion_time": h * h / (2.0 * species.diffusivity),
        "residence_time": float(residence.mean()),
        "oxygen_use_fraction": species.uptake * area / (q * c0) if q * c0 > 0 else None,
    }


def run_transport(
    solution: Solution, culture: Culture, spec: TransportSpec | None = None
) -> TransportRun:
    """Oxygen and solutes along every channel of a solved network, and the dosing delay.

    Parameters
    ----------
    solution : Solution
        The solved network (tubing included).
    culture : Culture
        The cells, their oxygen needs and where they grow.
    spec : TransportSpec, optional
        Solutes and gas permeabilities (none: an impermeable chip, no solutes).

    Returns
    -------
    TransportRun
    """
    spec = spec or TransportSpec()
    net = solution.network
    ch = channel_set(solution, culture, spec)
    species = oxygen_species(culture, solution.fluid.temperature)
    ox = march_network(ch, species)
    groups = level_groups(net)
    c0 = _chip_inlet(net, ox)
    seeded = ch.seeded & np.isfinite(ox.floor_min)
    area = ch.floor_area
    chip = ~ch.round & np.isfinite(ox.floor_min)
    pool = seeded if seeded.any() else chip
    lowest = None
    if pool.any():
        i = int(np.flatnonzero(pool)[np.nanargmin(ox.floor_min[pool])])
        lowest = {**_where(net, i), "o2_floor_min": float(ox.floor_min[i])}
    share = None
    if species.critical is not None and area[seeded].sum() > 0:
        share = float((ox.below_critical * area)[seeded].sum() / area[seeded].sum())
    solutes = []
    solute_entries = []
    for s in spec.solutes:  # a handful of solutes
        sp = Species(s.name, s.diffusivity, s.inlet, culture.cell_density * s.uptake, s.km)
        st = march_network(ch, sp)
        solutes.append(st)
        solute_entries.append(
            {
                "name": s.name,
                "diffusivity": s.diffusivity,
                "inlet_concentration": s.inlet,
                "uptake_per_cell": s.uptake,
                "km": s.km,
                "levels": [
                    {
                        "generation": int(g),
                        "role": str(r),
                        "c_in": float(np.mean(st.inlet[m])),
                        "c_out": float(np.mean(st.outlet[m])),
                        "c_floor_min": float(np.min(st.floor_min[m])),
                    }
                    for r, g, m in groups  # levels
                ],
                "mass_residual": st.residual,
            }
        )
    if spec.solutes:
        first = spec.solutes[0]
        dose = dosing(ch, first.diffusivity)
        dose_name, dose_source = first.name, "the first [[solutes]] entry"
    else:
        dose = dosing(ch, DOSE_DIFFUSIVITY)
        dose_name, dose_source = "a small molecule", DOSE_SOURCE
    roof = ch.wall[~ch.round]
    tubing = ch.wall[ch.round]
    results: dict[str, Any] = {
        "o2_supply": species.inlet,
        "o2_chip_inlet": c0,
        "o2_ambient": culture.o2_ambient,
        "o2_equilibrium": float(species.ambient),
        "o2_critical": species.critical,
        "o2_critical_source": culture.o2_critical_source if species.critical else None,
        "o2_diffusivity": species.diffusivity,
        "o2_uptake": species.uptake,
        "o2_km": species.km,
        "roof_conductance": float(roof.max(initial=0.0)),
        "roof_source": spec.roof_source,
        "tubing_conductance": float(tubing.max(initial=0.0)),
        "levels": _level_entries(solution, ch, ox, species, c0, groups),
        "o2_floor_min": None if lowest is None else lowest["o2_floor_min"],
        "lowest": lowest,
        "hypoxic_fraction": share,
        "seeded_area": float(area[seeded].sum()),
        "o2_delivered": ox.moles_in,
        "o2_used": float(ox.uptake.sum()),
        "roof_influx": float(ox.wall_influx.sum()),
        "o2_used_fraction": float(ox.uptake.sum() / ox.moles_in) if ox.moles_in > 0 else None,
        "mass_residual": ox.residual,
        "waves": ox.waves,
        "stagnant": int(ox.stagnant.sum()),
        "profile": _profile(ox, groups, net),
        "context": _context(solution, culture, species, c0, groups),
        "dosing": _dosing_entry(net, ch, dose, groups, dose_name, dose_source),
        "solutes": solute_entries,
        "field": None,
    }
    for entry, s in zip(solute_entries, spec.solutes, strict=True):  # a handful of solutes
        entry["dosing"] = (
            results["dosing"]
            if s is spec.solutes[0]
            else _dosing_entry(net, ch, dosing(ch, s.diffusivity), groups, s.name, "")
        )
    return TransportRun(
        channels=ch,
        oxygen=ox,
        solutes=tuple(solutes),
        dose=dose,
        chip_inlet=c0,
        cells=bool(culture.cells),
        results=results,
    )


def bed_oxygen(
    culture: Culture,
    spec: TransportSpec | None,
    temperature: float | None,
    flow: float,
    width: float,
    depth: float,
    length: float,
) -> SpeciesTransport:
    """Oxygen along one seeded channel fed at the supply's oxygen (the sizing's bed estimate).

    Parameters
    ----------
    culture : Culture
    spec : TransportSpec or None
        The roof's permeability (None: impermeable).
    temperature : float or None
        [K] (None: 37 degC).
    flow : float
        [m^3/s].
    width, depth, length : float
        [m].
    """
    from chipflow.physics.duct import flow_state

    spec = spec or TransportSpec()
    h = float(o2_solubility(_kelvin(temperature)))
    wall = 0.0
    if spec.roof_permeability > 0 and spec.roof_thickness:
        wall = spec.roof_permeability / (spec.roof_thickness * h)
    # the floor shear rate does not depend on the viscosity: take 1 Pa s
    rate = float(flow_state(width, depth, length, flow, 1.0, 1000.0).wall_shear_floor)
    one = np.ones(1)
    ch = ChannelSet(
        upstream=np.array([0]),
        downstream=np.array([1]),
        flow=flow * one,
        length=length * one,
        width=width * one,
        depth=depth * one,
        round=np.zeros(1, bool),
        shear_rate=rate * one,
        seeded=np.ones(1, bool),
        wall=wall * one,
        port_inflow=np.array([flow, 0.0]),
        port_outflow=np.array([0.0, flow]),
    )
    return march_network(ch, oxygen_species(culture, temperature))
