"""Interfaces: contact conductance on split interfaces, enclosed air as an unknown, parts meshed apart
(found, refused until a joint is chosen, tied), and the stress stage across split interfaces and ties.

[TG] = S.P. Timoshenko, J.N. Goodier, Theory of Elasticity, 3rd ed., McGraw-Hill 1970 (from memory).
[INC] = F.P. Incropera, D.P. DeWitt, T.L. Bergman, A.S. Lavine, Fundamentals of Heat and Mass
Transfer, 6th ed., Wiley 2007 (section numbers from memory; they can differ between editions).
"""

from __future__ import annotations

import meshes
import numpy as np
import pytest
from skfem import MeshTet

from pipeline import errors
from pipeline.model import mesh as mesh_mod
from pipeline.model.materials import from_record
from pipeline.stages import heat, mapping, stress
from pipeline.stages.supports import Support

LA, LB, W = 0.02, 0.03, 0.01  # two slabs along x [m], cross-section W x W
KA, KB, R = 10.0, 2.0, 2e-3   # W/(m*K), W/(m*K), m^2*K/W (invented values)
T1, T2 = 373.15, 293.15


def material(k=10.0, e=70e9, nu=0.3, alpha=20e-6, name="m"):
    return from_record(name, {"conductivity": k, "youngs_modulus": e, "poisson_ratio": nu, "expansion": alpha,
                              "density": 1.0}, "test")


def domain_of(m, parts=None, surfaces=None):
    return mesh_mod.from_meshio(meshes.to_meshio(m, parts, surfaces), unit="m")


def two_slabs(jitter=0.2, seed=1):
    """Slabs a (x < LA) and b (x > LA), distorted everywhere but keeping the interface plane x = LA."""
    m = meshes.tensor(np.r_[np.linspace(0, LA, 5), np.linspace(LA, LA + LB, 7)[1:]], np.linspace(0, W, 3),
                      np.linspace(0, W, 3))
    rng = np.random.default_rng(seed)
    p = m.p.copy()
    inner = np.setdiff1d(np.arange(m.nvertices), m.boundary_nodes())
    p[1:, inner] += jitter * 0.005 * rng.uniform(-1, 1, (2, len(inner)))
    off = inner[np.abs(p[0, inner] - LA) > 1e-12]
    p[0, off] += jitter * 0.004 * rng.uniform(-1, 1, len(off))
    m = MeshTet(p, m.t)
    return m, meshes.layers(m, 0, {"a": (0, LA), "b": (LA, LA + LB)})


def wall_spec(order, **kw):
    return heat.HeatSpec({"a": material(KA), "b": material(KB)}, fixed_temperature={"xmin": T1, "xmax": T2},
                         order=order, **kw)


# --------------------------------------------------------------------------------- contact conductance

@pytest.mark.parametrize("order", [1, 2])
def test_composite_wall_with_contact_resistance(order):
    """[INC] sec. 3.1.4 (composite wall with thermal contact resistance):
    q'' = (T1 - T2) / (L_A/k_A + R'' + L_B/k_B), the jump at the contact q'' R''.  The exact field is
    linear on each side with a jump, inside the split P1 and P2 spaces: exact to round-off on a
    distorted mesh; the heat balance closes to round-off."""
    m, parts = two_slabs()
    d = mesh_mod.join(domain_of(m, parts), {"pad": mesh_mod.Joint("contact", parts=("a", "b"))})
    f = heat.solve(d, wall_spec(order, contacts={"pad": 1 / R}))
    q = (T1 - T2) / (LA / KA + R + LB / KB)
    (rec,) = f.interfaces
    assert rec["heat_W"] == pytest.approx(q * W * W, rel=1e-10)
    assert rec["mean_drop_K"] == pytest.approx(q * R, rel=1e-10)
    assert rec["max_drop_K"] == pytest.approx(q * R, rel=1e-10)
    assert rec["area_m2"] == pytest.approx(W * W, rel=1e-12)
    x = heat.fem.space(d, order).doflocs[0]
    side_b = np.zeros(len(x), dtype=bool)
    side_b[np.unique(heat.fem.space(d, order).element_dofs[:, d.parts["b"]])] = True
    exact = np.where(side_b, T2 + q * (LA + LB - x) / KB, T1 - q * x / KA)
    np.testing.assert_allclose(f.temperature, exact, rtol=0, atol=1e-9)
    assert f.imbalance < 1e-12


