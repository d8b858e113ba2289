"""What a design file says about transport: solutes, and the gas permeability of roof and tubing.

.. code-block:: toml

    [[solutes]]                       # one table per solute carried by the medium
    name = "glucose"                  # unique, printable
    diffusivity = "6.7e-10 m^2/s"     # in the medium
    inlet = "5.5 mol/m^3"             # concentration at the supply (a step to it is dosed)
    uptake = "2e-17 mol/s"            # optional: largest uptake per cell ([culture] density)
    km = "0.5 mol/m^3"                # optional: Michaelis-Menten constant (0: zero-order)

    [walls]
    roof_thickness = "4 mm"
    o2_permeability = "800 barrer"    # oxygen through the roof; PDMS has it preset

    [supply]                          # tree designs: gas-permeable supply tubing
    tubing_diameter = "0.5 mm"
    tubing_outer_diameter = "1.5 mm"
    tubing_o2_permeability = "800 barrer"

    [[tubes]]                         # explicit networks: per tube
    o2_permeability = "800 barrer"
    outer_diameter = "1.5 mm"

The ``[culture]`` oxygen keys (``o2_inlet``, ``o2_km``, ``o2_ambient``, ``o2_critical``, ...)
are read by :mod:`chipflow.spec.culture`. Without ``[walls]`` the roof is impermeable (glass,
a thermoplastic lid, or a PDMS roof whose permeation is left out: the cautious side); a
``"custom"`` wall material lets oxygen through only with its own ``o2_permeability``.

Examples
--------
>>> from chipflow.spec.reader import parse_design_text
>>> top = parse_design_text('[walls]\\nroof_thickness = "4 mm"\\n'
...     '[[solutes]]\\nname = "dye"\\ndiffusivity = "4e-10 m^2/s"\\ninlet = "10 uM"', "a.toml")
>>> spec = read_transport(top)
>>> spec.roof_permeability > 0, spec.solutes[0].name, round(spec.solutes[0].inlet, 6)
(True, 'dye', 0.01)
"""

from __future__ import annotations

from dataclasses import dataclass, field

from chipflow.spec.reader import Table
from chipflow.spec.walls import read_walls
from chipflow.transport.oxygen import PDMS_O2_PERMEABILITY, PDMS_O2_SOURCE

__all__ = ["SoluteSpec", "TransportSpec", "read_transport", "SOLUTE_KEYS", "WALL_PERMEABILITY"]

SOLUTE_KEYS = ("name", "diffusivity", "inlet", "uptake", "km")
#: Oxygen permeability preset of each wall material [mol/(m s Pa)] and its source.
WALL_PERMEABILITY = {"PDMS": (PDMS_O2_PERMEABILITY, PDMS_O2_SOURCE)}
#: Most solutes a design may declare.
MAX_SOLUTES = 20


@dataclass(frozen=True)
class SoluteSpec:
    """One ``[[solutes]]`` entry.

    Attributes
    ----------
    name : str
    diffusivity : float
        [m^2/s].
    inlet : float
        Concentration at the supply [mol/m^3].
    uptake : float
        Largest uptake per cell [mol/s] (0: none).
    km : float
        Michaelis-Menten constant [mol/m^3] (0: zero-order).
    """

    name: str
    diffusivity: float
    inlet: float
    uptake: float = 0.0
    km: float = 0.0


@dataclass(frozen=True)
class TransportSpec:
    """Solutes and gas permeabilities of a design.

    Attributes
    ----------
    solutes : tuple of SoluteSpec
    roof_permeability : float
        Oxygen permeability of the roof [mol/(m s Pa)] (0: impermeable).
    roof_thickness : float or None
        [m].
    roof_source : str
        Where the roof's permeability comes from.
    tubing_permeability : float
        Oxygen permeability of the supply tubing wall [mol/(m s Pa)] (0: impermeable).
    tubing_outer_diameter : float or None
        Outer diameter of the supply tubing [m] (its wall thickness with the inner diameter).
    tubes : dict
        Explicit networks: tube name -> (permeability [mol/(m s Pa)], outer diameter [m]).
    """

    solutes: tuple[SoluteSpec, ...] = ()
    roof_permeability: float = 0.0
    roof_thickness: float | None = None
    roof_source: str = ""
    tubing_permeability: float = 0.0
    tubing_outer_diameter: float | None = None
    tubes: dict = field(default_factory=dict)


