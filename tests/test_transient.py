"""Transient heat stage: closed forms, observed orders in time, energy account, Z_th and Foster fit.

[INC] = F.P. Incropera, D.P. DeWitt, T.L. Bergman, A.S. Lavine, Fundamentals of Heat and Mass
Transfer, 6th ed., Wiley 2007 (section and equation numbers from memory).
[CJ] = H.S. Carslaw, J.C. Jaeger, Conduction of Heat in Solids, 2nd ed., Oxford 1959 (from memory).
The closed forms are those of pipeline/verification/transient.py (one copy).
"""

from __future__ import annotations

import math

import meshes
import numpy as np
import pytest
from scipy.special import erfc

from pipeline import errors
from pipeline.model import mesh as mesh_mod
from pipeline.model.materials import from_record
from pipeline.stages import heat, impedance, kernels, transient as tr
from pipeline.verification.transient import SLAB, lumped, semi_infinite, slab_run, wall_theta


def material(k, rho, c):
    return from_record("m", {"conductivity": k, "youngs_modulus": 1e9, "poisson_ratio": 0.3, "expansion": 1e-5,
                             "density": rho, "specific_heat": c}, "test")


def bar(n, length=0.01, width=0.002):
    m = meshes.tensor(np.linspace(0, length, n + 1), np.linspace(0, width, 2), np.linspace(0, width, 2))
    return mesh_mod.from_meshio(meshes.to_meshio(m), unit="m")


def cube(n=3, side=0.01):
    g = np.linspace(0, side, n + 1)
    return mesh_mod.from_meshio(meshes.to_meshio(meshes.tensor(g, g, g)), unit="m")


@pytest.mark.parametrize("method", ["euler", "bdf2"])
def test_lumped_capacitance(method):
    """[INC] sec. 5.1-5.2, eq. 5.6: T = T_inf + (T_i - T_inf) exp(-t / tau), tau = rho c V / (h A).
    Bi = h (V/A) / k = 2e-4, so the interior spread is about Bi (T - T_inf) < 0.02 K (model form);
    for a decaying problem the global time error is at most the sum of the local errors, each held
    below the tolerance (1e-3 K) by the step control."""
    d = cube()
    k, rho, c, h, side = 400.0, 8900.0, 385.0, 50.0, 0.01
    tau = rho * c * side / 6 / h
    hs = heat.HeatSpec({"body": material(k, rho, c)}, convection={s: heat.Convection(h, 300.0) for s in d.surfaces})
    f = tr.solve(d, tr.TransientSpec(hs, initial=400.0, method=method, end=2 * tau, step=tau / 1e4, tolerance=1e-3))
    exact = lumped(f.times, tau, 400.0, 300.0)
    error = np.abs(f.part_history[:, 0, 2] - exact).max()
    assert error < 0.02 + f.record["accepted"] * 1e-3
    assert f.record["accepted"] < (400 if method == "euler" else 100)  # the step grows with the solution's time scale
    assert f.record["energy_residual_relative"] < 1e-10


@pytest.mark.parametrize("method, order", [("euler", 1), ("bdf2", 2)])
def test_observed_order_in_time(method, order):
    """Manufactured: an adiabatic body heated by P(t) = P0 sin(w t) stays uniform, with
    T = T0 + P0 (1 - cos w t) / (w C), C = rho c V (exact in space, so only the time error is left).
    Halving a fixed step must divide the error by 2^p."""
    d = cube(2)
    rho, c, P0, w = 2700.0, 900.0, 5.0, 2 * math.pi / 10
    C = rho * c * 1e-6
    hs = heat.HeatSpec({"body": material(100.0, rho, c)})
    errs = []
    for h in (0.5, 0.25, 0.125):
        spec = tr.TransientSpec(hs, power={"body": tr.Profile(function=lambda t: P0 * math.sin(w * t))},
                                initial=300.0, method=method, end=10.0, step=h, adaptive=False)
        f = tr.solve(d, spec)
        exact = 300.0 + P0 * (1 - np.cos(w * f.times)) / (w * C)
        errs.append(np.abs(f.part_history[:, 0, 2] - exact).max())
    observed = np.log2(np.array(errs[:-1]) / np.array(errs[1:]))
    assert observed == pytest.approx([order, order], abs=0.15)


