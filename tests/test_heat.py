"""Heat stage: closed-form verification cases, manufactured-solution orders, heat balance, errors.

Each expected value is computed in the test from a published closed form, named beside it.
[INC] = F.P. Incropera, D.P. DeWitt, T.L. Bergman, A.S. Lavine, Fundamentals of Heat and Mass
Transfer, 6th ed., Wiley 2007 (section numbers from memory; they can differ between editions).
"""

from __future__ import annotations

import meshes
import numpy as np
import pytest
from skfem import Basis, ElementTetP1, ElementTetP2, MeshTet

from pipeline import errors
from pipeline.model import mesh as mesh_mod
from pipeline.model.materials import from_record
from pipeline.stages import heat


def material(k, name="m"):
    """A material with conductivity k (scalar or 3 principal values); other values are placeholders."""
    kind = "orthotropic" if np.ndim(k) else "isotropic"
    return from_record(name, {"kind": kind, "conductivity": k, "youngs_modulus": 1e9, "poisson_ratio": 0.3,
                              "expansion": 1e-5, "density": 1.0}, "test")


def domain_of(m: MeshTet, parts=None, surfaces=None):
    return mesh_mod.from_meshio(meshes.to_meshio(m, parts, surfaces), unit="m")


def balance(field, kind=None, name=None):
    return sum(r["heat_in_W"] for r in field.balance
               if (kind is None or r["kind"] == kind) and (name is None or r["name"] == name))


# ---------------------------------------------------------------------------------------------
# Closed forms

@pytest.mark.parametrize("order", [1, 2])
def test_slab_between_fixed_temperatures(order):
    """[INC] sec. 3.1 (plane wall): T linear, q'' = k (T1 - T2) / L. Linear fields are in both
    spaces, so the answer is exact to solver round-off on a distorted mesh (patch test)."""
    L, k, A, t1, t2 = 0.05, 16.2, 0.02 * 0.01, 373.15, 293.15
    m = meshes.tensor(np.linspace(0, L, 9), np.linspace(0, 0.02, 4), np.linspace(0, 0.01, 3), jitter=0.25)
    d = domain_of(m)
    f = heat.solve(d, heat.HeatSpec({"body": material(k)}, fixed_temperature={"xmin": t1, "xmax": t2},
                                    order=order))
    x = heat.fem.space(d, order).doflocs[0]
    np.testing.assert_allclose(f.temperature, t1 + (t2 - t1) * x / L, rtol=0, atol=1e-9)
    assert balance(f, name="xmin") == pytest.approx(k * A * (t1 - t2) / L, rel=1e-10)
    assert f.imbalance < 1e-10


def test_slab_with_uniform_generation():
    """[INC] sec. 3.5.1, plane wall with uniform generation, symmetric case: T_max = T_s + q L^2 / (2k).
    The profile is quadratic, inside the P2 space: exact to round-off."""
    L, k, q, ts = 0.01, 10.0, 1e6, 293.15
    m = meshes.tensor(np.linspace(-L, L, 7), np.linspace(0, 0.004, 3), np.linspace(0, 0.004, 3), jitter=0.2)
    d = domain_of(m)
    f = heat.solve(d, heat.HeatSpec({"body": material(k)}, generation={"body": q},
                                    fixed_temperature={"xmin": ts, "xmax": ts}, order=2,
                                    probes={"centre": (0.0, 0.002, 0.002)}))
    assert f.probes["centre"] == pytest.approx(ts + q * L**2 / (2 * k), abs=1e-8)  # 25 K above T_s
    x = heat.fem.space(d, 2).doflocs[0]
    np.testing.assert_allclose(f.temperature, ts + q * L**2 / (2 * k) * (1 - x**2 / L**2), atol=1e-8)
    assert f.imbalance < 1e-10
    assert f.loads[0]["power_W"] == pytest.approx(q * 2 * L * 0.004**2, rel=1e-12)


