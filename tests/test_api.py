"""The Python API a notebook user finds: pipeline.run returns the results; names, reprs and meshes."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

import pipeline
from pipeline import errors

ROOT = Path(__file__).parent.parent
DEMO = ROOT / "workflows" / "heat_spreader.toml"


def test_the_public_names_are_listed_and_load_on_first_use():
    for name in ("run", "load_mesh", "material_library", "Material", "HeatSpec", "MapSpec", "StressSpec", "Support",
                 "solve_heat", "transfer", "solve_stress", "Run", "TemperatureField", "StressField"):
        assert name in pipeline.__all__ and name in dir(pipeline)
        assert getattr(pipeline, name) is not None
    with pytest.raises(AttributeError):
        pipeline.no_such_name  # noqa: B018


def test_run_returns_each_stage_result_and_domain_and_the_same_mesh_as_the_vtu(tmp_path):
    import meshio

    run = pipeline.run(DEMO, set=["stages.stress.order=1"], store=str(tmp_path / "store"), out=str(tmp_path / "out"))
    assert run.status == "ok" and set(run.stages) == {"heat", "thermal_strain", "stress"}
    heat = run["heat"]
    assert isinstance(heat.result, pipeline.TemperatureField) and heat.domain is run.domain("heat")
    assert heat.result.parts["chip"]["max"] == pytest.approx(run.summary["stages"]["heat"]["parts_degC"]["chip"]["max"]
                                                          + 273.15, abs=1e-3)
    written = meshio.read(tmp_path / "out" / run.summary["stages"]["stress"]["vtu"])
    built = run["stress"].to_meshio()
    # the stress VTU holds the recovered field per part as point data (h/stress)
    assert np.array_equal(built.point_data["von_mises_Pa"], written.point_data["von_mises_Pa"])
    grid = run["heat"].to_pyvista()
    assert grid.n_cells == len(heat.domain.tetrahedra) and "temperature_K" in grid.point_data
    assert len(repr(run)) < 400 and "<b>" in run._repr_html_()
    again = pipeline.run(DEMO, set=["stages.stress.order=1"], store=str(tmp_path / "store"), out=str(tmp_path / "out"))
    assert {s.status for s in again.stages.values()} == {"reused"}
    assert np.array_equal(again.result("heat").temperature, heat.result.temperature)


def test_reprs_are_short():
    lib = pipeline.material_library()
    assert len(repr(lib)) < 200 and len(repr(lib["fr4"])) < 200 and "fr4" in repr(lib["fr4"])


def test_a_schema_error_does_not_hide_a_misspelt_surface_in_another_stage(tmp_path):
    text = DEMO.read_text().replace("../cases/", f"{(ROOT / 'cases').as_posix()}/")
    text = text.replace("[stages.heat.convection.top_air]", "[stages.heat.convection.top_ar]")  # a name error
    text = text.replace('supports = { free = { kind = "minimal" } }',
                        'supports = { free = { kind = "minimal" } }\nsolver = "fastest"')  # a schema error
    path = tmp_path / "two.toml"
    path.write_text(text)
    with pytest.raises(errors.InputError) as info:
        pipeline.run(path, store=str(tmp_path / "store"))
    text = "\n".join(info.value.problems)
    assert "stages.stress.solver" in text
    assert "surface 'top_ar' does not exist (did you mean 'top_air'?)" in text
    assert all(r.code for r in info.value.records)
