"""Catalogue of bad input: each case runs the real ``thermochain run`` on a mistaken workflow or mesh.

Every case asserts exit status 2, one clear message naming the file and the key path or mesh group
and what would be valid, no traceback, and a stage store left exactly as it was (the store holds the
entries of a clean run of the base workflow beforehand).  Most cases call ``pipeline.cli.main``
in-process for speed; a few go through a subprocess to prove that no traceback reaches the user.
The base model is a small invented two-part box (loads made up for the test).
"""

from __future__ import annotations

import hashlib
import os
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


def visible(state: dict[str, str]) -> dict[str, str]:
    """The entries and the marker of a store's state, without its hidden files (locks, writes in progress)."""
    return {k: v for k, v in state.items() if not any(part.startswith(".") for part in Path(k).parts)}


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
    sets: list[str] = field(default_factory=list)  # --set options of the run
    out: bool = True  # give --out (False: the workflow's own output.folder is the results folder)
    setup: object = None  # a function of the case folder that writes further files


def replace(old: str, new: str) -> tuple[str, str]:
    return (old, new)


def _field(folder: Path, name: str = "field.csv", shift_mm: float = 0.0, bad_row: str | None = None) -> None:
    """A temperature field on a 1 mm grid over the base box (CSV x, y, z [mm], T [K]; invented values),
    moved by ``shift_mm`` in x, with one row replaced by ``bad_row``."""
    g = np.arange(0.0, 10.5, 1.0)
    x, y, z = (a.ravel() for a in np.meshgrid(g, g, np.arange(0.0, 6.5, 1.0), indexing="ij"))
    rows = [f"{a + shift_mm:g},{b:g},{c:g},{300 + 2 * c:g}" for a, b, c in zip(x, y, z)]
    if bad_row is not None:
        rows[37] = bad_row
    (folder / name).write_text("x,y,z,T\n" + "\n".join(rows) + "\n")


