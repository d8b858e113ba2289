"""Transport in builds: channels.csv columns, results.json ``transport``, checks, report,
console, the design-file keys, ``chipflow analyse --cell-type --o2-inlet``, oxygen defaults."""

from __future__ import annotations

import csv
import io
import json
import math
import tomllib
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from chipflow.build import DesignSource, build_design
from chipflow.cli import main
from chipflow.errors import SpecError
from chipflow.export.bundle import channels_csv
from chipflow.transport.oxygen import (
    BARRER,
    incubator_o2_pressure,
    o2_solubility,
    water_vapour_pressure,
)

ROOT = Path(__file__).resolve().parents[1]
DEMO = tomllib.loads((ROOT / "designs" / "demo_endothelial_bed.toml").read_text())
HEPATOCYTE = ROOT / "designs" / "hepatocyte_roof_bed.toml"


def built(data: dict, name: str = "t.toml"):
    return build_design(DesignSource.from_dict(data, name), field=False)


@pytest.fixture(scope="module")
def demo():
    return built(DEMO, "demo.toml")


@pytest.fixture(scope="module")
def hepatic():
    return build_design(HEPATOCYTE, field=False)


def test_channels_csv_has_the_oxygen_columns(demo):
    rows = list(csv.reader(io.StringIO(channels_csv(demo))))
    header = rows[0]
    # the header names each SI unit in brackets, as every other numeric column
    assert header[-3:] == ["o2_in [mol/m^3]", "o2_out [mol/m^3]", "o2_floor_min [mol/m^3]"]
    assert "width [m]" in header and "flow [m^3/s]" in header
    table = {h: [r[i] for r in rows[1:]] for i, h in enumerate(header)}
    tubing = [i for i, role in enumerate(table["role"]) if role == "tubing"]
    assert tubing and all(table["o2_floor_min [mol/m^3]"][i] == "" for i in tubing)
    chip = [i for i, role in enumerate(table["role"]) if role != "tubing"]
    floor = np.array([float(table["o2_floor_min [mol/m^3]"][i]) for i in chip])
    out = np.array([float(table["o2_out [mol/m^3]"][i]) for i in chip])
    assert np.all(floor <= out + 1e-15) and np.all(floor > 0)


def test_results_hold_transport_per_level_and_dosing(demo):
    t = demo.results["transport"]
    levels = demo.results["generations"]
    assert [(lv["role"], lv["generation"]) for lv in t["levels"]] == [
        (g["role"], g["generation"]) for g in levels
    ]
    keys = {"o2_in", "o2_out", "o2_floor_min", "peclet", "damkohler", "hypoxic_fraction"}
    for lv, g in zip(t["levels"], levels, strict=True):
        assert keys <= set(lv)
        # Pe = U h / D with the level's mean velocity and depth (3e-9 m^2/s, Sci Rep 2017)
        assert lv["peclet"] == pytest.approx(g["mean_velocity"] * g["depth"] / 3e-9, rel=1e-9)
        assert lv["o2_floor_min"] <= lv["o2_out"] <= lv["o2_in"]
    # Da = V h / (D c0): endothelial 1e-17 mol/s per cell x 1e9 cells/m^2 at 50 um
    bed = next(lv for lv in t["levels"] if lv["role"] == "bed")
    assert bed["damkohler"] == pytest.approx(1e-8 * 50e-6 / (3e-9 * t["o2_chip_inlet"]), rel=1e-9)
    dosing = t["dosing"]
    assert [set(d) >= {"t50", "t90"} for d in dosing["levels"]] == [True] * len(levels)
    slow = dosing["slowest"]
    assert slow["role"] == "bed" and 0 < slow["t50"] < slow["t90"]
    # 30 cm of 0.5 mm tubing at 12 uL/min hold 58.9 uL: 294.5 s, most of the delay
    assert slow["tubing_t50"] == pytest.approx(294.5, rel=0.02) and slow["tubing_share"] > 0.95
    units = demo.results["units"]
    assert units["o2_in"] == "mol/m^3" and units["t90"] == "s" and units["peclet"] == "1"
    json.dumps(demo.results, allow_nan=False, default=str)


