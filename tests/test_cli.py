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
    r = thermochain("run", DEMO, "--out", out)
    assert r.returncode == 0, r.stderr
    summary = json.loads((out / "summary.json").read_text())
    assert summary["status"] == "ok"
    stage = summary["stages"]["heat"]
    assert stage["status"] == "computed"
    assert stage["heat_in_W"] == pytest.approx(3.5)
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


def test_check_validates_without_solving():
    r = thermochain("check", DEMO)
    assert r.returncode == 0, r.stderr
    assert "bounding box [m]" in r.stdout and "inputs valid" in r.stdout


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
    ("fixed_temperature = { mount = 318.15 }", "fixed_temperature = { mounts = 318.15 }", "did you mean 'mount'"),
    ("film_coefficient = 8.0\nambient = 298.15\n\n[stages.heat.convection.spreader_sides]",
     "film_coefficient = -8.0\nambient = 298.15\n\n[stages.heat.convection.spreader_sides]", "greater than 0"),
    ("title =", "title = = ", "TOML syntax error"),
    ("chip_top = [30.0, 20.0, 6.8]", "chip_top = [300.0, 20.0, 6.8]", "probe 'chip_top'"),
])
def test_bad_input_gives_a_clear_message_and_status_2(tmp_path, old, new, message):
    path = write_variant(tmp_path, old, new)
    r = thermochain("run", path, "--out", tmp_path / "out")
    assert r.returncode == 2
    assert message in r.stderr
    assert "Traceback" not in r.stderr
    assert str(path) in r.stderr


def test_all_input_errors_are_reported_at_once(tmp_path):
    path = write_variant(tmp_path, 'chip = { material = "silicon" }', 'chip = { material = "silicone" }')
    text = path.read_text().replace("mount = 318.15", "mounts = 318.15")
    path.write_text(text)
    r = thermochain("check", path)
    assert r.returncode == 2
    assert "silicone" in r.stderr and "mounts" in r.stderr


def test_no_way_for_heat_to_leave_is_a_failed_run(tmp_path):
    text = DEMO.read_text()
    start = text.index("fixed_temperature")
    end = text.index("[probes]")
    path = write_variant(tmp_path, text[start:end], "\n")
    r = thermochain("run", path, "--out", tmp_path / "out")
    assert r.returncode == 1
    assert "no steady state" in r.stderr and "Traceback" not in r.stderr
    assert json.loads((tmp_path / "out" / "summary.json").read_text())["stages"]["heat"]["status"] == "failed"


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