def test_interface_named_by_a_surface_and_an_insulated_one():
    """A surface group on the interface names it; a zero conductance insulates: all heat stays in a."""
    m, parts = two_slabs()
    c = m.p[:, m.facets].mean(axis=1)
    inner = np.flatnonzero((m.f2t[1] >= 0) & (np.abs(c[0] - LA) < 1e-12))
    surfaces = meshes.faces(m) | {"joint": inner}
    d = mesh_mod.join(domain_of(m, parts, surfaces), {"gap": mesh_mod.Joint("contact", surface="joint")})
    assert d.contacts["gap"].parts == ("a", "b")
    spec = heat.HeatSpec({"a": material(KA), "b": material(KB)}, power={"a": 2.0},
                         convection={"xmin": heat.Convection(10.0, T2), "xmax": heat.Convection(10.0, T2)},
                         contacts={"gap": 0.0})
    f = heat.solve(d, spec)
    assert f.interfaces[0]["heat_W"] == 0.0
    out = {r["name"]: r["heat_in_W"] for r in f.balance}
    assert out["xmin"] == pytest.approx(-2.0, rel=1e-10) and out["xmax"] == pytest.approx(0.0, abs=1e-12)


def test_contact_needs_a_conductance_and_names_are_checked():
    m, parts = two_slabs()
    d = mesh_mod.join(domain_of(m, parts), {"pad": mesh_mod.Joint("contact", parts=("a", "b"))})
    with pytest.raises(errors.InputError, match="interface 'pad' is split but has no conductance"):
        heat.solve(d, wall_spec(1))
    with pytest.raises(errors.InputError, match=r"interface 'pda' does not exist \(did you mean 'pad'\?\)"):
        heat.solve(d, wall_spec(1, contacts={"pad": 1.0, "pda": 1.0}))
    with pytest.raises(errors.InputError, match=r"part 'bb' does not exist \(did you mean 'b'\?\)"):
        mesh_mod.join(domain_of(m, parts), {"x": mesh_mod.Joint("contact", parts=("a", "bb"))})
    with pytest.raises(errors.InputError, match="already share nodes"):
        mesh_mod.join(domain_of(m, parts), {"x": mesh_mod.Joint("tie", parts=("a", "b"))})


@pytest.mark.parametrize("order", [1, 2])
def test_split_interface_keeps_the_sides_together_in_the_stress_stage(order):
    """Tied sides move as one: a uniform temperature rise on a bonded bimaterial bar gives the same
    displacements and stresses on the split mesh as on the shared-node mesh (same discrete problem,
    reordered: round-off)."""
    m, parts = two_slabs()
    bonded = domain_of(m, parts)
    split = mesh_mod.join(bonded, {"pad": mesh_mod.Joint("contact", parts=("a", "b"))})
    spec = stress.StressSpec({"a": material(e=70e9, alpha=23e-6), "b": material(e=200e9, alpha=12e-6)},
                             {"xmin": Support("fixed")}, order=order)
    load = lambda d: mapping.from_function(d, lambda x: 393.15 + 0 * x[0], mapping.MapSpec(reference=293.15), order)
    one, two = stress.solve(bonded, load(bonded), spec), stress.solve(split, load(split), spec)
    n = len(one.displacement)
    scale = np.abs(one.displacement).max()
    space_one, space_two = heat.fem.space(bonded, order), heat.fem.space(split, order)
    # the split mesh keeps element ids: compare element by element
    u1 = one.displacement[space_one.element_dofs]
    u2 = two.displacement[space_two.element_dofs]
    np.testing.assert_allclose(u2, u1, rtol=0, atol=1e-9 * scale)
    np.testing.assert_allclose(two.von_mises, one.von_mises, rtol=1e-8, atol=1e-6 * one.von_mises.max())
    np.testing.assert_allclose(two.reactions["xmin"], one.reactions["xmin"], rtol=1e-9, atol=1e-9)
    assert n < len(two.displacement)


# --------------------------------------------------------------------------------------- enclosed air

