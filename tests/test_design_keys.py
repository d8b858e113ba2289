"""Every key of the design-file reference (docs/guide/design-files.rst) has an effect.

The keys are read from the reference page's tables themselves, so a key documented later
without an entry here fails the test. Each key is changed within its valid range on the demo
design (with the other keys it needs, e.g. ``velocity_ratio`` with ``rule = "area-growth"``)
and the build must differ: in its results, its drawing, or (for ``[export]``) the bytes of its
mask files. Keys whose effect only shows without a drawing (nominal tree lengths, round
channels) are checked on the sized design, and the list below says why.
"""

from __future__ import annotations

import copy
import json
import re
import tomllib
from pathlib import Path

import pytest
import shapely
from rst_tables import guide_table

from chipflow.build import DesignSource, build_design
from chipflow.design.sizing import size_tree
from chipflow.spec.tree import load_tree_spec

ROOT = Path(__file__).parents[1]
DEMO = tomllib.loads((ROOT / "designs" / "demo_endothelial_bed.toml").read_text())
# the keys of explicit networks are changed on the bundled network drawn from coordinates
TWIN = tomllib.loads((ROOT / "designs" / "twin_culture_manifold.toml").read_text())
ON_TWIN = {"__design__": TWIN}


def _entry(section: str, name: str, key: str, value) -> dict:
    """A change of one entry of a list of tables of the twin design."""
    items = copy.deepcopy(TWIN[section])
    for item in items:
        if item["name"] == name:
            item[key] = value
    return {section: items}


# the keys of culture regions are changed on the demo made into two regions
REGIONAL = {k: copy.deepcopy(v) for k, v in DEMO.items() if k != "bed"}
REGIONAL["tree"].pop("bed_channels")
REGIONAL["regions"] = [
    {"name": "a", "flow_fraction": 0.25, "bed_channels": 4, "length": "2 mm"},
    {"name": "b", "flow_fraction": 0.75, "bed_channels": 6, "length": "2 mm"},
]
ON_REGIONS = {"__design__": REGIONAL}


def _region(**changes) -> dict:
    """A change of the first region of the two-region demo (None removes a key)."""
    items = copy.deepcopy(REGIONAL["regions"])
    for key, value in changes.items():
        if value is None:
            items[0].pop(key, None)
        else:
            items[0][key] = value
    return {"regions": items}


# the keys of chambers are changed on a small network of one chamber without positions (its
# chamber is solved in 2D all the same; the drawn paired design is built in test_chambers.py)
CHAMBER = {
    "name": "cell chamber", "from": "b", "to": "c", "width": "1.2 mm", "length": "3 mm",
    "depth": "100 um",
}  # fmt: skip
ONE_CHAMBER = {
    "name": "one-chamber",
    "fluid": {"kind": "medium"},
    "channels": [
        {"name": "feed", "from": "a", "to": "b", "width": "300 um", "depth": "100 um",
         "length": "5 mm"},
        {"name": "drain", "from": "c", "to": "d", "width": "300 um", "depth": "100 um",
         "length": "5 mm"},
    ],
    "chambers": [CHAMBER],
    "ports": [{"node": "a", "flow": "2 uL/min"}, {"node": "d", "pressure": "0 Pa"}],
    "culture": {"cell_type": "hepatocyte"},
}  # fmt: skip
ON_CHAMBER = {"__design__": ONE_CHAMBER}
PILLARED = {"__design__": {**ONE_CHAMBER, "chambers": [
    {**CHAMBER, "pillars": {"diameter": "150 um", "pitch": "400 um"}}]}}  # fmt: skip


def _chamber(context: dict, **change) -> dict:
    """A change of the one chamber's keys (None: left out)."""
    item = {**context["__design__"]["chambers"][0], **change}
    return {"chambers": [{k: v for k, v in item.items() if v is not None}]}


def _pillars(**change) -> dict:
    pillars = {**PILLARED["__design__"]["chambers"][0]["pillars"], **change}
    return _chamber(PILLARED, pillars=pillars)


