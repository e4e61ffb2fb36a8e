"""Mesh loading: Gmsh MSH 2.2 / 4.1 (ASCII, binary), names, units, interfaces and validation."""

from __future__ import annotations

from pathlib import Path

import meshio
import numpy as np
import pytest

import meshes
from pipeline import errors
from pipeline.model import mesh as mesh_mod

DATA = Path(__file__).parent / "data"


@pytest.mark.parametrize("name", ["boxes_41", "boxes_41_ascii", "boxes_22", "boxes_22_ascii"])
def test_gmsh_files_give_the_same_named_domain(name):
    d = mesh_mod.load(DATA / f"{name}.msh", unit="mm")
    assert sorted(d.parts) == ["lower", "upper"]
    assert sorted(d.surfaces) == ["bottom", "top", "unnamed_surface_7"]
    assert any("no name" in n for n in d.notices)
    lo, hi = d.bounding_box
    np.testing.assert_allclose(hi - lo, [0.010, 0.010, 0.006], rtol=1e-12)  # mm applied once
    assert d.part_volume("lower") == pytest.approx(10 * 10 * 4 * 1e-9, rel=1e-9)
    assert d.part_volume("upper") == pytest.approx(10 * 10 * 2 * 1e-9, rel=1e-9)
    assert d.facet_areas(d.surface("top")).sum() == pytest.approx(1e-4, rel=1e-9)
    (pair, facets), = d.interfaces.items()
    assert pair == ("lower", "upper")
    assert d.facet_areas(facets).sum() == pytest.approx(1e-4, rel=1e-9)
    assert "bounding box [m]" in d.describe()


def test_the_length_unit_is_applied_once_and_must_be_known():
    metres = mesh_mod.load(DATA / "boxes_41.msh", unit="m")
    inches = mesh_mod.load(DATA / "boxes_41.msh", unit="in")
    np.testing.assert_allclose(inches.points, metres.points * 0.0254)
    with pytest.raises(errors.InputError, match="valid units are m, cm, mm, um, in"):
        mesh_mod.load(DATA / "boxes_41.msh", unit="mmm")


def test_parts_that_touch_without_shared_nodes_are_found_with_their_area():
    """Boxes meshed without fragmenting (tests/data/split_boxes_41.msh): the 10 x 10 mm faces touch."""
    d = mesh_mod.load(DATA / "split_boxes_41.msh", unit="mm")
    assert not d.interfaces
    touch = d.touching[("lower", "upper")]
    assert touch.area == pytest.approx(1e-4, rel=1e-12)
    (line,) = mesh_mod.touching_problems(d, "heat")
    assert "parts 'lower' and 'upper' touch on 0.0001 m^2" in line and "kind = 'tie'" in line
    assert not mesh_mod.load(DATA / "boxes_41.msh", unit="mm").touching  # fragmented: shared nodes


def test_splitting_an_interface_duplicates_its_nodes_and_keeps_a_third_part_bonded():
    """Three slabs a | b | c along z and a column d through all of them along one edge: splitting a/b
    gives b its own copies of the a/b nodes, except where d meets the interface (stays shared)."""
    m = meshes.tensor(np.linspace(0, 1, 4), np.linspace(0, 1, 4), np.linspace(0, 1, 4))
    c = m.p[:, m.t].mean(axis=1)
    column = (c[0] < 1 / 3) & (c[1] < 1 / 3)
    parts = {"a": np.flatnonzero(~column & (c[2] < 1 / 3)), "b": np.flatnonzero(~column & (c[2] > 1 / 3)),
             "d": np.flatnonzero(column)}
    d = mesh_mod.from_meshio(meshes.to_meshio(m, parts), unit="m")
    s = mesh_mod.join(d, {"ab": mesh_mod.Joint("contact", parts=("a", "b"))})
    contact = s.contacts["ab"]
    pairs = contact.node_pairs
    moved = pairs[pairs[:, 0] != pairs[:, 1]]
    assert len(moved) == len(pairs) - 3  # the three nodes where the column meets the interface stay shared
    np.testing.assert_array_equal(s.points[moved[:, 0]], s.points[moved[:, 1]])
    assert ("a", "b") not in s.interfaces and ("a", "d") in s.interfaces and ("b", "d") in s.interfaces
    assert s.bodies[0] == 1  # still one body: the contact conducts
    for name in d.surfaces:
        assert s.facet_areas(s.surfaces[name]).sum() == pytest.approx(d.facet_areas(d.surfaces[name]).sum())
    np.testing.assert_array_equal(s.part_ids(), d.part_ids())


def test_unknown_names_list_the_valid_ones_and_the_closest():
    d = mesh_mod.load(DATA / "boxes_41.msh", unit="mm")
    with pytest.raises(errors.MeshError, match=r"part 'uper' does not exist \(did you mean 'upper'\?\); "
                                               r"parts there are: lower, upper"):
        d.part("uper")
    with pytest.raises(errors.MeshError, match="did you mean 'bottom'"):
        d.surface("botom")


def box_mesh(**kw):
    m = meshes.tensor(np.linspace(0, 1, 3), np.linspace(0, 1, 3), np.linspace(0, 1, 3))
    return m, meshes.to_meshio(m, **kw)


