"""A stage kind is one module: this test module *is* a toy kind, ``scale`` (it multiplies a temperature
field by a factor), registered at run time and run through ``thermochain run`` with caching, reasons,
the summary and a VTU file, without editing the runner, the outputs or the command line."""

from __future__ import annotations

import dataclasses
import json
import sys
from pathlib import Path
from typing import Literal

import meshio
import numpy as np
import pytest

from pipeline import cli, kinds
from pipeline.fields import TemperatureField
from pipeline.flow.workflow import Strict
from pipeline.kinds import base
from pipeline.stages import heat, mapping

ROOT = Path(__file__).parent.parent
DEMO = ROOT / "workflows" / "heat_spreader.toml"

# ---- the toy kind: everything it needs is here ----
NAME = "scale"
RESULT = TemperatureField
SOURCE = TemperatureField  # it reads a heat stage, and a map stage can read it
READS: tuple[str, ...] = ()
CALLS = {"scale": 0}


class Schema(Strict):
    kind: Literal["scale"]
    source: str
    factor: float = 1.0


def plan(ctx, name, stage, where):
    upstream = base.upstream(ctx, stage.source, SOURCE, where)
    inputs = ctx.base_inputs(NAME, 1) | {"options": stage.model_dump(), "upstream": upstream.key}
    return base.StagePlan(name, NAME, upstream.domain, stage.factor, inputs, source=stage.source)


def compute(plan, upstream):
    CALLS["scale"] += 1
    field, _ = upstream
    return dataclasses.replace(field, temperature=field.temperature * plan.spec)


def summary(plan, field):
    return {"max_K": float(field.temperature.max())}


def outputs(domain, field):
    return {"scaled_K": field.at_vertices}, {}
# ---- end of the toy kind ----


@pytest.fixture
def scale_kind():
    kinds.register(sys.modules[__name__])
    yield
    kinds.unregister(NAME)


@pytest.fixture
def counted(monkeypatch):
    calls = CALLS | {"heat": 0, "map": 0}
    CALLS["scale"] = 0
    for module, name, kind in ((heat, "solve", "heat"), (mapping, "transfer", "map")):
        original = getattr(module, name)

        def counting(*args, _original=original, _kind=kind, **kwargs):
            calls[_kind] += 1
            return _original(*args, **kwargs)

        monkeypatch.setattr(module, name, counting)
    return lambda: calls | {"scale": CALLS["scale"]}


def workflow(tmp_path: Path, factor: float) -> Path:
    text = DEMO.read_text().replace("../cases/", f"{(ROOT / 'cases').as_posix()}/")
    text = text.replace('source = "heat"\nreference', 'source = "scaled"\nreference')
    text += f'\n[stages.scaled]\nkind = "scale"\nsource = "heat"\nfactor = {factor}\n'
    text = text.replace('folder = "../results/heat_spreader"', f'folder = "{(tmp_path / "out").as_posix()}"\nfigures = false\nreport = false')
    path = tmp_path / "toy.toml"
    path.write_text(text)
    return path


def run(path: Path, tmp_path: Path, *extra: str) -> dict:
    assert cli.main(["-q", "run", str(path), "--store", str(tmp_path / "store"), *extra]) == 0
    return json.loads((tmp_path / "out" / "summary.json").read_text())


def test_a_toy_kind_runs_through_thermochain_run_with_caching_reasons_summary_and_vtu(tmp_path, scale_kind, counted):
    path = workflow(tmp_path, 1.01)
    first = run(path, tmp_path)
    assert counted() == {"heat": 1, "scale": 1, "map": 1}
    st = first["stages"]["scaled"]
    assert st["kind"] == "scale" and st["status"] == "computed" and st["reads"] == "heat"
    heat_max = max(p["max"] for p in first["stages"]["heat"]["parts_degC"].values()) + 273.15
    assert st["max_K"] == pytest.approx(1.01 * heat_max, rel=1e-6)
    # the map stage read the scaled field: its mapped maximum is the scaled one
    assert first["stages"]["thermal_strain"]["diagnostics"]["mapped_max_K"] == pytest.approx(st["max_K"], rel=1e-12)
    vtu = meshio.read(tmp_path / "out" / st["vtu"])
    assert np.max(vtu.point_data["scaled_K"]) == pytest.approx(st["max_K"], rel=1e-12)
    assert "part_id" in vtu.cell_data

    second = run(path, tmp_path)  # unchanged: everything reused, and said so
    assert counted() == {"heat": 1, "scale": 1, "map": 1}
    assert second["stages"]["scaled"]["reason"] == "scaled reused: nothing it reads changed"

    third = run(path, tmp_path, "--set", "stages.scaled.factor=1.02")  # only the toy and what reads it rerun
    assert counted() == {"heat": 1, "scale": 2, "map": 2}
    assert third["stages"]["heat"]["status"] == "reused"
    assert third["stages"]["scaled"]["reason"] == "scaled recomputed: options changed (factor)"
    assert "its source scaled changed" in third["stages"]["thermal_strain"]["reason"]


def test_a_toy_kind_is_in_the_schema_and_its_mistakes_are_reported_like_any_kind(tmp_path, scale_kind, capsys):
    path = workflow(tmp_path, 1.0)
    path.write_text(path.read_text().replace("factor = 1.0", "factr = 1.0"))
    assert cli.main(["run", str(path), "--store", str(tmp_path / "store")]) == 2
    err = capsys.readouterr().err
    assert "unknown key 'stages.scaled.factr' (did you mean 'factor'?)" in err and "Traceback" not in err
    assert cli.main(["schema"]) == 0
    assert '"scale"' in capsys.readouterr().out


def test_without_registration_the_kind_is_unknown(tmp_path, capsys):
    path = workflow(tmp_path, 1.0)
    assert cli.main(["check", str(path)]) == 2
    assert "'scale' is not a stage kind" in capsys.readouterr().err
