"""Figures checked against the fields they show, on the shipped housing (workflows/housing.toml):
colour range = the shown field's own range, the section holds its part, peak markers sit at the
reported peaks, no field figure is mostly one colour; warpage, line plots and the house style."""

from __future__ import annotations

from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest

from pipeline.model.units import celsius
from pipeline.outputs import figures, style
from pipeline.stages import constitutive

ROOT = Path(__file__).parent.parent
HOUSING = ROOT / "workflows" / "housing.toml"
#: The housing's named surfaces that make up its outside (cases/housing/make_mesh.py).
OUTSIDE = ("outside", "fins", "base", "bolt_1", "bolt_2", "bolt_3", "bolt_4")


@pytest.fixture(scope="module")
def housing(tmp_path_factory):
    import pipeline

    tmp = tmp_path_factory.mktemp("housing")
    run = pipeline.run(HOUSING, ["output.figures=false", "output.report=false", "output.vtu=false"],
                       store=str(tmp / "store"), out=str(tmp / "out"))
    return SimpleNamespace(record=run.summary, heat=run["heat"].result, stress=run["stress"].result,
                           domain=run["heat"].domain, sdomain=run["stress"].domain, dir=tmp)


def singular_nodes(domain, supports) -> np.ndarray:
    """Vertices on support surfaces and on the boundary edges of bonded interfaces (computed here)."""
    facets = domain.mesh.facets
    nodes = set()
    for s in supports:
        nodes.update(np.unique(facets[:, domain.surfaces[s]]).tolist())
    boundary = set(np.unique(facets[:, domain.boundary_facets()]).tolist())
    for f in domain.interfaces.values():
        nodes.update(set(np.unique(facets[:, f]).tolist()) & boundary)
    return np.array(sorted(nodes))


def pixels(path: Path) -> np.ndarray:
    from matplotlib.image import imread

    return imread(path)[..., :3]


def not_one_colour(path: Path) -> float:
    """The share of the most common colour among the figure's non-background pixels (16 levels a channel)."""
    rgb = (pixels(path) * 15 + 0.5).astype(int).reshape(-1, 3)
    rgb = rgb[~np.all(rgb >= 14, axis=1)]  # white background and near-white text boxes
    _, count = np.unique(rgb, axis=0, return_counts=True)
    return float(count.max() / count.sum())


def test_outside_is_drawn_on_the_outer_surface_own_range(housing, tmp_path):
    rec = figures.temperature_outside(tmp_path / "outside.png", housing.domain, housing.heat)
    t = celsius(housing.heat.at_vertices)
    facets = np.concatenate([housing.domain.surfaces[s] for s in OUTSIDE])
    skin = t[np.unique(housing.domain.mesh.facets[:, facets])]
    assert rec["range"] == pytest.approx((skin.min(), skin.max()), abs=1e-9)
    assert rec["range"][1] < t.max() - 10  # the components inside run far hotter than the outside
    assert not_one_colour(tmp_path / "outside.png") < 0.5


def test_inside_hides_the_shell_and_shows_the_hottest_part(housing, tmp_path):
    assert figures.enclosing_parts(housing.domain) == ["shell"]
    rec = figures.temperature_inside(tmp_path / "inside.png", housing.domain, housing.heat)
    t = celsius(housing.heat.at_vertices)
    shown = np.unique(housing.domain.tetrahedra[np.concatenate([housing.domain.parts[p] for p in rec["parts"]])])
    assert rec["hidden"] == ["shell"] and "board" in rec["parts"]
    assert rec["range"][1] == pytest.approx(t[shown].max(), abs=1e-9)  # the hottest point is on a skin
    hottest = max(housing.record["stages"]["heat"]["parts_degC"].items(), key=lambda kv: kv[1]["max"])[0]
    assert rec["hottest_part"] == hottest
    assert not_one_colour(tmp_path / "inside.png") < 0.5


def test_section_runs_through_the_middle_of_the_board_and_shows_it(housing, tmp_path):
    rec = figures.temperature_section(tmp_path / "section.png", housing.domain, housing.heat)
    d = housing.domain
    z = d.points[np.unique(d.tetrahedra[d.parts["board"]]), 2]
    assert rec["part"] == "board" and rec["axis"] == "z"
    assert rec["level_m"] == pytest.approx(0.5 * (z.min() + z.max()), abs=1e-12)
    assert "board" in rec["parts"] and rec["part_pixels"] > 0.05  # the board's pixels fill part of the image
    # the section's values are linear interpolants on the tetrahedra the plane crosses: their range
    # lies within those tetrahedra's vertex values
    t = celsius(housing.heat.at_vertices)
    zt = d.points[d.tetrahedra, 2]
    crossing = d.tetrahedra[(zt.min(axis=1) <= rec["level_m"]) & (zt.max(axis=1) >= rec["level_m"])]
    lo, hi = rec["range"]
    assert t[crossing].min() - 1e-9 <= lo < hi <= t[crossing].max() + 1e-9
    assert not_one_colour(tmp_path / "section.png") < 0.5