def _vtu_field(folder: Path) -> None:
    """The base mesh as a VTU file with point temperatures, one of them NaN."""
    m = box()
    t = 300.0 + m.points[:, 2]
    t[7] = np.nan
    meshio.write(folder / "field.vtu", meshio.Mesh(m.points, [c for c in m.cells if c.type == "tetra"],
                                                   point_data={"T": t}))


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
                               [r"stages\.strain", "kind", r"heat, .*map, stress"]),
    "unknown_stage_kind": Case([replace('kind = "map"', 'kind = "mapping"')],
                               [r"stages\.strain\.kind", "'mapping'", "did you mean 'map'", r"heat, .*map, stress"]),
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
                                 [r"stages\.heat\.radiation\.sides\.emissivity", r"a number in 0\.\.1 or a finish name", "paint", r"got 1\.2"]),
    "emissivity_negative": Case([replace("emissivity = 0.8", "emissivity = -0.1")],
                                [r"stages\.heat\.radiation\.sides\.emissivity", r"a number in 0\.\.1 or a finish name", r"got -0\.1"]),
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
    # ---- names that become file names, values beyond plausibility, hints (issue 22) ----------------------
    "stage_name_climbs_out_of_the_results_folder": Case(
        [replace("[stages.stress]", '[stages."../../escaped_stress"]')],
        [r"stages\.'\.\./\.\./escaped_stress'", "becomes part of file names", "plain name", "'escaped_stress'"]),
    "stage_name_is_an_absolute_path": Case(
        [replace("[stages.stress]", '[stages."/elsewhere/stress"]')],
        [r"stages\.'/elsewhere/stress'", "plain name", "'elsewhere_stress'"]),
    "stage_name_with_a_nul_byte": Case([replace("[stages.stress]", '[stages."stre\\u0000ss"]')],
                                       [r"stages\.'stre\\x00ss'", "plain name", "'stre_ss'"]),
    "stage_name_reserved_by_windows": Case([replace("[stages.stress]", "[stages.nul]")],
                                           [r"stages\.'nul'", "plain name"]),
    "probe_name_with_a_folder_separator": Case([replace("centre = [", '"sub/centre" = [')],
                                               [r"probes\.'sub/centre'", "plain name", "'sub_centre'"]),
    "temperature_in_coulomb": Case([replace('ambient = "25 degC"', 'ambient = "25 C"')],
                                   [r"stages\.heat\.convection\.top\.ambient", "not a temperature unit",
                                    "did you mean '25 degC'"]),
    "temperature_in_fahrenheit_as_farad": Case([replace('ambient = "25 degC"', 'ambient = "77 F"')],
                                               [r"stages\.heat\.convection\.top\.ambient", "did you mean '77 degF'"]),
    "temperature_implausibly_high": Case([replace('ambient = "25 degC"', "ambient = 1e300")],
                                         [r"stages\.heat\.convection\.top\.ambient", "beyond any plausible value",
                                          "100000 K"]),
    "power_implausibly_large": Case([replace('upper = "0.5 W"', "upper = 1e300")],
                                    [r"stages\.heat\.power\.upper", "beyond any plausible value", "1e\+09 W"]),
    "set_value_is_blamed_on_the_set_option": Case(sets=["stages.heat.order=3"],
                                                  expect=[r"^--set stages\.heat\.order=3 \(over ", r"stages\.heat\.order",
                                                          "1 or 2"]),
    "set_table_value_is_blamed_on_the_set_option": Case(
        sets=['stages.heat.power={ upper = "0.5 m" }'],
        expect=[r"^--set stages\.heat\.power=\{ upper = \"0\.5 m\" \}", r"stages\.heat\.power\.upper", "not a unit of W"]),
    "extends_chain_too_deep": Case([replace('title = "catalogue', 'extends = "e0.toml"\ntitle = "catalogue')],
                                   ["'extends' chain is more than 32 files deep"],
                                   setup=lambda folder: [(folder / f"e{i}.toml").write_text(f'extends = "e{i + 1}.toml"\n')
                                                         for i in range(1200)]),
    "extends_names_a_huge_file": Case([replace('title = "catalogue', 'extends = "huge.toml"\ntitle = "catalogue')],
                                      ["refused unread", r"2048\.0 MiB", "at most 1024 KiB"], named="huge.toml",
                                      setup=lambda folder: os.truncate(_touch(folder / "huge.toml"), 2 << 30)),
    "orthotropic_compliance_not_positive_definite": Case(
        [replace("[parts]", '[materials.mine]\nkind = "orthotropic"\nconductivity = [1.0, 1.0, 0.3]\n'
                 "youngs_modulus = [20e9, 20e9, 10e9]\npoisson_ratio = [0.9, 0.8, 0.8]\n"
                 "shear_modulus = [5e9, 4e9, 4e9]\nexpansion = [14e-6, 14e-6, 60e-6]\ndensity = 1900.0\n\n[parts]"),
         replace('material = "fr4"', 'material = "mine"')],
        [r"material 'mine'", "not positive definite", "no such material exists", r"\|nu_xy\| < 1"]),
    "conductivity_polynomial_negative_in_its_range": Case(
        [replace("[parts]", "[materials.mine]\nconductivity = 100.0\nconductivity_polynomial = [100.0, -0.5]\n"
                 "valid_from = 150.0\nvalid_to = 400.0\nyoungs_modulus = 70e9\npoisson_ratio = 0.3\n"
                 "expansion = 23e-6\ndensity = 2700.0\n\n[parts]"),
         replace('material = "aluminium_6061_t6"', 'material = "mine"')],
        [r"material 'mine'", r"falls to -100 W/\(m\*K\) at 400\.0 K", "150..400 K", "must stay positive"]),
    "field_file_with_a_nan_temperature": Case(
        [replace('source = "heat"\nreference', 'file = "field.csv"\nfile_unit = "mm"\nreference')], [r"field\.csv: 1 of 847 points have a coordinate or temperature that is not a finite number",
                 "points 38 "], named="field.csv", setup=lambda folder: _field(folder, bad_row="1,2,3,nan")),
    "field_file_with_a_text_row": Case(
        [replace('source = "heat"\nreference', 'file = "field.csv"\nfile_unit = "mm"\nreference')], [r"field\.csv:39: expected four numbers x, y, z, T"], named="field.csv",
        setup=lambda folder: _field(folder, bad_row="1,2,three,300")),
    "field_file_far_from_the_model": Case(
        [replace('source = "heat"\nreference', 'file = "field.csv"\nfile_unit = "mm"\nreference')], [r"stages\.strain: .* structural points lie outside", "same length unit and position"],
        setup=lambda folder: _field(folder, shift_mm=50.0)),
    "field_vtu_with_a_nan_temperature": Case(
        [replace('source = "heat"\nreference', 'file = "field.vtu"\narray = "T"\nfile_unit = "mm"\nreference')],
        [r"field\.vtu: 1 of 175 points have a coordinate or temperature that is not a finite number"],
        named="field.vtu", setup=_vtu_field),
    "reference_by_part_names_a_missing_part": Case(
        [replace('reference = "25 degC"', 'reference = "25 degC"\nreference_by_part = { uper = "30 degC" }')],
        [r"stages\.strain\.reference_by_part", "part 'uper' does not exist", "did you mean 'upper'"]),
    "radiation_with_emissivity_zero_is_the_only_way_out": Case(
        [replace('fixed_temperature = { bottom = "40 degC" }', ""),
         replace('[stages.heat.convection.top]\nfilm_coefficient = "10 W/(m^2*K)"\nambient = "25 degC"\n', ""),
         replace("emissivity = 0.8", "emissivity = 0.0")],
        [r"stages\.heat", "receive power \\(upper\\)", "radiation with emissivity > 0", "no steady state"]),
    "pressure_on_a_surface_inside_the_body": Case(
        [replace('supports = { bottom = { kind = "fixed" } }', 'supports = { bottom = { kind = "fixed" } }\n'
                 'pressure = { middle = "1 MPa" }')],
        [r"stages\.stress\.pressure", "surface 'middle' has 32 facets inside the body", "boundary surface"]),
    "output_folder_is_the_root": Case([replace('folder = "results"', 'folder = "/"')],
                                      [r"output\.folder: / is the root of the file system", "a folder of its own"],
                                      out=False),
    "output_folder_is_a_system_folder": Case([replace('folder = "results"', 'folder = "/etc/thermochain"')],
                                             [r"output\.folder: /etc/thermochain is a system folder"], out=False),
    "output_folder_is_an_existing_file": Case([replace('folder = "results"', 'folder = "box.msh/results"')],
                                              [r"output\.folder: .*box\.msh is an existing file, not a folder"],
                                              out=False),
    "output_folder_holds_a_foreign_summary": Case(
        [replace('folder = "results"', 'folder = "theirs"')],
        [r"output\.folder: .*theirs holds a summary\.json that is not a thermochain run's", "new or empty folder"],
        out=False, setup=lambda folder: (folder / "theirs").mkdir() or (folder / "theirs" / "summary.json").write_text(
            '{"total": 3, "items": []}')),
    "output_folder_holds_other_files": Case(
        [replace('folder = "results"', 'folder = "."')],
        [r"output\.folder: .* holds files no run writes \(box\.msh, workflow\.toml\)"], out=False),
    # ---- the mesh ----------------------------------------------------------------------------------------
    "mesh_node_tags_near_2e9": Case([replace('file = "box.msh"', 'file = "tags.msh"')],
                                    [r"node tags go up to 2000000174 for 175 nodes", "GiB", "renumber"],
                                    files={"tags.msh": "renumbered"}, named="tags.msh"),
    "mesh_with_a_nan_coordinate": Case([replace('file = "box.msh"', 'file = "nan.msh"')],
                                       ["1 node has coordinates that are not finite", "NaN"],
                                       files={"nan.msh": "nan"}, named="nan.msh"),
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
    if kind == "renumbered":  # node tags near 2e9 (a mesh exported from a larger model without renumbering)
        path.write_text(_renumbered(path.read_text(), 2_000_000_000 - 1))
    elif kind == "nan":  # one node of a tetrahedron without a coordinate
        lines = path.read_text().splitlines()
        at = lines.index("$Nodes") + 3
        lines[at] = " ".join(lines[at].split()[:1] + ["nan"] + lines[at].split()[2:])
        path.write_text("\n".join(lines) + "\n")
    if kind == "duplicate":  # rename the surface group "sides" to "top" in the file
        path.write_text(path.read_text().replace('"sides"', '"top"'))
    elif kind == "clash":
        path.write_text(path.read_text().replace('"middle"', '"upper"'))


