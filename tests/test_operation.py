"""Time-varying operation: compliance, roof deformation, harmonic solve, reservoirs, rocker."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate, signal

from chipflow.network import NetworkBuilder, solve
from chipflow.network.supply import STANDARD_GRAVITY
from chipflow.operation.compliance import (
    ATMOSPHERE,
    air_compliance,
    inertance,
    plate_rigidity,
    roof_compliance,
    tube_compliance,
    womersley_number,
)
from chipflow.operation.deformation import (
    PROFILE_MOMENTS,
    deflection_scale,
    pressure_integral,
    resistance_ratio,
    roof_deflection,
)
from chipflow.operation.frequency import harmonic_response
from chipflow.operation.reservoirs import drain_reservoirs, port_response, rocker_cycle
from chipflow.operation.waveform import Waveform, peristaltic_frequency
from chipflow.physics.duct import resistance
from chipflow.physics.fluid import water

FLUID = water()


def one_channel():
    b = NetworkBuilder()
    b.channel("c", "in", "out", width=200e-6, depth=50e-6, length=10e-3)
    return b.build()


# -- RC low-pass: a channel fed through a compliance --------------------------------------------
@pytest.mark.parametrize("omega_rc", [0.1, 1.0, 3.0, 20.0])
def test_lumped_compliance_at_inlet_is_an_rc_low_pass(omega_rc: float) -> None:
    net = one_channel()
    r = float(resistance(200e-6, 50e-6, 10e-3, FLUID.viscosity))
    c = 1e-13
    omega = omega_rc / (r * c)
    nodes = np.array([c, 0.0])
    out = harmonic_response(net, FLUID, omega, nodes, {"out": 0.0}, {"in": 1.0}, inertia=False)
    ratio = out.flow[0]
    # analytic RC low-pass (Bruus 2008, ch. 4): 1 / (1 + j omega R C)
    assert abs(ratio) == pytest.approx(1.0 / math.sqrt(1.0 + omega_rc**2), rel=1e-9)
    assert np.angle(ratio) == pytest.approx(-math.atan(omega_rc), abs=1e-9)
    # independent reference: scipy.signal's frequency response of 1 / (RC s + 1)
    _, h = signal.freqresp(signal.TransferFunction([1.0], [r * c, 1.0]), w=[omega])
    assert ratio == pytest.approx(complex(h[0]), rel=1e-9)


def test_rc_low_pass_agrees_with_a_time_domain_simulation() -> None:
    net = one_channel()
    r = float(resistance(200e-6, 50e-6, 10e-3, FLUID.viscosity))
    c = 2e-13
    omega = 2.0 / (r * c)
    out = harmonic_response(net, FLUID, omega, np.array([c, 0.0]), {"out": 0.0}, {"in": 1.0},
                            inertia=False)  # fmt: skip
    # scipy.signal.lsim of dq/dt = (Q_in - q)/(RC) over 30 time constants; the last period
    # holds the periodic state
    period = 2 * np.pi / omega
    t = np.linspace(0.0, 30 * r * c + period, 60001)
    _, q, _ = signal.lsim(signal.TransferFunction([1.0], [r * c, 1.0]), np.cos(omega * t), t)
    last = t > t[-1] - period
    expected = np.real(out.flow[0] * np.exp(1j * omega * t[last]))
    assert np.max(np.abs(q[last] - expected)) < 2e-4


def test_inertance_adds_the_second_order_term() -> None:
    net = one_channel()
    r = float(resistance(200e-6, 50e-6, 10e-3, FLUID.viscosity))
    ell = float(inertance(200e-6, 50e-6, 10e-3, FLUID.density))
    assert ell == pytest.approx(FLUID.density * 10e-3 / (200e-6 * 50e-6))  # rho l / A
    c, omega = 1e-13, 1e4
    out = harmonic_response(net, FLUID, omega, np.array([c, 0.0]), {"out": 0.0}, {"in": 1.0})
    # the RLC divider 1 / (L C s^2 + R C s + 1), scipy.signal as the reference
    _, h = signal.freqresp(signal.TransferFunction([1.0], [ell * c, r * c, 1.0]), w=[omega])
    assert out.flow[0] == pytest.approx(complex(h[0]), rel=1e-9)


def _ladder():
    b = NetworkBuilder()
    b.tube("feed", "pump", "a", diameter=0.5e-3, length=0.2)
    b.channel("ab", "a", "b", width=300e-6, depth=50e-6, length=5e-3)
    b.channel("ac", "a", "c", width=200e-6, depth=50e-6, length=8e-3)
    b.channel("bc", "b", "c", width=100e-6, depth=50e-6, length=3e-3)
    b.channel("co", "c", "out", width=300e-6, depth=50e-6, length=5e-3)
    b.channel("bo", "b", "out", width=150e-6, depth=50e-6, length=6e-3)
    return b.build()


@settings(max_examples=25, deadline=None)
@given(
    st.complex_numbers(max_magnitude=1e-9, allow_nan=False, allow_infinity=False),
    st.complex_numbers(max_magnitude=1e3, allow_nan=False, allow_infinity=False),
    st.floats(0.1, 100.0),
)
def test_the_response_is_linear_and_superposes(q_amp: complex, p_amp: complex, f: float) -> None:
    """A flow source at the pump and a pressure source at the outlet act independently
    (linearity, superposition), at any frequency."""
    net = _ladder()
    c = np.linspace(1e-14, 5e-14, net.n_nodes)
    w = 2 * np.pi * f
    both = harmonic_response(net, FLUID, w, c, {"out": p_amp}, {"pump": q_amp})
    flow_only = harmonic_response(net, FLUID, w, c, {"out": 0.0}, {"pump": 1.0})
    pressure_only = harmonic_response(net, FLUID, w, c, {"out": 1.0}, {})
    expected = q_amp * flow_only.flow + p_amp * pressure_only.flow
    scale = abs(q_amp) + abs(p_amp) * 1e-12 + 1e-30
    assert np.max(np.abs(both.flow - expected)) <= 1e-9 * scale


@settings(max_examples=20, deadline=None)
@given(st.lists(st.floats(-1.0, 1.0), min_size=4, max_size=4))
def test_harmonics_superpose_in_time(parts: list[float]) -> None:
    """A waveform's samples are the sum of its harmonics' samples (superposition)."""
    c1, c2 = complex(parts[0], parts[1]), complex(parts[2], parts[3])
    both = Waveform(1.0, 2.0, (c1, c2)).sample(64)
    first = Waveform(0.5, 2.0, (c1,)).sample(64)
    second = Waveform(0.5, 2.0, (0.0, c2)).sample(64)
    assert np.allclose(both, first + second, atol=1e-12)


def test_waveform_from_samples_recovers_its_harmonics() -> None:
    t = np.linspace(0.0, 2.0, 201)  # one period of 2 s, last sample closes it
    x = 3.0 + 0.5 * np.cos(np.pi * t) + 0.2 * np.sin(2 * np.pi * t)
    w = Waveform.from_samples(t, x)
    assert w.frequency == pytest.approx(0.5)
    assert w.mean == pytest.approx(3.0, abs=1e-4)
    assert w.harmonics[0] == pytest.approx(0.5, abs=2e-4)
    assert w.harmonics[1] == pytest.approx(-0.2j, abs=2e-4)  # sin = Re(-j e^{jwt})
    # a roller pump pulses once per roller passage (arithmetic of the mechanism)
    assert peristaltic_frequency(10, 3) == pytest.approx(0.5)


# -- compliance ------------------------------------------------------------------------------
def test_tube_compliance_tends_to_the_thin_wall_limit() -> None:
    a, t, e, length = 0.4e-3, 1e-6, 2e6, 0.3
    # thin-walled tube: hoop strain p a / (E t) gives dV/dp = 2 pi a^3 l / (E t) (analytic)
    thin = 2 * np.pi * a**3 * length / (e * t)
    assert float(tube_compliance(2 * a, 2 * (a + t), length, e)) == pytest.approx(thin, rel=1e-2)


def test_roof_compliance_is_the_integral_of_the_deflection() -> None:
    w, length, b = 500e-6, 4e-3, float(plate_rigidity(1.5e6, 200e-6, 0.5))
    area, _ = integrate.quad(lambda x: roof_deflection(x, w, 1.0, b), -w / 2, w / 2)
    assert float(roof_compliance(w, length, b)) == pytest.approx(area * length, rel=1e-10)
    # clamped strip under uniform load: centre deflection q w^4 / (384 D) (Timoshenko &
    # Woinowsky-Krieger, Theory of Plates and Shells 1959, cylindrical bending; from memory)
    assert float(roof_deflection(0.0, w, 100.0, b)) == pytest.approx(100.0 * w**4 / (384 * b))


def test_trapped_air_and_womersley() -> None:
    # isothermal ideal gas: C = V / p_abs (Bruus 2008)
    assert float(air_compliance(1e-9, 1000.0)) == pytest.approx(1e-9 / (ATMOSPHERE + 1000.0))
    # Womersley number (D_h / 2) sqrt(omega rho / mu): for a 1 mm tube of water at 1 rad/s
    alpha = float(womersley_number(1e-3, 1e-3, 1.0, 1000.0, 1e-3, True))
    assert alpha == pytest.approx(0.5 * 1e-3 * math.sqrt(1e6))


# -- roof deformation (Christov et al., J Fluid Mech 2018) ------------------------------------
def test_profile_moments_are_the_published_coefficients() -> None:
    # int (1/4 - xi^2)^(2n) over the width: 1/30, 1/630, 1/12012 (Christov et al. 2018,
    # from memory); computed here by quadrature
    for n, value in enumerate(PROFILE_MOMENTS, start=1):
        numeric, _ = integrate.quad(lambda x, n=n: (0.25 - x * x) ** (2 * n), -0.5, 0.5)
        assert value == pytest.approx(numeric, rel=1e-12)


def test_zero_pressure_or_a_rigid_roof_gives_the_rigid_channel() -> None:
    phi = float(deflection_scale(400e-6, plate_rigidity(1.5e6, 100e-6)))
    assert resistance_ratio(0.0, 0.0, 50e-6, phi) == pytest.approx(1.0, abs=1e-15)
    assert resistance_ratio(5e3, 0.0, 50e-6, 0.0) == pytest.approx(1.0, abs=1e-15)
    # and small pressures give the rigid conductance as the slope (lubrication limit)
    g = pressure_integral(1e-6, 50e-6, phi) / 1e-6
    assert g == pytest.approx((50e-6) ** 3, rel=1e-9)


def test_flow_pressure_relation_agrees_with_a_direct_lubrication_solution() -> None:
    """The quartic of the model against an independent solution: integrate h(x, p)^3 across
    the width by quadrature and march dp/dz = -12 mu Q / (int h^3 dx) along the channel."""
    w, h, length, mu = 600e-6, 30e-6, 10e-3, 1e-3
    b = float(plate_rigidity(1.5e6, 80e-6, 0.5))
    phi = float(deflection_scale(w, b))
    p_in = 4e3
    model_q = w / (12 * mu * length) * float(pressure_integral(p_in, h, phi))

    def width_integral(p: float) -> float:
        value, _ = integrate.quad(lambda x: (h + roof_deflection(x, w, p, b)) ** 3, -w / 2, w / 2)
        return value

    def outlet_pressure(q: float) -> float:
        sol = integrate.solve_ivp(lambda z, p: [-12 * mu * q / width_integral(p[0])],
                                  (0.0, length), [p_in], rtol=1e-10, atol=1e-6)  # fmt: skip
        return float(sol.y[0, -1])

    from scipy.optimize import brentq

    q_direct = brentq(outlet_pressure, model_q * 0.5, model_q * 1.5, xtol=1e-20, rtol=1e-12)
    assert model_q == pytest.approx(q_direct, rel=1e-6)
    # a soft roof carries more flow than the rigid one at the same pressure drop
    assert model_q > w * h**3 * p_in / (12 * mu * length) * 1.05


# -- draining reservoirs and the rocker --------------------------------------------------------
def test_two_reservoirs_through_one_channel_decay_exponentially() -> None:
    net = one_channel()
    r = float(resistance(200e-6, 50e-6, 10e-3, FLUID.viscosity))
    rho_g = FLUID.density * STANDARD_GRAVITY
    area = 20e-6  # 20 mm^2
    g, offset = port_response(net, FLUID, {"in": 0.0, "out": 0.0}, {}, ["in", "out"])
    assert g == pytest.approx(np.array([[1, -1], [-1, 1]]) / r, rel=1e-12)
    drain = drain_reservoirs(g, offset, np.array([area, area]), np.array([0.02, 0.005]),
                             FLUID.density)  # fmt: skip
    tau = r * area / (2 * FLUID.density * STANDARD_GRAVITY)  # analytic: R A / (2 rho g)
    assert drain.time_constant == pytest.approx(tau, rel=1e-9)
    expected = 0.015 * np.exp(-drain.time / tau)
    assert np.max(np.abs(drain.heads[0] - drain.heads[1] - expected)) < 1e-8
    # the level settles at the mean head (volume is conserved)
    assert drain.heads[:, -1] == pytest.approx([0.0125, 0.0125], abs=0.015 * np.exp(-6) + 1e-7)
    # the flow falls to 10 % after tau ln 10
    assert drain.time_to_level == pytest.approx(tau * math.log(10), rel=1e-3)
    assert drain.flow[0] == pytest.approx(rho_g * 0.015 / r, rel=1e-9)


def test_a_rocker_without_tilt_gives_no_flow() -> None:
    cycle = rocker_cycle(1e12, 1e-4, 0.05, 0.0, 60.0, FLUID.density)
    assert np.all(cycle.flow == 0.0)


def test_rocker_periodic_state_agrees_with_time_integration() -> None:
    r, area, spacing, tilt, period = 2e12, 0.1e-6, 0.06, math.radians(15), 30.0
    cycle = rocker_cycle(r, area, spacing, tilt, period, FLUID.density)
    tau = cycle.time_constant
    assert tau == pytest.approx(r * area / (2 * FLUID.density * STANDARD_GRAVITY))

    # independent: march d(dh)/dt = -(dh + s sin theta(t)) / tau for many periods
    def rhs(t, dh):
        return [-(dh[0] + spacing * math.sin(tilt * math.sin(2 * math.pi * t / period))) / tau]

    n = 12
    sol = integrate.solve_ivp(rhs, (0.0, n * period), [0.0], dense_output=True, rtol=1e-10,
                              atol=1e-14)  # fmt: skip
    t_last = (n - 1) * period + cycle.time
    liquid = sol.sol(t_last)[0]
    head = liquid + spacing * np.sin(tilt * np.sin(2 * np.pi * t_last / period))
    # rocking tilt lifts one reservoir s sin(theta) above the other (geometry)
    assert np.max(np.abs(head - cycle.head_difference)) < 1e-6 * spacing
    assert cycle.flow == pytest.approx(FLUID.density * STANDARD_GRAVITY * head / r, rel=1e-5,
                                       abs=1e-16)  # fmt: skip


def test_a_single_reservoir_drains_into_an_open_outlet() -> None:
    net = one_channel()
    r = float(resistance(200e-6, 50e-6, 10e-3, FLUID.viscosity))
    steady = solve(net, FLUID, {"in": 100.0, "out": 0.0})
    assert steady.flow[0] == pytest.approx(100.0 / r)
    g, offset = port_response(net, FLUID, {"in": 0.0, "out": 0.0}, {}, ["in"])
    drain = drain_reservoirs(g, offset, np.array([10e-6]), np.array([0.01]), FLUID.density)
    tau = r * 10e-6 / (FLUID.density * STANDARD_GRAVITY)  # R A / (rho g)
    assert drain.time_constant == pytest.approx(tau, rel=1e-9)
    assert drain.heads[0] == pytest.approx(0.01 * np.exp(-drain.time / tau), abs=1e-9)


def test_operation_checks_grade_at_their_limits() -> None:
    from chipflow.checks.cell_types import ShearWindow
    from chipflow.checks.operation import (
        check_deformation,
        check_drain,
        check_flow_reversal,
        check_inertia,
        check_oscillating_shear,
        check_time_in_window,
        check_wall_model,
    )

    window = ShearWindow("endothelial", 0.5, 1.0, "Dewey et al. 1981")
    # deformation: warn above 5 % (chipflow default)
    assert check_deformation(["a"], [0.05]).status == "pass"
    assert check_deformation(["a", "b"], [0.01, 0.0501]).status == "warn"
    # outside every roof model's range: warn only where the resistance moves by over 1 %
    assert check_wall_model(["a", "b"], ["", "shorter than 2 widths"], [0.5, 0.01]).status == (
        "pass"
    )
    assert check_wall_model(["a", "b"], ["", "deeper than wide"], [0.0, 0.0101]).status == "warn"
    # Womersley number: quasi-steady below 1 (common practice)
    assert check_inertia(["a"], [0.99]).status == "pass"
    assert check_inertia(["a"], [1.0]).status == "warn"
    assert check_flow_reversal(["a"], [-1e-15]).status == "warn"
    assert check_flow_reversal(["a"], [0.0]).status == "pass"
    statuses = [check_time_in_window(["a"], [f], window).status for f in (1.0, 0.6, 0.1, 0.09)]
    assert statuses == ["pass", "warn", "warn", "fail"]
    assert check_drain(["a"], [0.99], window, 3600.0).status == "warn"
    # oscillating shear: the steady window does not apply (warn with the numbers) ...
    (osc,) = check_oscillating_shear(["a"], [0.5], [0.0], [1.2], [0.75], window, 0.05)
    assert osc.status == "warn" and "steady one-way flow" in osc.message and "0.75" in osc.message
    # ... unless the cell type has an oscillatory window: then its time-averaged magnitude is
    # graded like the steady floor shear (20 % band warns)
    cyclic = ShearWindow("x", 0.5, 1.0, "s", ShearWindow("x", 0.2, 0.6, "oscillatory source"))
    graded = [check_oscillating_shear(["a"], [0.5], [0.0], [1.0], [t], cyclic, 0.05)[0].status
              for t in (0.4, 0.65, 0.9)]  # fmt: skip
    assert graded == ["pass", "warn", "fail"]
