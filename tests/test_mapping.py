"""The map stage: same mesh, cross mesh, external files, stress-free temperatures, interfaces."""

from __future__ import annotations

import numpy as np
import pytest
from skfem import MeshTet

import meshes
from pipeline import errors
from pipeline.model import mesh as mesh_mod
from pipeline.model.materials import from_record
from pipeline.stages import heat, mapping, stress
from pipeline.stages.supports import Support



ROOM = mapping.MapSpec(293.15)  # a stress-free temperature; these tests look at the mapped temperatures only

def solid(k=100.0, e=70e9, nu=0.3, alpha=2e-5, name="m"):
    return from_record(name, {"conductivity": k, "youngs_modulus": e, "poisson_ratio": nu, "expansion": alpha,
                              "density": 2700.0, "yield_strength": 200e6}, "test")


def block(n=5, jitter=0.25, seed=0, shift=(0.0, 0.0, 0.0), parts=None):
    m = meshes.tensor(*[np.linspace(0, 0.02, n)] * 3, jitter=jitter, seed=seed)
    m = MeshTet(m.p + np.asarray(shift)[:, None], m.t)
    return mesh_mod.from_meshio(meshes.to_meshio(m, parts(m) if parts else None), unit="m")


def heated(d, order=1, generation=0.0):
    spec = heat.HeatSpec({p: solid() for p in d.parts}, fixed_temperature={"xmin": 400.0, "xmax": 300.0},
                         generation={p: generation for p in d.parts} if generation else {}, order=order)
    return heat.solve(d, spec)


def test_same_mesh_keeps_the_heat_stage_field_exactly():
    d = block()
    for order in (1, 2):
        t = heated(d, order)
        load = mapping.transfer(t, d, d, mapping.MapSpec(reference=300.0))
        assert load.order == order and load.diagnostics["method"] == "same mesh"
        np.testing.assert_array_equal(load.temperature, t.temperature)
        assert np.all(load.reference == 300.0)


def test_cross_mesh_reproduces_a_linear_field_and_the_same_stress():
    """A linear temperature is reproduced exactly by linear interpolation, so the stress computed on the
    structural mesh from the cross-mesh map equals the one from a heat solve on that mesh itself."""
    thermal, structural = block(n=4, seed=1), block(n=6, seed=2)
    load = mapping.transfer(heated(thermal), thermal, structural, mapping.MapSpec(reference=300.0))
    assert load.diagnostics["method"] == "cross mesh" and load.diagnostics["outside"] == 0
    own = mapping.transfer(heated(structural), structural, structural, mapping.MapSpec(reference=300.0))
    spec = stress.StressSpec({"body": solid()}, {"free": Support("minimal")}, order=2)
    a, b = stress.solve(structural, load, spec), stress.solve(structural, own, spec)
    np.testing.assert_allclose(a.displacement, b.displacement, atol=1e-14)


def test_cross_mesh_values_stay_within_the_source_range():
    thermal, structural = block(n=4, seed=3), block(n=7, seed=4)
    source = heated(thermal, generation=5e8)
    load = mapping.transfer(source, thermal, structural, ROOM)
    assert source.temperature.max() > 420.0  # the generation makes an interior peak
    assert load.temperature.min() >= source.temperature.min() - 1e-12
    assert load.temperature.max() <= source.temperature.max() + 1e-12
    # and it converges to the source field: at a point inside, both agree to interpolation accuracy
    assert load.diagnostics["mapped_max_K"] == pytest.approx(source.temperature.max(), rel=0.02)


def test_structural_model_may_omit_a_part():
    halves = lambda m: meshes.layers(m, 2, {"board": (0, 0.01), "pad": (0.01, 0.02)})  # noqa: E731
    thermal = block(n=5, jitter=0.0, parts=halves)
    board = mesh_mod.from_meshio(meshes.to_meshio(*_only_board(thermal)), unit="m")
    load = mapping.transfer(heated(thermal), thermal, board, ROOM)
    assert load.diagnostics["outside"] == 0
    assert len(load.temperature) == len(board.points)


def _only_board(d):
    ids = d.parts["board"]
    used = np.unique(d.tetrahedra[ids])
    renumber = np.full(len(d.points), -1)
    renumber[used] = np.arange(len(used))
    m = MeshTet(d.points[used].T.copy(), renumber[d.tetrahedra[ids]].T.copy())
    return (m,)


def test_points_slightly_outside_take_the_nearest_value_and_are_counted():
    thermal = block(n=4, jitter=0.0)
    structural = block(n=4, jitter=0.0, shift=(2e-5, 0.0, 0.0))
    load = mapping.transfer(heated(thermal), thermal, structural, ROOM)
    assert load.diagnostics["outside"] > 0
    assert load.diagnostics["max_distance_m"] == pytest.approx(2e-5, rel=1e-6)