def test_sealed_box_air_temperature_is_the_series_network():
    """Enclosed air as an unknown: a block with power faces the air with film h_i on its top face; the
    air gives the heat to a second block that is cooled outside.  With 1-D conduction through each
    block ([INC] sec. 3.1, thermal resistance networks) the air temperature is that of the series
    network T_air = T_inf + Q (L_B / (k_B A) + 1/(h_o A) + 1/(h_i A)) ... computed below; the sealed
    air's net exchange is zero to round-off."""
    # block a: x in [0, LA] (power Q, its face xmax faces the air) ; block b: separate, x in [LA+g, ...]
    L = 0.01
    ma = meshes.tensor(np.linspace(0, L, 5), np.linspace(0, W, 3), np.linspace(0, W, 3))
    mb = meshes.tensor(np.linspace(2 * L, 3 * L, 5), np.linspace(0, W, 3), np.linspace(0, W, 3))
    m = MeshTet(np.hstack([ma.p, mb.p]), np.hstack([ma.t, mb.t + ma.nvertices]))
    parts = {"a": np.arange(ma.nelements), "b": ma.nelements + np.arange(mb.nelements)}
    bnd = m.boundary_facets()
    c = m.p[:, m.facets[:, bnd]].mean(axis=1)
    surfaces = {"a_top": bnd[np.abs(c[0] - L) < 1e-12], "b_bottom": bnd[np.abs(c[0] - 2 * L) < 1e-12],
                "b_out": bnd[np.abs(c[0] - 3 * L) < 1e-12]}
    d = domain_of(m, parts, surfaces)
    Q, hi, ho, k, amb = 1.5, 8.0, 25.0, 5.0, 298.15
    spec = heat.HeatSpec({"a": material(k), "b": material(k)}, power={"a": Q},
                         convection={"b_out": heat.Convection(ho, amb)},
                         cavities={"air": heat.Cavity({"a_top": hi, "b_bottom": hi})})
    f = heat.solve(d, spec)
    (air,) = f.cavities
    A = W * W
    # all of Q crosses the air: from a's top into the air (1/(hi A)), air to b (1/(hi A)), through b
    # (L/(k A)), out (1/(ho A)); the air sits between the second film and the ambient.
    t_air = amb + Q * (1 / (ho * A) + L / (k * A) + 1 / (hi * A))
    assert air["temperature_K"] == pytest.approx(t_air, rel=1e-10)
    assert abs(air["from_solids_W"]) < 1e-10 * Q
    assert air["films_W"]["a_top"] == pytest.approx(Q, rel=1e-10)
    assert f.imbalance < 1e-12
    assert not heat.supplying(f.balance)


def test_ventilated_air_carries_its_share_and_sealed_air_needs_a_sink():
    """With ventilation m_dot c_p the air's balance is sum films = m_dot c_p (T_air - T_in) (an energy
    balance on the air, [INC] sec. 1.3.1); a body reached only by sealed air has no steady state."""
    m = meshes.tensor(np.linspace(0, W, 4), np.linspace(0, W, 3), np.linspace(0, W, 3))
    d = domain_of(m)
    Q, vent, t_in = 2.0, 0.05, 300.0
    spec = heat.HeatSpec({"body": material(50.0)}, power={"body": Q},
                         cavities={"air": heat.Cavity({"xmax": 10.0}, ventilation=vent, inlet=t_in)})
    f = heat.solve(d, spec)
    (air,) = f.cavities
    assert air["temperature_K"] == pytest.approx(t_in + Q / vent, rel=1e-10)
    assert air["ventilation_W"] == pytest.approx(Q, rel=1e-10)
    sealed = heat.HeatSpec({"body": material(50.0)}, power={"body": Q}, cavities={"air": heat.Cavity({"xmax": 10.0})})
    with pytest.raises(errors.PhysicsError, match="no steady state"):
        heat.solve(d, sealed)


