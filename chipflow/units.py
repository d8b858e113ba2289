"""Units at the boundary: one pint registry, text in, SI floats out.

Everything inside chipflow is a plain SI float (or a numpy array of them). Quantities typed by
a person - in a design file, on the command line - pass through :func:`to_si` exactly once, and
numbers shown to a person pass through :func:`from_si`.

Examples
--------
>>> to_si("50 um", "length")
5e-05
>>> round(to_si("5 uL/min", "flow"), 15)
8.3e-11
>>> to_si("37 degC", "temperature")
310.15
>>> to_si("1.2 dyn/cm^2", "pressure")
0.12
>>> from_si(5e-05, "um")
50.0
"""

from __future__ import annotations

import functools
import math
import os
import re
from dataclasses import dataclass
from numbers import Real
from pathlib import Path

import numpy as np
import pint

from chipflow.display import lab_number  # the formatting rules live in chipflow.display
from chipflow.errors import ArgumentError, UnitError

__all__ = [
    "ureg",
    "KINDS",
    "Kind",
    "to_si",
    "from_si",
    "format_quantity",
    "RESULT_UNITS",
    "units_of",
    "tidy",
    "lab_number",
]


def _cache_folder() -> Path | None:
    """Where pint keeps its parsed unit definitions between runs (None: no cache).

    ``CHIPFLOW_UNIT_CACHE`` names a folder, or ``off`` to parse the definitions every time;
    by default the user's cache folder. The folder name carries pint's version, so an upgrade
    starts afresh.
    """
    setting = os.environ.get("CHIPFLOW_UNIT_CACHE", "")
    if setting.lower() in ("off", "0", "no", "false"):
        return None
    if setting:
        return Path(setting)
    import platformdirs  # a dependency of pint

    return platformdirs.user_cache_path("chipflow", appauthor=False) / f"pint-{pint.__version__}"


def _registry() -> pint.UnitRegistry:
    """The registry, built from pint's cached definitions when a usable cache exists.

    Parsing pint's definition file is most of the cost of a registry; the parsed form is kept
    on disk (see :func:`_cache_folder`). Any trouble with the cache (a read-only home, a file
    half-written by a concurrent run) falls back to parsing, so the registry is always the same.
    """
    folder = _cache_folder()
    if folder is not None:
        try:
            return pint.UnitRegistry(autoconvert_offset_to_baseunit=True, cache_folder=folder)
        except Exception:  # noqa: BLE001 - the cache is an optimisation only
            pass
    return pint.UnitRegistry(autoconvert_offset_to_baseunit=True)


#: The one unit registry of chipflow. Offset temperatures ("37 degC") convert on their own.
ureg = _registry()
ureg.define("cell = [] = cells")
# gas permeability of membranes: 1e-10 cm^3(STP) cm / (cm^2 s cmHg), 22414 cm^3/mol at STP
ureg.define(
    "barrer = 1e-10 * (1e-6 / 22.414e-3) * 1e-2 / (1e-4 * 1333.22) mol / (m * s * Pa) = Barrer"
)


@dataclass(frozen=True)
class Kind:
    """A kind of physical quantity that chipflow accepts from people.

    Attributes
    ----------
    label : str
        What the quantity is called in messages ("length", "flow rate", ...).
    si_unit : str
        The SI unit values are converted to.
    example : str
        A valid input shown in error messages.
    """

    label: str
    si_unit: str
    example: str

    @property
    def dimensionality(self) -> pint.util.UnitsContainer:
        return ureg.Unit(self.si_unit).dimensionality


KINDS: dict[str, Kind] = {
    "length": Kind("length", "m", "50 um"),
    "area": Kind("area", "m**2", "0.01 mm^2"),
    "flow": Kind("flow rate", "m**3/s", "5 uL/min"),
    "pressure": Kind("pressure", "Pa", "3 kPa"),
    "viscosity": Kind("dynamic viscosity", "Pa*s", "0.9 mPa*s"),
    "density": Kind("density", "kg/m**3", "1000 kg/m^3"),
    "temperature": Kind("temperature", "K", "37 degC"),
    "time": Kind("time", "s", "2 s"),
    "velocity": Kind("velocity", "m/s", "1 mm/s"),
    "diffusivity": Kind("diffusivity", "m**2/s", "3e-9 m^2/s"),
    "concentration": Kind("molar concentration", "mol/m**3", "0.2 mol/m^3"),
    "molar_rate": Kind("molar rate per cell", "mol/s", "4.8e-17 mol/s"),
    "areal_density": Kind("cells per area", "1/m**2", "1e5 cell/cm^2"),
    "frequency": Kind("frequency", "1/s", "1 Hz"),
    "volume": Kind("volume", "m**3", "2 uL"),
    "angle": Kind("angle", "radian", "10 deg"),
    "compliance": Kind("hydraulic compliance", "m**3/Pa", "1e-15 m^3/Pa"),
    "permeability": Kind("gas permeability", "mol/(m*s*Pa)", "800 barrer"),
    "dimensionless": Kind("plain number", "dimensionless", "0.5"),
}

