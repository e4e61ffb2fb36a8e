"""Workflow files: schema, units, extends, --set overrides and messages."""

from __future__ import annotations

import json
import threading
from pathlib import Path

import pytest

from pipeline import errors
from pipeline.flow import runner, workflow as wf
from pipeline.stages import heat

ROOT = Path(__file__).parent.parent
DEMO = ROOT / "workflows" / "heat_spreader.toml"


def test_quantities_with_units_become_si():
    w = wf.load(DEMO)
    assert w.stages["heat"].fixed_temperature["mount"] == pytest.approx(318.15)
    assert w.stages["heat"].convection["top_air"].film_coefficient == 8.0
    assert w.probes["chip_top"] == pytest.approx([0.030, 0.020, 0.0068])
    assert w.stages["thermal_strain"].reference == pytest.approx(298.15)
    bare = wf.load(DEMO, ["stages.heat.power.chip=2500e-3", 'stages.heat.power.regulator="1000 mW"'])
    assert bare.stages["heat"].power == {"chip": 2.5, "regulator": pytest.approx(1.0)}


def test_extends_overrides_single_values_and_paths_stay_relative_to_each_file(tmp_path):
    variant = tmp_path / "hot.toml"
    variant.write_text(f'extends = "{DEMO.as_posix()}"\n'
                       'stages.heat.convection.top_air.ambient = "40 degC"\n'
                       'output.folder = "here"\n')
    w = wf.load(variant)
    assert w.stages["heat"].convection["top_air"].ambient == pytest.approx(313.15)
    assert w.stages["heat"].convection["spreader_sides"].ambient == pytest.approx(298.15)
    assert Path(w.mesh.file).resolve() == (ROOT / "cases" / "heat_spreader" / "heat_spreader_coarse.msh").resolve()
    assert Path(w.output.folder) == tmp_path / "here"


def test_an_extends_loop_is_refused(tmp_path):
    (tmp_path / "a.toml").write_text('extends = "b.toml"\n')
    (tmp_path / "b.toml").write_text('extends = "a.toml"\n')
    with pytest.raises(errors.InputError, match="'extends' loops back on itself"):
        wf.load(tmp_path / "a.toml")


def test_every_problem_is_reported_with_its_key_path():
    sets = ["stages.heat.orderr=2", 'stages.heat.convection.top_air.ambient="3 bananas"',
            "stages.stress.supports.free.kind=\"glued\"", "stages.thermal_strain.file=\"x.csv\"",
            "stages.heat.convection.top_air.film_coefficient=0"]
    with pytest.raises(errors.InputError) as info:
        wf.load(DEMO, sets)
    text = "\n".join(info.value.problems)
    assert "unknown key 'stages.heat.orderr' (did you mean 'order'?)" in text
    assert "stages.heat.convection.top_air.ambient: 'bananas' is not a known unit" in text
    assert "stages.stress.supports.free.kind" in text
    assert "stages.thermal_strain: give exactly one of 'source'" in text
    assert "film_coefficient: Input should be greater than 0" in text
    assert len(info.value.problems) == 5


def test_set_needs_key_and_value():
    with pytest.raises(errors.InputError, match="--set needs KEY=VALUE"):
        wf.load(DEMO, ["stages.heat.order"])


def test_schema_describes_units():
    text = json.dumps(wf.schema())
    assert "[W/(m**2*K)]" in text and "[K]" in text


#: shipped workflows too long for the suite (ten P2 solves); tests/test_cycle.py runs it at P1
SLOW = {"power_module_cycles.toml"}


@pytest.mark.parametrize("workflow", [pytest.param(p, marks=pytest.mark.slow) if p.name in SLOW else p
                                      for p in sorted((ROOT / "workflows").glob("*.toml"))], ids=lambda p: p.name)
def test_every_shipped_workflow_runs(workflow, tmp_path):
    record = runner.run(workflow, store=tmp_path / "store", out=tmp_path / "out")
    assert record["status"] == "ok"


def test_two_runs_on_one_store_compute_each_stage_once(tmp_path, monkeypatch):
    calls = []
    original = heat.solve

    def counting(*args, **kwargs):
        calls.append(1)
        return original(*args, **kwargs)

    monkeypatch.setattr(heat, "solve", counting)
    results = []

    def one(i):
        results.append(runner.run(DEMO, store=tmp_path / "store", out=tmp_path / f"out{i}"))

    threads = [threading.Thread(target=one, args=(i,)) for i in range(2)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert len(results) == 2 and len(calls) == 1
    assert sorted(r["stages"]["heat"]["status"] for r in results) == ["computed", "reused"]


def _validator():
    import jsonschema

    schema = wf.schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    return jsonschema.Draft202012Validator(schema)


SHIPPED = sorted((ROOT / "workflows").glob("*.toml")) + sorted((ROOT / "pipeline/verification/cases").glob("*.toml"))


@pytest.mark.parametrize("path", SHIPPED, ids=lambda p: p.name)
def test_every_shipped_workflow_is_valid_under_the_json_schema(path):
    """A real JSON Schema validator (draft 2020-12) accepts every shipped workflow: quantities with units,
    ``extends`` files that give only what they change; a ``_name.toml`` base is only ever extended, so it
    is checked as a file that may leave keys out."""
    import tomllib

    data = tomllib.loads(path.read_text())
    validator = _validator()
    if path.name.startswith("_"):
        import jsonschema

        validator = jsonschema.Draft202012Validator(validator.schema["then"] | {"$defs": validator.schema["$defs"]})
    assert [e.message for e in validator.iter_errors(data)] == []


def test_the_json_schema_rejects_what_the_loader_rejects():
    import tomllib

    data = tomllib.loads((ROOT / "workflows" / "heat_spreader.toml").read_text())
    validator = _validator()
    bad = dict(data, stages=dict(data["stages"], heat=dict(data["stages"]["heat"], powr={"chip": 1.0})))
    assert any("powr" in e.message for e in validator.iter_errors(bad))
    worse = dict(data, stages=dict(data["stages"], heat=dict(data["stages"]["heat"], order=3)))
    assert list(validator.iter_errors(worse))
    assert list(validator.iter_errors({"title": "no mesh, no parts, no stages"}))
