"""The ``[culture]`` and ``[limits]`` sections of a design file.

.. code-block:: toml

    [culture]
    cell_type = "endothelial"        # a row of chipflow/data/cell_types.toml
    shear_min = "0.4 Pa"             # optional: override the window (either side; one bound
                                     # alone, without a cell_type, is a one-sided window)
    shear_max = "1.2 Pa"
    seeded = "bed"                   # where cells grow: "bed" (default) or "all" generations
    cell_density = "1e5 cell/cm^2"   # cells per floor area (default 1e5 cell/cm^2, assumed)
    o2_consumption = "4.8e-17 mol/s" # oxygen uptake per cell (default: the cell type's row)
    o2_inlet = "0.2 mol/m^3"         # oxygen in the medium at the supply (default: equilibrium
                                     # with o2_ambient at the fluid temperature)
    o2_diffusivity = "3e-9 m^2/s"    # oxygen diffusivity in the medium (default: 37 C water)
    o2_km = "7.39e-3 mol/m^3"        # Michaelis-Menten constant of the uptake
    o2_ambient = "18.9 kPa"          # oxygen partial pressure of the incubator (default:
                                     # humidified air with 5 % CO2 at 37 degC)
    o2_critical = "0.02 mol/m^3"     # floor oxygen below which cells are hypoxic (default:
                                     # the cell type's row)
    residence_time = "2 s"           # optional target for the bed residence time
    outside_window_limit = "50 %"    # 2D field: most of the seeded floor that may lie outside
                                     # the shear window before chipflow warns (default 50 %)

    [limits]
    bond_pressure = "200 kPa"        # burst pressure of the bond (default: PDMS-glass plasma)
    safety_factor = 2                # the inlet pressure passes up to bond_pressure / this
    pump_pressure = "100 kPa"        # optional: the pump's rated pressure

Examples
--------
>>> from chipflow.spec.reader import parse_design_text
>>> text = '[culture]\\ncell_type = "hepatocyte"\\nshear_max = "0.05 Pa"'
>>> top = parse_design_text(text, "a.toml")
>>> culture = read_culture(top)
>>> culture.window.min, culture.window.max, culture.o2_consumption
(0.001, 0.05, 4.8e-17)
>>> culture.o2_critical, round(culture.o2_ambient)
(0.02, 18916)
>>> read_limits(top).bond_pressure
200000.0
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

from chipflow.checks.cell_types import (
    DEFAULT_O2_CONSUMPTION,
    DEFAULT_O2_SOURCE,
    ShearWindow,
    cell_type,
)
from chipflow.checks.culture import OUTSIDE_WINDOW_LIMIT, OUTSIDE_WINDOW_SOURCE
from chipflow.checks.pressure import BOND_LIMIT_DEFAULT, BOND_SAFETY_FACTOR, BOND_SOURCE
from chipflow.checks.transport import CELL_DENSITY_DEFAULT, O2_DIFFUSIVITY_37C
from chipflow.spec.reader import Table
from chipflow.transport.oxygen import AMBIENT_SOURCE, incubator_o2_pressure

__all__ = [
    "Culture",
    "Limits",
    "read_culture",
    "read_limits",
    "CULTURE_KEYS",
    "LIMITS_KEYS",
    "SEEDED",
]

CULTURE_KEYS = (
    "cell_type",
    "shear_min",
    "shear_max",
    "seeded",
    "cell_density",
    "o2_consumption",
    "o2_inlet",
    "o2_diffusivity",
    "residence_time",
    "outside_window_limit",
    "o2_km",
    "o2_ambient",
    "o2_critical",
)
LIMITS_KEYS = ("bond_pressure", "safety_factor", "pump_pressure")
#: Where the cells grow: only the bed, or every generation.
SEEDED = ("bed", "all")
#: Michaelis-Menten constant of the oxygen uptake when the design gives none [mol/m^3]: the
#: hepatocyte value of Sci Rep 2017;7:42113, Table 1 (an assumption for other cells).
O2_KM_DEFAULT = 7.39e-3
O2_KM_SOURCE = "hepatocyte value, Sci Rep 2017;7:42113 Table 1 (an assumption for other cells)"
#: Critical floor oxygen of cells without their own [mol/m^3]: about 1 % O2 in the gas.
O2_CRITICAL_DEFAULT = 0.01
O2_CRITICAL_SOURCE = (
    "assumption: about 1 % O2 in the gas (7 mmHg), the usual hypoxia condition of cell culture "
    "(common practice, from memory)"
)


@dataclass(frozen=True)
class Culture:
    """What grows in the chip and what it needs.

    Attributes
    ----------
    cell_type : str or None
        Name of the cell type (a row of the cell-type table), or None.
    cells : bool
        Whether the design declares cells (a ``cell_type`` or an ``o2_consumption``): only
        then is there an oxygen check.
    window : ShearWindow or None
        Floor wall-shear window [Pa] with its source; None when the design names neither a cell
        type nor a window (then there is no shear check).
    seeded : str
        "bed" or "all": the generations whose floor shear is checked against the window.
    cell_density : float
        Cells per floor area [1/m^2].
    cell_density_source : str
        "design file" or the assumption used.
    o2_consumption : float
        Oxygen uptake per cell [mol/s] (the cell type's row of the table, or the design's
        value; unused when ``cells`` is False).
    o2_consumption_source : str
        Citation of the uptake.
    o2_inlet : float or None
        Oxygen concentration of the medium at the supply [mol/m^3]; None: in equilibrium with
        ``o2_ambient`` at the fluid temperature.
    o2_diffusivity : float
        Oxygen diffusivity in the medium [m^2/s].
    o2_km : float
        Michaelis-Menten constant of the cells' oxygen uptake [mol/m^3].
    o2_km_source : str
    o2_ambient : float
        Oxygen partial pressure of the incubator gas [Pa].
    o2_ambient_source : str
    o2_critical : float
        Floor oxygen below which the cells count as hypoxic [mol/m^3].
    o2_critical_source : str
    residence_time : float or None
        Target bed residence time [s], if the design sets one here.
    outside_window_limit : float
        Share of the seeded floor that may lie outside the shear window in the 2D field
        before the check warns [1] (:func:`chipflow.checks.culture.check_floor_outside`).
    outside_window_source : str
        "chipflow default" or the design file.
    """

    cell_type: str | None = None
    cells: bool = False
    window: ShearWindow | None = None
    seeded: str = "bed"
    cell_density: float = CELL_DENSITY_DEFAULT
    cell_density_source: str = "assumption: 1e5 cells/cm^2"
    o2_consumption: float = DEFAULT_O2_CONSUMPTION
    o2_consumption_source: str = DEFAULT_O2_SOURCE
    o2_inlet: float | None = None
    o2_diffusivity: float = O2_DIFFUSIVITY_37C
    residence_time: float | None = None
    outside_window_limit: float = OUTSIDE_WINDOW_LIMIT
    outside_window_source: str = OUTSIDE_WINDOW_SOURCE
    o2_km: float = O2_KM_DEFAULT
    o2_km_source: str = O2_KM_SOURCE
    o2_ambient: float = dataclasses.field(default_factory=incubator_o2_pressure)
    o2_ambient_source: str = AMBIENT_SOURCE
    o2_critical: float = O2_CRITICAL_DEFAULT
    o2_critical_source: str = O2_CRITICAL_SOURCE


@dataclass(frozen=True)
class Limits:
    """What the chip and the pump can take.

    Attributes
    ----------
    bond_pressure : float
        Burst pressure of the bonded chip [Pa].
    bond_source : str
        "design file" or the cited default.
    safety_factor : float
        The inlet pressure passes up to ``bond_pressure / safety_factor`` [-].
    pump_pressure : float or None
        Rated pressure of the pump [Pa]; None when not given (no pump check).
    """

    bond_pressure: float = BOND_LIMIT_DEFAULT
    bond_source: str = BOND_SOURCE
    safety_factor: float = BOND_SAFETY_FACTOR
    pump_pressure: float | None = None


def read_culture(top: Table) -> Culture:
    """Read ``[culture]`` from the top-level table (defaults, and no shear window, when absent)."""
    table = top.table("culture", None)
    if table is None:
        return Culture()
    table.only(CULTURE_KEYS)
    name = table.string("cell_type", None)
    cell = cell_type(name, where=table.where("cell_type")) if name is not None else None
    low = table.quantity("shear_min", "pressure", None)
    high = table.quantity("shear_max", "pressure", None)
    window = None
    if cell is not None:
        window = cell.window()
        if low is not None or high is not None:
            low = window.min if low is None else low
            high = window.max if high is None else high
            window = ShearWindow(
                cell.name,
                low,
                high,
                f"{top.file_label} (overrides: {window.source})",
                window.oscillatory,
            )
    elif low is not None or high is not None:
        # one bound alone is a one-sided window
        low = 0.0 if low is None else low
        high = math.inf if high is None else high
        window = ShearWindow("design window", low, high, top.file_label)
    if window is not None and not window.min < window.max:
        raise table.error("shear_max", f"must be greater than shear_min ({window.min:g} Pa)")

    density = table.quantity("cell_density", "areal_density", None)
    uptake = table.quantity("o2_consumption", "molar_rate", None)
    if uptake is not None:
        uptake_source = top.file_label
    elif cell is not None and cell.o2_consumption is not None:
        uptake, uptake_source = cell.o2_consumption, cell.o2_source
    elif density is not None:
        raise table.error(
            "o2_consumption",
            "cell_density is given without a cell_type: give the cells' oxygen uptake "
            "(o2_consumption, e.g. '4.8e-17 mol/s') or a cell_type",
        )
    else:
        uptake_source = ""
    inlet = table.quantity("o2_inlet", "concentration", None)
    outside = table.quantity("outside_window_limit", "dimensionless", None, positive=False)
    if outside is not None and not 0.0 <= outside <= 1.0:
        raise table.error(
            "outside_window_limit",
            "must be a share of the floor from 0 % to 100 %, got "
            f"{table.data['outside_window_limit']!r}",
        )
    inlet = table.quantity("o2_inlet", "concentration", None, positive=False)
    km = table.quantity("o2_km", "concentration", None, positive=False)
    ambient = table.quantity("o2_ambient", "pressure", None, positive=False, maximum=1e6)
    critical = table.quantity("o2_critical", "concentration", None)
    if critical is not None:
        critical_source = top.file_label
    elif cell is not None and cell.o2_critical is not None:
        critical, critical_source = cell.o2_critical, cell.o2_critical_source
    else:
        critical, critical_source = O2_CRITICAL_DEFAULT, O2_CRITICAL_SOURCE
    return Culture(
        cell_type=name,
        cells=uptake is not None,
        window=window,
        seeded=table.choice("seeded", SEEDED, "bed"),
        cell_density=CELL_DENSITY_DEFAULT if density is None else density,
        cell_density_source=("assumption: 1e5 cells/cm^2" if density is None else top.file_label),
        o2_consumption=DEFAULT_O2_CONSUMPTION if uptake is None else uptake,
        o2_consumption_source=uptake_source,
        o2_inlet=inlet,
        o2_diffusivity=table.quantity("o2_diffusivity", "diffusivity", O2_DIFFUSIVITY_37C),
        residence_time=table.quantity("residence_time", "time", None),
        outside_window_limit=OUTSIDE_WINDOW_LIMIT if outside is None else outside,
        outside_window_source=OUTSIDE_WINDOW_SOURCE if outside is None else top.file_label,
        o2_km=O2_KM_DEFAULT if km is None else km,
        o2_km_source=O2_KM_SOURCE if km is None else top.file_label,
        o2_ambient=incubator_o2_pressure() if ambient is None else ambient,
        o2_ambient_source=AMBIENT_SOURCE if ambient is None else top.file_label,
        o2_critical=critical,
        o2_critical_source=critical_source,
    )


def read_limits(top: Table) -> Limits:
    """Read ``[limits]`` from the top-level table (cited defaults when absent)."""
    table = top.table("limits", None)
    if table is None:
        return Limits()
    table.only(LIMITS_KEYS)
    bond = table.quantity("bond_pressure", "pressure", None)
    return Limits(
        bond_pressure=BOND_LIMIT_DEFAULT if bond is None else bond,
        bond_source=BOND_SOURCE if bond is None else top.file_label,
        safety_factor=table.number("safety_factor", BOND_SAFETY_FACTOR, minimum=1.0),
        pump_pressure=table.quantity("pump_pressure", "pressure", None),
    )
