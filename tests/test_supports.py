"""Supports: reactions split by constraint direction, the contact (compression-only) support, and the
caution for bilateral supports that pull.

[TG] = S.P. Timoshenko, J.N. Goodier, Theory of Elasticity, 3rd ed., McGraw-Hill 1970, ch. 13
(thermal stress in restrained bodies; section numbers from memory).
[T25] = S. Timoshenko, Analysis of bi-metal thermostats, J. Opt. Soc. Am. 11(3), 1925.
"""

from __future__ import annotations

from pathlib import Path

import meshes
import numpy as np
import pytest
from test_stress import ALPHA, DT, E, NU, domain_of, solid, uniform

from pipeline import errors
from pipeline.stages import stress
from pipeline.stages.supports import Support

A = (0.1, 0.02, 0.02)  # block edges [m]


def block(n=(6, 3, 3), jitter=0.2):
    return domain_of(meshes.tensor(*[np.linspace(0, a, k) for a, k in zip(A, n)], jitter=jitter))


@pytest.mark.parametrize("listing", [("xmin", "ymin", "zmin", "xmax", "ymax"),
                                     ("zmin", "ymax", "xmax", "ymin", "xmin")])
def test_symmetry_planes_carry_only_normal_force_whatever_the_listing_order(listing):
    """[TG] ch. 13: a block held on xmin, xmax, ymin, ymax (in-plane restraint), free in z (held on zmin
    only) under uniform dT has sigma_xx = sigma_yy = -E alpha dT / (1 - nu), sigma_zz = 0.  Each plane
    carries its normal force sigma A_face; planes meet at edges, and there the residual is split by each
    plane's own direction, so no plane carries a tangential force (round-off) and zmin carries nothing."""
    d = block()
    f = stress.solve(d, uniform(d), stress.StressSpec({"body": solid()}, {s: Support("symmetry") for s in listing},
                                                      order=2))
    sigma = -E * ALPHA * DT / (1 - NU)
    scale = abs(sigma) * A[1] * A[2]
    area = {"xmin": A[1] * A[2], "xmax": A[1] * A[2], "ymin": A[0] * A[2], "ymax": A[0] * A[2], "zmin": 0.0}
    normal = {"xmin": (0, -1), "xmax": (0, 1), "ymin": (1, -1), "ymax": (1, 1), "zmin": (2, -1)}
    for name, (axis, sign) in normal.items():
        r = np.array(f.reactions[name])
        assert r[axis] == pytest.approx(sign * sigma * area[name], abs=1e-9 * scale)  # compressed: pushes inwards
        assert np.abs(np.delete(r, axis)).max() < 1e-9 * scale, (name, r)
    assert f.equilibrium["relative"] < 1e-9


def test_plate_clamped_on_two_edges_splits_the_corner_by_direction():
    """A square plate clamped on the two edges xmin and ymin (sharing the corner edge x = y = 0) under a
    uniform pressure p on its top: statics gives a total reaction p a^2, and mirror symmetry about the
    plane x = y (the structured mesh is symmetric about it too) gives each edge half of it.  The points
    of the shared corner are split equally between the two (they hold the same directions), so the
    per-edge reactions are the same whichever is listed first (round-off) and equal to those of a mesh
    refined once (round-off: the split no longer depends on the mesh).  The earlier rule (shared points to
    the first listed) gave 12.76 / 12.24 N on the coarse mesh."""
    p, a = 1e4, 0.05

    def reactions(n, listing):
        m = meshes.tensor(np.linspace(0, a, n + 1), np.linspace(0, a, n + 1), np.linspace(0, 0.002, 3))
        d = domain_of(m)
        f = stress.solve(d, None, stress.StressSpec({"body": solid()}, {s: Support("fixed") for s in listing},
                                                    pressure={"zmax": p}, order=2, solver="direct"))
        return {s: np.array(r) for s, r in f.reactions.items()}

    first, second, fine = reactions(6, ("xmin", "ymin")), reactions(6, ("ymin", "xmin")), reactions(12, ("xmin", "ymin"))
    for edge in ("xmin", "ymin"):
        assert first[edge][2] == pytest.approx(p * a * a / 2, rel=1e-9)
        assert fine[edge][2] == pytest.approx(p * a * a / 2, rel=1e-9)
    np.testing.assert_allclose(first["xmin"], second["xmin"], atol=1e-9 * p * a * a)
    np.testing.assert_allclose(first["ymin"], second["ymin"], atol=1e-9 * p * a * a)


def strip(top_expands_more: bool, n=11):
    """Half of a two-layer strip (x = 0 is its mid-plane), nu = 0, layers of 1 mm, 30 mm long."""
    L, t, w = 0.03, 1e-3, 3e-3
    m = meshes.tensor(np.linspace(0, L, n), np.linspace(0, w, 3), np.linspace(0, 2 * t, 5))
    d = domain_of(m, meshes.layers(m, 2, {"low": (0, t), "high": (t, 2 * t)}))
    lo, hi = (10e-6, 16e-6) if top_expands_more else (16e-6, 10e-6)
    mats = {"low": solid(nu=0.0, alpha=lo, name="low"), "high": solid(nu=0.0, alpha=hi, name="high")}
    return d, mats, (L, t, w)


