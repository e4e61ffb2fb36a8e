"""Studies: sweeps (grid and paired values, a real Dask LocalCluster, resume, failures, exact superposition)
and mesh convergence (observed order, Richardson estimate, GCI, flags for quantities that do not converge).

Stage executions are counted from the store's entries and each variant's stage statuses, not by timing:
the variants run in other processes."""

from __future__ import annotations

import csv
import json
import math
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

import meshes
from pipeline import cli, errors
from pipeline.fields import TemperatureField
from pipeline.flow import runner, store as store_mod
from pipeline.flow import workflow as wf
from pipeline.model import mesh as mesh_mod
from pipeline.stages import heat
from pipeline.kinds.stress import SINGULAR_PEAK
from pipeline.notices import Notice
from pipeline.studies import convergence, linear, sweep

ROOT = Path(__file__).parent.parent
SPREADER = ROOT / "workflows" / "heat_spreader.toml"
HOUSING = ROOT / "workflows" / "housing.toml"


def sweep_file(tmp_path: Path, table: str) -> Path:
    path = tmp_path / "study.toml"
    path.write_text(f'extends = "{SPREADER.as_posix()}"\n[sweep]\nfolder = "out"\n{table}\n')
    return path


MATERIALS_BY_AMBIENT = """
grid = { "stages.stress.materials.spreader" = ["aluminium_6061_t6", "copper_c11000", "unobtainium"] }
figures = ["heat.chip.max_degC", "stress.safety_factor_min"]
[sweep.paired]
"stages.heat.convection.top_air.ambient" = ["25 degC", "35 degC"]
"stages.heat.convection.spreader_sides.ambient" = ["25 degC", "35 degC"]
"""


def entries(store: Path, kind: str) -> int:
    return sum(1 for e in store_mod.Store(store).entries() if e.kind == kind)


# ---------------------------------------------------------------------------------------- definitions

def test_grid_axes_combine_fully_and_paired_lists_change_together(tmp_path):
    d, _ = sweep.definition(sweep_file(tmp_path, MATERIALS_BY_AMBIENT), None)
    combos = sweep.variants(d, "study.toml")
    assert len(combos) == 3 * 2
    assert all(v["stages.heat.convection.top_air.ambient"] == v["stages.heat.convection.spreader_sides.ambient"]
               for v in combos)
    assert {(v["stages.stress.materials.spreader"], v["stages.heat.convection.top_air.ambient"]) for v in combos} == \
        {(m, a) for m in ("aluminium_6061_t6", "copper_c11000", "unobtainium") for a in ("25 degC", "35 degC")}
    assert len({sweep.variant_id(v) for v in combos}) == 6


@pytest.mark.parametrize("value", ["40 degC", 3.5, 2, True, [1.0, 2.0], {"kind": "fixed"}])
def test_values_reach_the_workflow_unchanged_through_set(value):
    raw = wf.apply_sets({}, [f"a.b={sweep.toml_value(value)}"], "here")
    assert raw == {"a": {"b": value}}


@pytest.mark.parametrize("table, expected", [
    ('paired = { "stages.heat.power.chip" = ["1 W", "2 W"], "stages.heat.power.regulator" = ["1 W"] }',
     "the lists must have equal lengths"),
    ('grid = { "stages.heat.power.chip" = ["1 W"] }\nbogus = 1', "sweep.bogus"),
    ('grid = { "stages.heat.power.chip" = [] }', "has no values"),
    ("figures = []", "give 'grid' and/or 'paired'"),
    ('grid = { "stages.heat.power.chip" = ["1 W"] }\nagainst = "stages.heat.power.cpu"', "sweep.against"),
    ('grid = { "stages.heat.powr.chip" = ["1 W", "2 W"] }', "stages.heat.powr"),
])
def test_a_bad_definition_is_an_input_error_naming_the_file_and_key(tmp_path, table, expected, capsys):
    path = sweep_file(tmp_path, table)
    assert cli.main(["sweep", str(path), "--serial", "--store", str(tmp_path / "store")]) == 2
    err = capsys.readouterr().err
    assert expected in err and str(path) in err and "Traceback" not in err
    assert not (tmp_path / "store").exists()  # nothing ran


