"""The verdict, the loads table and the materials table, from the shipped housing's summary and the
magnesium variant (workflows/housing.toml, housing_magnesium.toml: invented demo scenarios)."""

from __future__ import annotations

from pathlib import Path

import pytest

from pipeline.flow import runner
from pipeline.outputs import verdict

ROOT = Path(__file__).parent.parent
QUIET = ["output.figures=false", "output.report=false", "output.vtu=false"]


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("verdict")
    return {name: runner.run(ROOT / "workflows" / f"{name}.toml", QUIET, store=tmp / "store", out=tmp / name)
            for name in ("housing", "housing_magnesium")}


def test_verdict_names_the_hottest_part_and_the_lowest_safety_factor(runs):
    record = runs["housing"]
    parts = record["stages"]["heat"]["parts_degC"]
    hottest = max(parts, key=lambda p: parts[p]["max"])
    rated = {p: f["safety_factor"] for p, f in record["stages"]["stress"]["parts"].items() if f["safety_factor"]}
    lowest = min(rated, key=rated.get)
    lines = verdict.verdict(record, {"cpu": 100.0, "regulator": 125.0}, 1.5)
    assert lines[0]["text"].startswith(f"Hottest part: {hottest} at {parts[hottest]['max']:.1f} degC")
    assert lines[0]["state"] == "pass"  # 81.8 degC against 125 degC
    low = next(v for v in lines if v["text"].startswith("Lowest safety factor"))
    assert f"{lowest}, {rated[lowest]:.2f}" in low["text"]
    assert low["state"] == ("fail" if rated[lowest] < 1.5 else "pass")
    below = [p for p, sf in rated.items() if sf < 1.5]
    failing = [v for v in lines if v["text"].startswith("Below the required")]
    assert bool(failing) == bool(below) and all(p in failing[0]["text"] for p in below)
    # a limit just above the hottest part's peak makes it "near", one below makes it fail
    near = verdict.verdict(record, {hottest: parts[hottest]["max"] + 1.0}, 1.5)
    assert near[0]["state"] == "near"
    assert verdict.verdict(record, {hottest: parts[hottest]["max"] - 1.0}, 1.5)[0]["state"] == "fail"
    assert ("FAIL" in verdict.text(lines)) == any(v["state"] == "fail" for v in lines) and "ok" in verdict.text(lines)
    assert "FAIL" in verdict.text(verdict.verdict(record, {hottest: parts[hottest]["max"] - 1.0}, 1.5))


def test_a_peak_at_a_singular_feature_is_said_next_to_its_factor(runs):
    record = runs["housing"]
    st = record["stages"]["stress"]
    low = min((p for p in st["parts"] if st["parts"][p]["safety_factor"]), key=lambda p: st["parts"][p]["safety_factor"])
    st = dict(st, figures=[{"part": low, "peak_singular": True, "calm_peak_MPa": 50.0}])
    line = next(v for v in verdict.verdict({"stages": {"stress": st}}, {}, 1.5) if v["text"].startswith("Lowest"))
    expected = st["parts"][low]["strength_Pa"] / 50e6
    assert "singular feature" in line["note"] and f"{expected:.2f}" in line["note"]


def test_loads_table_lists_every_boundary_condition_with_units(runs):
    rows = verdict.loads(runs["housing"])
    text = {(r[1], r[2]): r[3] for r in rows}
    assert text[("power", "cpu")] == "8 W"
    assert text[("enclosed air (unknown temperature)", "air")] == "cavity 3 W/(m^2 K); sealed"
    assert text[("interface", "pad_to_cpu (cpu / gap_pad)")] == "contact, h_c = 5000 W/(m^2 K)"
    assert "dT^0.25" in text[("convection", "outside")]
    assert text[("radiation", "outside")].startswith("emissivity 0.9 (paint)")
    assert text[("stress-free temperature", "all parts")] == "25.0 degC"
    assert {r[2] for r in rows if r[1] == "support"} == {"base", "bolt_1", "bolt_2", "bolt_3", "bolt_4"}
    assert sum(r[1] == "solution" for r in rows) == 3


def test_materials_table_shows_values_per_stage_with_footnoted_sources(runs):
    header, rows, notes = verdict.materials(runs["housing_magnesium"])
    shell = {r[1]: r for r in rows if r[0] == "shell"}
    assert set(shell) == {"aluminium_a380", "magnesium_az91d"}  # heat keeps aluminium, stress reads magnesium
    col = header.index("youngs modulus [GPa]")
    assert shell["magnesium_az91d"][col].startswith("45 [") and shell["aluminium_a380"][col] == "-"
    k = header.index("conductivity [W/(m K)]")
    assert shell["aluminium_a380"][k].startswith("96 [")
    for r in rows:
        for cell in r[3:]:
            if cell != "-":
                n = int(cell.rsplit("[", 1)[1].rstrip("]"))
                assert 1 <= n <= len(notes) and notes[n - 1]
