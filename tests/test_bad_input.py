"""Catalogue of bad input: each case runs the real ``thermochain run`` on a mistaken workflow or mesh.

Every case asserts exit status 2, one clear message naming the file and the key path or mesh group
and what would be valid, no traceback, and a stage store left exactly as it was (the store holds the
entries of a clean run of the base workflow beforehand).  Most cases call ``pipeline.cli.main``
in-process for speed; a few go through a subprocess to prove that no traceback reaches the user.
The base model is a small invented two-part box (loads made up for the test).
"""

from __future__ import annotations

import hashlib
import re
import subprocess
import sys
from dataclasses import dataclass, field
from pathlib import Path

import meshio
import numpy as np
import pytest

import meshes
from pipeline import cli
from pipeline.stages import solvers

#: Base workflow: a 10 x 10 x 6 mm box in mm, part "lower" (z < 4 mm) and part "upper" (invented loads).
BASE = """\
title = "catalogue base (invented loads)"

[mesh]
file = "box.msh"
unit = "mm"

[parts]
lower = { material = "aluminium_6061_t6" }
upper = { material = "fr4" }

[stages.heat]
kind = "heat"
power = { upper = "0.5 W" }
fixed_temperature = { bottom = "40 degC" }

[stages.heat.convection.top]
film_coefficient = "10 W/(m^2*K)"
ambient = "25 degC"

[stages.heat.radiation.sides]
emissivity = 0.8
surroundings = "25 degC"

[stages.strain]
kind = "map"
source = "heat"
reference = "25 degC"

[stages.stress]
kind = "stress"
source = "strain"
order = 1
supports = { bottom = { kind = "fixed" } }

[probes]
centre = ["5 mm", "5 mm", "3 mm"]

[output]
folder = "results"
vtu = false
figures = false
report = false
"""


def box(**change) -> meshio.Mesh:
    """The base mesh: parts lower/upper, surfaces bottom (z=0), top (z=6), sides (x, y faces of both
    parts) and middle (the interior facets at z = 4 mm, a surface not on the boundary)."""
    m = meshes.tensor(np.linspace(0, 10, 5), np.linspace(0, 10, 5), np.linspace(0, 6, 7))
    f = meshes.faces(m)
    mid = m.p[:, m.facets].mean(axis=1)
    inner = np.setdiff1d(np.flatnonzero(np.abs(mid[2] - 4) < 1e-9), m.boundary_facets())
    surfaces = {"bottom": f["zmin"], "top": f["zmax"],
                "sides": np.concatenate([f[k] for k in ("xmin", "xmax", "ymin", "ymax")]), "middle": inner}
    parts = meshes.layers(m, 2, {"lower": (0, 4), "upper": (4, 6)})
    return meshes.to_meshio(m, parts | change.pop("parts", {}), surfaces | change.pop("surfaces", {}))


def write_box(path: Path, mesh: meshio.Mesh | None = None, binary: bool = False) -> Path:
    return meshes.write_gmsh(mesh or box(), path, binary=binary)


