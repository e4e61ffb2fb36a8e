"""The cycle stage (pipeline/stages/cycle.py, kinds/cycle.py) and the joint life estimates (stages/life.py)."""

import math
import shutil
from pathlib import Path

import numpy as np
import pytest

from pipeline import errors
from pipeline.flow import runner
from pipeline.stages import cycle, life
from pipeline.verification import catalogue

CASES = Path(catalogue.__file__).parent / "cases"


def test_ranges_pick_the_governing_pair_and_its_mean():
    # three uniaxial states at one point: -100, 50, 20 MPa; the largest equivalent range is 150 MPa
    # between the first two, the mean there -25 MPa (definitions in the module docstring)
    stack = np.zeros((3, 1, 6))
    stack[:, 0, 0] = [-100e6, 50e6, 20e6]
    r = cycle.ranges(stack)
    assert r["equivalent_range"][0] == pytest.approx(150e6, rel=1e-15)
    assert list(r["pair"][0]) == [0, 1]
    assert r["mean"][0, 0] == pytest.approx(-25e6, rel=1e-15)
    assert r["von_mises_range"][0] == pytest.approx(80e6, rel=1e-15)  # |vM| forgets the sign: 100 - 20
    assert (r["state_max"][0], r["state_min"][0]) == (0, 2)


def test_equivalent_range_of_a_reversed_shear_is_sqrt3_tau():
    # pure shear +tau and -tau: the difference 2 tau in shear, von Mises sqrt(3) * 2 tau
    stack = np.zeros((2, 1, 6))
    stack[:, 0, 5] = [30e6, -30e6]
    r = cycle.ranges(stack)
    assert r["equivalent_range"][0] == pytest.approx(math.sqrt(3) * 60e6, rel=1e-14)
    assert r["von_mises_range"][0] == pytest.approx(0.0, abs=1e-6)


def test_life_formula_limiting_cases():
    # No copy of Engelmaier (1983) or IPC-D-279 was consulted, so no worked example is reproduced; the
    # formula's own limits are checked instead: N_f = 1/2 when the strain range is 2 eps_f (a quarter
    # cycle to the ductility), fewer cycles for a larger range, c = -0.442 at T_sj = 0 degC and f = 0,
    # and c less negative (longer life at small strain) for faster cycling.
    assert life.cycles(2 * life.EPS_F_SNPB, life.EPS_F_SNPB, -0.442) == pytest.approx(0.5, rel=1e-15)
    assert life.cycles(0.01, 0.325, -0.45) > life.cycles(0.02, 0.325, -0.45)
    assert life.engelmaier_exponent(0.0, 0.0) == pytest.approx(-0.442, rel=1e-15)
    assert life.engelmaier_exponent(25.0, 1000.0) > life.engelmaier_exponent(25.0, 1.0)
    assert life.cycles(0.0, 0.325, -0.45) is None
    # leadless: F L_D / h times the mismatch; leaded grows with the square of the mismatch
    j = life.Joint("s", "c", "b")
    assert life.shear_range(j, 1e-3, 5e-3, 1e-4) == pytest.approx(0.05, rel=1e-14)
    leaded = life.Joint("s", "c", "b", model="leaded", lead_stiffness=1e4, area=1e-6)
    assert life.shear_range(leaded, 2e-3, 5e-3, 1e-4) == pytest.approx(4 * life.shear_range(leaded, 1e-3, 5e-3, 1e-4))


def _case(tmp_path, name="cycle_restrained.toml"):
    for f in ("_uniform_heat.toml", "_output.toml", name):
        shutil.copy(CASES / f, tmp_path / f)
    catalogue.bar_mesh(tmp_path, None)
    return tmp_path / name


def test_a_cycle_reuses_its_stored_states(tmp_path):
    path = _case(tmp_path)
    first = runner.run(path, ["output.figures=true", "output.report=true"], store=str(tmp_path / "store"),
                       out=str(tmp_path / "out"))
    assert first["stages"]["cycle"]["status"] == "computed"
    assert (tmp_path / "out" / "cycle_range.png").exists() and "Ranges between the states" in \
        (tmp_path / "out" / "report.html").read_text()
    assert first["stages"]["cycle"]["reads"] == ["cold_stress", "hot_stress"]
    again = runner.run(path, store=str(tmp_path / "store"), out=str(tmp_path / "out"))
    assert {s["status"] for s in again["stages"].values()} == {"reused"}
    changed = runner.run(path, ["stages.cold.fixed_temperature.xmin=250.0"], store=str(tmp_path / "store"),
                         out=str(tmp_path / "out2"))
    assert changed["stages"]["cycle"]["status"] == "computed" and changed["stages"]["hot_stress"]["status"] == "reused"