def test_a_fixed_ambient_that_supplies_heat_is_named_with_its_watts():
    """A film to a fixed 'inside air' hotter than the wall puts heat into the solids: the notice names
    the surface and the watts (the slab between two films, [INC] sec. 3.1: q = dT / (1/h + L/k + 1/h))."""
    m = meshes.tensor(np.linspace(0, W, 4), np.linspace(0, W, 3), np.linspace(0, W, 3))
    d = domain_of(m)
    spec = heat.HeatSpec({"body": material(50.0)},
                         convection={"xmin": heat.Convection(10.0, 350.0), "xmax": heat.Convection(10.0, 300.0)})
    f = heat.solve(d, spec)
    q = 50.0 / (2 / 10.0 + W / 50.0) * W * W  # (T_1 - T_2) / (1/h + L/k + 1/h) times the area
    (record,) = heat.supplying(f.balance)
    assert record["name"] == "xmin" and record["heat_in_W"] == pytest.approx(q, rel=1e-10)


# --------------------------------------------------------------------------------- parts meshed apart

def apart(nx_a=5, nx_b=4, ny_a=3, ny_b=4, shift=0.0):
    """A bar of two parts meshed separately with different sizes, touching at x = LA (no shared nodes)."""
    ma = meshes.tensor(np.linspace(0, LA, nx_a), np.linspace(0, W, ny_a), np.linspace(0, W, ny_a))
    mb = meshes.tensor(np.linspace(LA, LA + LB, nx_b), np.linspace(0, W, ny_b) + shift, np.linspace(0, W, ny_b))
    m = MeshTet(np.hstack([ma.p, mb.p]), np.hstack([ma.t, mb.t + ma.nvertices]))
    parts = {"a": np.arange(ma.nelements), "b": ma.nelements + np.arange(mb.nelements)}
    bnd = m.boundary_facets()
    c = m.p[:, m.facets[:, bnd]].mean(axis=1)
    surfaces = {"xmin": bnd[np.abs(c[0]) < 1e-12], "xmax": bnd[np.abs(c[0] - LA - LB) < 1e-12]}
    return domain_of(m, parts, surfaces)


def test_parts_meshed_apart_are_found_and_refused_until_chosen():
    d = apart()
    assert list(d.touching) == [("a", "b")]
    assert d.touching[("a", "b")].area == pytest.approx(W * W, rel=1e-12)
    with pytest.raises(errors.InputError, match=r"parts 'a' and 'b' touch on 0.0001 m\^2 .* share no nodes"):
        heat.solve(d, wall_spec(1))
    insulated = mesh_mod.join(d, {"ab": mesh_mod.Joint("insulated", parts=("b", "a"))})
    assert not insulated.touching and not insulated.ties
    with pytest.raises(errors.InputError, match="needs a conforming interface"):
        mesh_mod.join(d, {"ab": mesh_mod.Joint("contact", parts=("a", "b"))})


@pytest.mark.parametrize("order", [1, 2])
@pytest.mark.parametrize("sizes", [dict(nx_a=5, ny_a=3, nx_b=9, ny_b=7), dict(nx_a=9, ny_a=7, nx_b=5, ny_b=3)])
@pytest.mark.parametrize("first", ["a", "b"])
def test_tie_of_parts_meshed_apart_passes_the_heat_patch_test(order, sizes, first):
    """Mortar tie (C. Bernardi, Y. Maday, A.T. Patera, A new nonconforming approach to domain
    decomposition: the mortar element method, 1994; B.I. Wohlmuth, SIAM J. Numer. Anal. 38, 2000):
    the constraint int (T_s - T_m) mu dA = 0 for mu in the tied side's trace space holds for any field
    linear on the interface, and constant fluxes are in that space, so a uniform gradient passes the
    tie exactly (patch test) whichever side follows and whichever is finer: the plane-wall solution
    [INC] sec. 3.1 to round-off, the heat balance to round-off."""
    d = mesh_mod.join(apart(**sizes), {"ab": mesh_mod.Joint("tie", parts=(first, "b" if first == "a" else "a"))})
    assert not d.touching and list(d.ties) == ["ab"]
    f = heat.solve(d, heat.HeatSpec({"a": material(KA), "b": material(KA)},
                                    fixed_temperature={"xmin": T1, "xmax": T2}, order=order))
    x = heat.fem.space(d, order).doflocs[0]
    np.testing.assert_allclose(f.temperature, T1 + (T2 - T1) * x / (LA + LB), rtol=0, atol=1e-9)
    q = KA * W * W * (T1 - T2) / (LA + LB)
    assert {r["name"]: r["heat_in_W"] for r in f.balance}["xmin"] == pytest.approx(q, rel=1e-10)
    assert f.imbalance < 1e-10