def test_orphan_nodes_are_pruned_with_a_notice():
    m, mm = box_mesh()
    mm.points = np.vstack([mm.points, [[5.0, 5.0, 5.0], [6.0, 6.0, 6.0]]])
    d = mesh_mod.from_meshio(mm)
    assert len(d.points) == m.nvertices
    assert any("2 nodes used by no tetrahedron were removed" in n for n in d.notices)
    assert d.bounding_box[1].max() == 1.0


def test_a_mesh_without_tetrahedra_is_refused(tmp_path):
    mm = meshio.Mesh(np.eye(3), [("triangle", np.array([[0, 1, 2]]))])
    with pytest.raises(errors.MeshError, match="no tetrahedra.*cell types found: triangle"):
        mesh_mod.from_meshio(mm, source="flat.msh")


def test_inverted_and_degenerate_elements_are_named_by_id():
    m, mm = box_mesh()
    tets = mm.cells[-1].data
    tets[3, [2, 3]] = tets[3, [3, 2]]  # inverted
    n = len(mm.points)
    mm.points = np.vstack([mm.points, [[3, 0, 0], [4, 0, 0], [3, 1, 0], [4, 1, 0]]])
    flat = np.array([[n, n + 1, n + 2, n + 3]])  # four points in one plane: zero volume
    cells = [meshio.CellBlock(b.type, b.data) for b in mm.cells[:-1]] + [
        meshio.CellBlock("tetra", np.vstack([tets, flat]))]
    phys = mm.cell_data["gmsh:physical"][:-1] + [np.ones(len(tets) + 1, dtype=int)]
    bad = meshio.Mesh(mm.points, cells, cell_data={"gmsh:physical": phys}, field_data=mm.field_data)
    with pytest.raises(errors.MeshError) as info:
        mesh_mod.from_meshio(bad, source="bad.msh")
    text = "\n".join(info.value.problems)
    assert "inverted tetrahedra (negative volume), ids 3" in text
    assert f"degenerate (zero-volume) tetrahedra, ids {len(tets)}" in text


def test_unnamed_volume_groups_get_a_generated_name():
    m, mm = box_mesh(parts={"a": np.arange(0, 20), "b": np.arange(20, 48)})
    del mm.field_data["a"]
    d = mesh_mod.from_meshio(mm)
    assert sorted(d.parts) == ["b", "unnamed_volume_1"]
    assert len(d.interfaces) == 1


def test_a_named_part_with_no_elements_is_an_error():
    m, mm = box_mesh()
    mm.field_data["ghost"] = np.array([42, 3])
    with pytest.raises(errors.MeshError, match="part 'ghost' .* has no elements"):
        mesh_mod.from_meshio(mm, source="x.msh")


def tet10(points, tets, order):
    """Quadratic cells with mid-edge nodes in the given edge order."""
    mids = [0.5 * (points[tets[:, a]] + points[tets[:, b]]) for a, b in order]
    allp = np.vstack([points] + mids)
    n = len(points)
    ids = [tets] + [n + i * len(tets) + np.arange(len(tets))[:, None] for i in range(6)]
    return allp, np.hstack(ids)


def test_tet10_is_accepted_after_a_node_order_check():
    m, mm = box_mesh(surfaces={})
    tets = mm.cells[-1].data
    good_p, good_t = tet10(mm.points, tets, mesh_mod.EDGES_TET10)
    d = mesh_mod.from_meshio(meshio.Mesh(good_p, [("tetra10", good_t)]))
    assert len(d.tetrahedra) == len(tets)
    assert len(d.points) == m.nvertices  # mid-edge nodes dropped, P2 comes from the element
    assert any("tetra10" in n for n in d.notices)
    wrong = [(0, 1), (1, 2), (0, 2), (0, 3), (2, 3), (1, 3)]  # Gmsh's order of the last two edges
    bad_p, bad_t = tet10(mm.points, tets, wrong)
    with pytest.raises(errors.MeshError, match="node order is not meshio's tetra10 order"):
        mesh_mod.from_meshio(meshio.Mesh(bad_p, [("tetra10", bad_t)]))


def test_unreadable_and_missing_files(tmp_path):
    junk = tmp_path / "junk.msh"
    junk.write_text("this is not a mesh\n")
    with pytest.raises(errors.MeshError, match="junk.msh: meshio cannot read"):
        mesh_mod.load(junk, unit="mm")
    with pytest.raises(errors.MeshError, match="mesh file not found"):
        mesh_mod.load(tmp_path / "none.msh", unit="mm")


def test_domain_source_hash_is_the_file_content():
    a = mesh_mod.load(DATA / "boxes_41.msh", unit="mm")
    b = mesh_mod.load(DATA / "boxes_22.msh", unit="mm")
    assert len(a.source_hash) == 64 and a.source_hash != b.source_hash


def test_facet_keys_of_meshes_too_large_for_integer_keys_match_the_same_facets():
    """Above about 1.6e6 nodes n^3 overflows 62 bits; the record keys must match exactly the same facets."""
    from pipeline.model.mesh import _facet_keys

    rng = np.random.default_rng(0)
    tri = rng.integers(0, 50, size=(200, 3))
    shuffled = rng.permuted(tri, axis=1)
    for n in (50, 2**21):  # the integer path and the record path
        a, b = _facet_keys(tri, n), _facet_keys(shuffled, n)
        assert np.array_equal(a, b)
        order = np.argsort(a)
        pos = np.searchsorted(a, b[::-1], sorter=order)
        assert np.array_equal(a[order[pos]], b[::-1])
