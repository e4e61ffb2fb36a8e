"""View factors (pipeline/stages/view.py) against the closed forms, with obstruction, reciprocity and
the summation rule; the closed forms and meshes are those of the exchange_ verification cases."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from pipeline import errors
from pipeline.fields import ViewFactors
from pipeline.model import mesh
from pipeline.stages import view
from pipeline.verification import catalogue as cat
from pipeline.verification import meshes as mk


def _between(result, a, b):
    (g,) = result.groups.values()
    surface = np.array([g.labels[k][0] for k in g.label])
    fa, fb = surface == a, surface == b
    return float(g.area[fa] @ g.F[np.ix_(fa, fb)].sum(axis=1) / g.area[fa].sum())


def _pair(tmp_path: Path, prepare, h, distance=1.0):
    prepare(tmp_path, h)
    domain = mesh.load(next(tmp_path.glob("*.msh")), "m")
    return domain, view.solve(domain, view.ViewSpec({"pair": view.Group(("a", "b"))}, h * distance))


def test_closed_forms_match_published_values():
    # Incropera et al., 6th ed., Table 13.2 / Fig. 13.4-13.6 (read from the charts, from memory):
    # equal squares at right angles with a common edge 0.20, aligned squares X = Y = 1 about 0.20
    assert cat.perpendicular_view(1.0, 1.0) == pytest.approx(0.2000, abs=2e-4)
    assert cat.parallel_view(1.0, 1.0) == pytest.approx(0.1998, abs=2e-4)
    # discs: equal discs radius = distance, F = (2 + 1 - sqrt(5))/2 ... S = 3: 0.5 (3 - sqrt(5)) = 0.382
    assert cat.disc_view(1.0, 1.0, 1.0) == pytest.approx(0.5 * (3 - np.sqrt(5)), rel=1e-12)
    # summation on a closed box of two parallel squares: F_par + 4 F_perp = 1 (unit cube)
    assert cat.parallel_view(1.0, 1.0) + 4 * cat.perpendicular_view(1.0, 1.0) == pytest.approx(1.0, abs=1e-12)


@pytest.mark.parametrize("prepare, expected", [
    (cat.discs_prepare, cat.disc_view(*cat.DISC)),
    (cat.perpendicular_prepare, cat.perpendicular_view(1.0, 1.0)),
])
def test_view_factor_error_falls_with_patch_size(tmp_path, prepare, expected):
    errs = []
    for h in (0.5, 0.25):
        folder = tmp_path / str(h)
        _, result = _pair(folder, prepare, h)
        errs.append(abs(_between(result, "a", "b") / expected - 1))
        # midpoint rule over each patch: O((h/L)^2) (see catalogue.MIDPOINT)
        assert errs[-1] <= cat.MIDPOINT * h**2
    assert errs[1] < errs[0] / 2


def test_reciprocity_and_summation_after_correction(tmp_path):
    mk.shells(tmp_path / "s.msh", cat.SPHERES, 4)
    domain = mesh.load(tmp_path / "s.msh", "m")
    g = view.solve(domain, view.ViewSpec({"gap": view.Group(("inner", "outer"), enclosure=True)}, 0.2)).groups["gap"]
    AF = g.area[:, None] * g.F
    assert np.abs(AF - AF.T).max() <= 1e-14 * g.area.max()
    assert np.abs(g.F.sum(axis=1) - 1).max() <= 1e-12
    assert g.residuals["raw"]["summation"] < 0.05  # the raw matrix is a discretisation, not exact
    # the inner sphere sees only the outer one, F_12 = 1 (Incropera Table 13.2, concentric spheres),
    # but for the concave folds of the faceted sphere where quadrilaterals split into two triangles: a
    # point on one face of a wedge with a fold of delta sees the other face through at most
    # (1 - cos delta) / 2 (the infinite wedge, from memory), and a facet has three neighbours
    inner = np.array([g.labels[k][0] == "inner" for k in g.label])
    assert g.F[np.ix_(inner, inner)].sum(axis=1).max() <= 3 * (1 - np.cos(_largest_fold(domain, "inner"))) / 2
    # round trip through the store's arrays
    again = ViewFactors.from_arrays(*view.solve(domain, view.ViewSpec(
        {"gap": view.Group(("inner", "outer"), enclosure=True)}, 0.2)).to_arrays())
    assert np.array_equal(again.groups["gap"].F, g.F) and again.groups["gap"].labels == g.labels


def _largest_fold(domain, surface: str) -> float:
    """The largest angle [rad] between the normals of two neighbouring facets of a concave fold."""
    geo = view._facet_geometry(domain, domain.surfaces[surface])
    tri = domain.mesh.facets[:, domain.surfaces[surface]].T
    edges: dict = {}
    for k, t in enumerate(tri):
        for a, b in ((0, 1), (1, 2), (2, 0)):
            edges.setdefault(tuple(sorted((t[a], t[b]))), []).append(k)
    worst = 0.0
    for i, j in (ks for ks in edges.values() if len(ks) == 2):
        if np.dot(geo["normal"][i], geo["centroid"][j] - geo["centroid"][i]) > 0:  # j in front of i: concave
            worst = max(worst, float(np.arccos(np.clip(geo["normal"][i] @ geo["normal"][j], -1, 1))))
    return worst


def test_a_plate_between_two_plates_blocks_their_view(tmp_path):
    g = mk.planes(0, 1, 8)
    path = mk.carved(tmp_path / "three.msh", g, g, [-0.1, 0, 0.45, 0.55, 1, 1.1],
                     keep=lambda c: (c[2] < 0) | (c[2] > 1) | ((c[2] > 0.45) & (c[2] < 0.55)),
                     surfaces={"a": lambda m, n: (np.abs(m[2]) < 1e-9) & (n[2] > 0.5),
                               "b": lambda m, n: (np.abs(m[2] - 1) < 1e-9) & (n[2] < -0.5),
                               "c": lambda m, n: (np.abs(m[2] - 0.45) < 1e-9) & (n[2] < -0.5)})
    domain = mesh.load(path, "m")
    result = view.solve(domain, view.ViewSpec({"pair": view.Group(("a", "b", "c"))}, 0.25))
    assert _between(result, "a", "b") == 0.0
    # the blocker's lower face at 0.45: aligned squares X = Y = 1/0.45 (midpoint rule, h/L = 0.25/0.45)
    assert _between(result, "a", "c") == pytest.approx(cat.parallel_view(1 / 0.45, 1 / 0.45),
                                                      rel=cat.MIDPOINT * (0.25 / 0.45) ** 2)


def test_bad_groups_are_reported_together(tmp_path):
    mk.shells(tmp_path / "s.msh", cat.SPHERES, 2)
    domain = mesh.load(tmp_path / "s.msh", "m")
    spec = view.ViewSpec({"one": view.Group(("inner", "iner")), "two": view.Group(("inner",))}, -1.0)
    with pytest.raises(errors.InputError) as info:
        view.check(domain, spec, "w.toml: stages.view")
    text = str(info.value)
    assert "patch_size" in text and "'iner'" in text and "inner" in text and "is in group 'one' already" in text
