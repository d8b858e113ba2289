"""Which checks a build runs, from its solved network, its per-level rows and the design.

:func:`culture_checks` grades what the cells feel and get (floor shear per generation, bed
residence time, oxygen diffusion and supply, even perfusion, laminar flow, entrance length);
:func:`pressure_checks` what the chip and the pump must hold. Each check function of this
package is pure; this module only chooses them and feeds them.
"""

from __future__ import annotations

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
    check_oxygen_diffusion,
    check_oxygen_supply,
    check_residence_time,
)
from chipflow.network import Solution
from chipflow.network.summary import generation_labels, port_pressure_range
from chipflow.spec.culture import Culture, Limits

__all__ = ["culture_checks", "pressure_checks", "bed_grader"]


class _ChannelLabels:
    """Labels of a network's channels, made only for the one a check names."""

    def __init__(self, network) -> None:
        self.network = network

    def __getitem__(self, index: int) -> str:
        net, i = self.network, int(index)
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
) -> list[CheckResult]:
    """Checks of what the cells feel and get.

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

    Every channel of the network, tubing included and with or without a generation, is checked
    for laminar flow and entrance length; the oxygen checks run only where the design declares
    cells (``culture.cells``).
    """
    net = solution.network
    out: list[CheckResult] = []
    beds = [i for i, r in enumerate(rows) if r["role"] == "bed"]
    everything = list(range(len(rows)))
    seeded = beds if culture.seeded == "bed" and beds else everything
    if window is not None:
        steady = [i for i in seeded if i not in oscillating]
        if steady or not rows:
            out += _shear_results(solution, rows, steady, window, "floor", skip=oscillating)
    if targets is not None:
        levels = beds if target_levels == "bed" and beds else everything
        out += _shear_results(solution, rows, levels, targets, target_kind, " (design target)")
    if beds:
        bed = rows[beds[0]]
        label = generation_labels([bed])[0]
        of_bed: list[CheckResult] = []
        if residence_target is not None:
            of_bed.append(check_residence_time(bed["residence_time"], residence_target))
        if culture.cells:
            of_bed.append(
                check_oxygen_diffusion(bed["depth"], bed["residence_time"], culture.o2_diffusivity)
            )
            area = sum(rows[i]["count"] * rows[i]["width"] * rows[i]["length"] for i in seeded)
            of_bed.append(
                check_oxygen_supply(
                    max(r["flow_total"] for r in rows),
                    area,
                    culture.cell_density,
                    culture.o2_consumption,
                    culture.o2_inlet,
                    consumption_source=culture.o2_consumption_source,
                    density_source=culture.cell_density_source,
                )
            )
        of_bed.append(check_uniformity(np.abs(solution.flow[net.role == "bed"])))
        out += [replace(r, level=label) for r in of_bed]
    if net.n_channels:
        labels = _ChannelLabels(net)
        out.append(check_reynolds(labels, solution.reynolds))
        out.append(
            check_entrance_length(
                labels, net.width, net.depth, net.length, solution.reynolds, net.round
            )
        )
    temperature = check_temperature(solution.fluid.temperature)
    if temperature is not None:
        out.append(temperature)
    return out


def bed_grader(
    culture: Culture,
    total_flow: float,
    bed_count: int,
    residence_time: float | None,
    bed_length: float | None,
):
    """A ``bed_grade(depth, width) -> (fails, warnings, reason)`` for the depth choice of
    :func:`chipflow.design.sizing.size_tree`: the bed's oxygen checks at that geometry.

    The bed's residence time is the design's (its length follows from it), or follows from
    a given ``bed_length`` [m]; its floor area is ``count * width * length``. The checks are
    the build's own :func:`check_oxygen_diffusion` and :func:`check_oxygen_supply`.

    Parameters
    ----------
    culture : Culture
    total_flow : float
        Flow through the trunk [m^3/s].
    bed_count : int
        Number of bed channels.
    residence_time, bed_length : float or None
        The bed's residence time [s] or length [m] (one of them).

    Examples
    --------
    Endothelial-like defaults; at 100 um the oxygen needs (1e-4)^2 / (2 * 3e-9) = 1.67 s to
    cross the depth (Einstein 1905), longer than a 1 s residence time:

    >>> from chipflow.spec.culture import Culture
    >>> grade = bed_grader(Culture(), 50e-9 / 60, 16, 1.0, None)
    >>> grade(100e-6, 400e-6)[:2], grade(50e-6, 400e-6)[:2]
    ((1, 0), (0, 0))
    """

    def grade(depth: float, width: float) -> tuple[int, int, str]:
        q = total_flow / bed_count
        if residence_time is not None:
            t = residence_time
            length = t * q / (width * depth)
        else:
            length = bed_length
            t = length * width * depth / q
        results = [
            check_oxygen_diffusion(depth, t, culture.o2_diffusivity),
            check_oxygen_supply(
                total_flow,
                bed_count * width * length,
                culture.cell_density,
                culture.o2_consumption,
                culture.o2_inlet,
            ),
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