@pytest.mark.parametrize("setting, words", [
    ('stages.cycle.states=["cold", "hot_stress"]', "is a heat stage"),
    ('stages.cycle.states=["cold_stres", "hot_stress"]', "cold_stress"),
    ('stages.cycle.states=["hot_stress"]', "at least 2"),
    ('stages.cycle.joints.j={part = "bdy", component = "body", board = "body"}', "body"),
    ('stages.cycle.joints.j={part = "body", component = "body", board = "body", ductility = 0.3, exponent = -0.5}',
     "their source"),
])
def test_bad_cycles_are_named(tmp_path, setting, words):
    with pytest.raises(errors.InputError) as exc:
        runner.plan(_case(tmp_path), [setting])
    assert words in str(exc.value) and "stages.cycle" in str(exc.value)


def _superposition_case(tmp_path):
    shutil.copy(CASES / "_output.toml", tmp_path / "_output.toml")
    shutil.copy(CASES / "cycle_superposition.toml", tmp_path / "cycle_superposition.toml")
    catalogue.bimetal_mesh(tmp_path, 6)
    return tmp_path / "cycle_superposition.toml"


def test_superposition_is_refused_with_its_reason_when_expansion_depends_on_temperature(tmp_path):
    path = _superposition_case(tmp_path)
    summary = runner.run(path, ["materials.high.expansion_polynomial=[1.2e-5, 1.0e-8]"],
                         store=str(tmp_path / "store"), out=str(tmp_path / "out"))
    record = summary["stages"]["superposed"]["superposition"]
    assert record["used"] is False and "temperature-dependent stiffness or expansion of part high" in record["why"]
    # solved directly instead: the same ranges as the direct cycle (the same solves, in another order)
    direct = summary["stages"]["direct"]["parts"]["high"]["equivalent_range_max_Pa"]
    assert summary["stages"]["superposed"]["parts"]["high"]["equivalent_range_max_Pa"] == pytest.approx(direct, rel=1e-12)


def test_superposed_states_need_a_template(tmp_path):
    with pytest.raises(errors.InputError) as exc:
        runner.plan(_superposition_case(tmp_path), ["stages.superposed.template=\"on\""])
    assert "stages.superposed.template" in str(exc.value) and "on_stress" in str(exc.value)


def test_the_power_module_cycles_at_p1(tmp_path):
    # the shipped workflow (a -40/+125 degC chamber cycle and a power cycle, and the same four states
    # superposed), at P1 to stay fast; the P2 run is in docs and the slow suite
    root = Path(__file__).parent.parent
    sets = [f"stages.{s}_stress.order=1" for s in ("cold", "hot", "off", "on")] + ["output.figures=false",
                                                                              "output.report=false"]
    summary = runner.run(root / "workflows" / "power_module_cycles.toml", sets, store=str(tmp_path / "store"),
                         out=str(tmp_path / "out"))
    st = summary["stages"]
    assert summary["status"] == "ok"
    sweep = st["sweep"]["superposition"]
    assert sweep["used"] and sweep["solves"] == {"heat": 1, "stress": 2}
    assert sweep["template_check"]["relative_difference"] < 1e-8  # CG to 1e-10 relative residual
    for part in ("solder", "substrate"):  # the superposed cold/hot pair is the direct chamber cycle
        assert st["sweep"]["parts"][part]["equivalent_range_max_Pa"] == pytest.approx(
            st["chamber"]["parts"][part]["equivalent_range_max_Pa"], rel=1e-7)
    joint = st["chamber"]["joints"]["substrate_solder"]
    assert joint["joint_temperature_range_K"] == pytest.approx(165.0, rel=1e-9)  # uniform soak, -40 to +125 degC
    assert "qualification tests" in joint["caution"] and any("not SnPb" in x for x in joint["limits"])
    assert (tmp_path / "out" / "chamber.vtu").exists()
