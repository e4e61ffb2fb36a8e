"""Results people look at: VTU + PVD, PNG figures (not blank, colour range = field range), report.html."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import meshio
import numpy as np
import pytest

from pipeline.flow import runner

ROOT = Path(__file__).parent.parent
DEMO = ROOT / "workflows" / "heat_spreader.toml"


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("demo")
    record = runner.run(DEMO, ['parts.chip.temperature_limit="80 degC"'], store=tmp / "store", out=tmp / "out")
    return tmp / "out", record


def test_vtu_files_hold_the_fields_and_the_pvd_lists_them(demo_run):
    out, record = demo_run
    heat_grid = meshio.read(out / "heat.vtu")
    t = heat_grid.point_data["temperature_degC"]
    assert t.max() == pytest.approx(max(s["max"] for s in record["stages"]["heat"]["parts_degC"].values()), abs=1e-3)
    stress_grid = meshio.read(out / "stress.vtu")
    assert stress_grid.point_data["displacement_m"].shape == (len(stress_grid.points), 3)
    assert stress_grid.point_data["stress_Pa"].shape == (len(stress_grid.points), 6)  # xx, yy, zz, xy, yz, xz
    ids = stress_grid.cell_data["part_id"][0]
    assert sorted(np.unique(ids)) == sorted(record["mesh"]["part_ids"].values())
    # one recovered field: the VTU's peak and lowest safety factor per part are the summary's
    cells = stress_grid.cells[0].data
    for part, f in record["stages"]["stress"]["parts"].items():
        points = np.unique(cells[ids == record["mesh"]["part_ids"][part]])
        assert stress_grid.point_data["von_mises_Pa"][points].max() == pytest.approx(f["von_mises_max_Pa"], rel=1e-12)
        if f["safety_factor_peak"] is not None:
            assert stress_grid.point_data["safety_factor"][points].min() == pytest.approx(f["safety_factor_peak"],
                                                                                            rel=1e-12)
    pvd = (out / "results.pvd").read_text()
    assert 'file="heat.vtu"' in pvd and 'file="stress.vtu"' in pvd


def image(path):
    from matplotlib.image import imread

    return imread(path)[..., :3]


def test_figures_are_not_blank_and_show_the_field_range(demo_run):
    out, record = demo_run
    heat = record["stages"]["heat"]
    figures = {f["file"]: f for st in record["stages"].values() for f in st.get("figures", [])}
    assert {"heat_outside.png", "heat_section.png", "heat_parts.png", "stress_von_mises.png"} <= set(figures)
    for name in figures:
        pixels = image(out / name)
        assert pixels.std() > 0.02, f"{name} looks blank"
        assert len(np.unique((pixels * 255).astype(int).reshape(-1, 3), axis=0)) > 50, name
    grid = meshio.read(out / "heat.vtu")
    t = grid.point_data["temperature_degC"]
    from skfem import MeshTet

    mesh = MeshTet(grid.points.T, grid.cells_dict["tetra"].T)
    outside = t[np.unique(mesh.facets[:, mesh.boundary_facets()])]  # the colour range is the outer surface's
    lo, hi = figures["heat_outside.png"]["range"]
    assert lo == pytest.approx(outside.min(), abs=1e-9) and hi == pytest.approx(outside.max(), abs=1e-9)
    vm = meshio.read(out / "stress.vtu").point_data["von_mises_Pa"] / 1e6
    lo, hi = figures["stress_von_mises.png"]["range"]
    assert vm.min() - 1e-9 <= lo <= hi <= vm.max() + 1e-9 and hi > 0.5 * vm.max()
    assert figures["stress_von_mises.png"]["exaggeration"] > 1
    assert figures["heat_section.png"]["part"] == "board"
    assert heat["figures"][0]["unit"] == "degC"


def test_report_is_self_contained_with_tables_warnings_and_cautions(demo_run):
    out, record = demo_run
    text = (out / "report.html").read_text()
    assert "src=\"http" not in text and text.count("data:image/png;base64,") == sum(
        len(st.get("figures", [])) for st in record["stages"].values())
    for needed in ("Heat balance", "peak von Mises", "safety factor", "Materials", "Sarvar", "Caution",
                   "qualified engineer", "key (SHA-256", "scikit-fem", "FAIL"):
        assert needed in text, needed
    # the chip is above its 80 degC limit: a failing row and a warning
    assert any("chip reaches" in w and "above its limit 80.0 degC" in w for w in record["warnings"])


def test_report_command_rebuilds_without_solving(demo_run, monkeypatch):
    out, record = demo_run
    (out / "report.html").unlink()
    from pipeline.stages import heat, stress

    def refuse(*a, **k):
        raise AssertionError("report must not solve")

    monkeypatch.setattr(heat, "solve", refuse)
    monkeypatch.setattr(stress, "solve", refuse)
    rebuilt = runner.report(out)
    assert (out / "report.html").is_file() and rebuilt["status"] == "ok"
    r = subprocess.run([sys.executable, "-m", "pipeline", "report", str(out)], capture_output=True, text=True)
    assert r.returncode == 0 and "report rebuilt" in r.stdout


CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")


@pytest.mark.skipif(CHROMIUM is None, reason="Debian's chromium is installed by .ci/run")
def test_report_opens_in_headless_chromium_with_every_image_loaded(demo_run, tmp_path):
    out, record = demo_run
    probe = tmp_path / "probe.html"
    report = (out / "report.html").as_uri()
    # a small page that loads the report in a frame and prints what it finds into the DOM
    probe.write_text(f"""<!doctype html><html><body><iframe id=f src="{report}" width=1200 height=800></iframe>
<pre id=out>waiting</pre><script>
document.getElementById('f').onload = function() {{
  const d = document.getElementById('f').contentDocument;
  const imgs = Array.from(d.images);
  const loaded = imgs.filter(i => i.complete && i.naturalWidth > 0).length;
  const h2 = Array.from(d.querySelectorAll('h2')).map(h => h.textContent);
  document.getElementById('out').textContent = 'images=' + imgs.length + ' loaded=' + loaded +
     ' tables=' + d.querySelectorAll('table').length + ' first=' + h2[0] + ' headings=|' + h2.join('|') + '|';
}};
</script></body></html>""")
    flags = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
             "--disable-background-networking", "--disable-component-update", "--disable-sync",
             "--allow-file-access-from-files", f"--user-data-dir={tmp_path / 'profile'}"]
    result = subprocess.run(flags + ["--virtual-time-budget=10000", "--dump-dom", probe.as_uri()],
                            capture_output=True, text=True, timeout=120)
    figures = sum(len(st.get("figures", [])) for st in record["stages"].values())
    assert f"images={figures} loaded={figures}" in result.stdout, result.stdout[-2000:] + result.stderr[-2000:]
    tables = int(result.stdout.split("tables=")[1].split(" ")[0])
    assert tables >= 8
    # the verdict is the first section, and every input table is there
    assert "first=Verdict" in result.stdout, result.stdout[-2000:]
    for heading in ("Loads and boundary conditions", "Materials (values used)"):
        assert f"|{heading}|" in result.stdout
    # a screenshot for a person to look at (kept in pytest's temporary folder; its path is printed)
    shot = tmp_path / "report.png"
    subprocess.run(flags + ["--hide-scrollbars", "--window-size=1280,2600", f"--screenshot={shot}", report],
                   capture_output=True, text=True, timeout=120)
    assert shot.is_file() and shot.stat().st_size > 10_000
    print(f"report screenshot: {shot}")
