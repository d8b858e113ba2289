"""chipflow: design, check and draw branching perfusion networks for organ-on-chip devices.

The stages compose in one direction::

    spec -> design -> layout -> network -> solve -> checks -> export / report
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("chipflow")
except PackageNotFoundError:  # pragma: no cover - running from a bare source tree
    __version__ = "0.0.0"

__all__ = ["__version__"]