@pytest.mark.parametrize("part", ["shell", "standoffs", "regulator"])
def test_stress_figure_marks_the_reported_peak_and_keeps_singular_points_over_range(housing, tmp_path, part):
    st = housing.record["stages"]["stress"]
    sing = singular_nodes(housing.sdomain, st["support_surfaces"])
    reported = st["parts"][part]
    # the quantity its safety factor reads: largest principal stress if brittle, else von Mises
    brittle = reported["criterion"].startswith("brittle")
    rec = figures.stress_part(tmp_path / f"{part}.png", housing.sdomain, housing.stress, part, sing,
                              quantity="principal" if brittle else "von_mises")
    key = "principal_max" if brittle else "von_mises_max"
    assert rec["peak_at_m"] == pytest.approx(reported[f"{key}_at_m"], abs=1e-12)
    assert rec["peak_MPa"] == pytest.approx(reported[f"{key}_Pa"] / 1e6, rel=1e-12)
    # colour range: the part's own recovered stress on the surface drawn, singular vertices left out
    ids, values = housing.stress.nodal[part]
    vm = (constitutive.principal(values.T)[:, 0] if brittle else constitutive.von_mises(values.T)) / 1e6
    drawn = figures.skin(housing.sdomain.points, housing.sdomain.tetrahedra[housing.sdomain.parts[part]])[0]
    # (the drawn piece: the one holding the peak; the others' values are not in the range)
    piece = figures._pieces(np.concatenate([housing.sdomain.tetrahedra[housing.sdomain.parts[part]][:, :3],
                                            housing.sdomain.tetrahedra[housing.sdomain.parts[part]][:, 1:]]),
                            len(housing.sdomain.points))
    home = piece[int(np.argmin(np.linalg.norm(housing.sdomain.points - rec["peak_at_m"], axis=1)))]
    surface = np.unique(drawn[piece[drawn[:, 0]] == home])
    on = np.isin(ids, surface)
    calm = on & ~np.isin(ids, sing)
    assert rec["range"] == pytest.approx((vm[on].min(), vm[calm].max()), abs=1e-9)
    assert rec["peak_singular"] and rec["peak_MPa"] > rec["range"][1]  # the singular peak lies over range
    assert not_one_colour(tmp_path / f"{part}.png") < 0.5


def test_stress_figure_without_singular_data_shows_the_whole_range(housing, tmp_path):
    rec = figures.stress_part(tmp_path / "cpu.png", housing.sdomain, housing.stress, "cpu")
    assert not rec["peak_singular"] and rec["range"][1] == pytest.approx(rec["peak_MPa"], rel=1e-12)
    assert rec["peak_at_m"] == pytest.approx(housing.record["stages"]["stress"]["parts"]["cpu"]["von_mises_max_at_m"])


def test_warpage_removes_the_best_fit_plane(housing, tmp_path):
    d = housing.sdomain
    rec = figures.warpage(tmp_path / "warp.png", d, housing.stress, "board")
    assert rec["axis"] == "z" and rec["peak_to_valley_um"] > 0
    uz = housing.stress.displacement[np.unique(d.tetrahedra[d.parts["board"]]), 2]
    assert rec["peak_to_valley_um"] <= np.ptp(uz) * 1e6 + 1e-9  # removing a plane cannot add warpage
    # a rigid tilt and lift adds nothing (the fit is exact for a plane; round-off only)
    x, y = d.points[:, 0], d.points[:, 1]
    tilted = housing.stress.displacement.copy()
    tilted[: len(x), 2] += 1e-5 + 3e-4 * x - 2e-4 * y
    again = figures.warpage(tmp_path / "warp2.png", d, SimpleNamespace(displacement=tilted), "board")
    assert again["peak_to_valley_um"] == pytest.approx(rec["peak_to_valley_um"], abs=1e-6)
    flat = np.zeros_like(tilted)
    flat[: len(x), 2] = 1e-5 + 3e-4 * x - 2e-4 * y
    assert figures.warpage(tmp_path / "warp3.png", d, SimpleNamespace(displacement=flat), "board")[
        "peak_to_valley_um"] < 1e-6


