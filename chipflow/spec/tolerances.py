"""The ``[tolerances]`` section: how far the real chip may stray from the drawn one.

Read by ``chipflow vary`` (:mod:`chipflow.variation`); every key has a command-line option of
the same meaning that overrides it. Without the section every tolerance is zero and a
variation run reproduces the nominal build.

.. code-block:: toml

    [tolerances]
    depth = "10 %"          # per mould level (one spin coat each): a fraction, or a length "5 um"
    width = "2 um"          # exposure bias of the whole mask, added to every channel width
    flow = "2 %"            # accuracy of the inlet supply (its flow, pressure or head)
    viscosity = "5 %"       # the medium's viscosity, rarely measured
    distribution = "uniform"  # "uniform" within +-tolerance, or "normal" (tolerance = 1 sd)
    samples = 1000          # Monte Carlo samples
    seed = 0                # random seed: the same seed gives the same numbers

Model: one depth error per mould level, one width bias for the whole mask, one supply error
and one viscosity error per chip, all independent. A normal draw is cut at
:data:`NORMAL_CUT` standard deviations, so that no sample has a negative depth; the tolerances
are validated against the design so that even the extreme draw leaves every channel a
positive width and depth. The ranges (SU-8 depth within about 5-10 %, exposure bias a few
micrometres, syringe pumps within a few percent) are common practice, not measured values.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any

from chipflow.errors import SpecError, UnitError
from chipflow.limits import check_value, range_for
from chipflow.spec.reader import Table
from chipflow.units import to_si

__all__ = [
    "Tolerances",
    "DISTRIBUTIONS",
    "NORMAL_CUT",
    "TOLERANCE_KEYS",
    "read_tolerances",
    "parse_tolerance",
    "MAX_SAMPLES",
]

DISTRIBUTIONS = ("uniform", "normal")
#: Normal draws are cut at this many standard deviations (chipflow's own choice).
NORMAL_CUT = 4.0
#: Largest number of samples accepted (memory and time stay bounded).
MAX_SAMPLES = int(range_for("whole", "samples").high)
TOLERANCE_KEYS = ("depth", "width", "flow", "viscosity", "distribution", "samples", "seed")

#: What each tolerance may be: "relative" (a fraction), "length", or "either".
_KINDS = {"depth": "either", "width": "length", "flow": "relative", "viscosity": "relative"}


@dataclass(frozen=True)
class Tolerances:
    """Fabrication and operating tolerances of one chip design.

    Attributes
    ----------
    depth : float
        Depth tolerance of each mould level: a fraction of the depth [-] when
        ``depth_relative``, else a length [m].
    depth_relative : bool
        Whether ``depth`` is a fraction.
    width : float
        Width bias of the whole mask [m], added to every on-chip channel width.
    flow : float
        Relative error of the inlet supply's imposed value [-].
    viscosity : float
        Relative error of the viscosity [-].
    distribution : str
        "uniform" (within +-tolerance) or "normal" (tolerance = one standard deviation).
    samples : int
        Number of Monte Carlo samples.
    seed : int
        Seed of the random generator.
    origin : tuple of (str, str)
        Where each given value came from (field, "file: tolerances.key" or "--option"),
        quoted in messages.
    """

    depth: float = 0.0
    depth_relative: bool = True
    width: float = 0.0
    flow: float = 0.0
    viscosity: float = 0.0
    distribution: str = "uniform"
    samples: int = 1000
    seed: int = 0
    origin: tuple[tuple[str, str], ...] = field(default=(), compare=False)

    def where(self, name: str) -> str:
        """Where the value of field ``name`` came from (for messages)."""
        return dict(self.origin).get(name, f"tolerances.{name}")

    @property
    def extreme(self) -> float:
        """How many tolerances the most extreme draw reaches: 1 (uniform) or the normal cut."""
        return 1.0 if self.distribution == "uniform" else NORMAL_CUT

    def with_options(self, **options: Any) -> Tolerances:
        """These tolerances with command-line values (those not None) put in their place.

        Keys are the field names; ``depth`` takes the parsed ``(value, relative)`` pair.
        """
        changes: dict[str, Any] = {}
        origin = dict(self.origin)
        for name, value in options.items():
            if value is None:
                continue
            if name == "depth":
                changes["depth"], changes["depth_relative"] = value
            else:
                changes[name] = value
            origin[name] = f"--{name}-tolerance" if name in _KINDS else f"--{name}"
        return replace(self, **changes, origin=tuple(sorted(origin.items())))

    def to_dict(self) -> dict[str, Any]:
        """The tolerances for results.json (SI; the depth as a fraction or a length)."""
        return {
            "depth": self.depth,
            "depth_kind": "fraction" if self.depth_relative else "length",
            "width": self.width,
            "flow": self.flow,
            "viscosity": self.viscosity,
            "distribution": self.distribution,
        }


def parse_tolerance(value: object, name: str, where: str) -> tuple[float, bool]:
    """A tolerance as ``(value, relative)``: a fraction [-] or a length [m].

    ``name`` is one of depth, width, flow, viscosity; ``where`` names the key or option.

    >>> parse_tolerance("10%", "depth", "--depth-tolerance")
    (0.1, True)
    >>> parse_tolerance("2 um", "width", "--width-tolerance")
    (2e-06, False)
    >>> parse_tolerance("2 um", "flow", "--flow-tolerance")  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    chipflow.errors.UnitError: wrong kind of unit at --flow-tolerance: expected a plain ...
    """
    kind = _KINDS[name]
    if kind == "length":
        si, relative = to_si(value, "length", where=where), False
    elif kind == "relative":
        si, relative = to_si(value, "dimensionless", where=where), True
    else:
        try:
            si, relative = to_si(value, "dimensionless", where=where), True
        except UnitError:
            try:
                si, relative = to_si(value, "length", where=where), False
            except UnitError:
                raise SpecError(
                    f"{where}: expected a fraction such as '10%' or a length such as '5 um', "
                    f"got {value!r}"
                ) from None
    if si < 0:
        raise SpecError(f"{where}: a tolerance cannot be negative, got {value!r}")
    if not relative:
        check_value(si, "length", key=name, section="tolerances", where=where, raw=value)
    if relative and si >= 1.0:
        raise SpecError(f"{where}: must be below 100 %, got {value!r}")
    return si, relative


def read_tolerances(top: Table) -> Tolerances:
    """The ``[tolerances]`` section of a design file (all zero when it is absent)."""
    table = top.table("tolerances", None)
    if table is None:
        return Tolerances()
    table.only(TOLERANCE_KEYS)
    values: dict[str, Any] = {}
    origin = []
    for name in _KINDS:
        if name in table:
            value, relative = parse_tolerance(table.data[name], name, table.where(name))
            values[name] = value
            if name == "depth":
                values["depth_relative"] = relative
            origin.append((name, table.where(name)))
    values["distribution"] = table.choice("distribution", DISTRIBUTIONS, "uniform")
    # ranges of both: chipflow.limits (1 to MAX_SAMPLES samples; seeds 0 to 2^32 - 1)
    values["samples"] = int(table.number("samples", 1000, integer=True, minimum=1))
    values["seed"] = int(table.number("seed", 0, integer=True, minimum=0))
    for name in ("distribution", "samples", "seed"):
        if name in table:
            origin.append((name, table.where(name)))
    return Tolerances(**values, origin=tuple(origin))
