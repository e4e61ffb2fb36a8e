"""Geometric singular features: bimaterial free edges, re-entrant edges, support rims, point supports;
never symmetry planes.  Expected features are counted from the construction of each mesh."""

from __future__ import annotations

import meshes
import numpy as np
from skfem import MeshTet
from test_stress import domain_of

from pipeline.stages import features
from pipeline.stages.supports import Support

SYM = Support("symmetry")


def two_layers(n=4):
    m = meshes.tensor(*[np.linspace(0, 0.01, n + 1)] * 3)
    return domain_of(m, meshes.layers(m, 2, {"low": (0, 0.005), "high": (0.005, 0.01)})), n


def on_line(seg, **fixed):
    """Whether both ends of each segment (n, 2, 3) have the given coordinates (x=..., y=..., z=...)."""
    ok = np.ones(len(seg), dtype=bool)
    for axis, value in fixed.items():
        ok &= np.all(np.abs(seg[:, :, "xyz".index(axis)] - value) < 1e-12, axis=1)
    return ok


def test_an_interface_meeting_free_faces_is_a_bimaterial_edge_and_symmetry_planes_are_not():
    """Two layers bonded at z = 5 mm, mirror planes on xmin and ymin: the interface's edge is free on
    xmax and ymax only (n segments each); where it meets a mirror plane the mirrored model has no edge."""
    d, n = two_layers()
    f = features.find(d, {"xmin": SYM, "ymin": SYM, "zmin": SYM})
    assert f.counts() == {"bimaterial_edge": 2 * n}
    seg = f.segments
    assert np.all(on_line(seg, z=0.005) & (on_line(seg, x=0.01) | on_line(seg, y=0.01)))
    assert set(f.owner) == {"high|low"} and all(p == {"high", "low"} for p in f.parts)


def test_without_mirror_planes_the_interface_edge_runs_all_round():
    d, n = two_layers()
    assert features.find(d, {}).counts() == {"bimaterial_edge": 4 * n}


def test_an_l_shaped_part_has_exactly_its_inner_corner_as_a_reentrant_edge():
    """An L-shaped section (a 10 mm cube with the quarter x > 5, z > 5 mm removed), extruded along y:
    the only re-entrant edge is the inner corner line x = z = 5 mm (270 degrees in the material);
    the outer edges (90 degrees) and flat faces (180) are not features."""
    k = 4
    m = meshes.tensor(*[np.linspace(0, 0.01, k + 1)] * 3)
    c = m.p[:, m.t].mean(axis=1)
    keep = ~((c[0] > 0.005) & (c[2] > 0.005))
    used, t = np.unique(m.t[:, keep], return_inverse=True)
    d = domain_of(MeshTet(m.p[:, used], t.reshape(4, -1)), surfaces={})
    f = features.find(d, {})
    assert f.counts() == {"reentrant_edge": k}
    assert np.all(on_line(f.segments, x=0.005, z=0.005))


def test_a_block_on_symmetry_planes_has_no_features():
    m = meshes.tensor(*[np.linspace(0, 0.01, 4)] * 3, jitter=0.2)
    d = domain_of(m)
    assert len(features.find(d, {face: SYM for face in ("xmin", "ymin", "zmin")})) == 0


def test_a_fixed_face_has_its_rim_and_the_minimal_support_its_points():
    """A fixed face xmin of a block: its rim (4 sides of n edges) is a support edge; the minimal support
    of a free block gives its three points."""
    n = 3
    m = meshes.tensor(*[np.linspace(0, 0.01, n + 1)] * 3)
    d = domain_of(m)
    f = features.find(d, {"xmin": Support("fixed")})
    assert f.counts() == {"support_edge": 4 * n}
    assert np.all(on_line(f.segments, x=0.0))
    assert features.find(d, {"free": Support("minimal")}).counts() == {"point_support": 3}


def test_a_peak_near_a_feature_is_flagged_and_the_peak_away_is_reported():
    d, n = two_layers()
    f = features.find(d, {"xmin": SYM, "ymin": SYM, "zmin": SYM})
    x = np.array([[0.01, 0.005, 0.005], [0.002, 0.002, 0.001], [0.001, 0.001, 0.009]])
    h = np.full(3, 0.0025)
    rec = features.flag(np.array([3.0, 1.0, 2.0]), x, h, f, "low")
    assert rec["near"]["code"] == "bimaterial_edge" and rec["near"]["distance_m"] < 1e-12
    assert rec["away"] == 2.0 and rec["away_at_m"] == x[2].tolist()