def test_checks_grade_the_floor_and_inform_on_dosing(demo, hepatic):
    for build in (demo, hepatic):
        names = {c.name: c for c in build.checks}
        assert names["hypoxic share of the seeded floor"].status == "pass"
        assert names["lowest floor oxygen"].status == "pass"
        assert names["dosing delay to the bed"].status == "pass"
        # the lumped estimates of earlier versions are context, not checks
        assert "oxygen diffusion across the bed depth" not in names
        assert "oxygen used in the bed" not in names
    assert demo.results["transport"]["context"]["diffusion_time"] == pytest.approx(
        (50e-6) ** 2 / (2 * 3e-9)
    )  # Einstein 1905, h^2 / (2 D)


def test_the_roof_keeps_the_hepatocytes_breathing(hepatic):
    t = hepatic.results["transport"]
    assert t["roof_conductance"] > 0 and t["roof_influx"] > 0
    closed = tomllib.loads(HEPATOCYTE.read_text())
    del closed["walls"]
    lidded = built(closed, "lid.toml")
    tl = lidded.results["transport"]
    # without the roof's oxygen the cells take nearly all the flow brings (2.5 min at 3e5
    # cells/cm^2 of 4.8e-17 mol/s: V t / (h c0) = 1.07 of it, a mass balance) and the end of
    # the bed goes hypoxic; with it the floor stays far above the critical 0.02 mol/m^3
    assert 3e9 * 4.8e-17 * 150 / (100e-6 * tl["o2_chip_inlet"]) > 1.0
    assert tl["hypoxic_fraction"] > 0 and t["hypoxic_fraction"] == 0
    assert t["o2_floor_min"] > 4 * 0.02 > tl["o2_floor_min"]
    share = next(c for c in lidded.checks if c.name == "hypoxic share of the seeded floor")
    assert share.status == "warn"


def test_solutes_are_carried_and_dosed(hepatic):
    (glucose,) = hepatic.results["transport"]["solutes"]
    assert glucose["name"] == "glucose" and glucose["inlet_concentration"] == 5.5
    bed = next(lv for lv in glucose["levels"] if lv["role"] == "bed")
    assert 0 < bed["c_floor_min"] < bed["c_out"] < bed["c_in"] <= 5.5
    assert hepatic.results["transport"]["dosing"]["solute"] == "glucose"
    assert abs(glucose["mass_residual"]) < 1e-9


def test_report_console_and_profile_show_the_oxygen(hepatic, tmp_path):
    from chipflow.export.bundle import write_build
    from chipflow.report import profile_figure
    from chipflow.report.console import console_summary
    from chipflow.report.figures import OXYGEN_PANEL

    write_build(hepatic, tmp_path / "o")
    page = (tmp_path / "o" / "report.html").read_text()
    assert "<h2>Oxygen and dosing</h2>" in page and "is the supply tubing" in page
    text = console_summary(hepatic.results)
    assert "oxygen:" in text and "dosing:" in text
    titles = [ax.get_title(loc="left") for ax in profile_figure(hepatic.results).get_axes()]
    assert OXYGEN_PANEL in titles


def test_explicit_network_with_a_loop_and_tubing():
    build = build_design(ROOT / "designs" / "bench_loop_network.toml")
    t = build.results["transport"]
    assert t["waves"] >= 4 and abs(t["mass_residual"]) < 1e-12
    assert t["dosing"]["slowest"] is not None


@pytest.mark.parametrize(
    "change,message",
    [
        ({"supply": {"tubing_o2_permeability": "800 barrer"}}, "needs its outer diameter"),
        (
            {"supply": {"tubing_o2_permeability": "800 barrer", "tubing_outer_diameter": "0.4 mm"}},
            "must exceed tubing_diameter",
        ),
        ({"solutes": [{"name": "a", "diffusivity": "1e-9 m^2/s", "inlet": "1 mM"}] * 2}, "taken"),
        ({"solutes": [{"name": "a", "diffusivity": "1e-9 m/s", "inlet": "1 mM"}]}, "diffusivity"),
        ({"walls": {"roof_thickness": "1 mm", "o2_permeability": "1 Pa"}}, "gas permeability"),
        ({"culture": {"o2_critical": "-1 mol/m^3"}}, "greater than zero"),
    ],
)
def test_bad_transport_keys_are_refused(change, message):
    data = {**DEMO, **{k: {**DEMO.get(k, {}), **v} if isinstance(v, dict) else v
                       for k, v in change.items()}}  # fmt: skip
    with pytest.raises(SpecError, match=message):
        built(data)


