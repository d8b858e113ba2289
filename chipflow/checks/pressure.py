"""Inlet pressure against what the bonded chip and the pump can take.

Defaults
--------
- A PDMS-glass plasma bond holds roughly 200-350 kPa (Duffy et al., Anal Chem 1998; from
  memory, medium confidence). chipflow takes the low end, 200 kPa, as the bond limit.
- Safety factor 2 (chipflow's own): the inlet pressure passes up to half the bond limit, warns
  up to the bond limit and fails beyond. Bonds vary from chip to chip and weaken with age,
  poor plasma treatment and cell culture; measure your own chips when it matters.
- The pump: passes up to 80 % of its rated pressure, warns up to 100 %, fails beyond (chipflow's
  own margin: syringe pumps stall and pressure controllers saturate near their rating).

The pressures are gauge pressures (above the outlet's atmosphere) [Pa].

Examples
--------
>>> check_bond_pressure(90e3).status, check_bond_pressure(150e3).status
('pass', 'warn')
"""

from __future__ import annotations

from chipflow.checks.result import CheckResult, grade_upper
from chipflow.display import quantity

__all__ = [
    "BOND_LIMIT_DEFAULT",
    "BOND_SAFETY_FACTOR",
    "BOND_SOURCE",
    "PUMP_MARGIN",
    "check_bond_pressure",
    "check_pump_pressure",
]

#: Burst pressure of a PDMS-glass plasma bond, low end of 200-350 kPa [Pa].
BOND_LIMIT_DEFAULT = 200e3
#: Divide the bond limit by this to get the pressure that passes (chipflow's own).
BOND_SAFETY_FACTOR = 2.0
BOND_SOURCE = (
    "PDMS-glass plasma bond about 200-350 kPa (Duffy et al., Anal Chem 1998; from memory, "
    "medium confidence); safety factor 2 is chipflow's own"
)
#: Share of the pump's rated pressure that passes (chipflow's own).
PUMP_MARGIN = 0.8


def check_bond_pressure(
    inlet_pressure: float,
    bond_limit: float = BOND_LIMIT_DEFAULT,
    *,
    safety_factor: float = BOND_SAFETY_FACTOR,
    source: str = BOND_SOURCE,
) -> CheckResult:
    """Inlet gauge pressure [Pa] against the bond limit [Pa] with a safety factor.

    Passes up to ``bond_limit / safety_factor``, warns up to ``bond_limit``, fails beyond.
    """
    allowed = bond_limit / safety_factor
    status = grade_upper(inlet_pressure, allowed, bond_limit)
    message = (
        f"inlet pressure {quantity(inlet_pressure, 'pressure')}; the bond holds about "
        f"{quantity(bond_limit, 'pressure')}, {quantity(allowed, 'pressure')} with a safety "
        f"factor of {safety_factor:g}"
    )
    if status == "warn":
        message += "; inside the safety margin: lower the flow or widen the narrowest channels"
    elif status == "fail":
        message += "; the chip may delaminate or burst: lower the flow or widen the channels"
    return CheckResult(
        "inlet pressure vs bond", status, inlet_pressure, allowed, "Pa", source, message
    )


def check_pump_pressure(
    inlet_pressure: float,
    pump_limit: float,
    *,
    margin: float = PUMP_MARGIN,
    source: str = "pump rating from the design file; 80 % margin is chipflow's own",
) -> CheckResult:
    """Inlet gauge pressure [Pa] against the pump's rated pressure [Pa].

    Passes up to ``margin * pump_limit``, warns up to ``pump_limit``, fails beyond.

    >>> check_pump_pressure(85e3, 100e3).status
    'warn'
    """
    allowed = margin * pump_limit
    status = grade_upper(inlet_pressure, allowed, pump_limit)
    message = (
        f"inlet pressure {quantity(inlet_pressure, 'pressure')} against the pump's "
        f"{quantity(pump_limit, 'pressure')} rating"
    )
    if status == "warn":
        message += f" (above {margin:.0%} of it: the pump works near its limit)"
    elif status == "fail":
        message += ": the pump cannot drive this flow"
    return CheckResult(
        "inlet pressure vs pump", status, inlet_pressure, allowed, "Pa", source, message
    )
