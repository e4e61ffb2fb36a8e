"""Property-based tests: whatever a workflow file holds, the loader accepts it or raises the project's
own ``InputError`` naming the file, never another exception.

Hypothesis builds valid workflow files (random values of the right kind and range), then mutates them:
keys removed, renamed or added, values replaced by any TOML value (huge integers, NaN, dates, nested
tables, random text with and without units), characters of the text inserted or deleted, ``extends``
chains that loop or lead nowhere, and random ``--set`` overrides.  A second property runs the planner
(mesh, materials, probes, supports, physics checks) on mutated values against the real small mesh.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import tomli_w
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from pipeline import errors
from pipeline.flow import runner
from pipeline.flow import workflow as wf
from pipeline.model import materials
from test_bad_input import write_box

MATERIALS = sorted(materials.library())
SURFACES = ["bottom", "top", "sides", "middle"]
UNIT_TEXT = ["K", "degC", "degF", "mm", "m", "W", "mW", "W/(m^2*K)", "Pa", "MPa", "N", "bananas", "", "kg",
             "W/(m^2*K", "W/0", "degC)", "m]", "**"]  # malformed: pint's parser raises odd exceptions on these

LOAD = settings(max_examples=150, deadline=None, database=None, suppress_health_check=[HealthCheck.too_slow])
PLAN = settings(max_examples=25, deadline=None, database=None, suppress_health_check=[HealthCheck.too_slow])


def temperature():
    return st.one_of(st.floats(200.0, 500.0), st.integers(-50, 150).map(lambda c: f"{c} degC"))


def positive(lo: float, hi: float, unit: str):
    return st.one_of(st.floats(lo, hi), st.floats(lo, hi).map(lambda v: f"{v:g} {unit}"))


def point():
    return st.lists(st.one_of(st.floats(0.0, 0.01), st.floats(0.0, 10.0).map(lambda v: f"{v:g} mm")),
                    min_size=3, max_size=3)


@st.composite
def valid(draw) -> dict:
    """A workflow of the right shape on the base box mesh (parts lower/upper, surfaces as in test_bad_input)."""
    heat = {"kind": "heat", "order": draw(st.sampled_from([1, 2])),
            "solver": draw(st.sampled_from(["auto", "direct", "amg"])),
            "power": {"upper": draw(positive(0.0, 10.0, "W"))},
            "fixed_temperature": {"bottom": draw(temperature())},
            "convection": {"top": {"film_coefficient": draw(positive(0.1, 100.0, "W/(m^2*K)")),
                                   "ambient": draw(temperature())}}}
    if draw(st.booleans()):
        heat["radiation"] = {"sides": {"emissivity": draw(st.one_of(st.floats(0.0, 1.0), st.sampled_from(
            ["paint", "solder_mask", "polished_aluminium"]))), "surroundings": draw(temperature())}}
    inline = {"conductivity": draw(st.floats(0.1, 400.0)), "youngs_modulus": draw(st.floats(1e6, 4e11)),
              "poisson_ratio": draw(st.floats(-0.5, 0.49)), "expansion": draw(st.floats(0.0, 5e-5)),
              "density": draw(st.floats(100.0, 20000.0))}
    if draw(st.booleans()):
        inline["conductivity_table"] = [[300.0, inline["conductivity"]], [400.0, inline["conductivity"] * 0.9]]
    support = draw(st.sampled_from([{"kind": "fixed"}, {"kind": "minimal"}, {"kind": "spring", "stiffness": 1e12},
                                    {"kind": "displacement", "x": 0.0, "y": 0.0, "z": "0.001 mm"}]))
    return {
        "title": draw(st.text(max_size=20)),
        "mesh": {"file": "box.msh", "unit": "mm"},
        "materials": {"mine": inline},
        "parts": {"lower": {"material": draw(st.sampled_from(MATERIALS + ["mine"]))},
                  "upper": {"material": draw(st.sampled_from(MATERIALS))}},
        "stages": {"heat": heat,
                   "strain": {"kind": "map", "source": "heat", "reference": draw(temperature())},
                   "stress": {"kind": "stress", "source": "strain", "order": draw(st.sampled_from([1, 2])),
                              "supports": {"bottom": support}}},
        "probes": {"centre": draw(point())},
        "output": {"figures": False, "report": False, "vtu": False},
    }


#: any TOML value, including what no schema expects
SCALARS = st.one_of(
    st.integers(), st.integers(min_value=10**300, max_value=10**400), st.floats(allow_nan=True, allow_infinity=True),
    st.booleans(),
    st.text(max_size=12), st.datetimes(), st.dates(), st.times(),
    st.tuples(st.floats(allow_nan=True), st.sampled_from(UNIT_TEXT)).map(lambda t: f"{t[0]} {t[1]}"),
    st.sampled_from(SURFACES + MATERIALS + ["heat", "strain", "stress", "map", "minimal", "nowhere"]),
)
VALUES = st.recursive(SCALARS, lambda inner: st.one_of(st.lists(inner, max_size=4),
                                                       st.dictionaries(st.text(max_size=8), inner, max_size=3)),
                      max_leaves=8)


def paths(data, prefix=()):
    """Every key path in a nested dict (tables and values)."""
    for key, value in data.items():
        yield prefix + (key,)
        if isinstance(value, dict):
            yield from paths(value, prefix + (key,))


def at(data, path):
    for key in path[:-1]:
        data = data[key]
    return data


@st.composite
def mutated(draw) -> dict:
    data = draw(valid())
    for _ in range(draw(st.integers(1, 3))):
        path = draw(st.sampled_from(list(paths(data))))
        table, key = at(data, path), path[-1]
        action = draw(st.sampled_from(["delete", "replace", "add", "rename"]))
        if action == "delete":
            del table[key]
        elif action == "replace":
            table[key] = draw(VALUES)
        elif action == "add":
            table[draw(st.text(min_size=1, max_size=10))] = draw(VALUES)
        else:
            i = draw(st.integers(0, max(len(key) - 1, 0)))
            table[key[:i] + key[i + 1:] + draw(st.text(max_size=2))] = table.pop(key)
        if not list(paths(data)):
            break
    return data


def assert_loads_or_input_error(files: dict[str, str], sets: list[str] | None = None) -> None:
    """Write ``files`` into a fresh folder and load the first one."""
    with tempfile.TemporaryDirectory() as folder:
        for name, text in files.items():
            (Path(folder) / name).write_text(text, encoding="utf-8")
        path = Path(folder) / next(iter(files))
        try:
            wf.load(path, sets)
        except errors.InputError as exc:
            assert exc.problems and exc.exit_status == 2
            for line in exc.problems:  # each message names the file it is about
                assert isinstance(line, str) and folder in line, line


@LOAD
@given(mutated())
def test_mutated_workflow_files_load_or_raise_an_input_error(data):
    assert_loads_or_input_error({"workflow.toml": tomli_w.dumps(data)})


@LOAD
@given(valid(), st.data())
def test_text_edits_of_a_workflow_file_load_or_raise_an_input_error(data, draw):
    text = tomli_w.dumps(data)
    for _ in range(draw.draw(st.integers(1, 3))):
        i = draw.draw(st.integers(0, len(text)))
        if draw.draw(st.booleans()):
            text = text[:i] + text[i + 1:]
        else:
            text = text[:i] + draw.draw(st.sampled_from(list("=[]{}\"',.#\n x1-"))) + text[i:]
    assert_loads_or_input_error({"workflow.toml": text})


@LOAD
@given(valid(), st.lists(st.sampled_from(["a.toml", "b.toml", "c.toml", "missing.toml", 3, ["x"]]),
                         min_size=1, max_size=3))
def test_extends_chains_load_or_raise_an_input_error(data, chain):
    files = {}
    names = ["a.toml", "b.toml", "c.toml"]
    for name, parent in zip(names, chain + [None] * 3):
        files[name] = (tomli_w.dumps({"extends": parent}) if parent is not None else "") + \
            (tomli_w.dumps(data) if name == names[len(chain) - 1] else "")
    assert_loads_or_input_error(files)


@LOAD
@given(valid(), st.lists(st.one_of(
    st.text(max_size=30),
    st.tuples(st.sampled_from(["stages.heat.power.upper", "stages.heat", "mesh.unit", "probes.centre.1",
                               "parts.lower.material", "stages.stress.supports.bottom.kind", "output", "x.y.z",
                               "stages.strain.source", "title.sub"]),
              st.text(max_size=12)).map(lambda kv: f"{kv[0]}={kv[1]}")), max_size=3))
def test_set_overrides_load_or_raise_an_input_error(data, sets):
    assert_loads_or_input_error({"workflow.toml": tomli_w.dumps(data)}, sets)


@PLAN
@given(mutated())
def test_planning_a_mutated_workflow_gives_a_plan_or_an_input_error(data):
    with tempfile.TemporaryDirectory() as folder:
        write_box(Path(folder) / "box.msh")
        path = Path(folder) / "workflow.toml"
        path.write_text(tomli_w.dumps(data), encoding="utf-8")
        try:
            runner.plan(path, store=str(Path(folder) / "store"))
        except errors.InputError as exc:
            assert exc.problems and all(folder in line for line in exc.problems), exc.problems


# ------------------------------------------------------------------------------- names and the store

@LOAD
@given(st.text(min_size=1, max_size=80))
def test_a_plain_name_keeps_a_file_inside_its_folder(name):
    """Any name ``plain_name`` accepts, made into '<folder>/<name>_parts.png', names a file directly in the
    folder (no separator, no '..', no NUL, no drive); the suggestion for a refused name is itself plain."""
    folder = Path("/results")
    if wf.plain_name(name):
        target = folder / f"{name}_parts.png"
        assert target.parent == folder and ".." not in target.parts and "\x00" not in name
        assert Path(name).name == name and not Path(name).is_absolute()
    else:
        assert wf.plain_name(wf._plain_suggestion(name))


NODE = st.recursive(
    st.sampled_from(["file", "link_out", "link_in"]),
    lambda children: st.dictionaries(st.sampled_from(
        ["arrays.npz", "meta.json", "manifest.json", "notes.txt", "entry", ".hidden", "a" * 64, "b" * 64,
         ".%s.abcd1234" % ("c" * 64), ".%s.lock" % ("d" * 64)]), children, max_size=4),
    max_leaves=12)


def _build(folder: Path, node, outside: Path) -> None:
    for name, child in node.items():
        path = folder / name
        if child == "file":
            path.write_text(name)
        elif child == "link_out":
            path.symlink_to(outside, target_is_directory=True)
        elif child == "link_in":
            path.symlink_to(folder)
        else:
            path.mkdir()
            _build(path, child, outside)


def _state(folder: Path) -> dict[str, str]:
    out = {}
    for p in sorted(folder.rglob("*")):
        out[str(p.relative_to(folder))] = ("link" if p.is_symlink() else "dir" if p.is_dir() else p.read_text())
    return out


@settings(max_examples=60, deadline=None, database=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.dictionaries(st.sampled_from(["heat", "map", "stress", "Bad-Kind", ".x", "thermochain-store.json"]),
                       NODE, max_size=3), st.booleans())
def test_cleaning_any_folder_removes_only_verified_entries(layout, marked):
    """Whatever a folder holds (files, folders, links out of it and into it, hidden names, names like
    entries and leftovers), cleaning it deletes nothing outside, nothing when it is not a store, and in a
    store only folders that hold nothing but an entry's files -- exactly those it reports."""
    from pipeline.flow import store as store_mod

    with tempfile.TemporaryDirectory() as work:
        root, outside = Path(work) / "store", Path(work) / "outside"
        root.mkdir()
        outside.mkdir()
        (outside / "precious").write_text("keep")
        _build(root, {k: v for k, v in layout.items() if not (marked and k == "thermochain-store.json")}, outside)
        if marked:
            (root / "thermochain-store.json").write_text('{"store_schema": 2}')
        before = _state(root)
        s = store_mod.Store(root)
        try:
            done = s.clean(0)
        except errors.InputError:
            assert not marked
            assert _state(root) == before
            return
        assert marked and (outside / "precious").read_text() == "keep" and len(list(outside.iterdir())) == 1
        after = _state(root)
        gone = {k for k in before if k not in after}
        reported = {str(e.path.relative_to(root)) for e in done.removed} | {str(p.relative_to(root))
                                                                             for p in done.leftovers}
        tops = {k for k in gone if not any(k.startswith(r + "/") for r in gone if r != k)}
        assert tops == reported
        for name in reported:
            removed = {k[len(name) + 1:] for k in gone if k.startswith(name + "/")}
            assert removed <= set(store_mod.ENTRY_FILES) | {"entry"} | {f"entry/{n}" for n in store_mod.ENTRY_FILES}
            assert before[name] == "dir"
