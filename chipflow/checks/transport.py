"""Transport in the culture bed: residence time, floor oxygen, hypoxic share, dosing delay.

The oxygen checks of a build grade what the 1D transport of :mod:`chipflow.transport` finds on
the seeded floor: :func:`check_hypoxic_share` (the share of the seeded floor below the cells'
critical oxygen), :func:`check_floor_oxygen` (the lowest floor oxygen against that value) and
:func:`check_dosing` (the time a step change at the pump takes to reach the bed, as
information). :func:`check_oxygen_diffusion` and :func:`check_oxygen_supply` are the lumped
estimates of earlier versions (diffusion time across the depth against the residence time; the
share of the inlet oxygen the cells would use at the inlet concentration); builds report their
numbers as context (``transport.context`` in results.json) but no longer grade them: a bed can
pass both while its downstream floor is hypoxic.

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
- Hypoxic share (chipflow's own limits): none of the seeded floor below the critical oxygen
  passes; any warns; more than 10 % fails. A tenth of the cells short of oxygen is a zone large
  enough to change what the whole culture reports (viability, metabolism, gene expression), and
  the model's floor oxygen is uncertain by more than its 2 % numerical error (the uptake per
  cell alone varies several-fold between cultures).
- Lowest floor oxygen: passes at or above twice the critical value, warns below (the same
  uncertainty of the uptake; below the critical value the hypoxic share says how much).

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
    "check_hypoxic_share",
    "check_floor_oxygen",
    "check_dosing",
    "HYPOXIC_FAIL_SHARE",
    "FLOOR_O2_MARGIN",
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
#: Share of the seeded floor below the critical oxygen above which the check fails (ours).
HYPOXIC_FAIL_SHARE = 0.10
#: The lowest floor oxygen passes at or above this multiple of the critical value (ours).
FLOOR_O2_MARGIN = 2.0


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


def check_hypoxic_share(
    share: float, critical: float, critical_source: str, lowest_where: str = ""
) -> CheckResult:
    """Share of the seeded floor whose oxygen lies below the cells' critical value.

    Passes when none does, warns when some does, fails above :data:`HYPOXIC_FAIL_SHARE`
    (chipflow's own limits, see the module notes).

    Parameters
    ----------
    share : float
        Hypoxic share of the seeded floor [-].
    critical : float
        The cells' critical floor oxygen [mol/m^3].
    critical_source : str
        Where the critical value comes from.
    lowest_where : str, optional
        Where the floor oxygen is lowest, for the message.

    >>> check_hypoxic_share(0.0, 0.02, "x").status, check_hypoxic_share(0.2, 0.02, "x").status
    ('pass', 'fail')
    """
    status = grade_upper(share, 0.0, HYPOXIC_FAIL_SHARE)
    message = (
        f"{share:.1%} of the seeded floor lies below the critical oxygen {critical:.3g} mol/m^3"
    )
    if status != "pass":
        message += (
            f"{' (lowest ' + lowest_where + ')' if lowest_where else ''}: raise the flow, "
            "shorten the bed, seed fewer cells or let oxygen in through the roof (a shallower "
            "bed helps where the Damkohler number is above about 0.1)"
        )
    source = (
        f"critical oxygen: {critical_source}; limits: chipflow's own (any hypoxic floor warns, "
        f"more than {HYPOXIC_FAIL_SHARE:.0%} fails)"
    )
    return CheckResult(
        "hypoxic share of the seeded floor", status, share, HYPOXIC_FAIL_SHARE, "1", source, message
    )


def check_floor_oxygen(
    lowest: float, critical: float, critical_source: str, where: str = ""
) -> CheckResult:
    """The lowest floor oxygen of the seeded floor against the cells' critical value.

    Passes at or above :data:`FLOOR_O2_MARGIN` times the critical value and warns below (the
    hypoxic share check grades how much of the floor lies below the critical value itself).

    >>> check_floor_oxygen(0.15, 0.02, "x").status, check_floor_oxygen(0.03, 0.02, "x").status
    ('pass', 'warn')
    """
    limit = FLOOR_O2_MARGIN * critical
    status = "pass" if lowest >= limit else "warn"
    place = f" ({where})" if where else ""
    message = (
        f"the floor oxygen falls to {lowest:.3g} mol/m^3{place}, "
        f"{lowest / critical:.2g} times the critical {critical:.3g} mol/m^3"
    )
    if status != "pass":
        message += "; the cells' uptake varies several-fold: measure it, or give them more oxygen"
    source = (
        f"critical oxygen: {critical_source}; pass at {FLOOR_O2_MARGIN:g}x or more (chipflow's "
        "own margin)"
    )
    return CheckResult("lowest floor oxygen", status, lowest, limit, "mol/m^3", source, message)


def check_dosing(t50: float, t90: float, tubing_t50: float, where: str = "") -> CheckResult:
    """The dosing delay, as information (always passes): how long a step change at the pump
    takes to bring the slowest bed channel's outlet to 50 % and 90 % of the new concentration,
    and how much of it the supply tubing takes.

    >>> check_dosing(300.0, 340.0, 290.0).message.split(";")[0]
    'a step change at the pump reaches 50 % at the slowest bed outlet after 300 s, 90 % after 340 s'
    """
    share = tubing_t50 / t50 if t50 > 0 else 0.0
    place = f" ({where})" if where else ""
    message = (
        f"a step change at the pump reaches 50 % at the slowest bed outlet after {t50:.3g} s, "
        f"90 % after {t90:.3g} s{place}; the supply tubing takes {tubing_t50:.3g} s "
        f"({share:.0%}) of the 50 % time"
    )
    source = (
        "Taylor-Aris dispersion (Taylor 1953; Aris 1956) along the path, inverse Gaussian "
        "arrival; information only"
    )
    return CheckResult("dosing delay to the bed", "pass", t90, None, "s", source, message)