def test_composite_wall_with_convection_on_both_faces():
    """[INC] sec. 3.1 (composite wall, thermal circuit): q'' = (Tinf1 - Tinf2) / (1/h1 + sum L/k + 1/h2).
    Aluminium 3 mm (k 167) and FR-4 1.6 mm (k 0.3) between films of 100 and 10 W/(m^2 K). Each layer's
    profile is linear and the interface is an element face, so P1 is exact to round-off."""
    l1, l2, k1, k2, h1, h2, tinf1, tinf2 = 3e-3, 1.6e-3, 167.0, 0.3, 100.0, 10.0, 323.15, 273.15
    xs = np.concatenate([np.linspace(0, l1, 4), np.linspace(l1, l1 + l2, 5)[1:]])
    m = meshes.tensor(xs, np.linspace(0, 0.01, 3), np.linspace(0, 0.01, 3))
    parts = meshes.layers(m, 0, {"plate": (0, l1), "board": (l1, l1 + l2)})
    d = domain_of(m, parts)
    assert list(d.interfaces) == [("board", "plate")]
    spec = heat.HeatSpec({"plate": material(k1), "board": material(k2)},
                         convection={"xmin": heat.Convection(h1, tinf1), "xmax": heat.Convection(h2, tinf2)},
                         probes={"interface": (l1, 0.005, 0.005)})
    f = heat.solve(d, spec)
    flux = (tinf1 - tinf2) / (1 / h1 + l1 / k1 + l2 / k2 + 1 / h2)  # 433.46 W/m^2
    area = 0.01 * 0.01
    assert balance(f, name="xmin") == pytest.approx(flux * area, rel=1e-10)
    assert f.probes["interface"] == pytest.approx(tinf1 - flux * (1 / h1 + l1 / k1), abs=1e-9)
    assert f.parts["board"]["min"] == pytest.approx(tinf2 + flux / h2, abs=1e-9)
    assert f.imbalance < 1e-10


def test_straight_fin_with_convective_tip():
    """[INC] sec. 3.6.2, Table 3.4 case A (convection from the tip). Aluminium pin 5 x 5 x 50 mm,
    k = 167, h = 25 on sides and tip. The 1-D fin theory neglects the cross-section gradient
    (Bi = h t / k = 7.5e-4), an O(Bi) effect; with P2 and 40 elements along the pin the
    discretisation error is far below that, so 0.2 % bounds both."""
    k, h, a, L, tb, tinf = 167.0, 25.0, 5e-3, 50e-3, 353.15, 293.15
    m = meshes.tensor(np.linspace(0, L, 41), np.linspace(0, a, 3), np.linspace(0, a, 3))
    sides = meshes.faces(m)
    d = domain_of(m, surfaces={"base": sides["xmin"], "air": np.concatenate(
        [sides[s] for s in ("xmax", "ymin", "ymax", "zmin", "zmax")])})
    f = heat.solve(d, heat.HeatSpec({"body": material(k)}, fixed_temperature={"base": tb},
                                    convection={"air": heat.Convection(h, tinf)}, order=2,
                                    probes={"tip": (L, a / 2, a / 2)}))
    mm = np.sqrt(h * 4 * a / (k * a * a))
    hmk = h / (mm * k)
    theta_tip = 1 / (np.cosh(mm * L) + hmk * np.sinh(mm * L))
    M = np.sqrt(h * 4 * a * k * a * a) * (tb - tinf)
    q_fin = M * (np.sinh(mm * L) + hmk * np.cosh(mm * L)) / (np.cosh(mm * L) + hmk * np.sinh(mm * L))
    assert (f.probes["tip"] - tinf) / (tb - tinf) == pytest.approx(theta_tip, rel=2e-3)
    assert balance(f, name="base") == pytest.approx(q_fin, rel=2e-3)
    assert f.imbalance < 1e-9


def annulus(r1, r2, nr, nt, nz, height):
    """Quarter of a hollow cylinder, mapped from a box (straight-sided tetrahedra)."""
    m = meshes.tensor(np.linspace(r1, r2, nr), np.linspace(0, np.pi / 2, nt), np.linspace(0, height, nz))
    r, t, z = m.p
    return MeshTet(np.array([r * np.cos(t), r * np.sin(t), z]), m.t)


