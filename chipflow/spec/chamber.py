"""Culture chambers in design files: the keys of ``[[chambers]]`` and of ``[bed] kind =
"chamber"``.

.. code-block:: toml

    [[chambers]]                       # an explicit network: between two nodes
    name = "culture A"
    from = "a in"
    to = "a out"
    width = "2 mm"
    length = "8 mm"                    # from its 'from' node to its 'to' node
    depth = "100 um"
    corner_radius = "200 um"           # optional: the chamber's corners rounded
    taper = "1 mm"                     # optional: each end narrows to its channel over this
    pillars = { diameter = "150 um", pitch = "300 um", pattern = "hex" }   # optional

A chamber is a wide culture region between the channels that feed and drain it. Its pillars
(round posts that hold the roof up, drawn as holes in its mask level) sit on a hexagonal or
square lattice of ``pitch`` centred in the chamber; a pillar is kept where its wall stays at
least the gap between pillars (``pitch - diameter``) from the chamber's outline, tapers
included. The same keys (without ``name``, ``from``, ``to``) describe the
chamber a tree ends in (``[bed] kind = "chamber"``, :mod:`chipflow.spec.tree`).

Bad input is refused here with one line: pillars as large as their pitch, a pitch below the
mask's smallest feature, a chamber no longer than its two tapers, a corner radius beyond half
the width. Pillars and gaps narrower than the mask resolves are fabrication findings of the
drawing (:mod:`chipflow.layout.check`), not input errors.
"""

from __future__ import annotations

from dataclasses import dataclass

from chipflow.spec.reader import Table

__all__ = ["Pillars", "ChamberShape", "read_chamber", "CHAMBER_KEYS", "PILLAR_KEYS", "PATTERNS"]

#: Pillar lattices.
PATTERNS = ("hex", "square")
#: Keys of a chamber's shape (both in ``[[chambers]]`` and ``[bed] kind = "chamber"``).
CHAMBER_KEYS = ("width", "length", "depth", "corner_radius", "taper", "pillars")
PILLAR_KEYS = ("diameter", "pitch", "pattern")


@dataclass(frozen=True)
class Pillars:
    """Round posts holding up a chamber's roof.

    Attributes
    ----------
    diameter : float
        Post diameter [m].
    pitch : float
        Centre-to-centre distance of neighbouring posts [m].
    pattern : str
        "hex" (rows of posts ``pitch`` apart along the flow, rows ``pitch * sqrt(3) / 2``
        apart, every other row shifted by half a pitch) or "square".
    """

    diameter: float
    pitch: float
    pattern: str = "hex"

    @property
    def gap(self) -> float:
        """Narrowest gap between neighbouring posts [m]."""
        return self.pitch - self.diameter


@dataclass(frozen=True)
class ChamberShape:
    """A chamber's shape as the design file gives it.

    Attributes
    ----------
    width : float
        Width across the flow [m].
    length : float
        Length along the flow, tapers included [m].
    depth : float
        [m].
    corner_radius : float
        Radius of its rounded corners [m] (0: sharp).
    taper : float
        Length over which each end narrows from ``width`` to the channels meeting it [m]
        (0: a flat end wall).
    pillars : Pillars or None
    """

    width: float
    length: float
    depth: float
    corner_radius: float = 0.0
    taper: float = 0.0
    pillars: Pillars | None = None


def read_chamber(
    table: Table, min_feature: float, depths: tuple[float, ...] | None = None
) -> ChamberShape:
    """The chamber keys of ``table`` (see the module notes), validated.

    Parameters
    ----------
    table : Table
        A ``[[chambers]]`` entry or ``[bed]``; its other keys are checked by the caller.
    min_feature : float
        The mask's smallest feature [m] (``[fabrication] min_feature``): the least pitch.
    depths : tuple of float, optional
        The mould depths the chamber's depth must be one of (a tree's); None: any.

    Examples
    --------
    >>> from chipflow.spec.reader import parse_design_text
    >>> top = parse_design_text('width = "2 mm"\\nlength = "8 mm"\\ndepth = "100 um"\\n'
    ...                         'pillars = { diameter = "150 um", pitch = "300 um" }', "c.toml")
    >>> shape = read_chamber(top, 25e-6)
    >>> shape.pillars.pattern, round(shape.pillars.gap * 1e6, 6)
    ('hex', 150.0)
    >>> bad = parse_design_text('width = "2 mm"\\nlength = "8 mm"\\ndepth = "100 um"\\n'
    ...                         'taper = "4 mm"', "c.toml")
    >>> read_chamber(bad, 25e-6)  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    chipflow.errors.SpecError: c.toml: taper: two tapers of 4 mm need a chamber longer than 8 mm...
    """
    width = table.quantity("width", "length")
    length = table.quantity("length", "length")
    depth = table.quantity("depth", "length")
    if depths is not None and not any(abs(depth - d) <= 1e-12 for d in depths):
        shown = ", ".join(f"{d * 1e6:g} um" for d in depths)
        raise table.error("depth", f"must be one of [fabrication] depths ({shown})")
    if depths is not None:
        depth = min(depths, key=lambda d: abs(d - depth))
    taper = table.quantity("taper", "length", 0.0, positive=False, minimum=0.0)
    if 2 * taper >= length:
        raise table.error(
            "taper",
            f"two tapers of {taper * 1e3:g} mm need a chamber longer than {length * 1e3:g} mm; "
            "shorten the taper or lengthen the chamber",
        )
    radius = table.quantity("corner_radius", "length", 0.0, positive=False, minimum=0.0)
    body = length - 2 * taper
    if radius > min(width, body) / 2:
        raise table.error(
            "corner_radius",
            f"{radius * 1e6:g} um is more than half the chamber's width or body length "
            f"(at most {min(width, body) / 2 * 1e6:g} um)",
        )
    pillars = None
    if "pillars" in table:
        sub = table.table("pillars")
        sub.only(PILLAR_KEYS)
        diameter = sub.quantity("diameter", "length")
        pitch = sub.quantity("pitch", "length")
        pattern = sub.choice("pattern", PATTERNS, "hex")
        if pitch < min_feature:
            raise sub.error(
                "pitch",
                f"{pitch * 1e6:g} um is below the mask's smallest feature "
                f"[fabrication] min_feature {min_feature * 1e6:g} um",
            )
        if diameter >= pitch:
            raise sub.error(
                "diameter",
                f"pillars of {diameter * 1e6:g} um are as large as their pitch of "
                f"{pitch * 1e6:g} um or larger: they would touch; give a diameter below the pitch",
            )
        if pitch > min(width, body):
            raise sub.error(
                "pitch",
                f"{pitch * 1e6:g} um is longer than the chamber's width or body "
                f"({min(width, body) * 1e6:g} um): no pillar lattice fits",
            )
        pillars = Pillars(diameter, pitch, pattern)
    return ChamberShape(width, length, depth, radius, taper, pillars)
