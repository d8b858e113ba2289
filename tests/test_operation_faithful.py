"""Faithful time-varying operation: soft roofs solved self-consistently, thick roofs, oscillating
shear, exact crossing times, pulsation against the source, dampers sized to a target."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import integrate

from chipflow.build import build_design
from chipflow.cli import main
from chipflow.errors import NetworkError
from chipflow.network import NetworkBuilder
from chipflow.network.supply import STANDARD_GRAVITY
from chipflow.operation.compliance import ATMOSPHERE, plate_rigidity
from chipflow.operation.crossings import (
    exponential_statistics,
    harmonic_statistics,
    harmonic_values,
)
from chipflow.operation.deformation import (
    THICK_WALL,
    roof_deflection,
    thick_wall_displacement,
    thick_wall_moments,
)
from chipflow.operation.model import Walls
from chipflow.operation.softwall import solution_residual, solve_soft, wall_law
from chipflow.physics.duct import resistance
from chipflow.physics.fluid import water

ROOT = Path(__file__).resolve().parents[1]
PULSATILE = ROOT / "designs" / "pulsatile_peristaltic_bed.toml"
FLUID = water()
CATALAN = 0.915965594177219015  # Catalan's constant
ZETA3 = 1.202056903159594285  # Apery's constant, zeta(3)


@pytest.fixture(autouse=True)
def _plain_junctions(plain_pieces):
    # junction corrections are tested in test_junctions.py; these builds need none of their
    # 2D solves, so a fixed stand-in keeps them fast
    return plain_pieces


# -- soft roofs, self-consistent -----------------------------------------------------------------
def _soft_ladder():
    """Channels 0.3-1 mm wide under a 150 um roof: t/w from 0.15 (plate) to 0.75 (thick)."""
    b = NetworkBuilder()
    b.channel("trunk", "in", "a", width=1000e-6, depth=30e-6, length=6e-3)
    b.channel("upper", "a", "b", width=600e-6, depth=30e-6, length=5e-3)
    b.channel("lower", "a", "c", width=400e-6, depth=30e-6, length=8e-3)
    b.channel("cross", "b", "c", width=200e-6, depth=30e-6, length=3e-3)
    b.channel("out_b", "b", "out", width=600e-6, depth=30e-6, length=4e-3)
    b.channel("out_c", "c", "out", width=400e-6, depth=30e-6, length=4e-3)
    return b.build()


def _lubrication_flow(width, depth, length, p_a, p_b, profile) -> float:
    """Independent flow of one soft channel from its own end pressures: lubrication theory,
    Q = w / (12 mu l) int_{p_b}^{p_a} <(h + p psi(x))^3> dp, by nested quadrature (no
    closed-form moments), times the exact series over the parallel-plate conductance of the
    rigid channel (chipflow's calibration of the law: the rigid channel keeps its exact
    resistance)."""

    def mean_cube(p: float) -> float:
        value, _ = integrate.quad(lambda x: (depth + p * profile(x)) ** 3, 0.0, width / 2,
                                  epsabs=0, epsrel=1e-10)  # fmt: skip
        return 2.0 * value / width

    g, _ = integrate.quad(mean_cube, p_b, p_a, epsabs=0, epsrel=1e-10)
    series = 1.0 / float(resistance(width, depth, length, FLUID.viscosity))
    parallel_plates = width * depth**3 / (12 * FLUID.viscosity * length)
    return width / (12 * FLUID.viscosity * length) * g * series / parallel_plates


def test_soft_roof_network_agrees_with_independent_lubrication_integrals() -> None:
    net = _soft_ladder()
    walls = Walls("custom", 0.8e6, 0.5, 150e-6, "test")
    law = wall_law(net, FLUID, walls)
    models = law.moments[0]
    assert set(models.tolist()) == {0.0, 1.0}  # both roof models appear
    soft = solve_soft(net, FLUID, law, {"in": 6e3, "out": 0.0})
    p, q = soft.solution.pressure, soft.solution.flow
    b = plate_rigidity(0.8e6, 150e-6, 0.5)
    independent = []
    for i in range(net.n_channels):  # six channels, each integrated on its own
        w = float(net.width[i])
        if models[i] == THICK_WALL:

            def profile(x, w=w):
                return float(thick_wall_displacement(x, w, 150e-6, 0.8e6, 0.5))
        else:

            def profile(x, w=w):
                return float(roof_deflection(x, w, 1.0, b))

        pa, pb = p[net.node_a[i]], p[net.node_b[i]]
        independent.append(_lubrication_flow(w, 30e-6, float(net.length[i]), pa, pb, profile))
    independent = np.array(independent)
    assert q == pytest.approx(independent, rel=1e-6)
    # conservation at the free nodes with the independent flows (Kirchhoff)
    n = net.n_nodes
    out = np.bincount(net.node_a, independent, n) - np.bincount(net.node_b, independent, n)
    free = [net.node_index(k) for k in ("a", "b", "c")]
    assert np.abs(out[free]).max() <= 1e-6 * np.abs(independent).max()
    # the roofs bulge enough to matter here, and the solve says how it converged
    assert soft.resistance_change().max() > 0.2
    assert 1 <= soft.iterations <= 20 and soft.residual <= 1e-10
    assert soft.check["mass_residual"] <= 1e-12


def test_soft_roof_convergence_failure_is_an_error() -> None:
    net = _soft_ladder()
    law = wall_law(net, FLUID, Walls("custom", 0.8e6, 0.5, 150e-6, "test"))
    with pytest.raises(NetworkError, match="did not converge in 1 Newton steps"):
        solve_soft(net, FLUID, law, {"in": 6e3, "out": 0.0}, max_iterations=1)


def test_the_self_check_catches_a_broken_balance() -> None:
    net = _soft_ladder()
    law = wall_law(net, FLUID, Walls("custom", 0.8e6, 0.5, 150e-6, "test"))
    soft = solve_soft(net, FLUID, law, {"in": 6e3, "out": 0.0})
    sol = soft.solution
    fixed = np.isin(np.arange(net.n_nodes), [net.node_index("in"), net.node_index("out")])
    args = dict(injected=np.zeros(net.n_nodes), fixed=fixed)
    good = solution_residual(net, sol.pressure, sol.flow, sol.resistance, **args)
    assert max(good.values()) < 1e-12
    flow = sol.flow.copy()
    flow[2] *= 1.001  # one channel off its law and the balance by 0.1 %
    bad = solution_residual(net, sol.pressure, flow, sol.resistance, **args)
    assert bad["mass_residual"] > 1e-4 and bad["law_residual"] > 1e-4


def _variant(tmp_path: Path, flow: str = "10 uL/min") -> Path:
    text = PULSATILE.read_text()
    for old, new in (
        ('depths = ["50 um"]', 'depths = ["25 um"]'),
        ('roof_thickness = "1 mm"', 'roof_thickness = "100 um"'),
        ("max_width_to_depth = 12", "max_width_to_depth = 100"),
        ('"10 uL/min"', f'"{flow}"'),
    ):
        assert old in text
        text = text.replace(old, new)
    path = tmp_path / "soft.toml"
    path.write_text(text)
    return path


def test_soft_roof_variant_fails_its_shear_check_on_the_deformed_chip(tmp_path: Path) -> None:
    """The bundled peristaltic bed with a 100 um roof over 25 um deep channels: rigid, every
    level is sized to 0.75 Pa; with the roof bulging, the wide trunk carries the same flow in
    a deeper channel and its floor shear falls below the 0.5-1 Pa window."""
    b = build_design(_variant(tmp_path), field=False)
    trunk = b.results["generations"][0]
    assert trunk["wall_shear_floor_rigid"] == pytest.approx(0.75, rel=0.01)
    assert trunk["wall_shear_floor"] < 0.5
    check = next(c for c in b.checks if c.name == "floor shear: d0")
    assert check.status == "fail" and check.value == pytest.approx(trunk["wall_shear_floor"])
    op = b.results["operation"]
    assert op["walls"]["solve"]["iterations"] >= 1
    assert op["walls"]["solve"]["residual"] <= op["walls"]["solve"]["tolerance"]
    # the one-pass figure is kept as a diagnostic beside the self-consistent one
    assert trunk["resistance_change_one_pass"] != trunk["resistance_change"]
    names = {c.name: c for c in b.checks}
    assert "solved self-consistently" in names["wall deformation"].message
    # the trunk's plate deflects by more than the roof is thick: outside every model's range
    assert names["roof model range"].status == "warn"
    assert "outside the range of every roof model" in names["roof model range"].message


def test_thick_roofs_are_judged_by_the_thick_wall_model() -> None:
    """The bundled 1 mm PDMS roof over 51-538 um channels (t/w 1.9-20): the thick-wall model,
    named in the results."""
    b = build_design(PULSATILE, field=False)
    walls = b.results["operation"]["walls"]
    assert walls["models"] == ["thick wall (Wang & Christov, Proc R Soc A 2019)"]
    assert {r["wall_model"] for r in b.results["generations"]} == set(walls["models"])


# -- the thick-wall model against its limits and an independent solve ---------------------------
def test_thick_wall_tends_to_the_elastic_half_plane() -> None:
    """t/w >> 1: the half-plane's response to a load p_k cos(kx) is 2 (1 - nu^2) p_k / (E k)
    (Johnson, Contact Mechanics 1985, from memory); summed over the uniform strip load's
    harmonics the centre displacement is 8 C (1 - nu^2) p w / (pi^2 E) (C Catalan's constant)
    and the mean 14 zeta(3) / pi^3 (1 - nu^2) p w / E."""
    w, e, nu = 200e-6, 1.3e6, 0.5
    rows = thick_wall_moments(w, 20 * w, e, nu)
    scale = (1 - nu**2) * w / e
    assert rows[1] == pytest.approx(8 * CATALAN / math.pi**2 * scale, rel=1e-6)
    assert rows[2] == pytest.approx(14 * ZETA3 / math.pi**3 * scale, rel=1e-6)


def test_thick_wall_tends_to_the_simply_supported_plate() -> None:
    """t/w << 1: a simply supported strip under uniform load deflects 5 p w^4 / (384 B) at its
    centre (Timoshenko & Woinowsky-Krieger 1959); the elastic solution exceeds it by the
    shear deformation, of relative order (t/w)^2."""
    w, e, nu = 1e-3, 1.5e6, 0.3
    for ratio, slack in ((0.02, 1e-3), (0.05, 6e-3)):
        t = ratio * w
        plate = 5 * w**4 / (384 * float(plate_rigidity(e, t, nu)))
        centre = float(thick_wall_moments(w, t, e, nu)[1])
        assert 1.0 < centre / plate < 1.0 + slack


def test_thick_wall_agrees_with_a_finite_element_solve() -> None:
    """Independent: plane-strain elasticity of the half roof [0, w/2] x [0, t] by P2 finite
    elements (scikit-fem), symmetric at x = 0, simply supported at x = w/2 (no vertical
    displacement, no normal stress), free on top, the pressure on its underside."""
    import skfem
    from skfem.helpers import ddot, sym_grad, trace
    from skfem.models.elasticity import lame_parameters

    w, t, e, nu = 1.0, 1.0, 1.0, 0.4
    mesh = skfem.MeshTri.init_tensor(np.linspace(0, w / 2, 41), np.linspace(0, t, 81))
    basis = skfem.Basis(mesh, skfem.ElementVector(skfem.ElementTriP2()))
    lam, mu = lame_parameters(e, nu)  # plane strain

    @skfem.BilinearForm
    def stiffness(u, v, _):
        eu, ev = sym_grad(u), sym_grad(v)
        return 2 * mu * ddot(eu, ev) + lam * trace(eu) * trace(ev)

    underside = mesh.facets_satisfying(lambda x: x[1] < 1e-9)
    bottom = skfem.FacetBasis(mesh, basis.elem, facets=underside)

    @skfem.LinearForm
    def load(v, _):
        return 1.0 * v[1]  # unit pressure pushing up into the roof

    k = stiffness.assemble(basis)
    f = load.assemble(bottom)
    dofs = basis.get_dofs(lambda x: np.isclose(x[0], 0.0))
    side = basis.get_dofs(lambda x: np.isclose(x[0], w / 2))
    fixed = np.concatenate([dofs.nodal["u^1"], dofs.facet["u^1"], side.nodal["u^2"],
                            side.facet["u^2"]])  # fmt: skip
    u = skfem.solve(*skfem.condense(k, f, D=fixed))
    centre = basis.probes(np.array([[0.0], [0.0]])) @ u
    fe_centre = float(centre[1])
    series = float(thick_wall_displacement(0.0, w, t, e, nu))
    assert series == pytest.approx(fe_centre, rel=2e-3)


# -- oscillatory shear index and exact statistics -------------------------------------------------
def test_osi_of_a_pure_sinusoid_is_one_half_and_of_a_steady_flow_zero() -> None:
    """OSI = 1/2 (1 - |int tau dt| / int |tau| dt) (Ku et al. 1985; He & Ku 1996)."""
    s = harmonic_statistics(np.array([0.0, 0.7, 0.0]), np.array([[0.4 - 0.3j], [0j], [1j]]))
    assert s["osi"].tolist() == [0.5, 0.0, 0.5]
    # a sinusoid of amplitude a: <|tau|> = 2a / pi (analytic)
    assert s["mean_magnitude"][0] == pytest.approx(2 * 0.5 / math.pi, rel=1e-14)


def test_exact_statistics_agree_with_dense_quadrature() -> None:
    """Random harmonic sums: OSI, <|f|> and the time in a window against 200,000 samples
    a period (the independent reference here; chipflow never samples)."""
    rng = np.random.default_rng(7)
    a0 = rng.normal(0.3, 0.5, 6)
    c = rng.normal(size=(6, 3)) + 1j * rng.normal(size=(6, 3))
    s = harmonic_statistics(a0, c, (0.4, 1.5))
    theta = np.linspace(0.0, 2 * np.pi, 200_001)[:-1]
    f = harmonic_values(a0, c, np.tile(theta, (6, 1)))
    osi = 0.5 * (1 - np.abs(f.mean(axis=1)) / np.abs(f).mean(axis=1))
    assert s["osi"] == pytest.approx(osi, abs=1e-6)
    assert s["mean_magnitude"] == pytest.approx(np.abs(f).mean(axis=1), rel=1e-6)
    inside = ((np.abs(f) >= 0.4) & (np.abs(f) <= 1.5)).mean(axis=1)
    assert s["in_window"] == pytest.approx(inside, abs=3e-5)
    # the exact maximum lies at or above every sample, and samples come within (dtheta)^2 of it
    assert np.all(s["max"] >= f.max(axis=1) - 1e-12)
    assert np.all(s["max"] - f.max(axis=1) < 1e-8)


def _windowed_channel(tmp_path: Path, inlet: str) -> Path:
    """One 400 x 50 um channel, 20 mm long, with a 0.3-1 Pa window, its inlet port as given
    and its outlet open."""
    path = tmp_path / "channel.toml"
    path.write_text(
        f"""
name = "one channel"
[culture]
shear_min = "0.3 Pa"
shear_max = "1.0 Pa"
[[channels]]
name = "c"
from = "in"
to = "out"
width = "400 um"
depth = "50 um"
length = "20 mm"
[[ports]]
node = "in"
{inlet}
[[ports]]
node = "out"
pressure = "0 Pa"
"""
    )
    return path


def test_exact_time_in_window_of_a_draining_reservoir(tmp_path: Path) -> None:
    """One reservoir of area A drains through one channel of resistance R into an open
    outlet: the head, the flow and the floor shear decay as exp(-t/T), T = R A / (rho g)
    (Bruus 2008, ch. 4), so the shear crosses a bound tau_b at T ln(tau_0 / tau_b): the time in
    the window over the refill interval is a closed form."""
    b = build_design(_windowed_channel(tmp_path, 'head = "10 cm"\narea = "3 mm^2"'))
    r = float(resistance(400e-6, 50e-6, 20e-3, b.fluid.viscosity))
    tau_const = r * 3e-6 / (b.fluid.density * STANDARD_GRAVITY)
    tau0 = float(b.solution.wall_shear_floor[0])
    interval = 86400.0
    enter = tau_const * math.log(tau0 / 1.0) if tau0 > 1.0 else 0.0
    leave = min(tau_const * math.log(tau0 / 0.3), interval)
    exact = (leave - enter) / interval
    assert 0.0 < exact < 0.5 and tau0 > 1.0  # both bounds are crossed
    channels = b.results["operation"]["channels"]
    assert channels["time_in_window"][0] == pytest.approx(exact, rel=1e-9)
    assert b.results["operation"]["time_to_level"] == pytest.approx(
        tau_const * math.log(10), rel=1e-9
    )


def test_exponential_statistics_against_dense_samples() -> None:
    c = np.array([[0.3, 1.0, -0.8]])
    rates = np.array([0.0, -0.01, -0.05])
    s = exponential_statistics(c, rates, 500.0, (0.4, 0.6))
    t = np.linspace(0.0, 500.0, 2_000_001)
    f = 0.3 + np.exp(-0.01 * t) - 0.8 * np.exp(-0.05 * t)
    assert s["in_window"][0] == pytest.approx(((f >= 0.4) & (f <= 0.6)).mean(), abs=1e-6)
    assert s["max"][0] == pytest.approx(f.max(), rel=1e-9)


# -- dampers --------------------------------------------------------------------------------------
def _damped(tmp_path: Path, damper: str, name: str = "d.toml") -> Path:
    text = PULSATILE.read_text().replace("[limits]", f"[supply.damper]\n{damper}\n\n[limits]")
    path = tmp_path / name
    path.write_text(text)
    return path


def test_a_sized_damper_reproduces_its_target_in_a_re_solve(tmp_path: Path) -> None:
    sized = build_design(_damped(tmp_path, 'target_pulsation = "5 %"'), field=False)
    damper = sized.results["operation"]["damper"]
    volume = damper["air_volume"]
    assert damper["pulsation_at_target"] == pytest.approx(0.05, rel=1e-6)
    again = build_design(
        _damped(tmp_path, f'air_volume = "{volume * 1e9!r} uL"', "again.toml"), field=False
    )
    worst = max(r["pulsation"] for r in again.results["generations"])
    assert worst == pytest.approx(0.05, rel=0.01)
    # the air costs a slower start-up; the tubing that would store as much is stated
    assert damper["start_up_time_constant"] > damper["start_up_time_constant_without"] > 0
    assert damper["equivalent_tubing"] > 0


def test_a_sized_damper_matches_the_analytic_rc_low_pass(tmp_path: Path) -> None:
    """A pump feeding one channel with trapped air at its inlet: the chip's flow pulses by
    p0 / |1 + j omega R C| (Bruus 2008, ch. 4), so the target needs omega R C =
    sqrt((p0 / target)^2 - 1) and V = C p_abs (isothermal air)."""
    path = tmp_path / "rc.toml"
    path.write_text(
        """
name = "rc"
[[channels]]
name = "c"
from = "in"
to = "out"
width = "300 um"
depth = "40 um"
length = "20 mm"
[[ports]]
node = "in"
flow = "10 uL/min"
amplitude = "4 uL/min"
frequency = "0.5 Hz"
[[ports]]
node = "out"
pressure = "0 Pa"
[[compliances]]
node = "in"
target_pulsation = "5 %"
"""
    )
    b = build_design(path)
    r = float(resistance(300e-6, 40e-6, 20e-3, b.fluid.viscosity))
    omega = 2 * math.pi * 0.5
    c = math.sqrt((0.4 / 0.05) ** 2 - 1) / (omega * r)
    expected = c * (ATMOSPHERE + float(b.solution.pressure[0]))
    damper = b.results["operation"]["damper"]
    # the solve keeps the liquid's inertance, negligible here (omega^2 L C ~ 1e-6)
    assert damper["air_volume"] == pytest.approx(expected, rel=1e-3)
    # with one compliance the start-up time constant is R C (the RC circuit's only mode)
    assert damper["start_up_time_constant"] == pytest.approx(r * damper["compliance"], rel=1e-9)


@pytest.mark.parametrize(
    ("damper", "where"),
    [
        ('air_volume = "10 uL"\ncompliance = "1e-12 m^3/Pa"', "supply.damper"),
        ('target_pulsation = "-5 %"', "supply.damper.target_pulsation"),
        ('air_volume = "2 L"', "supply.damper.air_volume"),
        ('volume = "10 uL"', "did you mean"),
    ],
)
def test_bad_damper_input_exits_2_in_one_line(tmp_path, damper, where) -> None:
    result = CliRunner().invoke(
        main, ["build", str(_damped(tmp_path, damper)), "-o", str(tmp_path / "o")]
    )
    assert result.exit_code == 2 and where in result.stderr
    assert result.stderr.count("\n") == 1 and not (tmp_path / "o").exists()


def test_a_target_without_a_pulsating_supply_is_refused(tmp_path: Path) -> None:
    text = (ROOT / "designs" / "demo_endothelial_bed.toml").read_text()
    (tmp_path / "s.toml").write_text(text + '\n[supply.damper]\ntarget_pulsation = "5 %"\n')
    result = CliRunner().invoke(main, ["check", str(tmp_path / "s.toml")])
    assert result.exit_code == 2 and "needs a pulsating supply" in result.stderr


def test_an_oscillating_channel_of_a_plain_network_is_not_graded_by_the_steady_window(
    tmp_path: Path,
) -> None:
    """A pressure port pulsing by twice its mean reverses the flow (OSI above 0.05): the
    steady window is not applied to that channel, the oscillating check names it."""
    inlet = 'pressure = "100 Pa"\namplitude = "200 Pa"\nfrequency = "1 Hz"'
    b = build_design(_windowed_channel(tmp_path, inlet))
    osi = b.results["operation"]["channels"]["osi"][0]
    # the flow follows 1 + 2 cos(theta): backward while cos < -1/2, a third of the period,
    # carrying B = 2 (sqrt(3) - pi/3) of the integral; int f = 2 pi, int |f| = 2 pi + 2 B,
    # so OSI = 1/2 (1 - 2 pi / (2 pi + 2 B)) (Ku et al. 1985; the liquid's inertia, which
    # shrinks the pulse by about 1e-6 here, is left out)
    back = 2 * (math.sqrt(3) - math.pi / 3)
    assert osi == pytest.approx(0.5 * (1 - 2 * math.pi / (2 * math.pi + 2 * back)), rel=1e-5)
    names = [c.name for c in b.checks]
    assert "oscillating floor shear: channel c" in names
    assert not any(n.startswith("floor shear") for n in names)