def test_long_hollow_cylinder():
    """[INC] sec. 3.3.1 (radial systems, cylinder): T = T2 + (T1 - T2) ln(r/r2)/ln(r1/r2),
    q' = 2 pi k (T1 - T2)/ln(r2/r1). Quarter model, insulated symmetry planes and ends.
    Straight-sided facets approximate the circles: O(h^2) geometric error, about 2e-4 relative at
    24 divisions of the quarter circle; 1e-3 bounds it."""
    r1, r2, k, t1, t2, height = 0.05, 0.1, 50.0, 373.15, 273.15, 0.01
    m = annulus(r1, r2, 9, 25, 2, height)
    rad = np.sqrt(m.p[0] ** 2 + m.p[1] ** 2)
    bnd = m.boundary_facets()
    rf = np.sqrt(m.p[0, m.facets[:, bnd]] ** 2 + m.p[1, m.facets[:, bnd]] ** 2).mean(axis=0)
    surfaces = {"inner": bnd[np.isclose(rf, r1)], "outer": bnd[np.isclose(rf, r2)]}
    assert rad.min() == pytest.approx(r1)
    d = domain_of(m, surfaces=surfaces)
    c = 0.075 / np.sqrt(2)
    f = heat.solve(d, heat.HeatSpec({"body": material(k)}, fixed_temperature={"inner": t1, "outer": t2},
                                    order=2, probes={"mid": (c, c, height / 2)}))
    expected = t2 + (t1 - t2) * np.log(0.075 / r2) / np.log(r1 / r2)  # 41.50 degC
    assert f.probes["mid"] == pytest.approx(expected, abs=1e-3 * (t1 - t2))
    q_per_length = 2 * np.pi * k * (t1 - t2) / np.log(r2 / r1)
    assert balance(f, name="inner") / height * 4 == pytest.approx(q_per_length, rel=1e-3)


def test_hollow_sphere():
    """[INC] sec. 3.3.2 (sphere): T = T1 - (T1 - T2)(1 - r1/r)/(1 - r1/r2), q = 4 pi k (T1 - T2)/(1/r1 - 1/r2).
    A sector between two radial planes, a cone and the equator (all insulated, all containing the
    radial direction); its share of q is its solid angle over 4 pi. Straight-sided facets: O(h^2),
    1e-3 relative at this size (the chord error of 24 divisions is 1e-4)."""
    r1, r2, k, t1, t2 = 0.05, 0.1, 50.0, 373.15, 273.15
    polar = (np.pi / 4, np.pi / 2)
    m = meshes.tensor(np.linspace(r1, r2, 9), np.linspace(0, np.pi / 4, 13), np.linspace(*polar, 13))
    r, az, po = m.p
    m = MeshTet(np.array([r * np.sin(po) * np.cos(az), r * np.sin(po) * np.sin(az), r * np.cos(po)]), m.t)
    bnd = m.boundary_facets()
    rf = np.linalg.norm(m.p[:, m.facets[:, bnd]].mean(axis=1), axis=0)
    tol = 0.02 * r1
    surfaces = {"inner": bnd[rf < r1 + tol], "outer": bnd[rf > r2 - tol]}
    d = domain_of(m, surfaces=surfaces)
    p = 0.075 * np.array([np.sin(1.2) * np.cos(0.4), np.sin(1.2) * np.sin(0.4), np.cos(1.2)])
    f = heat.solve(d, heat.HeatSpec({"body": material(k)}, fixed_temperature={"inner": t1, "outer": t2},
                                    order=2, probes={"mid": tuple(p)}))
    expected = t1 - (t1 - t2) * (1 - r1 / 0.075) / (1 - r1 / r2)  # 33.33 degC
    assert f.probes["mid"] == pytest.approx(expected, abs=1e-3 * (t1 - t2))
    solid_angle = np.pi / 4 * (np.cos(polar[0]) - np.cos(polar[1]))
    q = 4 * np.pi * k * (t1 - t2) / (1 / r1 - 1 / r2)
    assert balance(f, name="inner") == pytest.approx(q * solid_angle / (4 * np.pi), rel=2e-3)