# the keys of a chamber bed are changed on the demo made into a small tree that ends in one
# (two ports on each end wall: a cheap 2D solve)
CHAMBER_BED = {"kind": "chamber", "width": "1.2 mm", "length": "3 mm", "depth": "50 um"}
CHAMBER_TREE = {k: copy.deepcopy(v) for k, v in DEMO.items() if k != "bed"}
CHAMBER_TREE["tree"]["bed_channels"] = 2
CHAMBER_TREE["bed"] = CHAMBER_BED
ON_CHAMBER_BED = {"__design__": CHAMBER_TREE}


def _chamber_bed(**change) -> dict:
    return {"bed": change}


TWO_LEVEL = {"fabrication": {"depths": ["30 um", "100 um"], "max_width_to_depth": 12}}

VARIED = {
    "tolerances": {
        "depth": "5 %", "width": "2 um", "flow": "2 %", "viscosity": "5 %", "samples": 30,
    }
}  # fmt: skip

# time-varying supplies: the page's second table names the [supply] inlet in its first column
PERISTALTIC = {"supply": {"inlet": "peristaltic", "rpm": 10, "rollers": 3, "pulsation": 0.4}}
PULSING = {
    "supply": {
        "inlet": "pulsatile-pressure", "pressure": "500 Pa", "pressure_amplitude": "100 Pa",
        "frequency": "1 Hz",
    }
}  # fmt: skip
DRAINING = {"supply": {"inlet": "reservoir", "head": "5 cm", "reservoir_area": "100 mm^2"}}
ROCKING = {
    "supply": {
        "inlet": "rocker", "tilt_angle": "25 deg", "period": "1 min",
        "reservoir_spacing": "60 mm", "reservoir_area": "200 mm^2", "head": "8 mm",
        "outlet": None, "inlet_tubing": None, "tubing_diameter": None,
    }
}  # fmt: skip
WALLS = {"walls": {"material": "PDMS", "roof_thickness": "1 mm"}, **PERISTALTIC}
CUSTOM_WALLS = {
    "walls": {"material": "custom", "modulus": "2 MPa", "roof_thickness": "1 mm"},
    **PERISTALTIC,
}
WAVEFORM = str(ROOT / "tests" / "data" / "pump_period.csv")
SOLUTE = {"name": "glucose", "diffusivity": "6.7e-10 m^2/s", "inlet": "5.5 mol/m^3",
          "uptake": "1e-16 mol/s", "km": "0.5 mol/m^3"}  # fmt: skip
SOLUTES = {"solutes": [SOLUTE]}
POROUS_TUBING = {
    "supply": {
        "tubing_outer_diameter": "2 mm", "tubing_modulus": "2 MPa",
        "tubing_o2_permeability": "100 barrer",
    }
}  # fmt: skip

# (section, key): (context changes, the change, what shows it)
#   "build": results or drawing of a build; "dxf"/"gds": the mask file bytes;
#   "vary": the results of chipflow vary;
#   "sizing": the sized design (the key matters where nothing is drawn, e.g. chipflow check)
# a mesh bed on the demo: straight bed channels joined by rows of cross-connections
MESH = {"kind": "mesh", "max_straight_length": None, "cross_pitch": "1 mm", "cross_width": "40 um"}

