"""Which checks a build runs, from its solved network, its per-level rows and the design.

:func:`culture_checks` grades what the cells feel and get (floor shear per generation, bed
residence time, even perfusion, laminar flow, entrance length); :func:`transport_checks` the
oxygen their floor sees and the dosing delay (from :func:`chipflow.transport.run_transport`);
:func:`pressure_checks` what the chip and the pump must hold. Each check function of this
package is pure; this module only chooses them and feeds them.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import replace
from typing import Any

import numpy as np

from chipflow.checks.cell_types import ShearWindow
from chipflow.checks.conditions import check_temperature
from chipflow.checks.culture import check_floor_shear
from chipflow.checks.flow import check_entrance_length, check_reynolds, check_uniformity
from chipflow.checks.pressure import check_bond_pressure, check_pump_pressure
from chipflow.checks.result import CheckResult
from chipflow.checks.transport import (
    check_dosing,
    check_floor_oxygen,
    check_hypoxic_share,
    check_residence_time,
)
from chipflow.network import Solution
from chipflow.network.summary import generation_labels, port_pressure_range
from chipflow.spec.culture import Culture, Limits

__all__ = ["culture_checks", "transport_checks", "pressure_checks", "bed_grader"]


class _ChannelLabels:
    """Labels of a network's channels, made only for the one a check names."""

    def __init__(self, network, index: np.ndarray | None = None) -> None:
        self.network = network
        self.index = index

    def __getitem__(self, index: int) -> str:
        net = self.network
        i = int(index) if self.index is None else int(self.index[int(index)])
        generation = int(net.generation[i])
        where = f" ({net.role[i]}, generation {generation})" if generation >= 0 else ""
        return f"channel {net.channel_name(i)}{where}"


def _shear_results(
    solution: Solution,
    rows: list[dict[str, Any]],
    levels: list[int],
    window: ShearWindow,
    kind: str,
    suffix: str = "",
    skip: tuple[int, ...] = (),
) -> list[CheckResult]:
    """One result per level in ``levels``; without levels, the channels of lowest and highest
    shear of the whole chip (tubing and the channels in ``skip`` left out)."""
    key = {"floor": "wall_shear_floor", "mean": "wall_shear_mean", "max": "wall_shear_max"}[kind]
    if rows:
        labels = generation_labels(rows)
        values = np.array([rows[i][key] for i in levels])
        names = [f"{labels[i]}{suffix}" for i in levels]
        results = check_floor_shear(names, values, window, kind=kind)
        # each result grades one level: the tables take their verdicts from these
        return [replace(r, level=labels[i]) for r, i in zip(results, levels, strict=True)]
    else:
        net = solution.network
        chip = np.setdiff1d(np.flatnonzero(net.role != "tubing"), np.asarray(skip, dtype=int))
        if chip.size == 0:
            return []
        tau = getattr(solution, key)[chip]
        ends = sorted({int(chip[np.argmin(tau)]), int(chip[np.argmax(tau)])})
        labels = _ChannelLabels(net)
        values = getattr(solution, key)[ends]
        names = [f"{labels[i]}{suffix}" for i in ends]
    return check_floor_shear(names, values, window, kind=kind)