@pytest.mark.parametrize("order", [1, 2])
def test_tie_passes_the_uniform_strain_patch_test(order):
    """A bar pulled by a given end displacement d with symmetry on three faces has the uniform strain
    d/L and sigma_xx = E d / L (uniaxial stress, [TG] ch. 1, from memory): linear displacements pass
    the mortar tie exactly, so the stress is uniform to round-off through the non-matching interface,
    and the reaction on xmin (listed first, so it owns the edge points) is -sigma_xx A."""
    d = mesh_mod.join(apart(nx_a=5, ny_a=3, nx_b=9, ny_b=7), {"ab": mesh_mod.Joint("tie", parts=("b", "a"))})
    m = d.mesh
    bnd = m.boundary_facets()
    c = d.points[m.facets[:, bnd].T].mean(axis=1)
    faces = {"ymin": bnd[np.abs(c[:, 1]) < 1e-12], "zmin": bnd[np.abs(c[:, 2]) < 1e-12]}
    d = mesh_mod._replace(d, surfaces=d.surfaces | faces)
    e, delta, L = 70e9, 1e-5, LA + LB
    spec = stress.StressSpec({"a": material(e=e), "b": material(e=e)},
                             {"xmin": Support("symmetry"), "ymin": Support("symmetry"), "zmin": Support("symmetry"),
                              "xmax": Support("displacement", components={"x": delta})}, order=order)
    f = stress.solve(d, None, spec)
    sxx = e * delta / L
    np.testing.assert_allclose(f.stress[:, 0], sxx, rtol=1e-9)
    np.testing.assert_allclose(f.stress[:, 1:], 0.0, atol=1e-9 * sxx)
    assert f.reactions["xmin"][0] == pytest.approx(-sxx * W * W, rel=1e-9)  # xmin owns its edge points
    assert f.equilibrium["relative"] < 1e-9  # solve round-off, as in tests/test_stress.py
    x = heat.fem.space(d, order).doflocs
    np.testing.assert_allclose(f.displacement[:, 0], delta * x[0] / L, rtol=0, atol=1e-9 * delta)  # solve round-off


def test_tied_chain_heat_to_stress_under_a_linear_temperature_is_stress_free():
    """The whole chain through a mortar tie, P2: a linear temperature (plane wall, [INC] sec. 3.1) in
    a free body (minimal support) gives a compatible thermal strain, hence zero stress ([TG] ch. 13:
    a linear temperature in an unrestrained body causes no stress); the displacement is quadratic,
    inside P2 on both sides, so the tie reproduces it.  Tolerance: round-off of the reduced solve
    (measured 4e-10 of E alpha dT; the conforming mesh gives 3e-14)."""
    d = mesh_mod.join(apart(nx_a=5, ny_a=3, nx_b=9, ny_b=7), {"ab": mesh_mod.Joint("tie", parts=("b", "a"))})
    mats = {"a": material(KA), "b": material(KA)}
    f = heat.solve(d, heat.HeatSpec(mats, fixed_temperature={"xmin": T1, "xmax": T2}, order=2))
    load = mapping.transfer(f, d, d, mapping.MapSpec(reference=T2))
    s = stress.solve(d, load, stress.StressSpec(mats, {"free": Support("minimal")}, order=2))
    assert np.abs(s.stress).max() < 1e-8 * 70e9 * 20e-6 * (T1 - T2)


