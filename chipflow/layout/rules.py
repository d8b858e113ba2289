"""What the drawing must obey: the chip footprint and the layout rules of the mould process.

Defaults are common practice for soft lithography in PDMS on a glass slide: a 75 x 25 mm
microscope slide, a 1 um mask grid, 100 um walls, biopsy-punched ports of 0.5, 0.75, 1.0 or
1.5 mm (common practice), bends with a centreline radius of at least twice the width.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from chipflow.errors import SpecError

__all__ = ["Chip", "LayoutRules", "PUNCH_DIAMETERS"]

#: Biopsy punch diameters in common use [m] (common practice).
PUNCH_DIAMETERS = (0.5e-3, 0.75e-3, 1.0e-3, 1.5e-3)


@dataclass(frozen=True)
class Chip:
    """The chip footprint.

    Attributes
    ----------
    width, height : float
        Outline size [m]; x runs along ``width`` (default a 75 x 25 mm slide).
    margin : float
        Edge margin that no channel or port may enter [m] (bonding area at the edge).
    punch_diameter : float
        Port hole diameter [m], one of :data:`PUNCH_DIAMETERS`.

    Examples
    --------
    >>> Chip().width, Chip().height
    (0.075, 0.025)
    >>> Chip(punch_diameter=0.9e-3)  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    chipflow.errors.SpecError: chip: punch diameter 0.9 mm is not a standard biopsy punch ...
    """

    width: float = 75e-3
    height: float = 25e-3
    margin: float = 2e-3
    punch_diameter: float = 1.0e-3

    def __post_init__(self) -> None:
        for label, value in (("width", self.width), ("height", self.height)):
            if not value > 0:
                raise SpecError(f"chip: {label} must be greater than zero, got {value:g} m")
        if not 0 <= self.margin < min(self.width, self.height) / 2:
            raise SpecError(
                f"chip: edge margin {self.margin * 1e3:g} mm leaves no room on a "
                f"{self.width * 1e3:g} x {self.height * 1e3:g} mm chip"
            )
        if not any(abs(self.punch_diameter - d) < 1e-9 for d in PUNCH_DIAMETERS):
            valid = ", ".join(f"{d * 1e3:g}" for d in PUNCH_DIAMETERS)
            raise SpecError(
                f"chip: punch diameter {self.punch_diameter * 1e3:g} mm is not a standard "
                f"biopsy punch (valid: {valid} mm)"
            )


@dataclass(frozen=True)
class LayoutRules:
    """Drawing rules of the mould and mask process.

    Attributes
    ----------
    grid : float
        Mask grid every node and outline vertex is snapped to [m].
    min_feature : float
        Smallest feature the mask resolves [m] (film masks about 25-75 um, chrome about 1 um;
        mask vendors' guidance, common practice).
    min_gap : float
        Smallest PDMS wall between channels that are not connected [m]; also the wall kept
        between neighbouring channels when placing them.
    bend_radius : float
        Smallest bend centreline radius as a multiple of the channel width [-].
    alignment_margin : float
        Overlap of the deeper mask level into a shallower channel at a depth step [m].
    max_width_to_depth : float
        Roof-sag limit on width/depth [-] (support posts are usual beyond about 10-20; common
        practice, from memory).
    max_depth_to_width : float
        Tall-wall limit on depth/width [-] (above 2 gave unusable PDMS features; Delamarche
        et al., Adv Mater 1997;9:741).
    port_keepout : float
        Clearance around a port hole that only the port's own channel may enter [m], measured
        from the hole's rim.
    """

    grid: float = 1e-6
    min_feature: float = 25e-6
    min_gap: float = 100e-6
    bend_radius: float = 2.0
    alignment_margin: float = 10e-6
    max_width_to_depth: float = 10.0
    max_depth_to_width: float = 2.0
    port_keepout: float = 0.5e-3

    def __post_init__(self) -> None:
        for label in ("grid", "min_feature", "min_gap", "max_width_to_depth", "max_depth_to_width"):
            if not getattr(self, label) > 0:
                raise SpecError(f"layout rules: {label} must be greater than zero")
        if not self.bend_radius >= 0.5:
            raise SpecError(
                f"layout rules: bend radius {self.bend_radius:g} x width is too tight; the "
                "inner wall of a bend needs at least 0.5 x width (2 is common practice)"
            )
        if self.alignment_margin < 0 or self.port_keepout < 0:
            raise SpecError("layout rules: alignment margin and port keep-out cannot be negative")

    @classmethod
    def from_fabrication(cls, fab: Any, **overrides: float) -> LayoutRules:
        """Rules from a ``[fabrication]`` section (duck-typed on its attribute names).

        Reads ``grid``, ``min_feature``, ``min_gap``, ``bend_radius`` (a multiple of the
        width), ``alignment_margin``, ``max_width_to_depth`` and ``max_depth_to_width`` where
        present; ``overrides`` (e.g. ``port_keepout``) win over both.

        Examples
        --------
        >>> from types import SimpleNamespace
        >>> LayoutRules.from_fabrication(SimpleNamespace(min_gap=50e-6, grid=0.5e-6)).min_gap
        5e-05
        """
        names = (
            "grid",
            "min_feature",
            "min_gap",
            "bend_radius",
            "alignment_margin",
            "max_width_to_depth",
            "max_depth_to_width",
            "port_keepout",
        )
        values = {n: float(getattr(fab, n)) for n in names if getattr(fab, n, None) is not None}
        values.update(overrides)
        return cls(**values)