def test_a_workflow_without_sweep_table_says_how_to_give_one(tmp_path):
    with pytest.raises(errors.InputError, match=r"no \[sweep\] table"):
        sweep.run(SPREADER, store=str(tmp_path / "store"), out=str(tmp_path / "out"), serial=True)


def test_the_sweep_table_is_in_no_stage_key(tmp_path):
    plain = runner.plan(SPREADER, store=str(tmp_path / "store"))
    studied = runner.plan(sweep_file(tmp_path, MATERIALS_BY_AMBIENT), store=str(tmp_path / "store"))
    assert [s.key for s in plain.stages] == [s.key for s in studied.stages]


# ------------------------------------------------------------------------------ execution on Dask

def test_local_cluster_sweep_computes_heat_once_per_ambient_records_failures_and_resumes(tmp_path):
    path = sweep_file(tmp_path, MATERIALS_BY_AMBIENT)
    store = tmp_path / "store"
    record = sweep.run(path, store=str(store), workers=2)
    assert record["executor"].startswith("Dask LocalCluster, 2 worker processes")
    rows = record["rows"]
    assert record["counts"]["variants"] == {"computed": 4, "failed": 2}
    failed = [r for r in rows if r["status"] == "failed"]
    assert all(r["values"]["stages.stress.materials.spreader"] == "unobtainium" for r in failed)
    assert all("material 'unobtainium' does not exist" in r["error"] for r in failed)
    # heat and map once per ambient (2), stress once per ok variant (4): counted in the store
    assert (entries(store, "heat"), entries(store, "map"), entries(store, "stress")) == (2, 2, 4)
    assert record["counts"]["stages"]["heat"] == {"computed": 2, "reused": 2}
    # the workers' numerical libraries were limited to one thread each
    assert all(r["threads"] == dict.fromkeys(r["threads"], "1") for r in rows)
    assert len({r["worker"] for r in rows}) == 2
    # outputs: table with one row per variant, plots, page with the caution
    folder = tmp_path / "out"
    table = list(csv.DictReader((folder / "sweep.csv").open()))
    assert len(table) == 6 and {r["status"] for r in table} == {"computed", "failed"}
    ok = [r for r in table if r["status"] == "computed"]
    hot = [float(r["heat.chip.max_degC"]) for r in ok if r["stages.heat.convection.top_air.ambient"] == "35 degC"]
    cool = [float(r["heat.chip.max_degC"]) for r in ok if r["stages.heat.convection.top_air.ambient"] == "25 degC"]
    assert len(set(hot)) == 1 and len(set(cool)) == 1 and hot[0] > cool[0]  # one heat result per ambient
    # one plot per figure against the swept value, and the tornado chart of the two axes
    assert {p["file"] for p in record["plots"]} == {"heat.chip.max_degC.png", "stress.safety_factor_min.png",
                                                     "tornado.png"}
    assert all((folder / p["file"]).stat().st_size > 1000 for p in record["plots"])
    page = (folder / "sweep.html").read_text()
    assert "Caution" in page and "unobtainium" in page and "<h2>Sweep</h2>" in page
    assert json.loads((folder / "sweep.json").read_text())["caution"]

    again = sweep.run(path, store=str(store), workers=2)
    assert again["counts"]["variants"] == {"up to date": 4, "failed": 2}
    assert (entries(store, "heat"), entries(store, "map"), entries(store, "stress")) == (2, 2, 4)