def test_orthotropic_block_with_rotated_axes():
    """An orthotropic block: (a) along each material axis the plane-wall result q = k_i A dT / L holds
    with that axis' conductivity ([INC] sec. 3.1); (b) Fourier's law for anisotropic solids transforms
    as K = R^T diag(k) R (H.S. Carslaw, J.C. Jaeger, Conduction of Heat in Solids, 2nd ed. 1959,
    sec. 1.17, from memory), so a block whose material axes are rotated by R gives at every node the
    same temperature as the same block turned by R with unrotated axes. Both exact to round-off."""
    k = [1.059, 0.8, 0.343]
    m = meshes.tensor(*[np.linspace(0, 0.02, 5)] * 3, jitter=0.2)
    d = domain_of(m)
    for axis, name in enumerate(("x", "y", "z")):
        lo, hi = f"{name}min", f"{name}max"
        f = heat.solve(d, heat.HeatSpec({"body": material(k)}, fixed_temperature={lo: 350.0, hi: 300.0}))
        assert balance(f, name=lo) == pytest.approx(k[axis] * 0.02**2 * 50.0 / 0.02, rel=1e-10)

    a, b = np.deg2rad(30.0), np.deg2rad(20.0)
    rz = np.array([[np.cos(a), np.sin(a), 0], [-np.sin(a), np.cos(a), 0], [0, 0, 1]])
    rx = np.array([[1, 0, 0], [0, np.cos(b), np.sin(b)], [0, -np.sin(b), np.cos(b)]])
    r = rx @ rz
    spec = dict(power={"body": 0.5}, fixed_temperature={"xmin": 350.0, "ymax": 300.0},
                convection={"zmax": heat.Convection(40.0, 290.0)})
    rotated_axes = heat.solve(d, heat.HeatSpec({"body": material(k).oriented(r)}, **spec))
    turned = domain_of(MeshTet(r @ m.p, m.t), surfaces=meshes.faces(m))
    turned_body = heat.solve(turned, heat.HeatSpec({"body": material(k)}, **spec))
    np.testing.assert_allclose(rotated_axes.temperature, turned_body.temperature, rtol=1e-10)
    assert abs(rotated_axes.temperature.max() - rotated_axes.temperature.min()) > 10.0
    kt = material(k).oriented(r).conductivity_tensor()
    np.testing.assert_allclose(kt, kt.T, atol=1e-15)
    np.testing.assert_allclose(np.linalg.eigvalsh(kt), sorted(k), rtol=1e-12)


# ---------------------------------------------------------------------------------------------
# Manufactured solution: proves the convergence order of P1 and P2 in L2 and H1.

# the manufactured field, its gradient and source live with the verification cases (one copy)
from pipeline.verification.manufactured import K as K_MMS  # noqa: E402
from pipeline.verification.manufactured import t_exact, t_grad, t_source  # noqa: E402


def mms_errors(order, n):
    m = meshes.tensor(*[np.linspace(0, 1, n + 1)] * 3)
    d = domain_of(m)
    mat = material([1.0, 1.0, 1.0])
    lam, vec = np.linalg.eigh(K_MMS)
    mat = from_record("aniso", {"kind": "orthotropic", "conductivity": lam.tolist(), "youngs_modulus": 1e9,
                                "poisson_ratio": 0.3, "expansion": 1e-5, "density": 1.0}, "test").oriented(
        np.linalg.det(vec) * vec.T if np.linalg.det(vec) < 0 else vec.T)
    np.testing.assert_allclose(mat.conductivity_tensor(), K_MMS, atol=1e-12)
    spec = heat.HeatSpec({"body": mat}, generation={"body": t_source},
                         fixed_temperature={s: t_exact for s in meshes.FACES}, order=order)
    f = heat.solve(d, spec)
    fine = Basis(d.mesh, ElementTetP2() if order == 2 else ElementTetP1(), intorder=2 * order + 2)
    th = fine.interpolate(f.temperature)
    x = fine.mapping.F(fine.X)
    l2 = np.sqrt(np.sum((th - t_exact(x)) ** 2 * fine.dx))
    h1 = np.sqrt(np.sum(np.sum((th.grad - t_grad(x)) ** 2, axis=0) * fine.dx))
    return l2, h1, f


@pytest.mark.parametrize("order,sizes", [(1, (4, 8, 16)), (2, (2, 4, 8))])
def test_manufactured_solution_orders(order, sizes):
    """Method of manufactured solutions (P.J. Roache, J. Fluids Eng. 124(1), 4-10, 2002; K. Salari and
    P. Knupp, SAND2000-1444): on uniformly refined meshes the observed orders approach the theoretical
    p + 1 (L2) and p (H1) (P.G. Ciarlet, The Finite Element Method for Elliptic Problems, 1978, ch. 3).
    Acceptance |observed - theoretical| <= 0.2 on the finest pair is common practice."""
    results = [mms_errors(order, n) for n in sizes]
    l2 = np.array([r[0] for r in results])
    h1 = np.array([r[1] for r in results])
    rate_l2 = np.log2(l2[-2] / l2[-1])
    rate_h1 = np.log2(h1[-2] / h1[-1])
    assert abs(rate_l2 - (order + 1)) <= 0.2, (l2, rate_l2)
    assert abs(rate_h1 - order) <= 0.2, (h1, rate_h1)
    # the balance closes to solver tolerance also with distributed sources and fixed-T faces
    assert results[-1][2].imbalance < 1e-8


