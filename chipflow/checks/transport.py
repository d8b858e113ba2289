"""Transport in the culture bed: residence time, oxygen diffusion and oxygen supply.

Defaults and thresholds
-----------------------
- Oxygen diffusivity in water at 37 C, 3e-9 m^2/s, and air-equilibrated oxygen concentration,
  0.2 mol/m^3 (Sci Rep 2017;7:42113, Table 1).
- Diffusion time across a depth ``h``: ``h^2 / (2 D)`` (Einstein 1905, one dimension).
- Cell areal density 1e5 cells/cm^2 (= 1e9 cells/m^2): an assumption for a confluent
  monolayer; give the design's own value.
- The thresholds are chipflow's own: residence time within 10 % of its target passes and within
  25 % warns; diffusion time up to half the residence time passes and up to the whole of it
  warns; oxygen use up to 50 % of the inlet oxygen passes and up to 100 % warns (beyond 100 %
  the flow cannot deliver what the cells consume).

Examples
--------
>>> r = check_oxygen_supply(flow=5e-9 / 60, floor_area=1e-5, cell_density=1e9,
...                         consumption=4.8e-17)
>>> r.status, round(r.value, 4)
('pass', 0.0288)
"""

from __future__ import annotations

from chipflow.checks.result import CheckResult, grade_upper

__all__ = [
    "O2_DIFFUSIVITY_37C",
    "O2_INLET_CONCENTRATION",
    "CELL_DENSITY_DEFAULT",
    "O2_SOURCE",
    "RESIDENCE_TOLERANCE",
    "DIFFUSION_WARN_RATIO",
    "O2_WARN_FRACTION",
    "O2_FAIL_FRACTION",
    "diffusion_time",
    "oxygen_use_fraction",
    "check_residence_time",
    "check_oxygen_diffusion",
    "check_oxygen_supply",
]

#: Oxygen diffusivity in water at 37 C [m^2/s] (Sci Rep 2017;7:42113, Table 1).
O2_DIFFUSIVITY_37C = 3e-9
#: Oxygen in air-equilibrated medium at 37 C [mol/m^3] (Sci Rep 2017;7:42113, Table 1).
O2_INLET_CONCENTRATION = 0.2
#: Cells per floor area when the design gives none [1/m^2] (1e5 cells/cm^2; an assumption).
CELL_DENSITY_DEFAULT = 1e9
O2_SOURCE = "Sci Rep 2017;7:42113, Table 1"
#: (pass, warn) relative deviation of the bed residence time from its target (chipflow's own).
RESIDENCE_TOLERANCE = (0.10, 0.25)
#: Diffusion time over residence time above which the diffusion check warns (chipflow's own).
DIFFUSION_WARN_RATIO = 0.5
#: Fractions of inlet oxygen used above which the supply check warns / fails (chipflow's own).
O2_WARN_FRACTION = 0.5
O2_FAIL_FRACTION = 1.0


def diffusion_time(depth: float, diffusivity: float = O2_DIFFUSIVITY_37C) -> float:
    """Time to diffuse across a depth, ``h^2 / (2 D)`` [s] (Einstein 1905, one dimension).

    Parameters
    ----------
    depth : float
        Channel depth [m].
    diffusivity : float
        Diffusion coefficient [m^2/s].

    >>> round(diffusion_time(50e-6), 4)   # 50 um of medium, oxygen at 37 C
    0.4167
    """
    return depth * depth / (2.0 * diffusivity)


def oxygen_use_fraction(
    flow: float,
    floor_area: float,
    cell_density: float = CELL_DENSITY_DEFAULT,
    consumption: float = 4.8e-17,
    inlet_concentration: float = O2_INLET_CONCENTRATION,
) -> float:
    """Fraction of the inlet oxygen the cells on the floor consume [-].

    ``cell_density * floor_area * consumption / (flow * inlet_concentration)``.

    Parameters
    ----------
    flow : float
        Flow through the bed [m^3/s].
    floor_area : float
        Floor area covered by cells [m^2].
    cell_density : float
        Cells per floor area [1/m^2].
    consumption : float
        Oxygen uptake per cell [mol/s].
    inlet_concentration : float
        Oxygen concentration of the inflowing medium [mol/m^3].
    """
    delivered = flow * inlet_concentration
    consumed = cell_density * floor_area * consumption
    if delivered <= 0.0:
        return float("inf") if consumed > 0.0 else 0.0
    return consumed / delivered


