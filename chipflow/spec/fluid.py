"""The ``[fluid]`` section of a design file.

.. code-block:: toml

    [fluid]
    kind = "medium"            # "medium" (default), "water" or "custom"
    temperature = "37 degC"    # default 37 degC for medium, 20 degC for water
    viscosity = "0.95 mPa*s"   # optional for medium/water (a measured value is best)
    density = "1007 kg/m^3"    # optional for medium/water
    name = "my medium"         # optional, shown in reports
"""

from __future__ import annotations

from chipflow.physics.fluid import Fluid, custom_fluid, fluid_preset
from chipflow.spec.reader import Table

__all__ = ["read_fluid", "FLUID_KEYS"]

FLUID_KEYS = ("kind", "temperature", "viscosity", "density", "name")


def read_fluid(top: Table) -> Fluid:
    """Read ``[fluid]`` from the top-level table (culture medium at 37 C when absent)."""
    table = top.table("fluid", None)
    if table is None:
        return fluid_preset("medium")
    table.only(FLUID_KEYS)
    kind = table.choice("kind", ("medium", "water", "custom"), "medium")
    temperature = table.quantity("temperature", "temperature", None, minimum=273.15, maximum=373.15)
    viscosity = table.quantity("viscosity", "viscosity", None)
    density = table.quantity("density", "density", None)
    if kind == "custom":
        if viscosity is None or density is None:
            raise table.error(None, "a custom fluid needs both 'viscosity' and 'density'")
        fluid = custom_fluid(table.label("name", "custom fluid"), viscosity, density, temperature)
    else:
        fluid = fluid_preset(kind, temperature, viscosity, density)
    if "name" in table and kind != "custom":
        fluid = Fluid(table.label("name"), fluid.viscosity, fluid.density, fluid.temperature)
    return fluid