@pytest.mark.parametrize("top_expands_more", [True, False])
def test_two_layer_strip_on_a_contact_foundation_lifts_off_and_keeps_its_free_curvature(top_expands_more):
    """[T25]: a free two-layer strip (equal thicknesses and moduli, nu = 0) under uniform dT curves with
    1/rho = 3 (a2 - a1) dT / (2 h), h the total thickness.  On a rigid frictionless foundation it cannot
    be held flat: it lifts off except along its ends (the layer that expands more on top: the strip
    arches up) or along its middle (underneath).  Its own weight keeps the contact force definite; it
    bends the strip by about 0.1 % of the thermal curvature (beam estimate q L^2 / (8 E I)).  Checked:
    contact only on one line of vertices (the rest separated), every held vertex presses, no point
    penetrates the foundation, the contact force carries the weight (statics; 1e-4: the solve leaves
    residual forces of about 1e-10 of the thermal nodal forces, 1e-8 N here, against a weight of
    5e-4 N), and the curvature is the free one within 1 % (as the free-strip test: discretisation and
    end effects)."""
    d, mats, (L, t, w) = strip(top_expands_more)
    sup = {"xmin": Support("symmetry", mirror=True), "ymin": Support("symmetry", mirror=True),
           "zmin": Support("contact")}
    g = 9.81
    f = stress.solve(d, uniform(d), stress.StressSpec(mats, sup, order=2, gravity=(0.0, 0.0, -g)))
    rec = f.supports["zmin"]
    weight = 2700.0 * L * w * 2 * t * g
    assert f.reactions["zmin"][2] == pytest.approx(weight, rel=1e-4)
    assert rec["tension_N"] == 0.0 and rec["least_pressing_N"] > 0
    assert rec["penetration_max_m"] <= 1e-12 * np.abs(f.displacement).max()
    dx = L / 10
    assert rec["contact_area_m2"] == pytest.approx(w * dx / 6, rel=1e-9)  # one line of vertices: a sixth of a row
    assert rec["separated_area_m2"] == pytest.approx(L * w - w * dx / 6, rel=1e-9)
    nv = d.mesh.nvertices
    pts, uz = d.points, f.displacement[:nv, 2]
    bottom = np.abs(pts[:, 2]) < 1e-12
    lowest = pts[bottom][np.abs(uz[bottom]) < 1e-15, 0]
    assert np.allclose(lowest, L if top_expands_more else 0.0)  # resting on the ends / the middle
    mid = (np.abs(pts[:, 2] - t) < 1e-9) & (np.abs(pts[:, 1] - w / 2) < 1e-9) & (pts[:, 0] < 0.8 * L)
    kappa = 2 * np.polyfit(pts[mid, 0], uz[mid], 2)[0]
    assert abs(kappa) == pytest.approx(3 * 6e-6 * DT / (2 * 2 * t), rel=1e-2)
    assert not [c for c in f.cautions if c["code"] == "support_pulls"]  # (the strip's end is a bimaterial edge)


def test_a_bilateral_support_that_pulls_is_cautioned_and_contact_is_named():
    """The same strip held by a symmetry support on its underside is pulled flat: the support must pull
    on part of the surface, and the caution names the support, the tensile force and the contact kind."""
    d, mats, _ = strip(True)
    sup = {"xmin": Support("symmetry", mirror=True), "ymin": Support("symmetry", mirror=True),
           "zmin": Support("symmetry")}
    f = stress.solve(d, uniform(d), stress.StressSpec(mats, sup, order=2))
    # the mirror planes pull too (the layers' stresses), and are not cautioned
    (caution,) = [c for c in f.cautions if c["code"] == "support_pulls"]
    assert caution["data"]["support"] == "zmin"
    assert caution["data"]["tension_N"] == pytest.approx(f.supports["zmin"]["tension_N"])
    assert caution["data"]["tension_N"] > 0
    assert "zmin" in caution["message"] and 'kind = "contact"' in caution["message"]
    # the thermal load alone is self-equilibrated: what the plane pulls, it presses back elsewhere
    assert f.supports["zmin"]["compression_N"] == pytest.approx(f.supports["zmin"]["tension_N"], rel=1e-6)


def test_a_body_that_would_lift_off_every_contact_support_is_refused():
    """A block on a contact support, pulled upwards: nothing holds it once the contact releases."""
    d = block()
    sup = {"xmin": Support("symmetry"), "ymin": Support("symmetry"), "zmin": Support("contact")}
    with pytest.raises(errors.PhysicsError, match="lift off"):
        stress.solve(d, None, stress.StressSpec({"body": solid()}, sup, force={"zmax": (0.0, 0.0, 10.0)}, order=1))


def test_a_minimal_support_with_an_applied_force_reports_the_force_once():
    """Issue 22's careless case: a minimal support under a 100 N force reported 296 N of reaction (its
    repeated constraint rows were each given the residual). Statics: the reactions balance the applied
    force exactly, to the solve's round-off."""
    import pipeline
    from pipeline.stages import stress
    from pipeline.stages.supports import Support

    d = pipeline.load_mesh(Path(__file__).parent.parent / "cases/heat_spreader/heat_spreader_coarse.msh", unit="mm")
    lib = pipeline.material_library()
    mats = {"spreader": lib["aluminium_6061_t6"], "board": lib["fr4"], "chip": lib["silicon"],
            "regulator": lib["silicon"]}
    r = stress.solve(d, None, stress.StressSpec(mats, {"free": Support("minimal")}, force={"top_air": (0.0, 0.0, 100.0)},
                                                order=1))
    assert np.allclose(r.reactions["free"], [0.0, 0.0, -100.0], atol=1e-8)
    assert r.equilibrium["relative"] < 1e-10