def test_die_on_sink_meshed_part_by_part_and_tied_gives_the_bonded_answer():
    """cases/die_on_sink (invented): a 10 W die on an aluminium base cooled from below, meshed once
    with shared nodes (bonded) and once part by part (die finer, faces not matching), tied.  There is
    no closed form; the tied answer must agree with the bonded one within the bonded model's own
    discretisation error, estimated by the difference between its P1 and P2 answers (a common-practice
    error indicator).  Measured: die peak rise 8.527 K (bonded P2) vs 8.515 K (tied P2), indicator
    0.11 K; die mean sigma_xx 8.95 vs 9.89 MPa, indicator 3.6 MPa."""
    from pathlib import Path

    from pipeline.model.materials import library

    case = Path(__file__).parent.parent / "cases" / "die_on_sink"
    lib = library()
    mats = {"die": lib["silicon"], "sink": lib["aluminium_6061_t6"]}
    bonded = mesh_mod.load(case / "die_on_sink_bonded.msh", "mm")
    apart_ = mesh_mod.load(case / "die_on_sink_apart.msh", "mm")
    with pytest.raises(errors.InputError, match="parts 'die' and 'sink' touch on 0.0001 m"):
        heat.check(apart_, heat.HeatSpec(mats))
    tied = mesh_mod.join(apart_, {"die_sink": mesh_mod.Joint("tie", parts=("die", "sink"))})

    def run(d, order):
        f = heat.solve(d, heat.HeatSpec(mats, power={"die": 10.0}, convection={"cold_plate": heat.Convection(2000.0, 298.15)},
                                        order=order, solver="direct"))
        load = mapping.transfer(f, d, d, mapping.MapSpec(reference=298.15))
        s = stress.solve(d, load, stress.StressSpec(mats, {"free": Support("minimal")}, order=order, solver="direct"))
        ids = d.parts["die"]
        vol = d.element_volumes[ids]
        assert f.imbalance < 1e-10 and s.equilibrium["relative"] < 1e-9
        return f.parts["die"]["max"], float((s.stress[ids, 0] * vol).sum() / vol.sum())

    (t1, s1), (t2, s2), (tt, st) = run(bonded, 1), run(bonded, 2), run(tied, 2)
    assert abs(tt - t2) < abs(t2 - t1)
    assert abs(st - s2) < abs(s2 - s1)


# ------------------------------------------------------------------------------------------ workflows

def _workflow(tmp_path, interfaces: str, mesh="die_on_sink_apart.msh") -> "Path":
    from pathlib import Path

    root = Path(__file__).parent.parent
    text = (root / "workflows" / "die_on_sink.toml").read_text()
    start, end = text.index("[interfaces.die_on_sink]"), text.index("[stages.heat]")
    text = text[:start] + interfaces + "\n" + text[end:]
    text = text.replace('"../cases/', f'"{(root / "cases").as_posix()}/').replace(
        "die_on_sink_apart.msh", mesh).replace("order = 2", "order = 1")
    path = tmp_path / "w.toml"
    path.write_text(text)
    return path


def test_a_workflow_must_choose_how_parts_meshed_apart_are_joined(tmp_path):
    """Bad input (exit status 2 at the command line): the pair and its touching area are named."""
    from pipeline.flow import runner

    with pytest.raises(errors.InputError, match=r"parts 'die' and 'sink' touch on 0.0001 m\^2 .*\[interfaces\]"):
        runner.plan(_workflow(tmp_path, ""), store=str(tmp_path / "s"))
    with pytest.raises(errors.InputError, match="a contact needs exactly one of conductance"):
        runner.plan(_workflow(tmp_path, '[interfaces.j]\nkind = "contact"\nparts = ["die", "sink"]\n'),
                    store=str(tmp_path / "s"))
    with pytest.raises(errors.InputError, match=r"part 'dye' does not exist \(did you mean 'die'\?\)"):
        runner.plan(_workflow(tmp_path, '[interfaces.j]\nkind = "tie"\nparts = ["dye", "sink"]\n'),
                    store=str(tmp_path / "s"))


def test_contact_resistance_through_a_workflow(tmp_path):
    """The bonded die-on-sink mesh with a contact resistance R'' on the die's bottom: the summary gives
    the heat through the interface (all 10 W, the die has no other way out) and the mean drop
    q'' R'' = (10 W / 1e-4 m^2) R'' ([INC] sec. 3.1.4; the flux is not uniform over the face, so
    the area mean is what the closed form gives: mean drop = R'' Q / A exactly)."""
    from pipeline.flow import runner

    R2 = 2e-5  # m^2*K/W (invented)
    path = _workflow(tmp_path, f'[interfaces.bond]\nkind = "contact"\nparts = ["die", "sink"]\n'
                               f'resistance = "{R2} m^2*K/W"\n', mesh="die_on_sink_bonded.msh")
    record = runner.run(path, store=tmp_path / "s", out=tmp_path / "out")
    (rec,) = record["stages"]["heat"]["interfaces"]
    assert rec["heat_W"] == pytest.approx(10.0, rel=1e-9)
    assert rec["mean_drop_K"] == pytest.approx(R2 * 10.0 / 1e-4, rel=1e-9)
    assert record["stages"]["heat"]["inputs"]["interfaces"]["bond"]["resistance"] == R2