def culture_checks(
    solution: Solution,
    rows: list[dict[str, Any]],
    culture: Culture,
    window: ShearWindow | None,
    residence_target: float | None,
    *,
    targets: ShearWindow | None = None,
    target_kind: str = "floor",
    target_levels: str = "all",
    oscillating: tuple[int, ...] = (),
    region_windows: Mapping[str, ShearWindow | None] | None = None,
    residence_targets: Mapping[str, float | None] | None = None,
) -> list[CheckResult]:
    """Checks of what the cells feel and get.

    Every channel of the network, tubing included and with or without a generation, is checked
    for laminar flow and entrance length; the oxygen checks are in :func:`transport_checks`.

    Parameters
    ----------
    solution : Solution
        The solved network.
    rows : list of dict
        Per-level rows of :func:`chipflow.network.summary.level_rows`, inlet to outlet (empty
        for a network without generation labels: then the shear check takes the channels of
        lowest and highest shear).
    culture : Culture
        Cells, their density and oxygen needs, and which levels carry cells.
    window : ShearWindow or None
        Floor-shear window of the cells [Pa], checked on the seeded levels (none: no check).
        A one-sided window is a one-sided check.
    residence_target : float or None
        Target bed residence time [s] (none: no residence check).
    targets : ShearWindow or None, optional
        The design's own shear window (``[targets]``) [Pa], checked besides ``window``.
    target_kind : str, optional
        Which wall shear ``targets`` limits: "floor", "mean" or "max".
    target_levels : str, optional
        Where ``targets`` applies: "all" levels or only the "bed".
    oscillating : tuple of int, optional
        Levels (indices of ``rows``; without rows, channel indices) whose flow oscillates:
        the cells' window, measured in steady flow, is not checked there (time-varying
        operation checks them instead, :func:`chipflow.operation.operate`).
    region_windows : mapping of str to ShearWindow or None, optional
        Per culture region (the rows' ``region``), the window of its own cells, checked on
        its levels instead of ``window``.
    residence_targets : mapping of str to float or None, optional
        Per culture region, its bed's residence time target [s] instead of
        ``residence_target``.

    Notes
    -----
    Every channel of the network, tubing included and with or without a generation, is checked
    for laminar flow and entrance length (a chamber's links for laminar flow only: they stand
    for its 2D flow, whose entrance the chamber's own field solve holds). The oxygen checks
    come from :func:`transport_checks`, which needs the species solved along the network.
    """
    net = solution.network
    out: list[CheckResult] = []
    beds = [i for i, r in enumerate(rows) if r["role"] == "bed"]
    everything = list(range(len(rows)))
    # cells in chambers (graded by their own floor check): "bed" then seeds no channel level
    chambered = bool(np.any(net.role == "chamber"))
    seeded = beds if culture.seeded == "bed" and (beds or chambered) else everything
    own = region_windows or {}
    where = [str(r.get("region", "") or "") for r in rows]
    steady = [i for i in seeded if i not in oscillating]
    # levels grouped by the window that applies to them (their region's cells, else window)
    by_window: dict[int, tuple[ShearWindow, list[int]]] = {}
    for i in steady:  # a handful of levels
        w = own.get(where[i]) or window
        if w is not None:
            by_window.setdefault(id(w), (w, []))[1].append(i)
    if window is not None and not rows:
        out += _shear_results(solution, rows, [], window, "floor", skip=oscillating)
    for w, levels in by_window.values():
        out += _shear_results(solution, rows, levels, w, "floor", skip=oscillating)
    if targets is not None:
        levels = beds if target_levels == "bed" and beds else everything
        out += _shear_results(solution, rows, levels, targets, target_kind, " (design target)")
    region = net.regions()
    first_beds = {where[b]: b for b in reversed(beds)}  # each region's first bed level
    for b in sorted(first_beds.values()):  # one bed per culture region
        bed = rows[b]
        label = generation_labels([bed])[0]
        name = where[b]
        target = (residence_targets or {}).get(name, residence_target)
        of_bed: list[CheckResult] = []
        if target is not None:
            of_bed.append(check_residence_time(bed["residence_time"], target))
        mine = (net.role == "bed") & (region == name)
        of_bed.append(check_uniformity(np.abs(solution.flow[mine])))
        if name:
            of_bed = [replace(r, name=f"{r.name} ({name})") for r in of_bed]
        out += [replace(r, level=label) for r in of_bed]
    if net.n_channels:
        labels = _ChannelLabels(net)
        out.append(check_reynolds(labels, solution.reynolds))
        # a chamber's links are equivalents of its 2D flow (its field solve has its entrance);
        # a mesh bed's cross-connections carry next to nothing in a symmetric bed: no
        # entrance flow to develop (their flows are shown in results.json "mesh")
        length = np.where(net.role == "chamber", np.inf, net.length)
        on = np.flatnonzero(net.role != "cross")
        if on.size:
            out.append(
                check_entrance_length(
                    _ChannelLabels(net, on),
                    net.width[on],
                    net.depth[on],
                    length[on],
                    solution.reynolds[on],
                    net.round[on],
                )
            )
    temperature = check_temperature(solution.fluid.temperature)
    if temperature is not None:
        out.append(temperature)
    return out


def _place(entry: dict[str, Any] | None) -> str:
    if not entry:
        return ""
    generation = entry.get("generation", -1)
    level = f"{entry['role']} generation {generation}" if generation >= 0 else entry["role"]
    return f"channel {entry['channel']}, {level}"