@pytest.mark.parametrize("method", ["euler", "bdf2"])
def test_energy_account_every_step(method):
    """Stored + lost = supplied at every step to round-off (each step's heat by the method's own
    quadrature), with a duty-cycled power and convection; the stored heat also equals
    int rho c (T - T0) dV by quadrature."""
    d = cube()
    rho, c = 2700.0, 900.0
    hs = heat.HeatSpec({"body": material(150.0, rho, c)}, convection={"xmin": heat.Convection(500.0, 300.0)})
    spec = tr.TransientSpec(hs, power={"body": tr.Profile.duty_cycle(1.0, 0.3, 20.0)}, initial=300.0,
                            method=method, end=3.0, step=1e-3, tolerance=0.01)
    f = tr.solve(d, spec)
    stored, supplied, lost, residual = f.energy.T
    assert np.abs(residual).max() < 1e-11 * np.abs(supplied).max()
    assert f.record["restarts"] >= 5
    T = f.snapshots["end"][1]
    p = heat._Problem(d, hs)
    ids = np.arange(len(d.tetrahedra))
    by_quadrature = rho * c * float(np.sum(p.geom.det[:, None] * p.ref.weights *
                                           kernels.interpolate(p.space, p.geom, ids, T - 300.0, p.ref)))
    assert stored[-1] == pytest.approx(by_quadrature, rel=1e-12)


def test_plane_wall_after_sudden_convection():
    """[INC] sec. 5.5.1, eqs. 5.39a-5.39c: wall of half-thickness L (insulated at x = 0, convection at
    x = L), theta* = sum C_n exp(-z_n^2 Fo) cos(z_n x*), C_n = 4 sin z_n / (2 z_n + sin 2 z_n),
    z_n tan z_n = Bi; eight terms (the ninth is below 1e-6 at Fo >= 0.1).  P2 with 16 elements
    and BDF2 at 1e-4 K per step: errors of 1e-3 of the initial difference are the mesh's."""
    L, k, rho, c, h = 0.01, 20.0, 8000.0, 500.0, 2000.0
    Bi, alpha = h * L / k, k / (rho * c)
    d = bar(16, L)
    hs = heat.HeatSpec({"body": material(k, rho, c)}, convection={"xmax": heat.Convection(h, 300.0)}, order=2)
    times = [Fo * L**2 / alpha for Fo in (0.1, 0.3, 1.0)]
    f = tr.solve(d, tr.TransientSpec(hs, initial=400.0, end=times[-1], step=times[0] / 1000, tolerance=1e-4,
                                     instants=tuple(times)))
    x = heat.fem.space(d, 2).doflocs[0] / L
    for t in times:
        theta = wall_theta(x, alpha * t / L**2, Bi)
        T = f.snapshots[f"t={t:g}"][1]
        assert np.abs((T - 300.0) / 100.0 - theta).max() < 1e-3


def test_semi_infinite_solid_step_surface_temperature():
    """[INC] sec. 5.7, eq. 5.57: T = T_s + (T_i - T_s) erf(x / (2 sqrt(alpha t))), while the wave has
    not reached the far face (erfc(L / (2 sqrt(alpha t))) < 1e-8 at the last time).  P2, 40 elements
    over L: 2e-3 of the step near the surface at the earliest time (the steepest profile)."""
    L, k, rho, c = 0.02, 50.0, 7800.0, 480.0
    alpha = k / (rho * c)
    t_end = (L / 12) ** 2 / alpha
    d = bar(40, L)
    hs = heat.HeatSpec({"body": material(k, rho, c)}, fixed_temperature={"xmin": 400.0}, order=2)
    times = (t_end / 4, t_end)
    f = tr.solve(d, tr.TransientSpec(hs, initial=300.0, end=t_end, step=t_end / 1e4, tolerance=1e-4, instants=times))
    assert erfc(L / (2 * math.sqrt(alpha * t_end))) < 1e-8
    x = heat.fem.space(d, 2).doflocs[0]
    for t in times:
        exact = semi_infinite(x, t, alpha, 400.0, 300.0)
        assert np.abs(f.snapshots[f"t={t:g}"][1] - exact).max() < 0.2
    assert f.record["energy_residual_relative"] < 1e-10


def test_zth_of_a_slab_on_a_heat_sink_and_its_foster_fit(tmp_path):
    """Z_th of a 1-D slab on an ideal sink against its series [CJ]; P2 with 20 elements, BDF2 at
    1e-4 K: 0.5 % of the steady value (mesh and the unresolved first instants).  The Foster network
    (terms chosen for 1 %) reproduces the computed Z_th within its reported error."""
    t, zth, exact, z = slab_run(tmp_path, 20)  # L = 5 mm silicon on an ideal sink, 1 W through the top
    assert np.abs(zth - exact).max() < 5e-3 * exact[-1]
    R = [r["R_K_per_W"] for r in z["foster"]]
    tau = [r["tau_s"] for r in z["foster"]]
    assert z["fit_error"] <= 0.01
    assert np.abs(impedance.foster(t, R, tau) - zth).max() <= z["fit_error"] * zth[-1] * (1 + 1e-9)
    L, k, _, _, w = SLAB
    assert sum(R) == pytest.approx(L / (k * w * w), rel=0.02)  # [INC] sec. 3.1: the steady L / (k A)