def _renumbered(text: str, offset: int) -> str:
    """A Gmsh 2.2 ASCII file with every node tag (in $Nodes and in the elements) increased by ``offset``."""
    lines, out, section = text.splitlines(), [], None
    for line in lines:
        fields = line.split()
        if line.startswith("$"):
            section = line if not line.startswith("$End") else None
        elif section == "$Nodes" and len(fields) == 4:
            fields[0] = str(int(fields[0]) + offset)
            line = " ".join(fields)
        elif section == "$Elements" and len(fields) > 3:
            head = 3 + int(fields[2])
            line = " ".join(fields[:head] + [str(int(f) + offset) for f in fields[head:]])
        out.append(line)
    return "\n".join(out) + "\n"


def _touch(path: Path) -> Path:
    path.write_bytes(b"")
    return path


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
    if case.setup is not None:
        case.setup(folder)
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
    before = {str(p) for p in (tmp_path / "case").rglob("*")}
    status = cli.main(["run", str(path), "--store", str(store)] + (["--out", str(tmp_path / "out")] if case.out else [])
                      + [a for item in case.sets for a in ("--set", item)])
    err = capsys.readouterr().err
    assert status == 2, err
    assert_message(case, tmp_path / "case", path, err)
    assert tree(store) == state
    assert not (tmp_path / "out").exists()  # nothing half-written either
    assert {str(p) for p in (tmp_path / "case").rglob("*")} == before


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
    assert message.startswith(f"{path}: stages.stress: linear solve (amg")  # amg, or its two-level variant
    history = re.search(r"did not converge: relative residual \S+ after 3 iterations \(last residuals ([^)]*)\)",
                        message)
    assert history and len(history.group(1).split(", ")) == 4, message  # the history: initial + 3 iterations
    assert message.endswith('try the direct solver (solver = "direct")')
    assert visible(tree(store)) == visible(state)