_NUMBER_UNIT = re.compile(r"([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*)", re.DOTALL)

#: Longest quantity text accepted [characters]: far above any real one ("1.2e-3 uL/min/cm^2").
MAX_QUANTITY_LENGTH = 100
#: Most unit factors in one unit ("mPa*s" has two).
MAX_UNIT_FACTORS = 8
#: Deepest parentheses in one unit ("uL/(min*cm^2)" has depth 1).
MAX_UNIT_NESTING = 2
#: Largest and smallest non-zero SI magnitudes accepted: beyond them no quantity is physical.
SI_MAGNITUDE_RANGE = (1e-60, 1e60)

# One token of a unit expression: a unit name, an exponent operator with its integer, a
# product or quotient sign, a parenthesis, or white space (a product, as in "mPa s").
_UNIT_TOKEN = re.compile(
    r"(?P<name>(?:[^\W\d]|[\u00b0%])\w*)|(?P<power>(?:\*\*|\^)\s*[-+]?\d+)|(?P<one>1(?![\d.eE]))"
    r"|(?P<op>[*/])|(?P<open>\()|(?P<close>\))|(?P<space>\s+)"
)


def _unit_problem(unit: str) -> str | None:
    """Why ``unit`` is not a well-formed unit expression (None when it is).

    The grammar is small on purpose (names, integer powers other than zero, ``*``, ``/``, white
    space, balanced parentheses), and the scan is one pass over the text, so that anything
    pint would choke on (stray signs, numbers, zero powers, deep nesting) is refused first.

    >>> _unit_problem("uL/(min*cm^2)") is None, _unit_problem("um;;"), _unit_problem("um**-0")
    (True, "unexpected ';'", 'a power of zero')
    """
    depth = factors = 0
    expect_factor = True  # at the start, after an operator or an opening parenthesis
    pos = 0
    while pos < len(unit):
        m = _UNIT_TOKEN.match(unit, pos)
        if m is None:
            return f"unexpected {unit[pos]!r}"
        pos, kind = m.end(), m.lastgroup
        if kind == "space":
            continue
        if kind in ("name", "one", "open"):
            if kind == "open":
                if not expect_factor:
                    return "'(' without an operator before it"
                depth += 1
                if depth > MAX_UNIT_NESTING:
                    return "parentheses nested too deeply"
                expect_factor = True
                continue
            factors += 1
            if factors > MAX_UNIT_FACTORS:
                return f"more than {MAX_UNIT_FACTORS} unit factors"
            expect_factor = False
        elif kind == "power":
            if expect_factor:
                return "a power without its unit"
            if int(m.group().lstrip("*^ ")) == 0:
                return "a power of zero"
        elif kind == "op":
            if expect_factor:
                return f"{m.group()!r} without a unit before it"
            expect_factor = True
        elif kind == "close":
            if expect_factor or depth == 0:
                return "unbalanced parentheses"
            depth -= 1
    if depth:
        return "unbalanced parentheses"
    if expect_factor and factors:
        return "the unit ends with an operator"
    return None


def _fail(kind: Kind, value: object, where: str, why: str) -> UnitError:
    place = f" at {where}" if where else ""
    return UnitError(
        f"{why}{place}: expected a {kind.label} such as '{kind.example}', got {value!r}"
    )