CASES = {
    ("", "name"): ({}, {"name": "another-bed"}, "build"),
    ("", "description"): ({}, {"description": "another text"}, "build"),
    ("fluid", "kind"): ({}, {"fluid": {"kind": "water"}}, "build"),
    ("fluid", "temperature"): (
        {"fluid": {"kind": "water"}},
        {"fluid": {"kind": "water", "temperature": "25 degC"}},
        "build",
    ),
    ("fluid", "viscosity"): ({}, {"fluid": {"kind": "medium", "viscosity": "1.1 mPa*s"}}, "build"),
    ("fluid", "density"): ({}, {"fluid": {"kind": "medium", "density": "1050 kg/m^3"}}, "build"),
    ("tree", "flow"): ({}, {"tree": {"flow": "10 uL/min"}}, "build"),
    ("tree", "generations"): ({}, {"tree": {"bed_channels": None, "generations": 4}}, "build"),
    ("tree", "bed_channels"): ({}, {"tree": {"bed_channels": 16}}, "build"),
    ("tree", "splits"): ({}, {"tree": {"bed_channels": None, "splits": [2, 3, 2]}}, "build"),
    ("nodes", "at"): (ON_TWIN, _entry("nodes", "join", "at", ["62 mm", "12.5 mm"]), "build"),
    ("channels", "via"): (
        ON_TWIN,
        _entry(
            "channels",
            "feed upper",
            "via",
            [["14 mm", "14.5 mm"], ["18 mm", "14.5 mm"], ["18 mm", "16.5 mm"]],
        ),  # fmt: skip
        "build",
    ),
    ("chambers", "name"): (ON_CHAMBER, _chamber(ON_CHAMBER, name="culture"), "build"),
    ("chambers", "from"): (ON_CHAMBER, _chamber(ON_CHAMBER, **{"from": "c", "to": "b"}), "build"),
    ("chambers", "to"): (
        ON_CHAMBER,
        {
            "chambers": [{**CHAMBER, "to": "e"}],
            "channels": [ONE_CHAMBER["channels"][0], {**ONE_CHAMBER["channels"][1], "from": "e"}],
        },
        "build",
    ),
    ("chambers", "width"): (ON_CHAMBER, _chamber(ON_CHAMBER, width="1.5 mm"), "build"),
    ("chambers", "depth"): (ON_CHAMBER, _chamber(ON_CHAMBER, depth="80 um"), "build"),
    ("chambers", "length"): (ON_CHAMBER, _chamber(ON_CHAMBER, length="4 mm"), "build"),
    ("chambers", "corner_radius"): (
        ON_CHAMBER,
        _chamber(ON_CHAMBER, corner_radius="300 um"),
        "build",
    ),  # fmt: skip
    ("chambers", "taper"): (ON_CHAMBER, _chamber(ON_CHAMBER, taper="500 um"), "build"),
    ("chambers", "pillars"): (PILLARED, _chamber(PILLARED, pillars=None), "build"),
    ("chambers", "diameter"): (PILLARED, _pillars(diameter="100 um"), "build"),
    ("chambers", "pitch"): (PILLARED, _pillars(pitch="350 um"), "build"),
    ("chambers", "pattern"): (PILLARED, _pillars(pattern="square"), "build"),
    ("tree", "rule"): (
        {},
        {"tree": {"rule": "shear-target"}, "targets": {"shear": "0.9 Pa"}},
        "build",
    ),
    # round channels size a Murray's-law comparison; the drawing refuses them
    ("tree", "shape"): ({}, {"tree": {"shape": "round"}}, "sizing"),
    ("tree", "trunk_width"): ({}, {"tree": {"trunk_width": "500 um"}}, "build"),
    ("tree", "trunk_depth"): (
        {
            "fabrication": {"depths": ["60 um", "70 um"]},
            "tree": {"trunk_width": "400 um", "trunk_depth": "60 um"},
        },
        {"tree": {"trunk_depth": "70 um"}},
        "build",
    ),
    ("tree", "growth"): (
        {"tree": {"rule": "area-growth", "growth": 1.2}},
        {"tree": {"growth": 1.4}},
        "build",
    ),
    ("tree", "velocity_ratio"): (
        {"tree": {"rule": "area-growth", "velocity_ratio": 4}},
        {"tree": {"velocity_ratio": 6}},
        "build",
    ),
    ("tree", "widths"): (
        {
            "tree": {
                "rule": "table",
                "widths": ["600 um", "335 um", "186 um", "104 um", "58 um", "35 um"],
                "depths": ["50 um"] * 6,
            }
        },
        {"tree": {"widths": ["600 um", "335 um", "186 um", "104 um", "58 um", "40 um"]}},
        "build",
    ),
    ("tree", "depths"): (
        {
            "tree": {
                "rule": "table",
                "widths": ["600 um", "335 um", "186 um", "104 um", "58 um", "35 um"],
                "depths": ["50 um"] * 6,
            },
            "fabrication": {"depths": ["50 um", "60 um"]},
        },
        {"tree": {"depths": ["60 um", "50 um", "50 um", "50 um", "50 um", "50 um"]}},
        "build",
    ),
    # nominal lengths of tree channels: the drawing replaces them, chipflow check uses them
    ("tree", "length"): ({}, {"tree": {"length": "3 mm"}}, "sizing"),
    ("tree", "lengths"): (
        {},
        {"tree": {"length": None, "lengths": ["1 mm", "2 mm", "2 mm", "2 mm", "2 mm"]}},
        "sizing",
    ),
    ("bed", "residence_time"): ({}, {"bed": {"residence_time": "2 s"}}, "build"),
    ("bed", "length"): ({}, {"bed": {"residence_time": None, "length": "3 mm"}}, "build"),
    ("bed", "max_straight_length"): ({}, {"bed": {"max_straight_length": "1.5 mm"}}, "build"),
    ("bed", "gap"): ({}, {"bed": {"gap": "150 um"}}, "build"),
    ("bed", "footprint"): ({}, {"bed": {"footprint": ["20 mm", "20 mm"]}}, "build"),
    ("bed", "kind"): (
        {"tree": {"bed_channels": 2}},
        {"bed": {**CHAMBER_BED, "residence_time": None, "max_straight_length": None, "gap": None}},
        "build",
    ),
    ("bed", "width"): (ON_CHAMBER_BED, _chamber_bed(width="1.5 mm"), "build"),
    ("bed", "depth"): (
        {**ON_CHAMBER_BED, "fabrication": {"depths": ["50 um", "100 um"]}},
        _chamber_bed(depth="100 um"),
        "build",
    ),
    ("bed", "corner_radius"): (ON_CHAMBER_BED, _chamber_bed(corner_radius="50 um"), "build"),
    ("bed", "taper"): (ON_CHAMBER_BED, _chamber_bed(taper="500 um"), "build"),
    ("bed", "pillars"): (
        ON_CHAMBER_BED,
        _chamber_bed(pillars={"diameter": "150 um", "pitch": "400 um"}),
        "build",
    ),
    ("bed", "cross_pitch"): ({"bed": MESH}, {"bed": {"cross_pitch": "0.8 mm"}}, "build"),
    ("bed", "cross_width"): ({"bed": MESH}, {"bed": {"cross_width": "50 um"}}, "build"),
    ("regions", "name"): (ON_REGIONS, _region(name="c"), "build"),
    ("regions", "flow_fraction"): (
        ON_REGIONS,
        {
            "regions": [
                {**REGIONAL["regions"][0], "flow_fraction": 0.4},
                {**REGIONAL["regions"][1], "flow_fraction": 0.6},
            ]
        },
        "build",
    ),  # fmt: skip
    ("regions", "bed_channels"): (ON_REGIONS, _region(bed_channels=8), "build"),
    ("regions", "splits"): (ON_REGIONS, _region(bed_channels=None, splits=[4]), "build"),
    ("regions", "cell_type"): (ON_REGIONS, _region(cell_type="venous-endothelium"), "build"),
    ("regions", "residence_time"): (
        ON_REGIONS,
        _region(length=None, residence_time="0.5 s"),
        "build",
    ),
    ("regions", "length"): (ON_REGIONS, _region(length="3 mm"), "build"),
    ("regions", "gap"): (ON_REGIONS, _region(gap="150 um"), "build"),
    ("regions", "max_straight_length"): (ON_REGIONS, _region(max_straight_length="1 mm"), "build"),
    ("regions", "footprint"): (ON_REGIONS, _region(footprint=["10 mm", "6 mm"]), "build"),
    ("targets", "shear_kind"): ({}, {"targets": {"shear_kind": "mean"}}, "build"),
    ("targets", "shear"): ({}, {"targets": {"shear": "0.9 Pa"}}, "build"),
    ("targets", "shear_min"): (
        {},
        {"targets": {"shear_min": "0.6 Pa", "shear_max": "1 Pa"}},
        "build",
    ),
    ("targets", "shear_max"): (
        {},
        {"targets": {"shear_min": "0.5 Pa", "shear_max": "0.9 Pa"}},
        "build",
    ),
    # the window of [targets] bounds the sizing of every level or of the bed alone
    ("targets", "levels"): (
        {
            "targets": {"shear_min": "0.5 Pa", "shear_max": "1 Pa"},
            "fabrication": {"max_width_to_depth": 14},
        },
        {"targets": {"levels": "bed"}},
        "sizing",
    ),
    ("targets", "tolerance"): ({}, {"targets": {"tolerance": 0.001}}, "build"),
    ("culture", "cell_type"): ({}, {"culture": {"cell_type": "mouse-esc"}}, "build"),
    ("culture", "shear_min"): ({}, {"culture": {"shear_min": "0.6 Pa"}}, "build"),
    ("culture", "shear_max"): ({}, {"culture": {"shear_max": "0.9 Pa"}}, "build"),
    ("culture", "seeded"): ({}, {"culture": {"seeded": "bed"}}, "build"),
    ("culture", "cell_density"): ({}, {"culture": {"cell_density": "2e5 cell/cm^2"}}, "build"),
    ("culture", "o2_consumption"): ({}, {"culture": {"o2_consumption": "1e-16 mol/s"}}, "build"),
    ("culture", "o2_inlet"): ({}, {"culture": {"o2_inlet": "0.1 mol/m^3"}}, "build"),
    ("culture", "o2_diffusivity"): ({}, {"culture": {"o2_diffusivity": "2e-9 m^2/s"}}, "build"),
    ("culture", "residence_time"): ({}, {"culture": {"residence_time": "2 s"}}, "build"),
    # graded on the 2D field, which a chip of 4 bed channels solves by default
    ("culture", "outside_window_limit"): (
        {"tree": {"bed_channels": 4}},
        {"culture": {"outside_window_limit": "10 %"}},
        "build",
    ),
    ("culture", "o2_km"): ({}, {"culture": {"o2_km": "1e-3 mol/m^3"}}, "build"),
    ("culture", "o2_ambient"): ({}, {"culture": {"o2_ambient": "15 kPa"}}, "build"),
    ("culture", "o2_critical"): ({}, {"culture": {"o2_critical": "0.05 mol/m^3"}}, "build"),
    ("supply", "tubing_o2_permeability"): (
        POROUS_TUBING,
        {"supply": {"tubing_o2_permeability": "800 barrer"}},
        "build",
    ),
    ("walls", "o2_permeability"): (WALLS, {"walls": {"o2_permeability": "100 barrer"}}, "build"),
    ("solutes", "name"): (SOLUTES, {"solutes": [{**SOLUTE, "name": "lactate"}]}, "build"),
    ("solutes", "diffusivity"): (
        SOLUTES,
        {"solutes": [{**SOLUTE, "diffusivity": "5e-10 m^2/s"}]},
        "build",
    ),
    ("solutes", "inlet"): (SOLUTES, {"solutes": [{**SOLUTE, "inlet": "25 mol/m^3"}]}, "build"),
    ("solutes", "uptake"): (SOLUTES, {"solutes": [{**SOLUTE, "uptake": "3e-16 mol/s"}]}, "build"),
    ("solutes", "km"): (SOLUTES, {"solutes": [{**SOLUTE, "km": "0.1 mol/m^3"}]}, "build"),
    ("fabrication", "depths"): ({}, {"fabrication": {"depths": ["60 um"]}}, "build"),
    ("fabrication", "grid"): ({}, {"fabrication": {"grid": "5 um"}}, "build"),
    ("fabrication", "min_feature"): ({}, {"fabrication": {"min_feature": "40 um"}}, "build"),
    ("fabrication", "min_width"): ({}, {"fabrication": {"min_width": "40 um"}}, "build"),
    ("fabrication", "max_width"): ({}, {"fabrication": {"max_width": "500 um"}}, "build"),
    ("fabrication", "max_width_to_depth"): (
        {},
        {"fabrication": {"max_width_to_depth": 10}},
        "build",
    ),
    ("fabrication", "max_depth_to_width"): (
        {},
        {"fabrication": {"max_depth_to_width": 1.2}},
        "build",
    ),
    ("fabrication", "min_gap"): ({}, {"fabrication": {"min_gap": "110 um"}}, "build"),
    ("fabrication", "bend_radius"): ({}, {"fabrication": {"bend_radius": 3}}, "build"),
    ("fabrication", "alignment_margin"): (
        TWO_LEVEL,
        {"fabrication": {"alignment_margin": "20 um"}},
        "build",
    ),
    ("chip", "width"): ({}, {"chip": {"width": "80 mm"}}, "build"),
    ("chip", "height"): ({}, {"chip": {"height": "30 mm"}}, "build"),
    ("chip", "margin"): ({}, {"chip": {"margin": "2 mm"}}, "build"),
    ("chip", "punch"): ({}, {"chip": {"punch": "1.5 mm"}}, "build"),
    ("chip", "port_keepout"): ({}, {"chip": {"port_keepout": "0.8 mm"}}, "build"),
    ("supply", "inlet"): (
        {},
        {"supply": {"inlet": "pressure", "pressure": "600 Pa"}},
        "build",
    ),
    ("supply", "flow"): ({}, {"supply": {"flow": "10 uL/min"}}, "build"),
    ("supply", "pressure"): (
        {"supply": {"inlet": "pressure", "pressure": "600 Pa"}},
        {"supply": {"pressure": "700 Pa"}},
        "build",
    ),
    ("supply", "head"): (
        {"supply": {"inlet": "reservoir", "head": "6 cm"}},
        {"supply": {"head": "7 cm"}},
        "build",
    ),
    ("supply", "outlet"): ({}, {"supply": {"outlet": "reservoir", "outlet_head": "1 cm"}}, "build"),
    ("supply", "outlet_head"): (
        {"supply": {"outlet": "reservoir", "outlet_head": "1 cm"}},
        {"supply": {"outlet_head": "2 cm"}},
        "build",
    ),
    ("supply", "tubing_diameter"): ({}, {"supply": {"tubing_diameter": "0.8 mm"}}, "build"),
    ("supply", "inlet_tubing"): ({}, {"supply": {"inlet_tubing": "50 cm"}}, "build"),
    ("supply", "outlet_tubing"): ({}, {"supply": {"outlet_tubing": "20 cm"}}, "build"),
    ("limits", "bond_pressure"): ({}, {"limits": {"bond_pressure": "150 kPa"}}, "build"),
    ("limits", "safety_factor"): ({}, {"limits": {"safety_factor": 3}}, "build"),
    ("limits", "pump_pressure"): ({}, {"limits": {"pump_pressure": "50 kPa"}}, "build"),
    ("export", "units"): ({}, {"export": {"units": "mm"}}, "dxf"),
    ("export", "dxf_version"): ({}, {"export": {"dxf_version": "R12"}}, "dxf"),
    ("export", "holes"): ({}, {"export": {"holes": "keyhole"}}, "dxf"),
    ("export", "polarity"): ({}, {"export": {"polarity": "inverse"}}, "dxf"),
    ("export", "mirror"): ({}, {"export": {"mirror": True}}, "dxf"),
    ("export", "gds_vertex_limit"): ({}, {"export": {"gds_vertex_limit": 199}}, "gds"),
    ("peristaltic", "flow"): (PERISTALTIC, {"supply": {"flow": "8 uL/min"}}, "build"),
    ("peristaltic", "rpm"): (PERISTALTIC, {"supply": {"rpm": 20}}, "build"),
    ("peristaltic", "rollers"): (PERISTALTIC, {"supply": {"rollers": 4}}, "build"),
    ("peristaltic", "pulsation"): (PERISTALTIC, {"supply": {"pulsation": 0.2}}, "build"),
    ("peristaltic", "waveform"): (
        PERISTALTIC,
        {"supply": {"rpm": None, "rollers": None, "pulsation": None, "waveform": WAVEFORM}},
        "build",
    ),
    ("pulsatile-pressure", "pressure_amplitude"): (
        PULSING,
        {"supply": {"pressure_amplitude": "50 Pa"}},
        "build",
    ),
    ("pulsatile-pressure", "frequency"): (PULSING, {"supply": {"frequency": "2 Hz"}}, "build"),
    ("reservoir", "head"): (DRAINING, {"supply": {"head": "6 cm"}}, "build"),
    ("reservoir", "reservoir_area"): (
        DRAINING,
        {"supply": {"reservoir_area": "50 mm^2"}},
        "build",
    ),
    ("reservoir", "outlet_area"): (
        {"supply": {**DRAINING["supply"], "outlet": "reservoir", "outlet_head": "1 cm"}},
        {"supply": {"outlet_area": "100 mm^2"}},
        "build",
    ),
    ("reservoir", "refill_interval"): (
        DRAINING,
        {"supply": {"refill_interval": "12 h"}},
        "build",
    ),
    ("rocker", "tilt_angle"): (ROCKING, {"supply": {"tilt_angle": "15 deg"}}, "build"),
    ("rocker", "period"): (ROCKING, {"supply": {"period": "2 min"}}, "build"),
    ("rocker", "reservoir_spacing"): (
        ROCKING,
        {"supply": {"reservoir_spacing": "40 mm"}},
        "build",
    ),
    ("rocker", "reservoir_area"): (ROCKING, {"supply": {"reservoir_area": "100 mm^2"}}, "build"),
    ("rocker", "head"): (ROCKING, {"supply": {"head": "5 mm"}}, "build"),
    # a damper reports its start-up time constant under any supply; a target needs a pulse
    ("supply.damper", "air_volume"): (
        {"supply": {"damper": {"air_volume": "50 uL"}}},
        {"supply": {"damper": {"air_volume": "80 uL"}}},
        "build",
    ),
    ("supply.damper", "compliance"): (
        {"supply": {"damper": {"compliance": "1e-12 m^3/Pa"}}},
        {"supply": {"damper": {"compliance": "2e-12 m^3/Pa"}}},
        "build",
    ),
    ("supply.damper", "target_pulsation"): (
        {"supply": {**PERISTALTIC["supply"], "damper": {"target_pulsation": "10 %"}}},
        {"supply": {"damper": {"target_pulsation": "5 %"}}},
        "build",
    ),
    ("walls", "material"): (WALLS, CUSTOM_WALLS, "build"),
    ("walls", "modulus"): (CUSTOM_WALLS, {"walls": {"modulus": "3 MPa"}}, "build"),
    ("walls", "poisson_ratio"): (CUSTOM_WALLS, {"walls": {"poisson_ratio": 0.4}}, "build"),
    ("walls", "roof_thickness"): (WALLS, {"walls": {"roof_thickness": "2 mm"}}, "build"),
    # [tolerances] feeds chipflow vary: its results must change
    ("tolerances", "depth"): (VARIED, {"tolerances": {"depth": "8 %"}}, "vary"),
    ("tolerances", "width"): (VARIED, {"tolerances": {"width": "1 um"}}, "vary"),
    ("tolerances", "flow"): (VARIED, {"tolerances": {"flow": "3 %"}}, "vary"),
    ("tolerances", "viscosity"): (VARIED, {"tolerances": {"viscosity": "2 %"}}, "vary"),
    ("tolerances", "distribution"): (VARIED, {"tolerances": {"distribution": "normal"}}, "vary"),
    ("tolerances", "samples"): (VARIED, {"tolerances": {"samples": 40}}, "vary"),
    ("tolerances", "seed"): (VARIED, {"tolerances": {"seed": 1}}, "vary"),
}

