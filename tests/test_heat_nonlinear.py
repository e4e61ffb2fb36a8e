"""Nonlinear heat: k(T), radiation and power-law convection by Newton-Raphson.

[INC] = Incropera, DeWitt, Bergman, Lavine, Fundamentals of Heat and Mass Transfer, 6th ed., 2007
(section and equation numbers from memory)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import brentq

import meshes
from pipeline import errors
from pipeline.model import mesh as mesh_mod
from pipeline.model.materials import from_record
from pipeline.stages import heat

SIGMA = heat.STEFAN_BOLTZMANN


def material(k=100.0, **curve):
    return from_record("m", {"conductivity": k, "youngs_modulus": 1e9, "poisson_ratio": 0.3, "expansion": 1e-5,
                             "density": 1.0, **curve}, "test")


def slab(n=21, length=0.05):
    m = meshes.tensor(np.linspace(0, length, n), np.linspace(0, 0.01, 3), np.linspace(0, 0.01, 3), jitter=0.2)
    return mesh_mod.from_meshio(meshes.to_meshio(m), unit="m")


@pytest.mark.parametrize("curve", ["polynomial", "table"])
def test_slab_with_conductivity_linear_in_temperature(curve):
    """Kirchhoff transform (H.S. Carslaw, J.C. Jaeger, Conduction of Heat in Solids, 2nd ed. 1959, sec. 1.7;
    M.N. Ozisik, Heat Conduction, 2nd ed. 1993, from memory): with k = k0 (1 + b (T - T0)) the potential
    U(T) = k0 [(T - T0) + b (T - T0)^2 / 2] is linear in x between fixed temperatures, so
    q'' = (U(T1) - U(T2)) / L and T(x) solves U(T) = U(T1) - q'' x. The profile is not polynomial:
    P2 with 20 elements along the slab is accurate to 1e-5 relative, so 1e-4 bounds it."""
    k0, beta, t0, t1, t2, L = 20.0, 4e-3, 300.0, 500.0, 300.0, 0.05
    if curve == "polynomial":
        mat = material(k0, conductivity_polynomial=[k0 * (1 - beta * t0), k0 * beta])
    else:  # exact for a linear law: two table rows spanning the range
        mat = material(k0, conductivity_table=[[t0, k0], [t1, k0 * (1 + beta * (t1 - t0))]])
    d = slab()
    f = heat.solve(d, heat.HeatSpec({"body": mat}, fixed_temperature={"xmin": t1, "xmax": t2}, order=2,
                                    probes={"mid": (L / 2, 0.005, 0.005)}))
    U = lambda t: k0 * ((t - t0) + beta * (t - t0) ** 2 / 2)  # noqa: E731
    flux = (U(t1) - U(t2)) / L
    assert sum(r["heat_in_W"] for r in f.balance if r["name"] == "xmin") == pytest.approx(flux * 1e-4, rel=1e-4)
    target = U(t1) - flux * L / 2
    t_mid = t0 + (-1 + np.sqrt(1 + 2 * beta * target / k0)) / beta
    assert f.probes["mid"] == pytest.approx(t_mid, abs=1e-4 * (t1 - t2))
    assert f.probes["mid"] > (t1 + t2) / 2  # conductivity rises with T: the hot half is flatter
    assert f.imbalance < 1e-8
    assert len(f.meta["newton"]) > 1


def plate(k=5e3):
    """A 50 x 50 x 2 mm plate; its top face "zmax" exchanges heat, the rest is adiabatic."""
    m = meshes.tensor(np.linspace(0, 0.05, 6), np.linspace(0, 0.05, 6), np.linspace(0, 0.002, 2))
    return mesh_mod.from_meshio(meshes.to_meshio(m), unit="m"), material(k)


def test_plate_losing_heat_by_radiation_only():
    """Energy balance of a surface radiating to large surroundings ([INC] sec. 1.2.3, eq. 1.7):
    P = eps sigma A (T^4 - Tsur^4). The plate is so conductive (k = 5000) that its temperature is
    uniform to P t / (k A) = 1e-5 K, far inside the 1e-3 K tolerance."""
    d, mat = plate()
    power, eps, tsur, area = 10.0, 0.85, 293.15, 0.05**2
    f = heat.solve(d, heat.HeatSpec({"body": mat}, power={"body": power},
                                    radiation={"zmax": heat.Radiation(eps, tsur)}))
    expected = (tsur**4 + power / (eps * SIGMA * area)) ** 0.25  # about 427 K
    assert f.parts["body"]["mean"] == pytest.approx(expected, abs=1e-3)
    assert f.imbalance < 1e-9
    history = f.meta["newton"]
    floor = 1e3 * history[-1]["residual"]  # rates computed near round-off say nothing
    rates = [h["rate"] for h in history if h["rate"] is not None and h["residual"] > floor]
    assert rates and max(rates[-2:]) >= 1.8, history  # quadratic convergence of Newton


def test_plate_with_convection_and_radiation_together():
    """Surface energy balance with both losses ([INC] sec. 1.3.1, eq. 1.12, from memory):
    P = A [h (T - Tinf) + eps sigma (T^4 - Tsur^4)], solved here by bracketing."""
    d, mat = plate()
    power, h, eps, tinf, area = 10.0, 6.0, 0.85, 298.15, 0.05**2
    f = heat.solve(d, heat.HeatSpec({"body": mat}, power={"body": power},
                                    convection={"zmax": heat.Convection(h, tinf)},
                                    radiation={"zmax": heat.Radiation(eps, tinf)}))
    expected = brentq(lambda t: area * (h * (t - tinf) + eps * SIGMA * (t**4 - tinf**4)) - power, tinf, 2000.0)
    assert f.parts["body"]["mean"] == pytest.approx(expected, abs=1e-3)
    flows = {r["kind"]: r["heat_in_W"] for r in f.balance}
    assert flows["convection"] + flows["radiation"] == pytest.approx(-power, rel=1e-9)
    assert flows["radiation"] == pytest.approx(-area * eps * SIGMA * (expected**4 - tinf**4), rel=1e-5)


def test_power_law_convection():
    """Natural convection in the usual power-law form h = h0 (dT / dT0)^n ([INC] ch. 9, simplified
    correlations, n = 1/4 for laminar flow, from memory): the balance P = A h0 dT^(1+n) / dT0^n gives
    dT = dT0 (P / (A h0 dT0))^(1/(1+n))."""
    d, mat = plate()
    power, h0, n, dt0, tinf, area = 2.0, 5.0, 0.25, 10.0, 298.15, 0.05**2
    f = heat.solve(d, heat.HeatSpec({"body": mat}, power={"body": power},
                                    convection={"zmax": heat.Convection(h0, tinf, n, dt0)}))
    expected = tinf + dt0 * (power / (area * h0 * dt0)) ** (1 / (1 + n))
    assert f.parts["body"]["mean"] == pytest.approx(expected, abs=1e-3)


def test_linear_problems_take_one_step():
    d, mat = plate()
    f = heat.solve(d, heat.HeatSpec({"body": mat}, power={"body": 2.0},
                                    convection={"zmax": heat.Convection(10.0, 300.0)}))
    assert len(f.meta["newton"]) == 1
    # the plate's through-thickness difference is P t / (k A) = 3e-4 K: 1e-3 K bounds it
    assert f.parts["body"]["mean"] == pytest.approx(300.0 + 2.0 / (10.0 * 0.05**2), abs=1e-3)


def test_a_solve_that_does_not_converge_reports_its_history():
    d, mat = plate()
    spec = heat.HeatSpec({"body": mat}, power={"body": 10.0}, radiation={"zmax": heat.Radiation(0.85, 293.15)},
                         max_iterations=2)
    with pytest.raises(errors.SolverError, match=r"did not converge in 2 Newton iterations \(relative residuals "):
        heat.solve(d, spec)


def test_emissivity_outside_zero_to_one_is_refused():
    d, mat = plate()
    with pytest.raises(errors.InputError, match="emissivity must lie in 0..1"):
        heat.solve(d, heat.HeatSpec({"body": mat}, power={"body": 1.0},
                                    radiation={"zmax": heat.Radiation(1.2, 293.15)}))


def test_temperatures_beyond_a_table_hold_the_end_value_and_say_so():
    d, _ = plate()
    mat = material(100.0, conductivity_table=[[250.0, 100.0], [300.0, 90.0]])
    f = heat.solve(d, heat.HeatSpec({"body": mat}, power={"body": 50.0},
                                    convection={"zmax": heat.Convection(10.0, 293.15)}))
    assert any("outside a conductivity table" in n for n in f.notices)