def test_profiles_tables_steps_and_cycles():
    p = tr.Profile((0.0, 1.0, 3.0), (0.0, 10.0, 30.0))
    assert [p.at(t) for t in (0.5, 2.0, 5.0)] == [5.0, 20.0, 30.0]
    s = tr.Profile((0.0, 1.0), (5.0, 7.0), hold=True)
    assert (s.at(1.0), s.at(1.0, left=True), s.at(0.99)) == (7.0, 5.0, 5.0)
    d = tr.Profile.duty_cycle(1.0, 0.25, 10.0, 2.0)
    assert (d.at(0.1), d.at(0.3), d.at(1.1), d.at(2.0, left=True)) == (10.0, 2.0, 10.0, 2.0)
    assert d.breaks(0.0, 2.0) == [0.25, 1.0, 1.25, 2.0]


def test_periodic_steady_state_is_reached_and_reported():
    d = cube(2)
    hs = heat.HeatSpec({"body": material(150.0, 2700.0, 900.0)}, convection={"xmin": heat.Convection(2000.0, 300.0)})
    spec = tr.TransientSpec(hs, power={"body": tr.Profile.duty_cycle(2.0, 1.0, 10.0)}, initial=300.0, end=400.0,
                            periodic=0.01, step=1e-2, tolerance=0.01)
    f = tr.solve(d, spec)
    assert f.record["reached"] == "periodic" and f.record["periodic_change_K"] <= 0.01
    assert f.times[-1] < 400.0 and f.times[-1] % 2.0 == pytest.approx(0.0, abs=1e-9)


def test_bad_input_is_reported_at_once():
    d = cube(2)
    hs = heat.HeatSpec({"body": from_record("m", {"conductivity": 1.0, "youngs_modulus": 1e9, "poisson_ratio": 0.3,
                                                  "expansion": 1e-5, "density": 1.0}, "test")})
    hs = heat.HeatSpec(hs.materials, convection={"xmin": heat.Convection(10.0, 320.0)})
    spec = tr.TransientSpec(hs, power={"bdy": tr.Profile.constant(1.0)}, method="rk4", periodic=0.1,
                            impedance=tr.ImpedanceSpec("body"), differences=(("body", "lid"),), initial=300.0)
    with pytest.raises(errors.InputError) as exc:
        tr.solve(d, spec)
    text = "\n".join(exc.value.problems)
    for word in ("specific_heat", "'bdy'", "rk4", "periodic", "'lid'", "from equilibrium"):
        assert word in text


# ---------------------------------------------------------------------------------------------
# Through the workflow: the power module pulse (shortened), instants feeding map -> stress

PULSE = __import__("pathlib").Path(__file__).resolve().parent.parent / "workflows" / "power_module_pulse.toml"
SHORT = ["stages.pulse.end=2 s", "output.figures=false", "output.report=false", "output.vtu=false"]


def test_power_module_pulse_runs_and_a_new_instant_reruns_only_what_it_touches(tmp_path):
    from pipeline.flow import runner

    def run(sets):
        return runner.run(PULSE, SHORT + sets, store=tmp_path / "store", out=tmp_path / "out")

    first = run([])
    st = first["stages"]
    assert {s["status"] for s in st.values()} == {"computed"}
    pulse = st["pulse"]
    assert pulse["steps"]["energy_residual_relative"] < 1e-10
    assert pulse["impedance"]["fit_error"] <= 0.01
    assert st["hottest_gradient"]["time_s"] == pytest.approx(pulse["instants_s"]["max_difference:die_1:baseplate"])
    assert (tmp_path / "out" / "pulse_foster.csv").read_text().startswith("R_K_per_W,tau_s\n")
    second = run(["stages.hottest_gradient.at=max_difference:substrate"])
    status = {n: s["status"] for n, s in second["stages"].items()}
    assert status == {"pulse": "reused", "hottest_gradient": "computed", "thermal_strain": "computed",
                      "stress": "computed"}


def test_instant_not_kept_is_bad_input_naming_the_kept_ones(tmp_path):
    from pipeline.flow import runner

    with pytest.raises(errors.InputError) as exc:
        runner.run(PULSE, SHORT + ["stages.hottest_gradient.at=max_difference:dye_1"], store=tmp_path / "s",
                   out=tmp_path / "o")
    text = "\n".join(exc.value.problems)
    assert "stages.hottest_gradient.at" in text and "max_difference:die_1" in text
    with pytest.raises(errors.InputError) as exc:
        runner.run(PULSE, SHORT + ["stages.hottest_gradient.at=1.5"], store=tmp_path / "s", out=tmp_path / "o")
    assert "instants" in "\n".join(exc.value.problems)