def test_points_far_outside_stop_the_stage_naming_part_and_distance():
    thermal = block(n=4, jitter=0.0)
    structural = block(n=4, jitter=0.0, shift=(0.01, 0.0, 0.0))
    with pytest.raises(errors.InputError, match=r"outside the thermal mesh by up to 10 mm .* in parts body"):
        mapping.transfer(heated(thermal), thermal, structural, ROOM)


def test_external_csv_and_vtu_fields(tmp_path):
    import meshio

    d = block(n=4)
    field = lambda x: 290.0 + 1000.0 * x[0] + 500.0 * x[2]  # noqa: E731  (K, x in m)
    cloud = meshes.tensor(*[np.linspace(-0.001, 0.021, 6)] * 3).p.T
    csv = tmp_path / "measured.csv"
    rows = ["x_mm,y_mm,z_mm,T_degC"] + [f"{x * 1e3},{y * 1e3},{z * 1e3},{field((x, y, z)) - 273.15}"
                                        for x, y, z in cloud]
    csv.write_text("\n".join(rows) + "\n")
    load = mapping.from_file(csv, d, ROOM, unit="mm", temperature_unit="degC")
    np.testing.assert_allclose(load.temperature, field(d.points.T), rtol=1e-10)
    assert load.diagnostics["method"] == "external file"

    vtu = tmp_path / "other_solver.vtu"
    m = meshes.tensor(*[np.linspace(-0.001, 0.021, 5)] * 3)
    meshio.write(vtu, meshio.Mesh(m.p.T, [("tetra", m.t.T)],
                                  point_data={"T": field(m.p), "flux": np.zeros((m.nvertices, 3))}))
    np.testing.assert_allclose(mapping.from_file(vtu, d, ROOM, array="T").temperature, field(d.points.T), rtol=1e-10)
    with pytest.raises(errors.InputError, match="name the temperature array; arrays there are: T, flux"):
        mapping.from_file(vtu, d, ROOM)
    with pytest.raises(errors.InputError, match="did you mean 'T'"):
        mapping.from_file(vtu, d, ROOM, array="t")
    with pytest.raises(errors.InputError, match="has 3 components"):
        mapping.from_file(vtu, d, ROOM, array="flux")


def test_bonded_parts_keep_their_own_expansion_and_stress_free_temperature():
    """Nothing is averaged across an interface: two layers in series along x, every face held normally,
    under a uniform temperature with a different stress-free temperature per part (an assembly
    temperature). The exact solution is uniaxial strain in each layer: sigma_xx = M_i eps_i - b_i is the
    same in both (equilibrium) and sum L_i eps_i = 0 (the faces are held), with M = lambda + 2 mu and
    b = (3 lambda + 2 mu) alpha dT; sigma_yy = sigma_zz = lambda_i eps_i - b_i (stress-strain relations
    with thermal strain, Timoshenko and Goodier, Theory of Elasticity, 3rd ed., ch. 13; the layered
    solution derived here). Displacement is piecewise linear with the interface on element faces, so P2
    reproduces it to round-off, also in the elements that touch the interface."""
    halves = lambda m: meshes.layers(m, 0, {"copper": (0, 0.01), "ceramic": (0.01, 0.02)})  # noqa: E731
    d = block(n=5, jitter=0.0, parts=halves)
    mats = {"copper": solid(e=117e9, nu=0.33, alpha=17e-6, name="cu"),
            "ceramic": solid(e=300e9, nu=0.22, alpha=7e-6, name="al2o3")}
    spec = mapping.MapSpec(reference=293.15, reference_by_part={"ceramic": 323.15})
    load = mapping.from_function(d, lambda x: 373.15 + 0 * x[0], spec, order=1)
    sup = {f: Support("symmetry") for f in meshes.FACES}
    f = stress.solve(d, load, stress.StressSpec(mats, sup, order=2))
    lame = {}
    for part, dt in (("copper", 80.0), ("ceramic", 50.0)):
        e, nu, a = mats[part].youngs_modulus[0], mats[part].poisson_ratio[0], mats[part].expansion[0]
        lam, mu = e * nu / ((1 + nu) * (1 - 2 * nu)), e / (2 * (1 + nu))
        lame[part] = (lam, lam + 2 * mu, (3 * lam + 2 * mu) * a * dt)
    sxx = -sum(b / m for _, m, b in lame.values()) / sum(1 / m for _, m, _ in lame.values())  # equal lengths
    for part, (lam, m, b) in lame.items():
        eps = (sxx + b) / m
        np.testing.assert_allclose(f.stress[d.parts[part], 0], sxx, rtol=1e-9)
        np.testing.assert_allclose(f.stress[d.parts[part], 1:3], lam * eps - b, rtol=1e-9)
    assert abs(f.stress[d.parts["copper"], 1].mean() - f.stress[d.parts["ceramic"], 1].mean()) > 1e7
    with pytest.raises(errors.InputError, match="did you mean 'copper'"):
        mapping.from_function(d, lambda x: 0 * x[0] + 300.0, mapping.MapSpec(300.0, reference_by_part={"coper": 300.0}))