# words in the table that are values or section names, not keys
VALUES = {
    "medium", "water", "custom", "equal-shear", "shear-target", "area-growth", "table",
    "rectangular", "round", "floor", "mean", "max", "all", "bed", "syringe", "pressure",
    "reservoir", "open", "um", "mm", "R2000", "R12", "split", "keyhole", "channels", "inverse",
    "uniform", "normal", "chipflow vary", '"10 %"', '"5 um"', "peristaltic",
    "pulsatile-pressure", "rocker", "PDMS", '"hex"', '"square"', "1 day", '"15 deg"',
    "time [s],flow [uL/min]", '"auto"', '"35 %"', "rpm / 60 x rollers", "dh + s sin(theta)",
    "0.25", '"25 %"', "_", "-", "chamber", "mesh", 'kind = "chamber"',
}  # fmt: skip


#: The key tables of the reference page, by their ``:name:``.
KEY_TABLES = ("tree-design-keys", "time-varying-supply-keys", "network-design-keys")


def documented_keys() -> set[tuple[str, str]]:
    """(section, key) of every key in the reference page's key tables."""
    keys = set()
    for name in KEY_TABLES:
        for cells in guide_table("design-files", name):
            section = "" if cells[0] == "top level" else cells[0].strip("`[]")
            # a value in quotes inside the cell (e.g. "supply": `pressure` is both) is a key
            # when the cell lists it outside parentheses
            outside = re.sub(r"\([^()]*\)", "", cells[1])
            for word in re.findall(r"``([^`]+)``", cells[1]):
                if word.startswith("["):
                    continue
                if word in VALUES and f"``{word}``" not in outside:
                    continue
                if word in VALUES and (section, word) not in CASES:
                    continue
                keys.add((section, word))
    return keys


