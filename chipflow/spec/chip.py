"""The ``[chip]`` section of a design file.

.. code-block:: toml

    [chip]
    width = "75 mm"             # outline along x (default: a 75 x 25 mm slide)
    height = "25 mm"
    margin = "2 mm"             # edge margin kept free of channels and ports
    punch = "1 mm"              # port punch diameter: 0.5, 0.75, 1 or 1.5 mm
    port_keepout = "0.5 mm"     # clearance around a port hole for its own channel only
"""

from __future__ import annotations

from chipflow.layout.rules import PUNCH_DIAMETERS, Chip
from chipflow.spec.reader import Table

__all__ = ["read_chip", "CHIP_KEYS"]

CHIP_KEYS = ("width", "height", "margin", "punch", "port_keepout")


def read_chip(top: Table) -> tuple[Chip, float | None]:
    """Read ``[chip]`` from the top-level table.

    Returns
    -------
    chip : Chip
        The footprint (a 75 x 25 mm slide with a 2 mm margin and a 1 mm punch when absent).
    port_keepout : float or None
        Clearance around the port holes [m] if given (goes into
        :class:`~chipflow.layout.LayoutRules`), else None.

    Examples
    --------
    >>> from chipflow.spec.reader import parse_design_text
    >>> chip, keep = read_chip(parse_design_text('[chip]\\nwidth = "50 mm"\\npunch = "1.5 mm"'))
    >>> chip.width, chip.height, chip.punch_diameter, keep
    (0.05, 0.025, 0.0015, None)
    >>> read_chip(parse_design_text('[chip]\\nwidht = "50 mm"', "demo.toml"))  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    chipflow.errors.SpecError: demo.toml: chip.widht: unknown key; did you mean 'width'? ...
    """
    table = top.table("chip", None)
    default = Chip()
    if table is None:
        return default, None
    table.only(CHIP_KEYS)
    width = table.quantity("width", "length", default.width)
    height = table.quantity("height", "length", default.height)
    margin = table.quantity("margin", "length", default.margin, positive=False, minimum=0.0)
    punch = table.quantity("punch", "length", default.punch_diameter)
    if not any(abs(punch - d) < 1e-9 for d in PUNCH_DIAMETERS):
        valid = ", ".join(f"'{d * 1e3:g} mm'" for d in PUNCH_DIAMETERS)
        raise table.error("punch", f"{punch * 1e3:g} mm is not a standard biopsy punch ({valid})")
    keep = table.quantity("port_keepout", "length", None, positive=False, minimum=0.0)
    if not margin < min(width, height) / 2:
        raise table.error("margin", f"{margin * 1e3:g} mm leaves no room on the chip")
    return Chip(width, height, margin, punch), keep
