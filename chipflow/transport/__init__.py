"""Species along the channels of a solved network, and on the 2D field: oxygen, solutes, dosing.

transport/ reads the solved flows (:class:`chipflow.network.Solution`) and the drawing; it
never solves the hydraulics again.

- :mod:`~chipflow.transport.oxygen`: incubator oxygen, solubility, PDMS permeability;
- :mod:`~chipflow.transport.species`: species and Michaelis-Menten floor uptake;
- :mod:`~chipflow.transport.transfer`: Leveque/Graetz transfer across the depth;
- :mod:`~chipflow.transport.march`: the 1D march along channels, mixing at nodes;
- :mod:`~chipflow.transport.dispersion`: Taylor-Aris dispersion and the dosing delay;
- :mod:`~chipflow.transport.field`: advection-diffusion-reaction on the field mesh;
- :mod:`~chipflow.transport.run`: one call for the build (:func:`run_transport`).

Submodules load on first use, so importing the package costs nothing.
"""

from __future__ import annotations

import importlib

__all__ = ["run_transport", "TransportRun"]


def __getattr__(name: str):
    if name in __all__:
        return getattr(importlib.import_module("chipflow.transport.run"), name)
    raise AttributeError(f"module 'chipflow.transport' has no attribute {name!r}")