def transport_checks(run) -> list[CheckResult]:
    """The oxygen the seeded floor sees (where the design declares cells) and the dosing delay.

    Parameters
    ----------
    run : chipflow.transport.TransportRun
    """
    res = run.results
    out: list[CheckResult] = []
    if run.cells and res["hypoxic_fraction"] is not None:
        where = _place(res["lowest"])
        critical, source = res["o2_critical"], res["o2_critical_source"]
        out.append(check_hypoxic_share(res["hypoxic_fraction"], critical, source, where))
        out.append(check_floor_oxygen(res["o2_floor_min"], critical, source, where))
    slowest = res["dosing"]["slowest"]
    if slowest is not None and np.isfinite(slowest["t90"]):
        out.append(
            check_dosing(slowest["t50"], slowest["t90"], slowest["tubing_t50"], _place(slowest))
        )
    return out


def bed_grader(
    culture: Culture,
    total_flow: float,
    bed_count: int,
    residence_time: float | None,
    bed_length: float | None,
    *,
    transport=None,
    temperature: float | None = None,
):
    """A ``bed_grade(depth, width) -> (fails, warnings, reason)`` for the depth choice of
    :func:`chipflow.design.sizing.size_tree`: the build's oxygen checks on one bed channel.

    The bed's residence time is the design's (its length follows from it), or follows from
    a given ``bed_length`` [m]. One bed channel, fed at the supply's oxygen, is marched by the
    1D transport of the build (:func:`chipflow.transport.run.bed_oxygen`) and graded by the
    build's own :func:`check_hypoxic_share` and :func:`check_floor_oxygen`; without cells
    there is nothing to grade.

    Parameters
    ----------
    culture : Culture
    total_flow : float
        Flow through the trunk [m^3/s].
    bed_count : int
        Number of bed channels.
    residence_time, bed_length : float or None
        The bed's residence time [s] or length [m] (one of them).
    transport : TransportSpec, optional
        The roof's gas permeability (none: an impermeable roof).
    temperature : float or None
        Fluid temperature [K] (None: 37 degC).

    Examples
    --------
    Hepatocytes (4.8e-17 mol/s each, Sci Rep 2017) at 2e5 cells/cm^2 under an impermeable roof,
    16 bed channels sharing 2 uL/min for 120 s: at the same residence time a 50 um bed has
    three times the floor of a 150 um one (floor = flow x time / depth), and its cells use
    more oxygen than the flow brings:

    >>> from chipflow.spec.culture import Culture
    >>> cells = Culture(cells=True, cell_density=2e9, o2_critical=0.02)
    >>> grade = bed_grader(cells, 2e-9 / 60, 16, 120.0, None)
    >>> grade(150e-6, 600e-6)[:2], grade(50e-6, 600e-6)[:2]
    ((0, 0), (1, 1))
    """
    from functools import lru_cache

    from chipflow.transport.run import bed_oxygen

    @lru_cache(maxsize=256)
    def grade(depth: float, width: float) -> tuple[int, int, str]:
        if not culture.cells:
            return 0, 0, "no cells are declared"
        q = total_flow / bed_count
        length = residence_time * q / (width * depth) if residence_time is not None else bed_length
        ox = bed_oxygen(culture, transport, temperature, q, width, depth, length)
        critical, source = culture.o2_critical, culture.o2_critical_source
        results = [
            check_hypoxic_share(float(ox.below_critical[0]), critical, source),
            check_floor_oxygen(float(ox.floor_min[0]), critical, source),
        ]
        bad = [r for r in results if r.status != "pass"]
        reason = "; ".join(f"{r.name} would {r.status}: {r.message}" for r in bad)
        return (
            sum(r.status == "fail" for r in results),
            sum(r.status == "warn" for r in results),
            reason or "the bed's oxygen checks pass",
        )

    return grade


def pressure_checks(solution: Solution, limits: Limits) -> list[CheckResult]:
    """The peak on-chip pressure against the bond and the supply pressure against the pump.

    Tubing is not on the chip: its pressure loads the pump, not the bond (a network of tubing
    only has no bond check).
    """
    net = solution.network
    supply_pressure, _ = port_pressure_range(solution)
    on_chip = net.role != "tubing"
    chip_nodes = np.union1d(net.node_a[on_chip], net.node_b[on_chip])
    out = []
    if chip_nodes.size:  # a network of tubing only has no bond to load
        out.append(
            check_bond_pressure(
                float(solution.pressure[chip_nodes].max()),
                limits.bond_pressure,
                safety_factor=limits.safety_factor,
                source=limits.bond_source,
            )
        )
    if limits.pump_pressure is not None:
        out.append(check_pump_pressure(supply_pressure, limits.pump_pressure))
    return out