def _solutes(top: Table) -> tuple[SoluteSpec, ...]:
    tables = top.tables("solutes", [])
    if len(tables) > MAX_SOLUTES:
        raise top.error("solutes", f"{len(tables)} solutes; at most {MAX_SOLUTES}")
    out: list[SoluteSpec] = []
    for t in tables:  # a handful of solutes
        t.only(SOLUTE_KEYS)
        name = t.label("name")
        if name in {s.name for s in out} or name.lower() == "oxygen":
            raise t.error(
                "name", f"{name!r} is taken: every solute needs its own name (not oxygen)"
            )
        out.append(
            SoluteSpec(
                name=name,
                diffusivity=t.quantity("diffusivity", "diffusivity"),
                inlet=t.quantity("inlet", "concentration", positive=False),
                uptake=t.quantity("uptake", "molar_rate", 0.0, positive=False),
                km=t.quantity("km", "concentration", 0.0, positive=False),
            )
        )
    return tuple(out)


def _tube_walls(top: Table) -> dict:
    out = {}
    for t in top.tables("tubes", []):  # hand-written tubing, a few entries
        if "o2_permeability" not in t and "outer_diameter" not in t:
            continue
        if "o2_permeability" not in t:
            raise t.error("o2_permeability", "outer_diameter is only used for gas permeation")
        if "outer_diameter" not in t:
            raise t.error("outer_diameter", "a gas-permeable tube needs its outer diameter")
        inner = t.quantity("diameter", "length")
        outer = t.quantity("outer_diameter", "length", maximum=0.1)
        if not outer > inner:
            raise t.error("outer_diameter", f"must exceed the inner diameter ({inner:g} m)")
        out[t.string("name")] = (
            t.quantity("o2_permeability", "permeability", positive=False),
            outer,
        )
    return out


def read_transport(top: Table) -> TransportSpec:
    """Read the solutes and the gas permeabilities of roof and tubing.

    Raises
    ------
    SpecError
        Unknown keys, duplicated solute names, a gas-permeable tubing without its outer
        diameter or with an outer diameter not above the inner one.
    """
    walls = read_walls(top)
    roof, roof_t, roof_source = 0.0, None, "no [walls]: an impermeable roof"
    if walls is not None:
        table = top.table("walls")
        roof_t = walls.roof_thickness
        if "o2_permeability" in table:
            roof = table.quantity("o2_permeability", "permeability", positive=False)
            roof_source = table.file_label
        elif walls.material in WALL_PERMEABILITY:
            roof, roof_source = WALL_PERMEABILITY[walls.material]
        else:
            roof_source = f"{walls.material} walls without o2_permeability: impermeable"
    tubing, outer = 0.0, None
    supply = top.table("supply", None)
    if supply is not None and "tubing_o2_permeability" in supply:
        tubing = supply.quantity("tubing_o2_permeability", "permeability", positive=False)
        if "tubing_outer_diameter" not in supply:
            raise supply.error(
                "tubing_outer_diameter", "gas-permeable tubing needs its outer diameter"
            )
        outer = supply.quantity("tubing_outer_diameter", "length", maximum=0.1)
        inner = supply.quantity("tubing_diameter", "length", 0.5e-3)
        if not outer > inner:
            raise supply.error(
                "tubing_outer_diameter", f"must exceed tubing_diameter ({inner * 1e3:g} mm)"
            )
    return TransportSpec(
        solutes=_solutes(top),
        roof_permeability=roof,
        roof_thickness=roof_t,
        roof_source=roof_source,
        tubing_permeability=tubing,
        tubing_outer_diameter=outer,
        tubes=_tube_walls(top),
    )
