"""`compare` on the shipped aluminium and magnesium housings (workflows/housing.toml and
housing_magnesium.toml, which changes the shell's material for the stress stage only): the heat
results and figures are equal, the stress results and figures differ, and the page says so."""

from __future__ import annotations

import csv
import io
from pathlib import Path

import pytest

from pipeline import errors
from pipeline.flow import runner
from pipeline.outputs import compare

ROOT = Path(__file__).parent.parent


@pytest.fixture(scope="module")
def pair(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("pair")
    for name in ("housing", "housing_magnesium"):  # one store: the magnesium run reuses the heat stage
        runner.run(ROOT / "workflows" / f"{name}.toml", ["output.report=false"], store=tmp / "store", out=tmp / name)
    return tmp, compare.run(tmp / "housing", tmp / "housing_magnesium", tmp / "compare")


def test_heat_is_equal_and_only_stress_differs(pair):
    tmp, record = pair
    heat, stress = record["stages"]["heat"], record["stages"]["stress"]
    assert heat["same_mesh"] and heat["same_key"] and not heat["differs"]
    assert all(f["equal"] for f in heat["fields"].values())
    assert stress["differs"] and not stress["fields"]["von_mises_Pa"]["equal"]
    figs = {(s, f): same for s, f, same, _ in record["figures"]}
    assert figs and all(same for (s, _), same in figs.items() if s == "heat")
    assert not any(same for (s, _), same in figs.items() if s == "stress")
    assert any(s.startswith("heat: results identical") and "figures equal" in s for s in record["statements"])
    assert any(s.startswith("stress: results differ") for s in record["statements"])
    # inputs: only the shell's material of the stress stage
    assert {r[0] for r in record["inputs"]} == {"stress"}
    assert ["stress", "material of shell", "aluminium_a380", "magnesium_az91d"] in record["inputs"]
    # one difference figure, of the stress stage (the heat fields are equal)
    assert [d["file"] for d in record["differences"]] == ["difference_stress.png"]
    assert (tmp / "compare" / "difference_stress.png").is_file()


def test_page_and_table_carry_the_side_by_side_values(pair):
    tmp, record = pair
    text = (tmp / "compare" / "compare.html").read_text()
    assert "What differs" in text and "heat: results identical" in text and "magnesium_az91d" in text
    assert text.count("data:image/png;base64,") == 1 and "Caution" in text
    rows = list(csv.DictReader(io.StringIO((tmp / "compare" / "compare.csv").read_text())))
    shell = next(r for r in rows if r["part"] == "shell" and r["quantity"] == "safety factor")
    a = runner._previous(tmp / "housing")["stages"]["stress"]["parts"]["shell"]["safety_factor"]
    b = runner._previous(tmp / "housing_magnesium")["stages"]["stress"]["parts"]["shell"]["safety_factor"]
    assert float(shell["A"]) == pytest.approx(a) and float(shell["B"]) == pytest.approx(b)
    assert float(shell["B_minus_A"]) == pytest.approx(b - a)
    cpu = next(r for r in rows if r["part"] == "cpu" and r["quantity"] == "peak temperature")
    assert float(cpu["B_minus_A"]) == 0.0


def test_a_folder_without_a_summary_is_an_input_error(tmp_path):
    with pytest.raises(errors.InputError, match="no summary.json"):
        compare.run(tmp_path, tmp_path, tmp_path / "out")


def test_compare_command_writes_the_page_and_says_what_differs(pair, tmp_path):
    import subprocess
    import sys

    tmp, _ = pair
    r = subprocess.run([sys.executable, "-m", "pipeline", "compare", str(tmp / "housing"), str(tmp / "housing_magnesium"),
                        "--out", str(tmp_path / "c")], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    assert "heat: results identical" in r.stdout and (tmp_path / "c" / "compare.html").is_file()
    bad = subprocess.run([sys.executable, "-m", "pipeline", "compare", str(tmp_path / "none"), str(tmp / "housing")],
                         capture_output=True, text=True)
    assert bad.returncode == 2 and "no summary.json" in bad.stderr and "Traceback" not in bad.stderr