def to_si(value: object, kind: str, *, where: str = "") -> float:
    """Convert a quantity given by a person to an SI float.

    Parameters
    ----------
    value : str, pint.Quantity or number
        Text such as ``"50 um"`` or ``"5 uL/min"``, a pint quantity of the registry, or a bare
        number. A bare number is accepted only for the ``"dimensionless"`` kind.
    kind : str
        One of the keys of :data:`KINDS`.
    where : str, optional
        Where the value came from (file and key), quoted in error messages.

    Returns
    -------
    float
        The value in the SI unit of ``kind`` (``KINDS[kind].si_unit``).

    Raises
    ------
    UnitError
        On a missing or wrong unit, text that is not a quantity, NaN or infinity.

    Examples
    --------
    >>> to_si("0.9 mPa*s", "viscosity")
    0.0009
    >>> to_si("3 kPa", "pressure")
    3000.0
    >>> to_si("12 um", "flow")  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    chipflow.errors.UnitError: wrong kind of unit: expected a flow rate ..., got '12 um'
    """
    spec = KINDS.get(kind) if isinstance(kind, str) else None
    if spec is None:
        raise ArgumentError(f"unknown kind of quantity {kind!r}; known: {', '.join(KINDS)}")
    if isinstance(value, bool):
        raise _fail(spec, value, where, "not a quantity")
    if isinstance(value, pint.Quantity):
        quantity = value
    elif isinstance(value, Real):
        if kind != "dimensionless":
            raise _fail(spec, value, where, "missing unit")
        quantity = ureg.Quantity(float(value), "")
    elif isinstance(value, str):
        if len(value) > MAX_QUANTITY_LENGTH:
            shown = f"{value[:40]}... ({len(value)} characters)"
            raise _fail(spec, shown, where, f"too long (at most {MAX_QUANTITY_LENGTH} characters)")
        match = _NUMBER_UNIT.fullmatch(value.strip())
        if match is None:
            raise _fail(spec, value, where, "not a quantity")
        number, unit = match.groups()
        if not unit and kind != "dimensionless":
            raise _fail(spec, value, where, "missing unit")
        problem = _unit_problem(unit)
        if problem is not None:
            raise _fail(spec, value, where, f"malformed unit ({problem})")
        try:
            quantity = ureg.Quantity(float(number), unit.replace("^", "**"))
        except (pint.PintError, ValueError, TypeError, AttributeError, SyntaxError, KeyError):
            raise _fail(spec, value, where, "unknown unit") from None
        except (ArithmeticError, RecursionError):
            raise _fail(spec, value, where, "malformed unit") from None
    else:
        raise _fail(spec, value, where, "not a quantity")
    try:
        with np.errstate(all="ignore"):
            magnitude = float(quantity.to(spec.si_unit).magnitude)
    except pint.DimensionalityError:
        raise _fail(spec, value, where, "wrong kind of unit") from None
    except (pint.PintError, TypeError, ValueError, KeyError, ArithmeticError, RecursionError):
        raise _fail(spec, value, where, "not a quantity") from None
    if not math.isfinite(magnitude):
        raise _fail(spec, value, where, "not a finite number")
    low, high = SI_MAGNITUDE_RANGE
    if magnitude != 0.0 and not low <= abs(magnitude) <= high:
        raise _fail(
            spec, value, where, f"out of any physical range ({magnitude:.3g} {spec.si_unit})"
        )
    return magnitude


@functools.lru_cache(maxsize=64)
def _si_size(unit: str) -> float:
    """How many SI base units one ``unit`` is (offset units such as degC are not allowed)."""
    return float(ureg.Quantity(1.0, unit.replace("^", "**")).to_base_units().magnitude)


def from_si(value: float | np.ndarray, unit: str) -> float | np.ndarray:
    """Express an SI value (scalar or array) in a unit for display.

    Parameters
    ----------
    value : float or numpy.ndarray
        Value in the SI unit of the same dimension as ``unit``.
    unit : str
        Target unit (not an offset unit such as degC), e.g. ``"um"``, ``"uL/min"``,
        ``"kPa"``, ``"mm/s"``.

    Examples
    --------
    >>> from_si(1e-3, "mm/s")
    1.0
    """
    scale = 1.0 / _si_size(unit)
    if isinstance(value, np.ndarray):
        return np.asarray(value, dtype=float) * scale
    return float(value) * scale


def format_quantity(value: float, unit: str, digits: int = 4) -> str:
    """Format an SI value in ``unit`` with ``digits`` significant figures.

    Examples
    --------
    >>> format_quantity(8.333e-11, "uL/min")
    '5 uL/min'
    """
    return f"{lab_number(from_si(value, unit), digits)} {unit}"


