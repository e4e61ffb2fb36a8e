"""The thermochain command: the demo workflow end to end, check, materials, mesh, exit codes."""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import meshio
import pytest

ROOT = Path(__file__).parent.parent
DEMO = ROOT / "workflows" / "heat_spreader.toml"


def thermochain(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "pipeline", *map(str, args)], capture_output=True, text=True,
                          cwd=cwd)


def test_demo_workflow_runs_and_writes_summary_and_vtu(tmp_path):
    out = tmp_path / "results"
    r = thermochain("run", DEMO, "--out", out, "--store", tmp_path / "store")
    assert r.returncode == 0, r.stderr
    summary = json.loads((out / "summary.json").read_text())
    assert summary["status"] == "ok"
    stage = summary["stages"]["heat"]
    assert stage["status"] == "computed"
    assert stage["heat_in_W"] == pytest.approx(3.5)  # "2.5 W" and "1 W" in the file
    assert stage["relative_imbalance"] < 1e-8
    # heat flows from the chip through the board into the spreader; the air (25 degC) may cool the
    # spreader's sides a little below the 45 degC cold plate
    parts = stage["parts_degC"]
    assert parts["chip"]["max"] > parts["board"]["mean"] > parts["spreader"]["mean"] > 45.0
    assert 25.0 < parts["spreader"]["min"] <= 45.0
    assert "qualified engineer" in summary["caution"]
    grid = meshio.read(out / stage["vtu"])
    assert "temperature_degC" in grid.point_data and "part_id" in grid.cell_data
    assert "chip" in r.stdout and "Caution" in r.stdout
    mech = summary["stages"]["stress"]
    assert mech["status"] == "computed" and mech["reads"] == "thermal_strain"
    assert mech["equilibrium"]["relative"] < 1e-8
    assert "ductile" in mech["parts"]["spreader"]["criterion"]
    grid = meshio.read(out / mech["vtu"])
    assert grid.point_data["displacement_m"].shape[1] == 3 and "von_mises_Pa" in grid.point_data
    assert (out / "summary.csv").read_text().startswith("stage,kind,item,quantity,value")
    again = thermochain("run", DEMO, "--out", out, "--store", tmp_path / "store")
    statuses = {n: s["status"] for n, s in json.loads((out / "summary.json").read_text())["stages"].items()}
    assert again.returncode == 0 and set(statuses.values()) == {"reused"}
    # the verdict is part of the result; --check-verdict turns 'fail' into exit status 3 (reused stages)
    assert mech["verdict"]["verdict"] in ("pass", "fail", "no criterion")
    strict = thermochain("run", DEMO, "--out", out, "--store", tmp_path / "store", "--check-verdict",
                         "--set", "output.required_safety_factor=1e6")
    assert strict.returncode == 3 and "verdict fail in stress" in strict.stderr, strict.stderr
    assert json.loads((out / "summary.json").read_text())["status"] == "ok"  # the computation succeeded


def test_check_validates_without_solving(tmp_path):
    r = thermochain("check", DEMO, "--store", tmp_path / "store")
    assert r.returncode == 0, r.stderr
    assert "bounding box [m]" in r.stdout and "stage stress (stress, reads thermal_strain): run" in r.stdout


def write_variant(tmp_path, old, new):
    text = DEMO.read_text().replace(old, new)
    text = text.replace('"../cases/', f'"{(ROOT / "cases").as_posix()}/')
    path = tmp_path / "variant.toml"
    path.write_text(text)
    return path


