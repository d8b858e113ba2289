"""The ``[walls]`` section: the soft roof of the channels.

.. code-block:: toml

    [walls]
    material = "PDMS"           # preset modulus with its source, or "custom" with modulus
    modulus = "1.32 MPa"        # Young's modulus (required for "custom"; overrides the preset)
    poisson_ratio = 0.5         # default 0.5 (nearly incompressible elastomer)
    roof_thickness = "1 mm"     # elastomer above the channels
    o2_permeability = "800 barrer"  # oxygen through the roof (PDMS: preset; read by
                                # chipflow.spec.transport)

Without ``[walls]`` the channels are rigid: no deformation, no wall compliance.
"""

from __future__ import annotations

from chipflow.operation.model import Walls
from chipflow.spec.reader import Table

__all__ = ["read_walls", "WALL_MATERIALS", "WALL_KEYS"]

WALL_KEYS = ("material", "modulus", "poisson_ratio", "roof_thickness", "o2_permeability")

#: Preset materials: Young's modulus [Pa] and its source.
WALL_MATERIALS = {
    "PDMS": (
        1.32e6,
        "PDMS 10:1 (Sylgard 184): 1.32-2.97 MPa for cure temperatures of 25-200 degC, "
        "Johnston et al., J Micromech Microeng 24 (2014) 035017 (from memory, medium "
        "confidence); the low end is taken, which overstates the bulge; give a measured modulus",
    ),
}


def read_walls(top: Table) -> Walls | None:
    """Read ``[walls]`` (None when absent).

    Raises
    ------
    SpecError
        Unknown keys, a non-positive modulus or thickness, a Poisson's ratio outside 0-0.5,
        "custom" without a modulus.
    """
    table = top.table("walls", None)
    if table is None:
        return None
    table.only(WALL_KEYS)
    material = table.choice("material", (*WALL_MATERIALS, "custom"), "PDMS")
    if material == "custom" and "modulus" not in table:
        raise table.error("modulus", 'material = "custom" needs a modulus, e.g. "1.5 MPa"')
    preset, source = WALL_MATERIALS.get(material, (None, ""))
    if "modulus" in table:
        modulus = table.quantity("modulus", "pressure", maximum=1e12)
        source = table.file_label
    else:
        modulus = preset
    return Walls(
        material=material,
        modulus=modulus,
        poisson_ratio=float(table.number("poisson_ratio", 0.5, minimum=0.0, maximum=0.5)),
        roof_thickness=table.quantity("roof_thickness", "length", maximum=0.1),
        source=source,
    )