def test_the_stress_free_temperature_is_required_and_the_message_says_why():
    d = block(n=2)
    with pytest.raises(errors.InputError, match=r"map.reference: give the stress-free temperature .* no default"):
        mapping.from_function(d, lambda x: 300.0 + 0 * x[0], mapping.MapSpec(None))


def _two_block_cloud(tmp_path, labelled: bool):
    """A CSV field on two blocks x < 0.01 (cold) and x > 0.01 (hot, +100 K) with the interface points
    given once per block: a 100 K jump (an invented field, linear within each block)."""
    rows = []
    g = np.linspace(0, 0.02, 5)
    for part, xs, offset in (("cold", np.linspace(0, 0.01, 4), 0.0), ("hot", np.linspace(0.01, 0.02, 4), 100.0)):
        for x in xs:
            for y in g:
                for z in g:
                    t = 300.0 + 500.0 * x + 300.0 * y - 200.0 * z + offset
                    rows.append(f"{x},{y},{z},{t}" + (f",{part}" if labelled else ""))
    path = tmp_path / "field.csv"
    path.write_text("x,y,z,T" + (",part" if labelled else "") + "\n" + "\n".join(rows) + "\n")
    return path


def _exact_jump(x):
    return 300.0 + 500.0 * x[0] + 300.0 * x[1] - 200.0 * x[2]


def test_a_labelled_field_keeps_its_jump_on_each_side(tmp_path):
    """Linear interpolation reproduces a field linear in each part exactly (round-off), so with part
    labels both sides of a 100 K jump map exactly onto a structural mesh split at the interface;
    without labels the duplicates are counted as a jump that was smeared."""
    halves = lambda m: meshes.layers(m, 0, {"cold": (0, 0.01), "hot": (0.01, 0.02)})  # noqa: E731
    bonded = block(n=5, jitter=0.0, parts=halves)
    split = mesh_mod.join(bonded, {"c": mesh_mod.Joint("contact", parts=("cold", "hot"))})
    load = mapping.from_file(_two_block_cloud(tmp_path, True), split, mapping.MapSpec(300.0, order=2))
    space = heat.fem.space(split, 2)
    hot = np.zeros(space.N, dtype=bool)
    hot[np.unique(space.element_dofs[:, split.parts["hot"]])] = True
    expected = _exact_jump(space.doflocs) + 100.0 * hot
    np.testing.assert_allclose(load.temperature, expected, rtol=0, atol=1e-9)
    assert load.diagnostics["by_part"] and load.diagnostics["duplicate_points_with_jump"] == 25
    assert load.diagnostics["shared_nodes_with_jump"] == 0
    # a structural mesh that shares the interface nodes cannot hold the jump: counted
    shared = mapping.from_file(_two_block_cloud(tmp_path, True), bonded, mapping.MapSpec(300.0))
    assert shared.diagnostics["shared_nodes_with_jump"] == 25
    assert shared.diagnostics["largest_shared_jump_K"] == pytest.approx(100.0, rel=1e-9)
    plain = mapping.from_file(_two_block_cloud(tmp_path, False), split, mapping.MapSpec(300.0, order=2))
    assert not plain.diagnostics["by_part"] and plain.diagnostics["duplicate_points_with_jump"] == 25
    assert np.abs(plain.temperature - expected).max() > 10.0  # smeared: why labels matter


def test_cross_mesh_transfer_reads_each_part_from_its_own_part():
    """A contact resistance makes a jump in the thermal field; on a finer structural mesh split the
    same way, each part reads its own side, so both sides of the jump survive: the plane wall with
    contact resistance ([INC] sec. 3.1.4, Incropera et al. 6th ed.) is linear per side, reproduced
    by the interpolation to round-off."""
    halves = lambda m: meshes.layers(m, 0, {"a": (0, 0.01), "b": (0.01, 0.02)})  # noqa: E731
    joint = {"c": mesh_mod.Joint("contact", parts=("a", "b"))}
    thermal = mesh_mod.join(block(n=5, jitter=0.0, parts=halves), joint)
    structural = mesh_mod.join(block(n=9, jitter=0.0, parts=halves), joint)
    spec = heat.HeatSpec({"a": solid(10.0), "b": solid(10.0)}, fixed_temperature={"xmin": 400.0, "xmax": 300.0},
                         contacts={"c": 1000.0})
    f = heat.solve(thermal, spec)
    load = mapping.transfer(f, thermal, structural, mapping.MapSpec(300.0))
    q = 100.0 / (0.01 / 10 + 1e-3 + 0.01 / 10)
    x = structural.points[:, 0]
    in_b = np.zeros(len(x), dtype=bool)
    in_b[np.unique(structural.tetrahedra[structural.parts["b"]])] = True
    expected = np.where(in_b, 300.0 + q * (0.02 - x) / 10, 400.0 - q * x / 10)
    np.testing.assert_allclose(load.temperature, expected, rtol=0, atol=1e-9)
    assert load.diagnostics["by_part"] and load.diagnostics["outside"] == 0