# ------------------------------------------------------------------------- other commands, hints and notices

@pytest.mark.parametrize("kind", ["folder", "not_utf8", "missing"])
def test_a_material_file_that_cannot_be_read_is_refused_clearly(kind, tmp_path, capsys):
    path = tmp_path / "mats.toml"
    if kind == "folder":
        path.mkdir()
    elif kind == "not_utf8":
        path.write_bytes(b"[materials.x]\ntitle = \"\xff\xfe\"\n")
    capsys.readouterr()
    status = cli.main(["materials", "--file", str(path)])
    err = capsys.readouterr().err
    assert status == 2 and "Traceback" not in err
    line, = problems(err)
    assert line.startswith(f"{path}: ")
    assert {"folder": "this is a folder", "not_utf8": "not a text file", "missing": "not found"}[kind] in line


def test_a_millimetre_mesh_declared_in_metres_gets_a_notice(tmp_path, capsys, caplog):
    """The base box (10 mm) declared in m is 10 m across: the plan goes on (it may be meant), with a notice
    that names the unit."""
    path = setup_case(Case([replace('unit = "mm"', 'unit = "m"'), replace('["5 mm", "5 mm", "3 mm"]', "[5, 5, 3]")]),
                      tmp_path / "case")
    capsys.readouterr()
    assert cli.main(["check", str(path), "--store", str(tmp_path / "store")]) == 0
    captured = capsys.readouterr()
    assert "the model is 10 m across" in caplog.text and "check mesh.unit" in caplog.text  # a warning (stderr)
    assert "note: the model is 10 m across" in captured.out  # in the mesh description too


