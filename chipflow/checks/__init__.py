"""Checks of a solved design: culture, transport, pressure, flow regime and fabrication.

Each check is a pure function of plain numbers or arrays that returns :class:`CheckResult`
objects (pass / warn / fail, value, limit, unit and the source of the limit). The limit tables
live beside them: the cell types in ``chipflow/data/cell_types.toml``
(:mod:`chipflow.checks.cell_types`); the defaults and thresholds in each module's docstring.
"""

from chipflow.checks.cell_types import (
    DEFAULT_O2_CONSUMPTION,
    CellType,
    ShearWindow,
    cell_type,
    cell_types,
)
from chipflow.checks.culture import check_floor_shear
from chipflow.checks.fabrication import fabrication_results
from chipflow.checks.flow import check_entrance_length, check_reynolds, check_uniformity
from chipflow.checks.pressure import check_bond_pressure, check_pump_pressure
from chipflow.checks.result import STATUSES, CheckResult, level_statuses, worst_status
from chipflow.checks.transport import (
    check_oxygen_diffusion,
    check_oxygen_supply,
    check_residence_time,
    diffusion_time,
    oxygen_use_fraction,
)

__all__ = [
    "CheckResult",
    "STATUSES",
    "worst_status",
    "level_statuses",
    "CellType",
    "ShearWindow",
    "cell_type",
    "cell_types",
    "DEFAULT_O2_CONSUMPTION",
    "check_floor_shear",
    "check_residence_time",
    "check_oxygen_diffusion",
    "check_oxygen_supply",
    "diffusion_time",
    "oxygen_use_fraction",
    "check_bond_pressure",
    "check_pump_pressure",
    "check_reynolds",
    "check_entrance_length",
    "check_uniformity",
    "fabrication_results",
]