def test_line_plot_draws_each_quantity(tmp_path):
    s = np.linspace(0, 0.05, 41)
    rec = figures.line_plot(tmp_path / "line.png", "across", s, {"temperature": (40 + 100 * s, "degC"),
                                                                  "von Mises": (1e3 * s ** 2, "MPa")})
    assert rec["ranges"]["temperature"] == pytest.approx((40, 45)) and rec["length_m"] == pytest.approx(0.05)
    assert pixels(tmp_path / "line.png").std() > 0.02


def test_house_maps_are_perceptually_ordered_and_verdicts_read_in_grey():
    for kind in ("temperature", "stress"):
        light = [style.lightness(style.colormap(kind)(x)) for x in np.linspace(0, 1, 33)]
        assert np.all(np.diff(light) > 0), kind  # lightness rises monotonically along the map
        assert light[0] > 5  # no black end: a cool surface still shows its shading
    diff = [style.lightness(style.colormap("difference")(x)) for x in np.linspace(0, 1, 33)]
    assert np.argmax(diff) == 16 and diff[0] < 40 and diff[-1] < 40
    from matplotlib.colors import to_rgb

    grey = sorted(style.lightness(to_rgb(c)) for c in (style.FAIL, style.NEAR, style.PASS))
    assert min(np.diff(grey)) > 10  # fail, near, pass differ in lightness, not in hue alone


def test_tornado_bars_are_the_changes_of_the_sweeps_own_runs(tmp_path):
    from pipeline.studies import page

    # an invented 3 x 3 grid with f = 2 a + b: holding b at its middle value, a moves f by -2..+2;
    # holding a at its middle value, b moves f by -10..+10
    a_vals, b_vals = [[1.0], [2.0], [3.0]], [[-10.0], [0.0], [10.0]]
    rows = [{"id": f"{i}{j}", "status": "ok", "values": {"a": a[0], "b": b[0]}, "figures": {"f": 2 * a[0] + b[0]}}
            for i, a in enumerate(a_vals) for j, b in enumerate(b_vals)]
    record = {"axes": [{"keys": ["a"], "values": a_vals}, {"keys": ["b"], "values": b_vals}], "rows": rows}
    rec = page.tornado(tmp_path, record, ["f"])
    bars = {b[0]: b[1:3] for b in rec["bars"]["f"]}
    assert bars == {"a": [-2.0, 2.0], "b": [-10.0, 10.0]}
    assert [b[0] for b in rec["bars"]["f"]][-1] == "b"  # the widest bar on top
    assert rec["baseline"] == {"a": "2", "b": "0"}
    assert pixels(tmp_path / "tornado.png").std() > 0.02
    rows[4]["status"] = "failed"  # no baseline run: no chart rather than a wrong one
    assert page.tornado(tmp_path, record, ["f"]) is None


def test_stress_figure_fed_with_the_results_own_peak_flags(housing, tmp_path):
    # the record issue 15's recovery gives per part and quantity, built here from the same singular
    # vertices: the figure must then draw the same range and marks as from the vertex ids
    st = housing.record["stages"]["stress"]
    sing = singular_nodes(housing.sdomain, st["support_surfaces"])
    by_ids = figures.stress_part(tmp_path / "a.png", housing.sdomain, housing.stress, "shell", sing)
    flags = {"peak": by_ids["peak_MPa"] * 1e6, "at_m": by_ids["peak_at_m"], "near": {"code": "clamp_rim"},
             "away": by_ids["calm_peak_MPa"] * 1e6, "away_at_m": by_ids["calm_peak_at_m"]}
    by_flags = figures.stress_part(tmp_path / "b.png", housing.sdomain, housing.stress, "shell", flags=flags)
    assert by_flags["range"] == pytest.approx(by_ids["range"], rel=1e-12)
    assert by_flags["peak_singular"] and by_flags["calm_peak_at_m"] == pytest.approx(by_ids["calm_peak_at_m"])
    calm = figures.stress_part(tmp_path / "c.png", housing.sdomain, housing.stress, "shell",
                               flags=dict(flags, near=None))
    assert not calm["peak_singular"] and calm["range"][1] == pytest.approx(calm["peak_MPa"], rel=1e-12)


def test_line_records_skip_points_outside_and_convert_units(tmp_path):
    records = [{"distance_m": 0.01 * i, "outside": i == 4, "temperature_K": 300.0 + i, "von_mises_Pa": 1e6 * i,
                "principal_Pa": [2e6 * i, 0.0, -1e6]} for i in range(5)]
    rec = figures.line_records(tmp_path / "l.png", "probe_line", records)
    assert rec["ranges"]["temperature"] == pytest.approx((26.85, 29.85))
    assert rec["ranges"]["largest principal"] == pytest.approx((0.0, 6.0)) and rec["length_m"] == pytest.approx(0.03)