#: The SI unit of every named quantity chipflow reports (results.json, channels.csv, the
#: ``--json`` outputs); ``"1"`` marks a plain number.
RESULT_UNITS: dict[str, str] = {
    # fluid and supply
    "viscosity": "Pa*s",
    "density": "kg/m^3",
    "temperature": "K",
    "head": "m",
    "tubing_diameter": "m",
    "inlet_tubing": "m",
    "outlet_tubing": "m",
    # totals
    "inlet_pressure": "Pa",
    "chip_inlet_pressure": "Pa",
    "outlet_pressure": "Pa",
    "total_flow": "m^3/s",
    "total_resistance": "Pa*s/m^3",
    "transit_time": "s",
    "tubing_transit_time": "s",
    "mass_residual": "1",
    "law_residual": "1",
    "condition": "1",
    "residual_tolerance": "1",
    # geometry
    "count": "1",
    "width": "m",
    "margin": "m",
    "mask_width": "m",
    "depth": "m",
    "length": "m",
    "aspect_ratio": "1",
    "total_area": "m^2",
    "hydraulic_diameter": "m",
    "grid": "m",
    "x": "m",
    "y": "m",
    # culture regions (results["regions"])
    "flow_fraction": "1",
    "flow_fraction_target": "1",
    "bed_channels": "1",
    "footprint": "m",
    "bed_extent": "m",
    # a mesh bed (results["mesh"])
    "cross_pitch": "m",
    "cross_width": "m",
    "rows": "1",
    "cross_connections": "1",
    "bed_channel_flow": "m^3/s",
    "cross_flow_max": "m^3/s",
    "cross_flow_max_share": "1",
    "width_factor": "1",
    "flow_narrowed": "m^3/s",
    # flow
    "pressure": "Pa",
    "flow": "m^3/s",
    "flow_per_channel": "m^3/s",
    "flow_total": "m^3/s",
    "hydraulic_resistance": "Pa*s/m^3",
    "pressure_drop": "Pa",
    "pressure_in": "Pa",
    "pressure_out": "Pa",
    "mean_velocity": "m/s",
    "max_velocity": "m/s",
    "wall_shear_floor": "Pa",
    "wall_shear_mean": "Pa",
    "wall_shear_max": "Pa",
    "target_shear": "Pa",
    "shear_target": "Pa",
    "shear_min": "Pa",
    "shear_max": "Pa",
    "reynolds": "1",
    "residence_time": "s",
    "entrance_length": "m",
    # field solve
    "resistance": "Pa*s/m^3",
    "network_resistance": "Pa*s/m^3",
    "p05": "Pa",
    "p50": "Pa",
    "p95": "Pa",
    "field_shear": "Pa",
    "network_shear": "Pa",
    "seeded_area": "m^2",
    "area_outside_window": "1",
    "below_window": "1",
    "above_window": "1",
    "mesh_triangles": "1",
    "max_deviation": "1",
    "field_cv": "1",
    "network_cv": "1",
    "area": "m^2",
    # composed field (results["composed_field"]): counts
    "pieces": "1",
    "kinds": "1",
    "bodies": "1",
    "triangles": "1",
    # chambers (results["chambers"])
    "corner_radius": "m",
    "taper": "m",
    "diameter": "m",
    "pitch": "m",
    "floor_area": "m^2",
    "inside_window": "1",
    "unsupported_span": "m",
    "flow_residual": "1",
    "link_fit_error": "1",
    # time-varying operation (results["operation"] and the per-level rows)
    "pulsation": "1",
    "min": "Pa",
    "max": "Pa",
    "pulsation_relative_to_source": "1",
    "floor_shear_signed_mean": "Pa",
    "floor_shear_peak": "Pa",
    "osi": "1",
    "osi_threshold": "1",
    "wall_shear_floor_rigid": "Pa",
    "resistance_change_one_pass": "1",
    "resistance_change_one_pass_max": "1",
    "roof_to_width": "1",
    "tolerance": "1",
    "iterations": "1",
    "residual": "1",
    "compliance": "m^3/Pa",
    "air_volume": "m^3",
    "damper": "m^3/Pa",
    "resistance_seen": "Pa*s/m^3",
    "damper_time_constant": "s",
    "start_up_time_constant": "s",
    "start_up_time_constant_without": "s",
    "equivalent_tubing": "m",
    "target_pulsation": "1",
    "pulsation_at_target": "1",
    "gauge_pressure": "Pa",
    "flow_mean": "m^3/s",
    "flow_amplitude": "m^3/s",
    "flow_min_over_time": "m^3/s",
    "flow_max_over_time": "m^3/s",
    "wall_shear_floor_amplitude": "Pa",
    "womersley": "1",
    "time_averaged_shear": "Pa",
    "time_in_window": "1",
    "resistance_change": "1",
    "resistance_change_max": "1",
    "frequency": "1/s",
    "source_pulsation": "1",
    "peak_chip_pressure": "Pa",
    "mean_flow": "m^3/s",
    "mean_pressure": "Pa",
    "roofs": "m^3/Pa",
    "tubing_walls": "m^3/Pa",
    "lumped": "m^3/Pa",
    "trapped_air": "m^3/Pa",
    "modulus": "Pa",
    "poisson_ratio": "1",
    "roof_thickness": "m",
    "period": "s",
    "tilt_angle": "rad",
    "reservoir_spacing": "m",
    "reservoir_area": "m^2",
    "time_constant": "s",
    "time_to_level": "s",
    "refill_interval": "s",
    "head_at_refill": "m",
    "lowest_level": "m",
    "peak_flow": "m^3/s",
    "peak_head_difference": "m",
    "time": "s",
    "heads": "m",
    "head_difference": "m",
    # transport (results["transport"], channels.csv)
    "o2_in": "mol/m^3",
    "o2_out": "mol/m^3",
    "o2_floor_min": "mol/m^3",
    "o2_supply": "mol/m^3",
    "o2_inlet": "mol/m^3",
    "o2_chip_inlet": "mol/m^3",
    "o2_equilibrium": "mol/m^3",
    "o2_critical": "mol/m^3",
    "o2_ambient": "Pa",
    "o2_km": "mol/m^3",
    "o2_diffusivity": "m^2/s",
    "o2_uptake": "mol/(m^2*s)",
    "o2_used": "mol/s",
    "o2_delivered": "mol/s",
    "o2_used_fraction": "1",
    "roof_influx": "mol/s",
    "roof_conductance": "m/s",
    "tubing_conductance": "m/s",
    "peclet": "1",
    "damkohler": "1",
    "hypoxic_fraction": "1",
    "diffusion_time": "s",
    "oxygen_use_fraction": "1",
    "stations": "1",
    "bulk": "mol/m^3",
    "floor": "mol/m^3",
    "floor_lowest": "mol/m^3",
    "diffusivity": "m^2/s",
    "inlet_concentration": "mol/m^3",
    "uptake_per_cell": "mol/s",
    "km": "mol/m^3",
    "c_in": "mol/m^3",
    "c_out": "mol/m^3",
    "c_floor_min": "mol/m^3",
    "t50": "s",
    "t90": "s",
    "tubing_t50": "s",
    "tubing_t90": "s",
    "tubing_share": "1",
    "waves": "1",
    "stagnant": "1",
    # per-channel extremes of a level
    "flow_min": "m^3/s",
    "flow_max": "m^3/s",
    "wall_shear_floor_min": "Pa",
    "wall_shear_floor_max": "Pa",
    "residence_time_min": "s",
    "residence_time_max": "s",
}


def units_of(*keys: str) -> dict[str, str]:
    """The SI units of ``keys``, in that order (see :data:`RESULT_UNITS`).

    >>> units_of("flow", "wall_shear_floor")
    {'flow': 'm^3/s', 'wall_shear_floor': 'Pa'}
    """
    return {key: RESULT_UNITS[key] for key in keys}


def tidy(value: float) -> float | None:
    """A float rounded to 12 significant digits for files people read (CSV, JSON).

    Binary floating point leaves noise such as ``4.9999999999999996e-05`` for 50 um; 12
    digits are far finer than any measured input and hide it. Infinity and NaN become None
    (JSON has neither).

    >>> tidy(4.9999999999999996e-05), tidy(0.9999999999999958), tidy(float("inf"))
    (5e-05, 1.0, None)
    """
    if not math.isfinite(value):
        return None
    return float(f"{value:.12g}")