def tree(root: Path) -> dict[str, str]:
    """Every file under root with the SHA-256 of its bytes: the store's full state."""
    return {str(p.relative_to(root)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(root.rglob("*")) if p.is_file()}


@pytest.fixture(scope="module")
def filled_store(tmp_path_factory):
    """A store holding the three entries of a clean run of the base workflow."""
    folder = tmp_path_factory.mktemp("base")
    write_box(folder / "box.msh")
    (folder / "base.toml").write_text(BASE)
    store = folder / "store"
    assert cli.main(["-q", "run", str(folder / "base.toml"), "--store", str(store)]) == 0
    state = tree(store)
    assert len([k for k in state if k.endswith("manifest.json")]) == 3
    return store, state


@dataclass
class Case:
    """A mistake: text replacements in the base workflow, extra files, and the message expected.

    expect: substrings (regular expressions) the one message must contain, beyond the file's name.
    named: which file the message names ("workflow" or the name of an extra file)."""

    edits: list[tuple[str, str]] = field(default_factory=list)
    expect: list[str] = field(default_factory=list)
    files: dict = field(default_factory=dict)
    named: str = "workflow"
    lines: int = 1


def replace(old: str, new: str) -> tuple[str, str]:
    return (old, new)


CASES = {
    # ---- the workflow file -------------------------------------------------------------------------------
    "toml_syntax_error": Case([replace('title = "catalogue', 'title = = "catalogue')],
                              ["TOML syntax error", r"line 1\b"]),
    "toml_syntax_error_later_line": Case([replace("[parts]", "[parts")], ["TOML syntax error", r"line 7\b"]),
    "unknown_top_level_key": Case([replace("title =", "titel =")],
                                  [r"unknown key 'titel'", "did you mean 'title'", "valid keys: title, mesh"]),
    "unknown_stage_key": Case([replace('kind = "heat"', 'kind = "heat"\nfixed_temperatur = { top = 300.0 }')],
                              [r"unknown key 'stages\.heat\.fixed_temperatur'", "did you mean 'fixed_temperature'"]),
    "unknown_convection_key": Case([replace("film_coefficient =", "film_coeficient =")],
                                   [r"unknown key 'stages\.heat\.convection\.top\.film_coeficient'",
                                    "did you mean 'film_coefficient'"]),
    "unknown_output_key": Case([replace("figures = false", "figure = false")],
                               [r"unknown key 'output\.figure'", "did you mean 'figures'"]),
    "unknown_support_key": Case([replace('{ kind = "fixed" }', '{ kind = "fixed", stifness = 1e9 }')],
                                [r"unknown key 'stages\.stress\.supports\.bottom\.stifness'",
                                 "did you mean 'stiffness'"]),
    "wrong_type_order": Case([replace("order = 1", 'order = "one"')], [r"stages\.stress\.order", "1 or 2"]),
    "wrong_type_power": Case([replace('power = { upper = "0.5 W" }', "power = { upper = true }")],
                             [r"stages\.heat\.power\.upper", "number or a string with a unit of W"]),
    "wrong_type_probe": Case([replace('centre = ["5 mm", "5 mm", "3 mm"]', 'centre = "middle"')],
                             [r"probes\.centre", "list"]),
    "wrong_type_flag": Case([replace("vtu = false", "vtu = 3")], [r"output\.vtu", "boolean"]),
    "wrong_probe_length": Case([replace('["5 mm", "5 mm", "3 mm"]', '["5 mm", "5 mm"]')],
                               [r"probes\.centre", "at least 3"]),
    "missing_mesh_file_key": Case([replace('file = "box.msh"\n', "")],
                                  [r"missing required key 'mesh\.file'", "mesh file"]),
    "missing_material_key": Case([replace('lower = { material = "aluminium_6061_t6" }', "lower = { }")],
                                 [r"missing required key 'parts\.lower\.material'", "material library"]),
    "missing_stage_kind": Case([replace('kind = "map"\n', "")],
                               [r"stages\.strain", "kind", "heat, map, stress"]),
    "unknown_stage_kind": Case([replace('kind = "map"', 'kind = "mapping"')],
                               [r"stages\.strain\.kind", "'mapping'", "did you mean 'map'", "heat, map, stress"]),
    "missing_supports": Case([replace('supports = { bottom = { kind = "fixed" } }', "")],
                             [r"missing required key 'stages\.stress\.supports'", "surface"]),
    "unit_of_wrong_dimension": Case([replace('ambient = "25 degC"', 'ambient = "25 mm"')],
                                    [r"stages\.heat\.convection\.top\.ambient", "not a unit of K"]),
    "power_in_wrong_unit": Case([replace('upper = "0.5 W"', 'upper = "0.5 W/m^2"')],
                                [r"stages\.heat\.power\.upper", "not a unit of W"]),
    "unknown_unit": Case([replace('ambient = "25 degC"', 'ambient = "25 bananas"')],
                         [r"stages\.heat\.convection\.top\.ambient", "'bananas' is not a known unit"]),
    "malformed_unit": Case([replace('film_coefficient = "10 W/(m^2*K)"', 'film_coefficient = "10 W/(m^2*K"')],
                           [r"stages\.heat\.convection\.top\.film_coefficient", r"'W/\(m\^2\*K' is not a known unit"]),
    "negative_conductivity": Case(
        [replace("[parts]", "[materials.mine]\nconductivity = -5.0\nyoungs_modulus = 70e9\npoisson_ratio = 0.3\n"
                 "expansion = 23e-6\ndensity = 2700.0\n\n[parts]"),
         replace('material = "aluminium_6061_t6"', 'material = "mine"')],
        [r"material 'mine'", "'conductivity' must be positive", r"W/\(m\*K\)"]),
    "zero_conductivity": Case(
        [replace("[parts]", "[materials.mine]\nconductivity = 0.0\nyoungs_modulus = 70e9\npoisson_ratio = 0.3\n"
                 "expansion = 23e-6\ndensity = 2700.0\n\n[parts]"),
         replace('material = "aluminium_6061_t6"', 'material = "mine"')],
        [r"material 'mine'", "'conductivity' must be positive"]),
    "zero_youngs_modulus": Case(
        [replace("[parts]", "[materials.mine]\nconductivity = 100.0\nyoungs_modulus = 0.0\npoisson_ratio = 0.3\n"
                 "expansion = 23e-6\ndensity = 2700.0\n\n[parts]"),
         replace('material = "aluminium_6061_t6"', 'material = "mine"')],
        [r"material 'mine'", "'youngs_modulus' must be positive", r"\[Pa\]"]),
    "negative_youngs_modulus_by_set": Case(
        [replace("[parts]", "[materials.mine]\nconductivity = 100.0\nyoungs_modulus = -70e9\npoisson_ratio = 0.3\n"
                 "expansion = 23e-6\ndensity = 2700.0\n\n[parts]"),
         replace('material = "aluminium_6061_t6"', 'material = "mine"')],
        [r"material 'mine'", "'youngs_modulus' must be positive"]),
    "zero_film_coefficient": Case([replace('film_coefficient = "10 W/(m^2*K)"', "film_coefficient = 0")],
                                  [r"stages\.heat\.convection\.top\.film_coefficient", "greater than 0"]),
    "negative_film_coefficient": Case([replace('film_coefficient = "10 W/(m^2*K)"',
                                               'film_coefficient = "-3 W/(m^2*K)"')],
                                      [r"stages\.heat\.convection\.top\.film_coefficient", "greater than 0"]),
    "poisson_ratio_one_half": Case(
        [replace("[parts]", "[materials.mine]\nconductivity = 100.0\nyoungs_modulus = 70e9\npoisson_ratio = 0.5\n"
                 "expansion = 23e-6\ndensity = 2700.0\n\n[parts]"),
         replace('material = "aluminium_6061_t6"', 'material = "mine"')],
        [r"material 'mine'", r"poisson_ratio must lie in \(-1, 0\.5\)", "0.5"]),
    "poisson_ratio_above_one_half": Case(
        [replace("[parts]", "[materials.mine]\nconductivity = 100.0\nyoungs_modulus = 70e9\npoisson_ratio = 0.7\n"
                 "expansion = 23e-6\ndensity = 2700.0\n\n[parts]"),
         replace('material = "aluminium_6061_t6"', 'material = "mine"')],
        [r"material 'mine'", r"poisson_ratio must lie in \(-1, 0\.5\)", "0.7"]),
    "emissivity_above_one": Case([replace("emissivity = 0.8", "emissivity = 1.2")],
                                 [r"stages\.heat\.radiation\.sides\.emissivity", "a number in 0\.\.1 or a finish name", "paint", "got 1\.2"]),
    "emissivity_negative": Case([replace("emissivity = 0.8", "emissivity = -0.1")],
                                [r"stages\.heat\.radiation\.sides\.emissivity", "a number in 0\.\.1 or a finish name", "got -0\.1"]),
    "emissivity_unknown_finish": Case([replace("emissivity = 0.8", 'emissivity = "paint_white"')],
                                      [r"stages\.heat\.radiation\.sides\.emissivity", "finish 'paint_white'",
                                       "did you mean 'paint'"]),
    "ambient_below_absolute_zero": Case([replace('ambient = "25 degC"', 'ambient = "-300 degC"')],
                                        [r"stages\.heat\.convection\.top\.ambient", "greater than or equal to 0 K",
                                         "absolute zero", r"-26\.85 K"]),
    "reference_below_absolute_zero": Case([replace('reference = "25 degC"', "reference = -1.0")],
                                          [r"stages\.strain\.reference", "greater than or equal to 0 K",
                                           "absolute zero"]),
    "source_stage_missing": Case([replace('source = "heat"', 'source = "haet"')],
                                 [r"stages\.strain\.source", "heat stage 'haet' does not exist",
                                  "did you mean 'heat'"]),
    "source_stage_of_wrong_kind": Case([replace('source = "strain"', 'source = "heat"')],
                                       [r"stages\.stress\.source", "stage 'heat' is a heat stage",
                                        "reads a map stage"]),
    "stages_in_a_cycle": Case([replace('source = "heat"', 'source = "stress"')],
                              [r"stages\.strain\.source", "cycle", "strain -> stress -> strain"]),
    "stage_reads_itself": Case([replace('source = "heat"', 'source = "strain"')],
                               [r"stages\.strain\.source", "cycle", "strain -> strain"]),
    "material_not_in_library": Case([replace('material = "fr4"', 'material = "fr5"')],
                                    [r"parts\.upper\.material", "material 'fr5' does not exist",
                                     "did you mean 'fr4'"]),
    "stage_material_not_in_library": Case(
        [replace('source = "strain"', 'source = "strain"\nmaterials = { lower = "steel_340" }')],
        [r"stages\.stress\.materials\.lower", "material 'steel_340' does not exist", "did you mean 'steel_304'"]),
    "probe_outside_the_mesh": Case([replace('["5 mm", "5 mm", "3 mm"]', '["5 mm", "5 mm", "30 mm"]')],
                                   [r"probes\.centre", "outside the mesh", r"box\.msh", r"bounding box is \[0\.0, "
                                    r"0\.0, 0\.0\] to \[0\.01, 0\.01, 0\.006\] m"]),
    "extends_loop": Case([replace('title = "catalogue', 'extends = "other.toml"\ntitle = "catalogue')],
                         ["'extends' loops back on itself", r"other\.toml"],
                         files={"other.toml": 'extends = "workflow.toml"\n'}),
    "extends_missing_file": Case([replace('title = "catalogue', 'extends = "parent.toml"\ntitle = "catalogue')],
                                 ["extends", r"parent\.toml", "not found"]),
    "power_in_unknown_part": Case([replace('power = { upper = "0.5 W" }', 'power = { uper = "0.5 W" }')],
                                  [r"stages\.heat\.power", "part 'uper' does not exist", "did you mean 'upper'"]),
    "unknown_support_kind": Case([replace('{ kind = "fixed" }', '{ kind = "glued" }')],
                                 [r"stages\.stress\.supports\.bottom\.kind", "'fixed'", "'minimal'"]),
    # ---- the mesh ----------------------------------------------------------------------------------------
    "mesh_file_missing": Case([replace('file = "box.msh"', 'file = "bx.msh"')],
                              [r"bx\.msh", "mesh file not found"]),
    "mesh_file_unreadable": Case([replace('file = "box.msh"', 'file = "broken.msh"')],
                                 ["meshio cannot read this file"], files={"broken.msh": "garbage"},
                                 named="broken.msh"),
    "mesh_without_tetrahedra": Case([replace('file = "box.msh"', 'file = "flat.msh"')],
                                    ["no tetrahedra", "triangle", "3-D tetrahedral mesh"],
                                    files={"flat.msh": "flat"}, named="flat.msh"),
    "mesh_with_inverted_elements": Case([replace('file = "box.msh"', 'file = "inverted.msh"')],
                                        ["2 inverted tetrahedra", "ids"], files={"inverted.msh": "inverted"},
                                        named="inverted.msh"),
    "mesh_with_zero_volume_elements": Case([replace('file = "box.msh"', 'file = "flat_tet.msh"')],
                                           ["1 degenerate \\(zero-volume\\) tetrahedra", "ids"],
                                           files={"flat_tet.msh": "degenerate"}, named="flat_tet.msh"),
    "workflow_part_absent_from_mesh": Case([replace('upper = { material = "fr4" }',
                                                    'upper = { material = "fr4" }\nuppr = { material = "fr4" }')],
                                           [r"parts", "part 'uppr' does not exist", "did you mean 'upper'"]),
    "mesh_part_without_material": Case([replace('upper = { material = "fr4" }\n', "")],
                                       ["mesh part 'upper' has no entry in \\[parts\\]", "give it a material"]),
    "workflow_surface_absent_from_mesh": Case([replace("fixed_temperature = { bottom", "fixed_temperature = { botom")],
                                              [r"stages\.heat\.fixed_temperature", "surface 'botom' does not exist",
                                               "did you mean 'bottom'"]),
    "support_surface_absent_from_mesh": Case([replace('supports = { bottom =', 'supports = { bottm =')],
                                             [r"stages\.stress\.supports", "surface 'bottm' does not exist",
                                              "did you mean 'bottom'"]),
    "duplicate_surface_names": Case([replace('file = "box.msh"', 'file = "twins.msh"')],
                                    ["two surface groups share the name 'top'", "unique"],
                                    files={"twins.msh": "duplicate"}, named="twins.msh"),
    "name_both_part_and_surface": Case([replace('file = "box.msh"', 'file = "clash.msh"')],
                                       ["'upper' is both a volume group and a surface group", "unique"],
                                       files={"clash.msh": "clash"}, named="clash.msh"),
    "surface_group_not_on_the_boundary": Case([replace("[stages.heat.convection.top]",
                                                       "[stages.heat.convection.middle]")],
                                              [r"stages\.heat\.convection", "surface 'middle'", "inside the body",
                                               "boundary surface"]),
    "mesh_length_unit_missing": Case([replace('unit = "mm"\n', "")],
                                     [r"missing required key 'mesh\.unit'", "'m', 'cm', 'mm', 'um', 'in'"]),
    "mesh_length_unit_unknown": Case([replace('unit = "mm"', 'unit = "mmm"')],
                                     [r"mesh\.unit", "'mmm'", "did you mean 'mm'", "'m', 'cm', 'mm', 'um' or 'in'"]),
    # ---- physics -----------------------------------------------------------------------------------------
    "power_with_no_way_out": Case(
        [replace('fixed_temperature = { bottom = "40 degC" }', ""),
         replace('[stages.heat.convection.top]\nfilm_coefficient = "10 W/(m^2*K)"\nambient = "25 degC"\n', ""),
         replace('[stages.heat.radiation.sides]\nemissivity = 0.8\nsurroundings = "25 degC"\n', "")],
        [r"stages\.heat", "parts lower, upper receive power \\(upper\\)", "no steady state",
         "add a boundary that removes heat"]),
    "body_free_to_move": Case([replace('supports = { bottom = { kind = "fixed" } }',
                                       'supports = { bottom = { kind = "symmetry" } }')],
                              [r"stages\.stress", "parts lower, upper is free to move", "3 rigid-body motions",
                               "translation in x", "translation in y", "rotation about z", "minimal"]),
    "supports_that_conflict": Case([replace('supports = { bottom = { kind = "fixed" } }',
                                            'supports = { bottom = { kind = "fixed" }, '
                                            'sides = { kind = "displacement", z = "0.01 mm" } }')],
                                   [r"stages\.stress\.supports", "bottom and sides conflict", "shared points"]),
    # ---- solver -------------------------------------------------------------------------------------------
    "model_too_large_for_the_memory_limit": Case([replace('kind = "heat"', 'kind = "heat"\nmemory_limit = "1 MB"')],
                                                 [r"stages\.heat", r"175 unknowns", "needs about", "memory_limit",
                                                  "coarser mesh"]),
}


def broken_mesh(kind: str, path: Path) -> None:
    """Write one of the damaged meshes the cases name."""
    if kind == "garbage":
        path.write_bytes(b"$MeshFormat\n2.2 0 8\n$EndMeshFormat\n$Nodes\n12\n1 0 0\n")  # cut off mid-section
        return
    m = box()
    if kind == "flat":
        m = meshio.Mesh(m.points, [c for c in m.cells if c.type == "triangle"],
                        cell_data={k: [a for a, c in zip(v, m.cells) if c.type == "triangle"]
                                   for k, v in m.cell_data.items()}, field_data=m.field_data)
    elif kind == "inverted":
        tet = next(c for c in m.cells if c.type == "tetra").data
        tet[[3, 10], 2], tet[[3, 10], 3] = tet[[3, 10], 3].copy(), tet[[3, 10], 2].copy()
    elif kind == "degenerate":
        on_bottom = np.flatnonzero(np.abs(m.points[:, 2]) < 1e-12)[:4]  # four nodes in the plane z = 0
        cells = [(c.type, c.data) for c in m.cells]
        cells[-1] = ("tetra", np.vstack([cells[-1][1], on_bottom]))
        data = {k: [a if i < len(v) - 1 else np.append(a, a[-1]) for i, a in enumerate(v)]
                for k, v in m.cell_data.items()}
        m = meshio.Mesh(m.points, cells, cell_data=data, field_data=m.field_data)
    meshes.write_gmsh(m, path, binary=False)
    if kind == "duplicate":  # rename the surface group "sides" to "top" in the file
        path.write_text(path.read_text().replace('"sides"', '"top"'))
    elif kind == "clash":
        path.write_text(path.read_text().replace('"middle"', '"upper"'))


def setup_case(case: Case, folder: Path) -> Path:
    folder.mkdir()
    write_box(folder / "box.msh")
    text = BASE
    for old, new in case.edits:
        assert old in text, f"edit target missing: {old!r}"
        text = text.replace(old, new, 1)
    for name, content in case.files.items():
        if name.endswith(".msh"):
            broken_mesh({"garbage": "garbage"}.get(content, content), folder / name)
        else:
            (folder / name).write_text(content)
    path = folder / "workflow.toml"
    path.write_text(text)
    return path


def problems(stderr: str) -> list[str]:
    """The problem lines under the command's single 'input error' header."""
    assert stderr.count("thermochain: input error:") == 1, stderr
    return [line.strip() for line in stderr.split("thermochain: input error:", 1)[1].splitlines() if line.strip()]


def assert_message(case: Case, folder: Path, path: Path, stderr: str) -> None:
    assert "Traceback" not in stderr
    lines = problems(stderr)
    assert len(lines) == case.lines, stderr
    message = lines[0]
    named = path if case.named == "workflow" else folder / case.named
    assert str(named) in message, message
    for pattern in case.expect:
        assert re.search(pattern, message), f"{pattern!r} not in {message!r}"


@pytest.mark.parametrize("name", sorted(CASES))
def test_bad_input_is_refused_clearly_and_leaves_the_store_as_it_was(name, tmp_path, filled_store, capsys):
    case = CASES[name]
    store, state = filled_store
    path = setup_case(case, tmp_path / "case")
    capsys.readouterr()
    status = cli.main(["run", str(path), "--store", str(store), "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert status == 2, err
    assert_message(case, tmp_path / "case", path, err)
    assert tree(store) == state
    assert not (tmp_path / "out").exists()  # nothing half-written either


@pytest.mark.parametrize("name", ["toml_syntax_error", "mesh_file_unreadable", "body_free_to_move"])
def test_through_the_installed_command_there_is_no_traceback(name, tmp_path, filled_store):
    case = CASES[name]
    store, state = filled_store
    path = setup_case(case, tmp_path / "case")
    r = subprocess.run([sys.executable, "-m", "pipeline", "check", str(path), "--store", str(store)],
                       capture_output=True, text=True)
    assert r.returncode == 2
    assert_message(case, tmp_path / "case", path, r.stderr)
    assert tree(store) == state


def test_the_catalogue_is_large_enough():
    assert len(CASES) >= 40


def test_the_reliability_document_names_tests_that_exist():
    root = Path(__file__).parent.parent
    text = (root / "docs" / "reliability.md").read_text()
    refs = re.findall(r"`(tests/\w+\.py)::(\w+)", text)
    assert len(refs) >= 12
    for file, name in refs:
        assert re.search(rf"^def {name}\(", (root / file).read_text(), re.M), f"{file}::{name}"
    assert f"Each of {len(CASES)} mistakes" in text


def test_an_iterative_solve_that_does_not_converge_shows_its_residuals_and_suggests_the_direct_solver(
        tmp_path, filled_store, capsys, monkeypatch):
    """The stress stage solved with AMG-preconditioned CG, its iterations capped at 3 (fault injection: no
    workflow key sets the cap, and no small model fails to converge reliably) so that the real solve stops
    short of its tolerance.  A run that fails (exit status 1), not bad input; the store keeps its entries."""
    store, state = filled_store
    original = solvers.Prepared.__init__
    monkeypatch.setattr(solvers.Prepared, "__init__",
                        lambda self, A, method="auto", near_null=None, rtol=1e-10, maxiter=500, *more, **kw:
                        original(self, A, method, near_null, rtol, min(maxiter, 3), *more, **kw))
    path = setup_case(Case([replace('order = 1\nsupports', 'order = 1\nsolver = "amg"\nsupports')]), tmp_path / "case")
    capsys.readouterr()
    status = cli.main(["run", str(path), "--store", str(store), "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert status == 1 and "Traceback" not in err
    assert err.count("thermochain: run failed:") == 1
    message, = [line.strip() for line in err.split("thermochain: run failed:", 1)[1].splitlines() if line.strip()]
    assert message.startswith(f"{path}: stages.stress: linear solve (amg, ")
    history = re.search(r"did not converge: relative residual \S+ after 3 iterations \(last residuals ([^)]*)\)",
                        message)
    assert history and len(history.group(1).split(", ")) == 4, message  # the history: initial + 3 iterations
    assert message.endswith('try the direct solver (solver = "direct")')
    visible = {k: v for k, v in tree(store).items() if not Path(k).parts[1].startswith(".")}
    assert visible == {k: v for k, v in state.items() if not Path(k).parts[1].startswith(".")}
