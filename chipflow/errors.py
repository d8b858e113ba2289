"""The chipflow error hierarchy.

Every error that bad input can cause is a :class:`ChipflowError`; the input errors also
subclass :class:`ValueError` so that generic code can catch them the usual way. The command
line turns any ``ChipflowError`` into one line on stderr and exit status 2.

Messages are written for a bench scientist: what was wrong, where (file, key, channel or
position) and what would be valid.
"""

from __future__ import annotations

__all__ = [
    "ChipflowError",
    "SpecError",
    "UnitError",
    "NetworkError",
    "DesignError",
    "LayoutError",
    "ExportError",
    "ArgumentError",
    "TooLargeError",
    "FieldError",
    "MeshBudgetError",
]


class ChipflowError(Exception):
    """Base class of every error chipflow raises on purpose."""


class SpecError(ChipflowError, ValueError):
    """A design file or a user-given value is malformed or out of range."""


class UnitError(SpecError):
    """A quantity has no unit, the wrong kind of unit, or is not a finite number."""


class NetworkError(ChipflowError, ValueError):
    """A channel network cannot be solved as given (disconnected, undetermined, ...)."""


class DesignError(ChipflowError, ValueError):
    """The design targets cannot be met within the fabrication limits."""


class LayoutError(ChipflowError, ValueError):
    """The sized design cannot be drawn on the chip (it does not fit, ...)."""


class ExportError(ChipflowError):
    """A mask or report file could not be written."""


class ArgumentError(ChipflowError, ValueError):
    """A library function was called with an argument it cannot use (wrong type or value)."""


class TooLargeError(LayoutError):
    """The design would need more memory to draw than the machine can spare."""


class FieldError(ChipflowError, ValueError):
    """A mask cannot be meshed or solved as a flow field (no ports, disconnected, ...)."""


class MeshBudgetError(FieldError):
    """A field's mesh has more triangles than the solve was allowed (see
    :func:`chipflow.field.budget.max_triangles`)."""
