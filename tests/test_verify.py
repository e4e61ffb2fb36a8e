"""thermochain verify: the suite passes at --quick through the command, its table has the promised
columns and caution, and a wrong expected value, a broken case or an unknown name make it say so."""

from __future__ import annotations

import json
import math
import subprocess
import sys
from dataclasses import replace

import pytest

from pipeline import cli
from pipeline.outputs.summary import CAUTION
from pipeline.verification import Check, catalogue

COLUMNS = ["case", "quantity", "published or closed-form value", "source", "computed", "relative error",
           "tolerance and why", "pass/fail"]


@pytest.fixture(scope="module")
def quick(tmp_path_factory):
    """One run of `thermochain verify --quick` in a subprocess, as a user would type it."""
    out = tmp_path_factory.mktemp("verify")
    r = subprocess.run([sys.executable, "-m", "pipeline", "verify", "--quick", "--out", str(out)],
                       capture_output=True, text=True, timeout=900, check=False)
    return r, out


def test_quick_verification_passes_through_the_command(quick):
    r, out = quick
    assert r.returncode == 0, r.stdout[-4000:] + r.stderr[-4000:]
    assert "every case passed" in r.stdout and "Traceback" not in r.stderr
    data = json.loads((out / "verification.json").read_text())
    assert data["passed"] and data["level"] == "quick"
    passed = {name for name, c in data["cases"].items() if c["status"] == "passed"}
    assert {"nafems_le11", "nafems_t4", "heat_fin", "stress_layers", "mms_heat_p1", "mms_stress_p2"} <= passed
    assert data["cases"]["nafems_le11_chain"]["status"] == "not run"  # a default- and fine-level case
    # every workflow case left its workflow, mesh and summary in its own folder, runnable by hand
    assert (out / "nafems_t4" / "t4.toml").is_file() and (out / "nafems_t4" / "t4.msh").is_file()
    assert json.loads((out / "nafems_t4" / "results" / "summary.json").read_text())["status"] == "ok"


def test_the_table_has_its_columns_sources_and_the_caution(quick):
    _, out = quick
    text = (out / "verification.md").read_text()
    lines = text.splitlines()
    header = next(line for line in lines if line.startswith("| case |"))
    assert [c.strip() for c in header.strip("|").split("|")] == COLUMNS
    rows = [line for line in lines if line.startswith("| ") and line is not header and not line.startswith("| case |")]
    assert len(rows) > 40 and all(row.rstrip().endswith("| pass |") for row in rows)
    assert any("NAFEMS" in row and "-105 MPa" in row for row in rows)
    orders = [row for row in rows if "observed" in row]
    assert len(orders) == 10 and all("theoretical" in row for row in orders)  # 8 in space, 2 in time
    assert "`thermochain verify --quick`" in text and CAUTION in text


def test_a_wrong_expected_value_fails_the_suite(tmp_path, monkeypatch, capsys):
    case = catalogue.CASES["heat_slab"]

    def off_by_one_percent(run, parameter):
        return [replace(c, expected=c.expected * 1.01) for c in case.checks(run, parameter)]

    monkeypatch.setitem(catalogue.CASES, "heat_slab", replace(case, checks=off_by_one_percent))
    assert cli.main(["verify", "--quick", "--only", "heat_slab", "--out", str(tmp_path)]) == 1
    printed = capsys.readouterr().out
    assert "SOME CASES FAILED" in printed
    table = (tmp_path / "verification.md").read_text()
    assert table.count("| FAIL |") == 2 and "SOME CASES FAILED" in table


def test_a_case_that_cannot_run_fails_with_its_message(tmp_path, monkeypatch, capsys):
    case = catalogue.CASES["heat_slab"]
    monkeypatch.setitem(catalogue.CASES, "heat_slab", replace(case, prepare=lambda work, parameter: None))
    assert cli.main(["verify", "--quick", "--only", "heat_slab", "--out", str(tmp_path)]) == 1
    table = (tmp_path / "verification.md").read_text()
    assert "(case did not run to the end)" in table and "heat_slab.msh" in table


def test_a_folder_it_did_not_make_is_left_alone(tmp_path, capsys):
    mine = tmp_path / "heat_slab"
    mine.mkdir()
    (mine / "notes.txt").write_text("keep")
    assert cli.main(["verify", "--quick", "--only", "heat_slab", "--out", str(tmp_path)]) == 2
    assert "was not made by thermochain verify" in capsys.readouterr().err
    assert (mine / "notes.txt").read_text() == "keep"


def test_an_unknown_case_is_bad_input(capsys):
    assert cli.main(["verify", "--only", "heat_slap"]) == 2
    assert "did you mean 'heat_slab'" in capsys.readouterr().err


def test_check_errors_scales_and_orders():
    base = {"quantity": "q", "unit": "MPa", "source": "s", "why": "w"}
    assert Check(expected=-105e6, computed=-102.7e6, tolerance=0.03, **base).passed
    assert not Check(expected=-105e6, computed=-98.5e6, tolerance=0.03, **base).passed
    zero = Check(expected=0.0, computed=1.0, tolerance=1e-8, scale=1e9, **base)
    assert zero.error == pytest.approx(1e-9) and zero.passed
    assert not Check(expected=1.0, computed=math.nan, tolerance=1.0, **base).passed
    order = Check(expected=2.0, computed=1.75, tolerance=0.2, order=True, **base)
    assert order.error == pytest.approx(0.25) and not order.passed