# ---------------------------------------------------------------------------------------------
# Power, balance, adiabatic listing, errors

def two_blocks():
    m = meshes.tensor(np.linspace(0, 0.04, 9), np.linspace(0, 0.01, 3), np.linspace(0, 0.01, 3))
    parts = meshes.layers(m, 0, {"left": (0, 0.02), "right": (0.02, 0.04)})
    return domain_of(m, parts)


def test_power_is_spread_over_the_part_and_reported_in_both_units():
    d = two_blocks()
    spec = heat.HeatSpec({"left": material(100.0), "right": material(5.0)}, power={"left": 2.0},
                         convection={"xmax": heat.Convection(20.0, 293.15)})
    f = heat.solve(d, spec)
    rec = f.loads[0]
    assert rec["power_W"] == 2.0
    assert rec["generation_W_per_m3"] == pytest.approx(2.0 / (0.02 * 0.01 * 0.01))
    assert balance(f, kind="convection") == pytest.approx(-2.0, rel=1e-10)
    assert "xmin" in f.adiabatic and "ymin" in f.adiabatic
    assert f.parts["left"]["max"] > f.parts["right"]["max"]
    arrays, meta = f.to_arrays()
    again = type(f).from_arrays(arrays, meta)
    assert again.parts == f.parts and np.array_equal(again.temperature, f.temperature)
    assert "imbalance" in repr(f)


def test_total_heat_flux_is_spread_over_the_surface():
    d = two_blocks()
    spec = heat.HeatSpec({"left": material(100.0), "right": material(100.0)},
                         flux={"xmin": heat.HeatFlux(total=3.0)}, fixed_temperature={"xmax": 300.0})
    f = heat.solve(d, spec)
    assert balance(f, kind="fixed_temperature") == pytest.approx(-3.0, rel=1e-10)
    # 1-D: T(0) - T(L) = q'' L / k
    assert f.parts["left"]["max"] - 300.0 == pytest.approx(3.0 / 1e-4 * 0.04 / 100.0, rel=1e-9)


def test_power_without_a_way_out_is_refused_before_solving():
    d = two_blocks()
    with pytest.raises(errors.PhysicsError, match="no steady state"):
        heat.solve(d, heat.HeatSpec({"left": material(1.0), "right": material(1.0)}, power={"left": 1.0}))


def test_every_input_problem_is_reported_at_once():
    d = two_blocks()
    spec = heat.HeatSpec({"left": material(1.0), "rigth": material(1.0)}, power={"lefft": 1.0},
                         convection={"xmaz": heat.Convection(-1.0, 300.0)}, fixed_temperature={"xmin": -5.0})
    with pytest.raises(errors.InputError) as info:
        heat.solve(d, spec)
    text = "\n".join(info.value.problems)
    assert "part 'right' has no material" in text
    assert "'rigth' does not exist (did you mean 'right'?)" in text
    assert "did you mean 'left'" in text
    assert "did you mean 'xmax'" in text
    assert "film_coefficient must be > 0" in text
    assert "must be >= 0 K" in text


def test_fixed_temperature_and_convection_on_one_surface_conflict():
    d = two_blocks()
    spec = heat.HeatSpec({"left": material(1.0), "right": material(1.0)}, fixed_temperature={"xmin": 300.0},
                         convection={"xmin": heat.Convection(5.0, 300.0)})
    with pytest.raises(errors.InputError, match="cannot be combined"):
        heat.solve(d, spec)


def test_probe_outside_the_mesh_is_an_input_error():
    d = two_blocks()
    spec = heat.HeatSpec({"left": material(1.0), "right": material(1.0)}, fixed_temperature={"xmin": 300.0},
                         probes={"lost": (1.0, 1.0, 1.0)})
    with pytest.raises(errors.InputError, match="probe 'lost'.*outside the mesh"):
        heat.solve(d, spec)


def test_amg_and_direct_solvers_agree():
    d = two_blocks()
    base = dict(materials={"left": material(100.0), "right": material(5.0)}, power={"left": 2.0},
                convection={"xmax": heat.Convection(20.0, 293.15)}, order=2)
    direct = heat.solve(d, heat.HeatSpec(**base, solver="direct"))
    amg = heat.solve(d, heat.HeatSpec(**base, solver="amg"))
    assert amg.solver.method == "amg" and amg.solver.iterations > 0
    np.testing.assert_allclose(amg.temperature, direct.temperature, rtol=1e-8)
