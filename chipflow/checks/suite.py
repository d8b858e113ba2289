"""Which checks a build runs, from its solved network, its per-level rows and the design.

:func:`culture_checks` grades what the cells feel and get (floor shear per generation, bed
residence time, oxygen diffusion and supply, even perfusion, laminar flow, entrance length);
:func:`pressure_checks` what the chip and the pump must hold. Each check function of this
package is pure; this module only chooses them and feeds them.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from chipflow.checks.cell_types import ShearWindow
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
from chipflow.network.summary import port_pressure_range
from chipflow.report.figures import generation_labels
from chipflow.spec.culture import Culture, Limits

__all__ = ["culture_checks", "pressure_checks", "bed_grader"]


def culture_checks(
    solution: Solution,
    rows: list[dict[str, Any]],
    culture: Culture,
    window: ShearWindow | None,
    residence_target: float | None,
) -> list[CheckResult]:
    """Checks of what the cells feel and get.

    Parameters
    ----------
    solution : Solution
        The solved network.
    rows : list of dict
        Per-level rows of :func:`chipflow.network.summary.level_rows`, inlet to outlet.
    culture : Culture
        Cells, their density and oxygen needs, and which levels carry cells.
    window : ShearWindow or None
        Floor-shear window [Pa] (none: no shear check).
    residence_target : float or None
        Target bed residence time [s] (none: no residence check).
    """
    net = solution.network
    out: list[CheckResult] = []
    if not rows:
        return out
    labels = generation_labels(rows)
    shear = np.array([r["wall_shear_floor"] for r in rows])
    beds = [i for i, r in enumerate(rows) if r["role"] == "bed"]
    seeded = beds if culture.seeded == "bed" and beds else list(range(len(rows)))
    if window is not None:
        out += check_floor_shear([labels[i] for i in seeded], shear[seeded], window)
    if beds:
        bed = rows[beds[0]]
        if residence_target is not None:
            out.append(check_residence_time(bed["residence_time"], residence_target))
        out.append(
            check_oxygen_diffusion(bed["depth"], bed["residence_time"], culture.o2_diffusivity)
        )
        floor_area = sum(rows[i]["count"] * rows[i]["width"] * rows[i]["length"] for i in seeded)
        out.append(
            check_oxygen_supply(
                max(r["flow_total"] for r in rows),
                floor_area,
                culture.cell_density,
                culture.o2_consumption,
                culture.o2_inlet,
                consumption_source=culture.o2_consumption_source,
                density_source=culture.cell_density_source,
            )
        )
        out.append(check_uniformity(np.abs(solution.flow[net.role == "bed"])))
    out.append(check_reynolds(labels, np.array([r["reynolds"] for r in rows])))
    out.append(
        check_entrance_length(
            labels,
            np.array([r["width"] for r in rows]),
            np.array([r["depth"] for r in rows]),
            np.array([r["length"] for r in rows]),
            np.array([r["reynolds"] for r in rows]),
        )
    )
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

    Tubing is not on the chip: its pressure loads the pump, not the bond.
    """
    net = solution.network
    supply_pressure, _ = port_pressure_range(solution)
    on_chip = net.role != "tubing"
    chip_nodes = np.union1d(net.node_a[on_chip], net.node_b[on_chip])
    chip_peak = float(solution.pressure[chip_nodes].max())
    out = [
        check_bond_pressure(
            chip_peak,
            limits.bond_pressure,
            safety_factor=limits.safety_factor,
            source=limits.bond_source,
        )
    ]
    if limits.pump_pressure is not None:
        out.append(check_pump_pressure(supply_pressure, limits.pump_pressure))
    return out
