"""Fluid properties against the IAPWS check value and the `iapws` reference library."""

from __future__ import annotations

import iapws
import pytest

from chipflow.errors import SpecError
from chipflow.physics.fluid import (
    MEDIUM_VISCOSITY_37C,
    culture_medium,
    fluid_preset,
    water,
    water_viscosity,
)


def test_iapws_2008_check_value() -> None:
    # Source: IAPWS R12-08, Table 4: T = 298.15 K, rho = 998 kg/m^3 -> 889.735100 uPa s.
    assert water_viscosity(298.15, 998.0) * 1e6 == pytest.approx(889.735100, abs=1e-6)


@pytest.mark.parametrize("celsius", [20.0, 25.0, 37.0, 5.0, 80.0])
def test_water_against_reference_library(celsius: float) -> None:
    # Reference library: the `iapws` package (IAPWS-95 state, IAPWS 2008 viscosity) at 0.1 MPa.
    # REFERENCES.md quotes 1001.6 / 890.02 / 691.30 uPa s at 20 / 25 / 37 C.
    temperature = 273.15 + celsius
    ref = iapws.IAPWS95(T=temperature, P=0.101325)
    ours = water(temperature)
    assert ours.density == pytest.approx(ref.rho, rel=2e-5)  # Kell (1975) correlation
    assert ours.viscosity == pytest.approx(ref.mu, rel=2e-5)


def test_published_water_viscosities() -> None:
    # Source: REFERENCES.md section 2 (IAPWS 2008 at 0.1 MPa).
    assert water(293.15).viscosity * 1e6 == pytest.approx(1001.6, abs=0.1)
    assert water(298.15).viscosity * 1e6 == pytest.approx(890.02, abs=0.02)
    assert water(310.15).viscosity * 1e6 == pytest.approx(691.30, abs=0.02)


def test_medium_default_and_override() -> None:
    # The 37 C default lies in the 0.93-0.97 mPa s range for 10 % serum (from memory, low
    # confidence; REFERENCES.md section 2); a measured value overrides it.
    assert 0.93e-3 <= culture_medium().viscosity <= 0.97e-3
    assert culture_medium().viscosity == MEDIUM_VISCOSITY_37C
    assert culture_medium(viscosity=1.1e-3).viscosity == 1.1e-3
    # colder medium is more viscous, like water
    assert culture_medium(293.15).viscosity > culture_medium().viscosity


def test_presets_and_errors() -> None:
    assert fluid_preset("water").temperature == 293.15
    assert fluid_preset("medium").temperature == 310.15
    with pytest.raises(SpecError, match="outside 0-100 degC"):
        water(400.0)
    with pytest.raises(SpecError, match="unknown fluid"):
        fluid_preset("blood")
    with pytest.raises(ValueError):
        fluid_preset("water", viscosity=-1.0)