def merged(*changes: dict) -> dict:
    data = copy.deepcopy(changes[0].get("__design__", DEMO) if changes else DEMO)
    for change in changes:
        for k, v in change.items():
            if k == "__design__":
                continue
            if isinstance(v, dict):
                section = data.setdefault(k, {})
                for kk, vv in v.items():
                    if vv is None:
                        section.pop(kk, None)
                    else:
                        section[kk] = vv
            else:
                data[k] = v
    return data


#: Keys whose effect is on the chip's 2D field: their builds solve it (the others' show in
#: the drawing, the network and the checks without it, so their builds leave it out).
FIELD_KEYS = {("culture", "outside_window_limit")}


def fingerprint(data: dict, what: str, tmp_path: Path, field: bool = False) -> bytes:
    source = DesignSource.from_dict(data, "keys.toml")
    if what == "sizing":
        design = size_tree(load_tree_spec(source.top))
        return repr(design.levels).encode()
    build = build_design(source, field=None if field else False)
    if what == "vary":
        from chipflow.spec.tolerances import read_tolerances
        from chipflow.variation.vary import vary_build

        variation = vary_build(build, read_tolerances(source.top), workers=1)
        return json.dumps(variation.results, sort_keys=True, default=str).encode()
    if what == "build":
        results = dict(build.results)
        results["design"] = {k: v for k, v in results["design"].items() if k != "sha256"}
        drawn = build.layout.layers if build.layout is not None else ()
        layers = b"".join(shapely.to_wkb(layer.geometry) for layer in drawn)
        return json.dumps(results, sort_keys=True, default=str).encode() + layers
    if what == "dxf":
        from chipflow.export.dxf import write_dxf

        return write_dxf(build.layout, tmp_path / "k.dxf", build.export.dxf).read_bytes()
    from chipflow.export.gds import write_gds

    return write_gds(build.layout, tmp_path / "k.gds", build.export.gds).read_bytes()


def test_the_table_and_the_cases_list_the_same_keys():
    assert documented_keys() == set(CASES)


@pytest.fixture(autouse=True)
def _plain_junctions(plain_pieces):
    # the junction corrections' values are tested in test_junctions.py; here only whether a
    # key changes the build matters, so a fixed stand-in spares the 2D solves
    return plain_pieces


#: Fingerprints of the cases' starting designs: 146 cases start from 37 designs (a design
#: always gives the same outputs, tests/test_build.py), so each is built once.
_BEFORE: dict[tuple[str, str, bool], bytes] = {}


@pytest.mark.parametrize("section,key", sorted(CASES), ids=lambda v: v or "top")
def test_changing_a_documented_key_changes_the_build(section, key, tmp_path):
    context, change, what = CASES[(section, key)]
    field = (section, key) in FIELD_KEYS
    start = (json.dumps(merged(context), sort_keys=True, default=str), what, field)
    if start not in _BEFORE:
        _BEFORE[start] = fingerprint(merged(context), what, tmp_path, field)
    before = _BEFORE[start]
    after = fingerprint(merged(context, change), what, tmp_path, field)
    assert before != after, f"[{section}] {key} had no effect on the {what}"
