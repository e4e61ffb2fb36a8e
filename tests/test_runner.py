"""The runner and the store: a stage reruns when, and only when, something it reads changed.

Stage executions are counted by wrapping the stage functions, not by timing."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from pipeline import errors
from pipeline.flow import runner, store as store_mod
from pipeline.stages import heat, mapping, stress

ROOT = Path(__file__).parent.parent
DEMO = ROOT / "workflows" / "heat_spreader.toml"
VARIANT = ROOT / "workflows" / "heat_spreader_magnesium.toml"


@pytest.fixture
def counted(monkeypatch):
    calls = {"heat": 0, "map": 0, "stress": 0}

    def wrap(module, name, kind):
        original = getattr(module, name)

        def counting(*args, **kwargs):
            calls[kind] += 1
            return original(*args, **kwargs)

        monkeypatch.setattr(module, name, counting)

    wrap(heat, "solve", "heat")
    wrap(mapping, "transfer", "map")
    wrap(stress, "solve", "stress")
    return calls


def run(tmp_path, workflow=DEMO, sets=None, rerun=None):
    return runner.run(workflow, sets, store=tmp_path / "store", out=tmp_path / "out", rerun=rerun)


def statuses(record):
    return {name: s["status"] for name, s in record["stages"].items()}


def test_first_run_computes_and_an_unchanged_rerun_computes_nothing(tmp_path, counted):
    first = run(tmp_path)
    assert counted == {"heat": 1, "map": 1, "stress": 1}
    assert set(statuses(first).values()) == {"computed"}
    second = run(tmp_path)
    assert counted == {"heat": 1, "map": 1, "stress": 1}
    assert set(statuses(second).values()) == {"reused"}
    assert second["stages"]["stress"]["reason"] == "stress reused: nothing it reads changed"
    for name in first["stages"]:  # identical results
        a, b = dict(first["stages"][name]), dict(second["stages"][name])
        for k in ("status", "reason", "seconds", "vtu"):
            a.pop(k, None), b.pop(k, None)
        a.get("solver", {}).pop("seconds", None), b.get("solver", {}).pop("seconds", None)
        assert json.dumps(a, sort_keys=True) == json.dumps(b, sort_keys=True)


def test_youngs_modulus_reruns_stress_alone_and_check_predicts_it(tmp_path, counted):
    run(tmp_path)
    inline = ['materials.stiff_al = { conductivity = 167.0, youngs_modulus = 80e9, poisson_ratio = 0.33, '
              'expansion = 23.6e-6, density = 2700.0, yield_strength = 276e6, tensile_strength = 310e6 }',
              'parts.spreader.material = "stiff_al"']
    # the inline material has the library's conductivity: only the stiffness differs
    _, plan = runner.check(DEMO, inline, store=tmp_path / "store", out=tmp_path / "out")
    assert [plan[n][0] for n in ("heat", "thermal_strain", "stress")] == [True, True, False]
    assert "part spreader changed material (youngs_modulus)" in plan["stress"][1]
    record = run(tmp_path, sets=inline)
    assert counted == {"heat": 1, "map": 1, "stress": 2}
    assert statuses(record) == {"heat": "reused", "thermal_strain": "reused", "stress": "computed"}
    assert record["stages"]["stress"]["reason"] == plan["stress"][1]


def test_conductivity_reruns_heat_and_everything_after(tmp_path, counted):
    run(tmp_path)
    sets = ['materials.soft = { conductivity = 120.0, youngs_modulus = 68.9e9, poisson_ratio = 0.33, '
            'expansion = 23.6e-6, density = 2700.0, yield_strength = 276e6, tensile_strength = 310e6 }',
            'parts.spreader.material = "soft"']
    _, plan = runner.check(DEMO, sets, store=tmp_path / "store", out=tmp_path / "out")
    assert not any(reuse for reuse, _ in plan.values())
    assert "part spreader changed material (conductivity)" in plan["heat"][1]
    record = run(tmp_path, sets=sets)
    assert counted == {"heat": 2, "map": 2, "stress": 2}
    assert "its source thermal_strain changed" in record["stages"]["stress"]["reason"]


def test_a_stress_only_material_swap_in_a_variant_file_reuses_heat_and_map(tmp_path, counted):
    run(tmp_path)
    _, plan = runner.check(VARIANT, store=tmp_path / "store", out=tmp_path / "out")
    assert [plan[n][0] for n in ("heat", "thermal_strain", "stress")] == [True, True, False]
    record = run(tmp_path, workflow=VARIANT)
    assert counted == {"heat": 1, "map": 1, "stress": 2}
    assert record["stages"]["stress"]["materials"]["spreader"] == "magnesium_az91d"
    assert record["stages"]["heat"]["materials"]["spreader"] == "aluminium_6061_t6"


def test_rerun_forces_one_stage(tmp_path, counted):
    run(tmp_path)
    record = run(tmp_path, rerun=["stress"])
    assert counted["stress"] == 2 and counted["heat"] == 1
    assert record["stages"]["stress"]["reason"] == "stress recomputed: --rerun stress"


def test_a_damaged_entry_is_a_reported_miss_and_is_replaced(tmp_path, counted):
    first = run(tmp_path)
    key = first["stages"]["heat"]["key"]
    arrays = tmp_path / "store" / "heat" / key / "arrays.npz"
    data = bytearray(arrays.read_bytes())
    data[len(data) // 2] ^= 0xFF
    arrays.write_bytes(bytes(data))
    record = run(tmp_path)
    assert counted["heat"] == 2
    assert "damaged" in record["stages"]["heat"]["reason"]
    assert record["stages"]["heat"]["parts_degC"] == first["stages"]["heat"]["parts_degC"]
    assert isinstance(store_mod.Store(tmp_path / "store").get("heat", key), tuple)  # replaced, whole again




def test_write_failure_message_names_the_store(tmp_path, monkeypatch):
    s = store_mod.Store(tmp_path / "store")
    s.put("heat", "a" * 64, {"x": [1.0]}, {"m": 1}, {})

    def refuse(*args, **kwargs):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(store_mod, "_write_synced", refuse)
    with pytest.raises(errors.StoreError, match="cannot write the heat entry .*No space left on device.* intact"):
        s.put("heat", "b" * 64, {"x": [2.0]}, {"m": 2}, {})
    assert isinstance(s.get("heat", "a" * 64), tuple)
    assert s.get("heat", "b" * 64) == "not in the store"
    assert not list((tmp_path / "store" / "heat").glob(".*.*/"))  # no temporary folder left behind


def test_keys_are_canonical_and_sensitive():
    a = store_mod.key({"kind": "heat", "options": {"b": 1, "a": 2.0}})
    b = store_mod.key({"options": {"a": 2.0, "b": 1}, "kind": "heat"})
    c = store_mod.key({"kind": "heat", "options": {"b": 1, "a": 2.0000001}})
    assert a == b != c and len(a) == 64
    with pytest.raises(ValueError):
        store_mod.key({"x": float("nan")})


def test_the_store_folder_comes_from_the_option_then_the_environment(tmp_path, monkeypatch):
    """One rule for every command (issue 14): --store, else $THERMOCHAIN_STORE, else the user's cache folder,
    whatever the workflow's folder or the current folder."""
    import platformdirs

    monkeypatch.setenv(store_mod.ENV, str(tmp_path / "env_store"))
    assert runner.store_root(DEMO, None) == tmp_path / "env_store"
    assert runner.store_root(DEMO, str(tmp_path / "opt")) == tmp_path / "opt"
    monkeypatch.delenv(store_mod.ENV)
    default = platformdirs.user_cache_path("thermochain") / "store"
    assert runner.store_root(DEMO, None) == runner.store_root(tmp_path / "elsewhere.toml", None) == default
    monkeypatch.chdir(tmp_path)
    assert store_mod.root() == default