def test_the_meshing_page_example_runs_and_its_parts_share_nodes(tmp_path, monkeypatch):
    """docs/meshing.md's Gmsh example (needs the optional gmsh package): the fragmented boxes share an
    interface of 10 x 10 mm and touch nowhere without shared nodes."""
    import re
    from pathlib import Path

    pytest.importorskip("gmsh")
    page = (Path(__file__).parent.parent / "docs" / "meshing.md").read_text()
    (code,) = re.findall(r"```python\n(.*?)```", page, re.S)
    monkeypatch.chdir(tmp_path)
    exec(compile(code, "docs/meshing.md", "exec"), {})
    d = mesh_mod.load(tmp_path / "two_boxes.msh", "mm")
    assert not d.touching
    assert d.facet_areas(d.interfaces[("die", "sink")]).sum() == pytest.approx(1e-4, rel=1e-9)
    assert "interface die/sink" in d.describe()


# ------------------------------------------------------------------------------------------ preload

def _bolted_plates(join: bool = True):
    """A square shank (2a x 2a) through two plates (a square tube 6a wide with a 4a hole, so the shank
    touches nothing but the heads), between a head and a nut that are 1e4 times stiffer; the shank is
    cut at mid-length by a pretension section (parts shank_lower / shank_upper).  Orthotropic
    materials with zero Poisson ratios and expansion along z only make every member uniaxial."""
    a, L, h = 0.002, 0.02, 0.002
    xs = np.linspace(-3 * a, 3 * a, 7)
    zs = np.r_[-h, np.linspace(0, L, 5), L + h]
    m = meshes.tensor(xs, xs, zs)
    c = m.p[:, m.t].mean(axis=1)
    r = np.maximum(np.abs(c[0]), np.abs(c[1]))
    head, shank, tube = (c[2] < 0) | (c[2] > L), (r < a) & (c[2] > 0) & (c[2] < L), (r > 2 * a) & (c[2] > 0) & (c[2] < L)
    keep = head | shank | tube
    c, head, shank, tube = c[:, keep], head[keep], shank[keep], tube[keep]
    parts = {"head": np.flatnonzero(head & (c[2] > L)), "nut": np.flatnonzero(head & (c[2] < 0)),
             "shank_lower": np.flatnonzero(shank & (c[2] < L / 2)), "shank_upper": np.flatnonzero(shank & (c[2] > L / 2)),
             "plate_1": np.flatnonzero(tube & (c[2] < L / 2)), "plate_2": np.flatnonzero(tube & (c[2] > L / 2))}
    d = domain_of(MeshTet(m.p, np.ascontiguousarray(m.t[:, keep])), parts, {})
    if join:
        d = mesh_mod.join(d, {"bolt": mesh_mod.Joint("section", parts=("shank_lower", "shank_upper"))})
    return d, a, L


def _uniaxial(name, e, alpha):
    return from_record(name, {"kind": "orthotropic", "conductivity": [1.0] * 3, "youngs_modulus": [e] * 3,
                              "poisson_ratio": [0.0] * 3, "shear_modulus": [e / 2] * 3,
                              "expansion": [0.0, 0.0, alpha], "density": 1.0}, "test")