def test_a_separately_started_scheduler_runs_the_sweep(tmp_path):
    """`dask scheduler` and `dask worker` as a user starts them (docs/studies.md)."""
    dask = Path(sys.executable).parent / "dask"
    if not dask.exists():
        pytest.skip("the dask command is not installed beside this Python")
    info = tmp_path / "scheduler.json"
    scheduler = subprocess.Popen([str(dask), "scheduler", "--scheduler-file", str(info), "--port", "0",
                                  "--no-dashboard"], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    worker = None
    try:
        for _ in range(300):
            if info.exists() and info.stat().st_size:
                break
            time.sleep(0.1)
        address = json.loads(info.read_text())["address"]
        worker = subprocess.Popen([str(dask), "worker", address, "--nworkers", "1", "--nthreads", "1",
                                   "--no-dashboard"], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        path = sweep_file(tmp_path, 'grid = { "stages.stress.materials.spreader" = '
                                    '["aluminium_6061_t6", "magnesium_az91d"] }')
        assert cli.main(["-q", "sweep", str(path), "--scheduler", address, "--store", str(tmp_path / "store")]) == 0
        record = json.loads((tmp_path / "out" / "sweep.json").read_text())
        assert record["executor"] == f"Dask scheduler {address}"
        assert record["counts"]["stages"]["heat"] == {"computed": 1, "reused": 1}
        assert all(r["threads"]["OMP_NUM_THREADS"] == "1" for r in record["rows"])  # the nanny's limit
    finally:
        for process in (worker, scheduler):
            if process is not None:
                process.terminate()
                process.wait(timeout=30)


def test_an_unreachable_scheduler_is_an_input_error(tmp_path):
    path = sweep_file(tmp_path, 'grid = { "stages.heat.power.chip" = ["1 W"] }')
    with pytest.raises(errors.InputError, match="cannot reach a Dask scheduler"):
        sweep.run(path, store=str(tmp_path / "store"), scheduler="tcp://127.0.0.1:9")


# ---------------------------------------------------------------------------------- superposition

def test_a_power_sweep_of_a_linear_problem_is_superposed_exactly(tmp_path):
    path = sweep_file(tmp_path, 'grid = { "stages.heat.power.chip" = ["1 W", "2.5 W", "4 W"] }')
    store = tmp_path / "store"
    assert cli.main(["-q", "sweep", str(path), "--serial", "--store", str(store)]) == 0
    record = json.loads((tmp_path / "out" / "sweep.json").read_text())
    assert record["linearity"]["heat"]["superposed"] and record["linearity"]["heat"]["solves"] == 2
    assert "exact because the problem is linear" in record["linearity"]["heat"]["reason"]
    assert record["counts"]["stages"]["heat"] == {"superposed": 3}
    assert "exact because the problem is linear" in (tmp_path / "out" / "sweep.html").read_text()
    # the stored superposed field against a direct solve of the same variant
    plan = runner.plan(path, ['stages.heat.power.chip="4 W"'], str(store))
    s = plan.stages[0]
    stored = TemperatureField.from_arrays(*plan.store.get("heat", s.key))
    direct = heat.solve(s.domain, s.spec)
    assert stored.solver.method.startswith("superposition") and not direct.solver.method.startswith("superposition")
    # superposition is exact for a linear problem: what remains is the round-off of the direct solves,
    # about cond(K) * machine epsilon * |T| (1e6 * 2.2e-16 * 400 K ~ 1e-7 K at most)
    assert np.abs(stored.temperature - direct.temperature).max() < 1e-7
    for part in direct.parts:
        assert stored.parts[part] == pytest.approx(direct.parts[part], abs=1e-7)
    assert stored.probes == pytest.approx(direct.probes, abs=1e-7)
    assert [(r["name"], r["kind"]) for r in stored.balance] == [(r["name"], r["kind"]) for r in direct.balance]
    assert [r["heat_in_W"] for r in stored.balance] == pytest.approx([r["heat_in_W"] for r in direct.balance],
                                                                     abs=1e-9)


def test_a_nonlinear_heat_problem_is_not_superposed_and_says_why(tmp_path):
    s = runner.plan(HOUSING, store=str(tmp_path)).stages[0]
    terms = linear.nonlinear_terms(s.spec)
    assert "radiation on outside" in terms and "convection exponent 0.25 on outside" in terms
    assert linear.nonlinear_terms(runner.plan(SPREADER, store=str(tmp_path)).stages[0].spec) == []


# ------------------------------------------------------------------------------------ convergence

def test_gci_reproduces_the_worked_example_of_celik_2008():
    # Celik et al. 2008, J. Fluids Eng. 130(7) 078001, Table 1, first column (from memory): N = 18000,
    # 8000, 4500 cells (2-D, so h ~ N^(-1/2)); phi = 6.063, 5.972, 5.863; published p = 1.53,
    # phi_ext = 6.1685, e_a = 1.5 %, GCI_fine = 2.17 %.  Tolerances are the rounding of the published digits.
    h = [18000 ** -0.5, 8000 ** -0.5, 4500 ** -0.5]
    g = convergence.gci(h, [6.063, 5.972, 5.863])
    assert g["r21"] == pytest.approx(1.5) and g["r32"] == pytest.approx(1.333, abs=5e-4)
    assert g["order"] == pytest.approx(1.53, abs=0.01)
    assert g["extrapolated"] == pytest.approx(6.1685, abs=6e-4)
    assert g["relative_change"] == pytest.approx(0.015, abs=5e-4)
    assert 100 * g["gci_fine"] == pytest.approx(2.17, abs=0.02)
    assert g["verdict"] == "converging"


@pytest.mark.parametrize("phi, verdict", [
    ([1.0, 1.2, 1.1], "oscillating"),                    # R < 0
    ([1.0, 1.1, 1.3], "diverging"),                     # the change grows
    ([2.0, 1 + 0.5 ** 0.3, 1 + 0.25 ** 0.3], "not converged"),  # phi = 1 + h^0.3: p = 0.3
    ([5.0, 5.0, 5.0], "unchanged"),
])
def test_quantities_that_do_not_converge_get_no_gci(phi, verdict):
    g = convergence.gci([1.0, 0.5, 0.25], phi)
    assert g["verdict"] == verdict
    assert g["gci_fine"] is None or verdict == "unchanged"


def test_a_stress_peak_on_a_support_is_flagged_singular_even_when_it_looks_monotone():
    # the study reads the flag's record (its code and part), never its wording
    flag = Notice(SINGULAR_PEAK, "any wording", "stress", {"part": "shell"})
    record = {"levels": [{"warning_records": [flag.to_dict()]}]}
    q = convergence._quantity("stress.shell.von_mises_max_MPa", [1.0, 0.5, 0.25], [10.0, 14.0, 16.0], record)
    assert q["verdict"] == "singular" and q["gci_fine"] is None and q["order"] == pytest.approx(1.0)
    other = {"levels": [{"warning_records": [Notice(SINGULAR_PEAK, "", "stress", {"part": "board"}).to_dict()]}]}
    assert convergence._quantity("stress.shell.von_mises_max_MPa", [1.0, 0.5, 0.25], [10.0, 14.0, 16.0],
                                 other)["verdict"] != "singular"


def test_uniform_refinement_keeps_parts_and_surfaces(tmp_path):
    m = meshes.tensor([0, 1, 2], [0, 1], [0, 0.5, 1], jitter=0.0)
    parts = meshes.layers(m, 0, {"a": (0, 1), "b": (1, 2)})
    file = meshes.write_gmsh(meshes.to_meshio(m, parts), tmp_path / "boxes.msh")
    coarse = mesh_mod.load(file, unit="mm")
    fine = mesh_mod.load(convergence.refine(coarse, 1, tmp_path / "meshes")[0], unit="mm")
    assert len(fine.tetrahedra) == 8 * len(coarse.tetrahedra) and fine.unit == "mm"
    for p in coarse.parts:
        assert fine.part_volume(p) == pytest.approx(coarse.part_volume(p), rel=1e-12)
    for s in coarse.surfaces:
        assert len(fine.surfaces[s]) == 4 * len(coarse.surfaces[s])
        assert fine.facet_areas(fine.surfaces[s]).sum() == pytest.approx(coarse.facet_areas(coarse.surfaces[s]).sum(),
                                                                        rel=1e-12)
    assert set(fine.interfaces) == set(coarse.interfaces)


def fin(tmp_path: Path) -> Path:
    """A square aluminium pin fin, 5 x 5 x 50 mm, base at 125 degC, h = 25 W/(m^2*K) to 25 degC on the
    sides and the tip (Incropera et al., Fundamentals of Heat and Mass Transfer, Table 3.4, case A)."""
    m = meshes.tensor(np.linspace(0, 50, 6), [0, 5], [0, 5])
    f = meshes.faces(m)
    skin = np.concatenate([f[k] for k in ("xmax", "ymin", "ymax", "zmin", "zmax")])
    meshes.write_gmsh(meshes.to_meshio(m, {"pin": np.arange(m.nelements)}, {"base": f["xmin"], "skin": skin}),
                      tmp_path / "fin.msh")
    path = tmp_path / "fin.toml"
    path.write_text('[mesh]\nfile = "fin.msh"\nunit = "mm"\n[parts]\npin = { material = "aluminium_6061_t6" }\n'
                    '[stages.heat]\nkind = "heat"\nfixed_temperature = { base = "125 degC" }\n'
                    'convection.skin = { film_coefficient = "25 W/(m^2*K)", ambient = "25 degC" }\n'
                    '[output]\nfolder = "res"\n')
    return path


def test_converge_on_a_fin_observes_second_order_and_extrapolates_to_fin_theory(tmp_path, capsys):
    path = fin(tmp_path)
    assert cli.main(["converge", str(path), "--levels", "3", "--quantity", "heat.pin.mean_degC",
                     "--quantity", "heat.pin.max_degC", "--store", str(tmp_path / "store")]) == 0
    assert "GCI" in capsys.readouterr().out
    record = json.loads((tmp_path / "res_convergence" / "convergence.json").read_text())
    assert [lv["tetrahedra"] for lv in record["levels"]] == [30, 240, 1920]
    mean, peak = record["quantities"]
    # P1 temperatures converge at second order in L2, so their volume mean does too (Ciarlet 1978 ch. 3;
    # Brenner & Scott 2008 ch. 5); |p_obs - p_formal| <= 0.2 is the common acceptance (Oberkampf & Roy 2010)
    assert mean["verdict"] == "converging" and mean["order"] == pytest.approx(2.0, abs=0.2)
    # 1-D fin with a convective tip (Incropera et al., Fundamentals of Heat and Mass Transfer, 6th ed., Table 3.4
    # case A): theta(x)/theta_b = [cosh m(L-x) + (h/mk) sinh m(L-x)] / [cosh mL + (h/mk) sinh mL]; its mean over
    # the length.  The 1-D model neglects the cross-section's temperature variation, of relative size Bi = h t/(2k)
    # (Incropera §3.6), so the tolerance is a few Bi times theta_b.
    k, h, a, length, theta_b = 167.0, 25.0, 5e-3, 0.05, 100.0
    mm = math.sqrt(h * 4 * a / (k * a * a))
    ratio = h / (mm * k)
    den = math.cosh(mm * length) + ratio * math.sinh(mm * length)
    exact = 25.0 + theta_b * (math.sinh(mm * length) + ratio * (math.cosh(mm * length) - 1)) / (mm * length) / den
    biot = h * a / (2 * k)
    assert mean["extrapolated"] == pytest.approx(exact, abs=5 * biot * theta_b)
    assert abs(mean["extrapolated"] - mean["values"][-1]) <= 1.25 * mean["gci_fine"] * abs(mean["values"][-1])
    assert peak["verdict"] == "unchanged"  # the base temperature is prescribed
    page = (tmp_path / "res_convergence" / "convergence.html").read_text()
    assert "Caution" in page and "heat.pin.mean_degC" in page


def test_converge_needs_three_meshes_and_known_quantities(tmp_path, capsys):
    path = fin(tmp_path)
    assert cli.main(["converge", str(path), "--levels", "2"]) == 2
    assert "at least 3 levels" in capsys.readouterr().err
    assert cli.main(["converge", str(path), "--meshes", str(tmp_path / "fin.msh"), "missing.msh"]) == 2
    assert "mesh file not found" in capsys.readouterr().err
    assert cli.main(["converge", str(path), "--quantity", "heat.pin.maximum_degC", "--store",
                     str(tmp_path / "store")]) == 2
    assert "did you mean 'heat.pin.max_degC'" in capsys.readouterr().err