def test_a_bare_temperature_below_150_k_gets_a_hint(tmp_path, caplog):
    path = setup_case(Case([replace('ambient = "25 degC"', "ambient = 35")]), tmp_path / "case")
    assert cli.main(["-q", "check", str(path), "--store", str(tmp_path / "store")]) == 0
    assert (f"{path}: stages.heat.convection.top.ambient: the bare number 35 is read as 35 K (-238.15 degC); "
            'if degrees Celsius were meant, write "35 degC"') in caplog.messages  # a warning (stderr)
    from pipeline.flow import runner

    record = runner.run(path, store=str(tmp_path / "store"), out=str(tmp_path / "out"))
    assert [h for h in record["hints"] if "ambient: the bare number 35 is read as 35 K" in h]  # in summary.json


def test_report_refuses_a_summary_that_is_not_a_finished_runs(tmp_path, filled_store, capsys):
    store, _ = filled_store
    folder = tmp_path / "results"
    folder.mkdir()
    for text, words in (('{"total": 3}', "not the summary of a thermochain run"),
                        ("\xff not json", "cannot be read as JSON"),
                        ('{"thermochain": "0.1.0", "workflow_path": "w.toml", "stages": {}, "status": "failed"}',
                         "the run did not finish")):
        (folder / "summary.json").write_text(text, encoding="latin-1")
        capsys.readouterr()
        status = cli.main(["report", str(folder), "--store", str(store)])
        err = capsys.readouterr().err
        assert status == 2 and "Traceback" not in err, err
        line, = problems(err)
        assert line.startswith(f"{folder / 'summary.json'}: ") and words in line


def test_material_text_is_printed_literally(tmp_path, capsys):
    """Text from a material file is not terminal markup: '[bold]' and '[link=...]' are shown as typed."""
    path = tmp_path / "mats.toml"
    path.write_text('[materials.odd]\ntitle = "[bold red]loud[/bold red]"\nnote = "[link=https://example.invalid]'
                    'click[/link] :smile:"\nconductivity = 1.0\nyoungs_modulus = 1e9\npoisson_ratio = 0.3\n'
                    'expansion = 1e-5\ndensity = 1000.0\n')
    capsys.readouterr()
    assert cli.main(["materials", "odd", "--file", str(path)]) == 0
    out = capsys.readouterr().out
    assert "[bold red]loud[/bold red]" in out
    assert "[link=https://example.invalid]click[/link] :smile:" in " ".join(out.split())


# ------------------------------------------------------------------------------------------- studies