@pytest.mark.parametrize("old,new,message", [
    ('unit = "mm"', 'unit = "mmm"', "mesh.unit"),
    ("[stages.heat]", "[stages.heat]\nfilm = 3", "unknown key 'stages.heat.film'"),
    ('chip = { material = "silicon" }', 'chip = { material = "silicone" }', "did you mean 'silicon'"),
    ('fixed_temperature = { mount = "45 degC" }', 'fixed_temperature = { mounts = "45 degC" }', "did you mean 'mount'"),
    ('film_coefficient = "8 W/(m^2*K)"\nambient = "25 degC"\n\n[stages.heat.convection.spreader_sides]',
     'film_coefficient = -8.0\nambient = "25 degC"\n\n[stages.heat.convection.spreader_sides]', "greater than 0"),
    ('ambient = "25 degC"\n\n[stages.heat.convection.spreader_sides]',
     'ambient = "25 mm"\n\n[stages.heat.convection.spreader_sides]', "not a unit of K (wrong dimension)"),
    ("title =", "title = = ", "TOML syntax error"),
    ('chip_top = ["30 mm"', 'chip_top = ["300 mm"', "probe 'chip_top'"),
    ('source = "thermal_strain"', 'source = "thermal_strian"', "did you mean 'thermal_strain'"),
    ('source = "thermal_strain"', 'source = "heat"', "stage 'heat' is a heat stage"),
    ('reference = "25 degC"', 'reference = "-300 degC"', "greater than or equal to 0"),
])
def test_bad_input_gives_a_clear_message_and_status_2(tmp_path, old, new, message):
    path = write_variant(tmp_path, old, new)
    assert path.read_text() != DEMO.read_text().replace('"../cases/', f'"{(ROOT / "cases").as_posix()}/')
    r = thermochain("run", path, "--out", tmp_path / "out", "--store", tmp_path / "store")
    assert r.returncode == 2
    assert message in r.stderr
    assert "Traceback" not in r.stderr
    assert str(path) in r.stderr


def test_all_input_errors_are_reported_at_once(tmp_path):
    path = write_variant(tmp_path, 'chip = { material = "silicon" }', 'chip = { material = "silicone" }')
    text = path.read_text().replace('mount = "45 degC"', 'mounts = "45 degC"')
    path.write_text(text)
    r = thermochain("check", path, "--store", tmp_path / "store")
    assert r.returncode == 2
    assert "silicone" in r.stderr and "mounts" in r.stderr


def test_no_way_for_heat_to_leave_is_bad_input_refused_before_solving(tmp_path):
    text = DEMO.read_text()
    start = text.index("fixed_temperature")
    end = text.index("[stages.thermal_strain]")
    path = write_variant(tmp_path, text[start:end], "\n")
    r = thermochain("run", path, "--out", tmp_path / "out", "--store", tmp_path / "store")
    assert r.returncode == 2  # found while planning (issue 7): bad input, nothing solved or stored
    assert "no steady state" in r.stderr and "Traceback" not in r.stderr
    assert not (tmp_path / "out").exists() and not (tmp_path / "store").exists()


def test_materials_lists_the_library_and_one_material_with_sources():
    r = thermochain("materials")
    assert r.returncode == 0 and "aluminium_6061_t6" in r.stdout
    one = thermochain("materials", "fr4")
    assert one.returncode == 0 and "conductivity" in one.stdout and "Sarvar" in one.stdout


def test_mesh_command_reports_the_bounding_box_in_metres():
    r = thermochain("mesh", ROOT / "cases" / "heat_spreader" / "heat_spreader_coarse.msh", "--unit", "mm")
    assert r.returncode == 0
    assert "0.06" in r.stdout and "part chip" in r.stdout


def test_version_and_console_script():
    r = thermochain("--version")
    assert r.returncode == 0 and "thermochain" in r.stdout
    exe = shutil.which("thermochain")
    if exe:  # installed with pip: the console command is the same program
        assert subprocess.run([exe, "--version"], capture_output=True, text=True).returncode == 0


def test_schema_is_json_schema_with_every_stage_kind():
    r = thermochain("schema")
    schema = json.loads(r.stdout)
    assert r.returncode == 0 and "HeatStage" in json.dumps(schema) and "StressStage" in json.dumps(schema)


def test_store_command_lists_and_cleans(tmp_path):
    store = tmp_path / "store"
    assert thermochain("run", DEMO, "--out", tmp_path / "out", "--store", store).returncode == 0
    listing = thermochain("store", store)
    assert "3 entries" in listing.stdout and "stress" in listing.stdout
    assert "removed 0 entries" in thermochain("store", store, "--clean", "30").stdout
    assert "removed 3 entries" in thermochain("store", store, "--clean", "0").stdout
