"""What the design file says about time-varying operation (frozen dataclasses, SI units)."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

from chipflow.operation.waveform import Waveform

__all__ = ["Walls", "TubingWall", "Pulsatile", "Rocker", "Damper", "OperationSpec", "DAY"]

#: One day [s]: the usual interval between medium changes (common practice in cell culture).
DAY = 86400.0


@dataclass(frozen=True)
class Walls:
    """The soft roof of the channels.

    Attributes
    ----------
    material : str
        "PDMS" (preset modulus) or "custom".
    modulus : float
        Young's modulus [Pa].
    poisson_ratio : float
        [1].
    roof_thickness : float
        Thickness of the elastomer above the channels [m].
    source : str
        Where the modulus comes from.
    """

    material: str
    modulus: float
    poisson_ratio: float
    roof_thickness: float
    source: str


@dataclass(frozen=True)
class TubingWall:
    """Elastic supply tubing: outer diameter [m], Young's modulus [Pa], Poisson's ratio [1]."""

    outer_diameter: float
    modulus: float
    poisson_ratio: float = 0.5


@dataclass(frozen=True)
class Pulsatile:
    """A periodic supply at a port: ``kind`` "flow" or "pressure", and its waveform."""

    kind: str
    waveform: Waveform
    label: str


@dataclass(frozen=True)
class Rocker:
    """A rocking platform with two equal reservoirs.

    Attributes
    ----------
    tilt_angle : float
        Largest tilt [rad].
    period : float
        One full rocking cycle [s].
    spacing : float
        Horizontal distance between the two reservoirs [m].
    area : float
        Cross-section of each reservoir [m^2].
    head : float
        Liquid height in each reservoir at rest [m].
    """

    tilt_angle: float
    period: float
    spacing: float
    area: float
    head: float


@dataclass(frozen=True)
class Damper:
    """A pulsation damper: trapped air or a lumped compliance at one node, or a target that
    chipflow sizes the trapped air for.

    Exactly one of ``air_volume``, ``compliance`` and ``target_pulsation`` is set.

    Attributes
    ----------
    node : str
        Where it sits (a tree design: the chip's inlet port, "inlet").
    air_volume : float or None
        Trapped air at the mean pressure [m^3], isothermal (``C = V / p_abs``).
    compliance : float or None
        A lumped compliance [m^3/Pa].
    target_pulsation : float or None
        The floor-shear pulsation (amplitude over mean at the fundamental) the seeded levels
        may keep at most [1]: chipflow sizes the smallest air volume that gives it.
    where : str
        The design-file key it came from, for messages.
    """

    node: str
    air_volume: float | None = None
    compliance: float | None = None
    target_pulsation: float | None = None
    where: str = "supply.damper"


@dataclass(frozen=True)
class OperationSpec:
    """Everything time-varying about a design; empty means steady operation on rigid walls.

    Port keys are node names; tree designs use "inlet" and "outlet" for the two supply sides
    (the build maps them onto the tubing ends).

    Attributes
    ----------
    walls : Walls or None
        Soft channel roofs (None: rigid walls).
    tubing : TubingWall or None
        Elastic supply tubing (None: rigid tubing).
    pulsatile : mapping
        Port to :class:`Pulsatile`.
    compliances : mapping
        Node to a lumped compliance [m^3/Pa].
    air_volumes : mapping
        Node to trapped air [m^3] (isothermal).
    drain_areas : mapping
        Reservoir port to its cross-section [m^2]: these reservoirs drain.
    rocker : Rocker or None
    refill_interval : float
        Time between refills or re-levelling of draining reservoirs [s].
    damper : Damper or None
        A pulsation damper (its node is not renamed by :meth:`renamed`).
    """

    walls: Walls | None = None
    tubing: TubingWall | None = None
    pulsatile: Mapping[str, Pulsatile] = field(default_factory=dict)
    compliances: Mapping[str, float] = field(default_factory=dict)
    air_volumes: Mapping[str, float] = field(default_factory=dict)
    drain_areas: Mapping[str, float] = field(default_factory=dict)
    rocker: Rocker | None = None
    refill_interval: float = DAY
    damper: Damper | None = None

    @property
    def mode(self) -> str:
        """ "pulsatile", "draining", "rocker" or "steady"."""
        if self.rocker is not None:
            return "rocker"
        if self.pulsatile:
            return "pulsatile"
        if self.drain_areas:
            return "draining"
        return "steady"

    def inlet_flow(self, default: float) -> float:
        """Mean flow of a pulsating flow supply at "inlet" [m^3/s], else ``default``."""
        pulse = self.pulsatile.get("inlet")
        return pulse.waveform.mean if pulse is not None and pulse.kind == "flow" else default

    def renamed(self, names: Mapping[str, str]) -> OperationSpec:
        """The same with port keys mapped through ``names`` (others kept)."""
        from dataclasses import replace

        def m(d):
            return {names.get(k, k): v for k, v in d.items()}

        return replace(
            self,
            pulsatile=m(self.pulsatile),
            compliances=m(self.compliances),
            air_volumes=m(self.air_volumes),
            drain_areas=m(self.drain_areas),
        )