def test_converge_refuses_the_same_mesh_three_times(tmp_path, filled_store, capsys):
    store, _ = filled_store
    path = setup_case(Case(), tmp_path / "case")
    mesh = str(tmp_path / "case" / "box.msh")
    capsys.readouterr()
    status = cli.main(["converge", str(path), "--meshes", mesh, mesh, mesh, "--store", str(store),
                       "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert status == 2 and "Traceback" not in err
    line, = problems(err)
    assert line.startswith("--meshes: ") and "is the same mesh as" in line and "identical content" in line
    assert not (tmp_path / "out").exists()


def test_converge_refuses_levels_whose_finest_mesh_cannot_fit(tmp_path, filled_store, capsys, monkeypatch):
    """6 levels of the 576-tetrahedron box are 18.9 million tetrahedra: refused with the estimate before any
    refinement (the memory available is set to 1 GiB for the test)."""
    from pipeline.stages import solvers

    monkeypatch.setattr(solvers, "available_memory", lambda: 2**30)
    store, _ = filled_store
    path = setup_case(Case(), tmp_path / "case")
    capsys.readouterr()
    status = cli.main(["converge", str(path), "--levels", "6", "--store", str(store), "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert status == 2 and "Traceback" not in err
    line, = problems(err)
    assert re.search(r"^--levels 6: the finest mesh would have about 18,874,368 tetrahedra \(32,768 times", line)
    assert "1.00 GiB is available; give --levels 3 or fewer" in line
    assert not (tmp_path / "out" / "meshes").exists()


def test_a_sweep_checks_one_variant_up_front_and_plans_the_others_when_they_run(tmp_path, monkeypatch):
    """400 variants: the definition and one variant are checked before anything runs (plans counted)."""
    from pipeline.flow import runner
    from pipeline.studies import execute, sweep

    path = setup_case(Case(), tmp_path / "case")
    films = ", ".join(f'"{5 + 0.1 * i:.1f} W/(m^2*K)"' for i in range(40))
    ambients = ", ".join(f'"{20 + i} degC"' for i in range(10))
    path.write_text(path.read_text() + f'\n[sweep]\ngrid = {{ "stages.heat.convection.top.film_coefficient" = '
                    f'[{films}], "stages.heat.convection.top.ambient" = [{ambients}] }}\n')
    counted = []
    original = runner.plan
    monkeypatch.setattr(runner, "plan", lambda *a, **k: counted.append(1) or original(*a, **k))

    class Stop(Exception):
        pass

    def stop(self, function, tasks, done):
        raise Stop(len(list(tasks)))

    monkeypatch.setattr(execute.Executor, "map", stop)
    with pytest.raises(Stop) as ran:
        sweep.run(path, store=str(tmp_path / "store"), serial=True, out=str(tmp_path / "sweep"))
    assert ran.value.args == (400,) and len(counted) <= 2


def test_local_workers_are_capped_at_the_cores(monkeypatch, caplog):
    from pipeline.studies import execute

    monkeypatch.setattr(execute.os, "cpu_count", lambda: 2)
    assert execute.local_workers(24) == 2 and execute.local_workers(None) == 2 and execute.local_workers(1) == 1
    assert "--workers 24 is more than the 2 cores of this machine; using 2 worker processes" in caplog.text


def test_a_conductivity_that_is_not_positive_where_the_part_is_solved_is_warned(tmp_path, filled_store):
    """k(T) = 5 - 0.02 T W/(m*K) (invented) is negative above 250 K: the solve converges to a heated part
    colder than its cooled boundary, which must not pass as ok without a warning naming part and material."""
    from pipeline.flow import runner

    store, _ = filled_store
    path = setup_case(Case([
        replace("[parts]", "[materials.soft]\nconductivity = 1.0\nconductivity_polynomial = [5.0, -0.02]\n"
                "youngs_modulus = 20e9\npoisson_ratio = 0.3\nexpansion = 15e-6\ndensity = 1900.0\n\n[parts]"),
        replace('material = "fr4"', 'material = "soft"')]), tmp_path / "case")
    record = runner.run(path, store=str(store), out=str(tmp_path / "out"))
    found = [w for w in record["warning_records"] if w["code"] == "heat.conductivity_not_positive"]
    assert len(found) == 1 and found[0]["data"]["part"] == "upper" and found[0]["data"]["conductivity"] < 0
    assert "part upper: the conductivity of soft falls to" in found[0]["message"]
    assert record["stages"]["heat"]["parts_degC"]["upper"]["min"] < 40.0  # colder than the 40 degC boundary