def check_residence_time(
    residence_time: float,
    target: float,
    *,
    tolerance: tuple[float, float] = RESIDENCE_TOLERANCE,
    source: str = "design target",
) -> CheckResult:
    """Bed residence time [s] against its target [s]: pass within ``tolerance[0]`` (relative),
    warn within ``tolerance[1]``, fail beyond.

    >>> check_residence_time(2.2, 2.0).status, check_residence_time(2.6, 2.0).status
    ('pass', 'fail')
    """
    deviation = abs(residence_time - target) / target
    status = grade_upper(deviation, tolerance[0] * (1 + 1e-12), tolerance[1] * (1 + 1e-12))
    message = (
        f"bed residence time {residence_time:.3g} s is {deviation:.1%} from its target "
        f"{target:.3g} s (pass within {tolerance[0]:.0%}, warn within {tolerance[1]:.0%})"
    )
    if status != "pass":
        message += "; adjust the bed length or the flow"
    return CheckResult("bed residence time", status, residence_time, target, "s", source, message)


def check_oxygen_diffusion(
    depth: float, residence_time: float, diffusivity: float = O2_DIFFUSIVITY_37C
) -> CheckResult:
    """Oxygen diffusion time across the bed depth against the bed residence time.

    Passes when ``h^2 / (2 D)`` is at most half the residence time, warns up to the whole of
    it, fails beyond (thresholds are chipflow's own).

    Parameters
    ----------
    depth : float
        Bed channel depth [m].
    residence_time : float
        Bed residence time [s].
    diffusivity : float
        Oxygen diffusivity [m^2/s].
    """
    t_diff = diffusion_time(depth, diffusivity)
    ratio = t_diff / residence_time
    status = grade_upper(ratio, DIFFUSION_WARN_RATIO, 1.0)
    message = (
        f"oxygen crosses the {depth * 1e6:.3g} um depth in about {t_diff:.3g} s "
        f"({ratio:.2g} of the {residence_time:.3g} s residence time)"
    )
    if status != "pass":
        message += "; a shallower bed or a longer residence time lets it reach the floor"
    source = f"h^2/(2D), Einstein 1905; D = {diffusivity:.3g} m^2/s"
    if diffusivity == O2_DIFFUSIVITY_37C:
        source += f" ({O2_SOURCE})"
    return CheckResult(
        "oxygen diffusion across the bed depth",
        status,
        t_diff,
        residence_time,
        "s",
        source,
        message,
    )


def check_oxygen_supply(
    flow: float,
    floor_area: float,
    cell_density: float = CELL_DENSITY_DEFAULT,
    consumption: float = 4.8e-17,
    inlet_concentration: float = O2_INLET_CONCENTRATION,
    *,
    consumption_source: str = O2_SOURCE,
    density_source: str = "assumption: 1e5 cells/cm^2",
) -> CheckResult:
    """Oxygen delivered by the flow against the uptake of the cells on the bed floor.

    The value is the fraction of inlet oxygen used (see :func:`oxygen_use_fraction`); passes up
    to 50 %, warns up to 100 %, fails beyond (chipflow's own thresholds). Parameters as in
    :func:`oxygen_use_fraction`.
    """
    fraction = oxygen_use_fraction(flow, floor_area, cell_density, consumption, inlet_concentration)
    status = grade_upper(fraction, O2_WARN_FRACTION, O2_FAIL_FRACTION)
    cells = cell_density * floor_area
    message = (
        f"{cells:.3g} cells on {floor_area * 1e6:.3g} mm^2 use {fraction:.1%} of the oxygen "
        f"the flow brings in ({flow * 6e10:.3g} uL/min at {inlet_concentration:.3g} mol/m^3)"
    )
    if status == "warn":
        message += "; cells downstream may see low oxygen: raise the flow"
    elif status == "fail":
        message += "; the flow cannot supply the cells: raise the flow or seed fewer cells"
    source = (
        f"uptake {consumption:.3g} mol/cell/s ({consumption_source}); "
        f"density {cell_density * 1e-4:.3g} cells/cm^2 ({density_source}); "
        f"inlet oxygen {inlet_concentration:.3g} mol/m^3; limits: chipflow's own"
    )
    return CheckResult(
        "oxygen used in the bed", status, fraction, O2_WARN_FRACTION, "1", source, message
    )