@pytest.mark.parametrize("order", [1, 2])
def test_bolt_preload_and_its_change_under_a_uniform_temperature(order):
    """Bolt clamping two plates (J.H. Bickford, An Introduction to the Design and Behavior of Bolted
    Joints, 3rd ed., 1995, the joint diagram; from memory): the preload F puts the bolt in tension F and
    the plates in compression F (equilibrium), with the shortening F (1/k_b + 1/k_p); a uniform
    temperature change dT with expansions a_p (plates) and a_b (bolt) changes the bolt force by
    dF = (a_p - a_b) dT L k_b k_p / (k_b + k_p), k = E A / L.  The members are uniaxial (linear
    displacement, in both spaces); the heads' compliance (E 1e4 times the bolt's) is the model-form
    error: measured 2e-5 (P1) and 6e-5 (P2) of the bolt force after heating and 2e-4 of the
    shortening, tolerance 1e-3.  Forces: the section force, and the plates'
    and the shank's axial forces from the volume mean of sigma_zz (F = int sigma_zz dV / L)."""
    d, a, L = _bolted_plates()
    E, Eb, ab, ap, F, dT = 70e9, 200e9, 12e-6, 23e-6, 5000.0, 80.0
    stiff = _uniaxial("head", 1e4 * Eb, 0.0)
    mats = {"head": stiff, "nut": stiff, "shank_lower": _uniaxial("bolt", Eb, ab),
            "shank_upper": _uniaxial("bolt", Eb, ab), "plate_1": _uniaxial("plate", E, ap),
            "plate_2": _uniaxial("plate", E, ap)}
    spec = stress.StressSpec(mats, {"free": Support("minimal")}, order=order, preload={"bolt": F}, solver="direct")

    def axial(s, names):
        ids = np.concatenate([d.parts[n] for n in names])
        return float((s.stress[ids, 2] * d.element_volumes[ids]).sum() / L)

    kb, kp = Eb * (2 * a) ** 2 / L, E * ((6 * a) ** 2 - (4 * a) ** 2) / L
    assembled = stress.solve(d, None, spec)
    bolt = assembled.meta["preload"]["bolt"]
    assert bolt["force_N"] == pytest.approx(F, rel=1e-9)
    assert axial(assembled, ["shank_lower", "shank_upper"]) == pytest.approx(F, rel=1e-6)
    assert axial(assembled, ["plate_1", "plate_2"]) == pytest.approx(-F, rel=1e-6)
    assert bolt["shortening_m"] == pytest.approx(F * (1 / kb + 1 / kp), rel=1e-3)
    load = mapping.from_function(d, lambda x: 373.15 + 0 * x[0], mapping.MapSpec(reference=373.15 - dT), order)
    heated = stress.solve(d, load, spec)
    expected = F + (ap - ab) * dT * L * kb * kp / (kb + kp)
    assert heated.meta["preload"]["bolt"]["force_N"] == pytest.approx(expected, rel=1e-3)
    assert axial(heated, ["plate_1", "plate_2"]) == pytest.approx(-heated.meta["preload"]["bolt"]["force_N"], rel=1e-6)
    assert heated.equilibrium["relative"] < 1e-5  # round-off grown by the 1e4 stiffness contrast (measured 2e-7)


def test_preload_through_a_workflow(tmp_path):
    """The bolted plates as a Gmsh file and a workflow: [interfaces] kind = 'section' and
    stages.stress.preload; the summary lists the bolt at its preload (no other load)."""
    from pipeline.flow import runner

    d, _, _ = _bolted_plates(join=False)
    path = meshes.write_gmsh(meshes.to_meshio(d.mesh, d.parts, {}), tmp_path / "bolt.msh")
    lines = ["[mesh]", f'file = "{path.as_posix()}"', 'unit = "m"', "[parts]"]
    lines += [f'{p} = {{ material = "steel_304" }}' for p in sorted(d.parts)]
    lines += ["[interfaces.bolt]", 'kind = "section"', 'parts = ["shank_lower", "shank_upper"]',
              "[stages.stress]", 'kind = "stress"', "order = 1", 'supports = { free = { kind = "minimal" } }',
              'preload = { bolt = "4 kN" }', "[output]", f'folder = "{(tmp_path / "out").as_posix()}"',
              "figures = false", "report = false", "vtu = false"]
    (tmp_path / "w.toml").write_text("\n".join(lines) + "\n")
    record = runner.run(tmp_path / "w.toml", store=tmp_path / "s")
    bolt = record["stages"]["stress"]["bolts"]["bolt"]
    assert bolt["preload_N"] == 4000.0 and bolt["force_N"] == pytest.approx(4000.0, rel=1e-9)