def test_gas_permeable_tubing_brings_oxygen_poor_medium_up(tmp_path):
    data = {
        **DEMO,
        "culture": {**DEMO["culture"], "o2_inlet": "0.05 mol/m^3"},
        "supply": {
            **DEMO["supply"], "tubing_outer_diameter": "2.5 mm",
            "tubing_o2_permeability": "800 barrer",
        },
    }  # fmt: skip
    t = built(data).results["transport"]
    # 30 cm of silicone-like tubing, a 1 mm wall: the medium reaches the chip close to the
    # incubator's equilibrium, from the pump's 0.05 mol/m^3
    assert t["o2_supply"] == 0.05 and 0.05 < t["o2_chip_inlet"] <= t["o2_equilibrium"]
    assert t["o2_chip_inlet"] > 0.15 and t["tubing_conductance"] > 0


def test_analyse_maps_oxygen_with_a_cell_type(tmp_path):
    import ezdxf

    doc = ezdxf.new("R2000")
    doc.header["$INSUNITS"] = 4
    doc.modelspace().add_lwpolyline([(0, -0.2), (12, -0.2), (12, 0.2), (0, 0.2)], close=True)
    mask = tmp_path / "straight.dxf"
    doc.saveas(mask)
    base = ["analyse", str(mask), "--depth", "50um", "--inlet", "0,0", "--outlet", "12,0"]
    base += ["--flow", "0.5uL/min"]
    runner = CliRunner()
    r = runner.invoke(main, [*base, "--cell-type", "hepatocyte", "--o2-inlet", "0.1mol/m^3"])
    assert r.exit_code == 0, r.output
    assert "oxygen: 0.1 mol/m^3 in" in r.output
    j = runner.invoke(
        main, [*base, "--cell-type", "hepatocyte", "--json", "-o", str(tmp_path / "a")]
    )
    t = json.loads(j.output)["transport"]
    assert t["o2_inlet"] == pytest.approx(0.1997, rel=1e-3) and t["o2_critical"] == 0.02
    assert 0 < t["o2_floor_min"] < t["o2_out"] < t["o2_inlet"]
    assert (tmp_path / "a" / "oxygen.svg").is_file()
    alone = runner.invoke(main, [*base, "--o2-inlet", "0.1mol/m^3"])
    assert alone.exit_code == 2 and "needs --cell-type" in alone.output


def test_incubator_oxygen_against_outside_values():
    iapws97 = pytest.importorskip("iapws.iapws97")
    for t in (293.15, 310.15, 350.0):  # IAPWS-IF97 saturation pressure, the iapws package
        assert water_vapour_pressure(t) == pytest.approx(iapws97._PSat_T(t) * 1e6, rel=1e-9)
    # Henry's law constant of O2 (Sander, Atmos Chem Phys 23 (2023) 10901: 1.3e-5 mol/(m^3 Pa)
    # at 25 degC, d ln H / d(1/T) = 1500 K; two digits) against our Benson & Krause (1984)
    for t in (298.15, 310.15):
        sander = 1.3e-5 * math.exp(1500 * (1 / t - 1 / 298.15))
        assert float(o2_solubility(t)) == pytest.approx(sander, rel=0.04)
    # the default: medium equilibrated with a humidified 5 % CO2 incubator at 37 degC holds
    # about 0.2 mol/m^3 (Sci Rep 2017;7:42113, Table 1)
    assert float(o2_solubility(310.15)) * incubator_o2_pressure() == pytest.approx(0.2, rel=0.02)
    # 1 Barrer = 3.35e-16 mol m / (m^2 s Pa) (the trade's conversion)
    assert BARRER == pytest.approx(3.35e-16, rel=2e-3)
