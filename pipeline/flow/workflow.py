"""The workflow file: schema, validation, ``extends`` and ``--set`` overrides.

A workflow is TOML.  A quantity is a bare number in SI units (m, K, W, Pa, N) or a string with a unit
("35 degC", "6 W/(m^2*K)", "2 mm"), converted once by pint.  Paths are relative to the file that names
them.  Every problem is reported at once, with the file and the key path.  See docs/workflow.md.
"""

from __future__ import annotations

import copy
import math
import re
import tomllib
import typing
from pathlib import Path
from typing import Annotated, Literal, Union

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field, ValidationError, model_validator

from .. import errors
from ..model.finishes import FINISHES
from ..model.units import to_si


def quantity(unit: str, **bounds):
    """A finite float in ``unit`` (SI) that may be written as a string with any unit of the same dimension."""
    return Annotated[float, BeforeValidator(lambda v: _finite_si(v, unit)), Field(description=f"[{unit}]", **bounds)]


def _finite_si(value, unit: str) -> float:
    try:
        out = to_si(value, unit)
    except OverflowError:
        raise ValueError(f"the number is too large (give a value in {unit})") from None
    if not math.isfinite(out):
        raise ValueError(f"must be a finite number in {unit}, got {value!r}")
    return out


def _temperature(value) -> float:
    kelvin = _finite_si(value, "K")
    if kelvin < 0:
        raise ValueError(f"a temperature must be greater than or equal to 0 K (absolute zero, -273.15 degC); "
                         f"got {value!r} = {kelvin:g} K")
    return kelvin


Temperature = Annotated[float, BeforeValidator(_temperature), Field(description="[K]", ge=0)]
Length = quantity("m")
PositiveLength = quantity("m", gt=0)
Power = quantity("W")
Generation = quantity("W/m**3")
HeatFluxDensity = quantity("W/m**2")
FilmCoefficient = quantity("W/(m**2*K)", gt=0)
Pressure = quantity("Pa")
Force = quantity("N")
SpringStiffness = quantity("N/m**3", gt=0)
Acceleration = quantity("m/s**2")
LengthUnit = Literal["m", "cm", "mm", "um", "in"]
KINDS = ("heat", "map", "stress")


def _emissivity(value):
    """A number in 0..1 or a finish name (the name is looked up by the runner); one message either way."""
    if isinstance(value, str):
        return value
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0 <= value <= 1:
        raise ValueError(f"emissivity must be a number in 0..1 or a finish name ({', '.join(FINISHES)})")
    return float(value)


Emissivity = Annotated[float | str, BeforeValidator(_emissivity)]


class Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False)


class MeshSection(Strict):
    file: str = Field(description="mesh file, relative to the workflow file; any format meshio reads")
    unit: LengthUnit = Field(description="length unit the mesh was drawn in")


class PartSection(Strict):
    material: str = Field(description="name in the material library or in [materials]")
    axes: list[list[float]] | None = Field(
        default=None, description="material x and y (and z) directions in model coordinates, for orthotropic parts")
    temperature_limit: Temperature | None = Field(default=None, description="highest allowed temperature [K]")


class ConvectionSection(Strict):
    film_coefficient: FilmCoefficient
    ambient: Temperature
    exponent: Annotated[float, Field(ge=0)] = Field(default=0.0, description="h = film_coefficient * "
                                                    "(|T - ambient| / reference_difference)^exponent")
    reference_difference: quantity("K", gt=0) = Field(default=1.0, description="temperature difference [K] "
                                                      "at which h equals film_coefficient")


class RadiationSection(Strict):
    emissivity: Emissivity = Field(description="0..1 or a finish name")
    surroundings: Temperature


class FluxSection(Strict):
    per_area: HeatFluxDensity | None = Field(default=None, description="into the body")
    total: Power | None = Field(default=None, description="into the body, spread over the surface")


class HeatStage(Strict):
    kind: Literal["heat"]
    order: Literal[1, 2] = 1
    solver: Literal["auto", "direct", "amg"] = "auto"
    memory_limit: quantity("B", gt=0) | None = Field(default=None, description="bytes the stage may use, e.g. "
                                                     "\"8 GiB\" (default: what the machine has available); not part of the store key")
    materials: dict[str, str] = Field(default_factory=dict, description="part -> material, for this stage only")
    power: dict[str, Power] = Field(default_factory=dict, description="part -> W")
    generation: dict[str, Generation] = Field(default_factory=dict, description="part -> W/m^3")
    flux: dict[str, FluxSection] = Field(default_factory=dict)
    convection: dict[str, ConvectionSection] = Field(default_factory=dict)
    radiation: dict[str, RadiationSection] = Field(default_factory=dict)
    fixed_temperature: dict[str, Temperature] = Field(default_factory=dict, description="surface -> K")
    max_iterations: Annotated[int, Field(gt=0)] = Field(default=30, description="Newton iterations at most")
    adiabatic: list[str] = Field(default_factory=list, description="surfaces meant to be adiabatic (symmetry "
                                 "planes, insulation): not warned about")


class MapStage(Strict):
    kind: Literal["map"]
    source: str | None = Field(default=None, description="the heat stage whose temperatures are mapped")
    file: str | None = Field(default=None, description="or an external field: VTU point data or CSV x, y, z, T")
    array: str | None = Field(default=None, description="point-data array of the VTU file")
    file_unit: LengthUnit = Field(default="m", description="length unit of the file's coordinates")
    temperature_unit: Literal["K", "degC"] = "K"
    mesh: MeshSection | None = Field(default=None, description="structural mesh, if not the workflow's mesh")
    reference: Temperature = Field(default=293.15, description="stress-free temperature [K]")
    reference_by_part: dict[str, Temperature] = Field(default_factory=dict)
    tolerance: PositiveLength | None = Field(default=None, description="distance outside the source that is "
                                             "accepted [m]; default half the source's median edge")
    order: Literal[1, 2] = Field(default=1, description="order of a cross-mesh or external field")

    @model_validator(mode="after")
    def _one_source(self):
        if (self.source is None) == (self.file is None):
            raise ValueError("give exactly one of 'source' (a heat stage) or 'file' (a field file)")
        return self


class SupportSection(Strict):
    kind: Literal["fixed", "symmetry", "displacement", "spring", "minimal"]
    x: Length | None = None
    y: Length | None = None
    z: Length | None = None
    stiffness: SpringStiffness | None = Field(default=None, description="spring stiffness per area [N/m^3]")


class StressStage(Strict):
    kind: Literal["stress"]
    source: str | None = Field(default=None, description="the map stage that gives the temperatures")
    order: Literal[1, 2] = 2
    solver: Literal["auto", "direct", "amg"] = "auto"
    memory_limit: quantity("B", gt=0) | None = Field(default=None, description="bytes the stage may use, e.g. "
                                                     "\"8 GiB\" (default: what the machine has available); not part of the store key")
    materials: dict[str, str] = Field(default_factory=dict, description="part -> material, for this stage only")
    supports: dict[str, SupportSection] = Field(description="surface (or any name for 'minimal') -> support")
    pressure: dict[str, Pressure] = Field(default_factory=dict, description="surface -> Pa")
    force: dict[str, Annotated[list[Force], Field(min_length=3, max_length=3)]] = Field(default_factory=dict)
    gravity: Annotated[list[Acceleration], Field(min_length=3, max_length=3)] | None = None


Stage = Annotated[Union[HeatStage, MapStage, StressStage], Field(discriminator="kind")]


class OutputSection(Strict):
    folder: str = Field(default="results", description="results folder, relative to the workflow file")
    vtu: bool = True
    figures: bool = Field(default=True, description="PNG figures (pyvista off-screen, matplotlib)")
    report: bool = Field(default=True, description="report.html with the figures embedded")
    required_safety_factor: Annotated[float, Field(gt=0)] = Field(
        default=1.5, description="pass/fail threshold in the report (1.5 against yield is common practice)")


class Workflow(Strict):
    title: str = ""
    mesh: MeshSection
    materials: dict[str, dict] = Field(default_factory=dict, description="inline materials, as in the library")
    parts: dict[str, PartSection]
    stages: dict[str, Stage]
    probes: dict[str, Annotated[list[Length], Field(min_length=3, max_length=3)]] = Field(default_factory=dict)
    output: OutputSection = OutputSection()
    # read by `thermochain sweep` only (pipeline/studies/sweep.py validates it); no stage reads it, so it
    # is in no store key
    sweep: dict | None = Field(default=None, description="a parameter study: grid and paired value lists "
                               "by key path (docs/studies.md)")


def read_raw(path: Path, seen: tuple[Path, ...] = ()) -> dict:
    """The TOML tables of ``path`` merged over those of the file it ``extends`` (recursively).

    Paths in each file are made relative to the file that names them."""
    path = Path(path)
    if path.resolve() in seen:
        chain = " -> ".join(str(p) for p in seen + (path.resolve(),))
        raise errors.InputError(f"{path}: 'extends' loops back on itself: {chain}")
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise errors.InputError(f"{path}: workflow file not found") from None
    except UnicodeDecodeError:
        raise errors.InputError(f"{path}: not a text file (a workflow is UTF-8 TOML)") from None
    except OSError as exc:
        raise errors.InputError(f"{path}: cannot read the workflow file ({exc.strerror or exc})") from None
    except tomllib.TOMLDecodeError as exc:
        raise errors.InputError(f"{path}: TOML syntax error: {exc}") from None
    _absolute_paths(raw, path.parent)
    parent = raw.pop("extends", None)
    if parent is None:
        return raw
    if not isinstance(parent, str):
        raise errors.InputError(f"{path}: extends must be a file name, got {parent!r}")
    if not (path.parent / parent).is_file():
        raise errors.InputError(f"{path}: extends: workflow file '{parent}' not found (looked for "
                                f"{path.parent / parent}); give a path relative to this file")
    return merge(read_raw(path.parent / parent, seen + (path.resolve(),)), raw)


def _absolute_paths(raw: dict, base: Path) -> None:
    """Turn the file keys of one file into paths relative to the current directory."""
    def fix(table, key):
        if isinstance(table, dict) and isinstance(table.get(key), str):
            table[key] = str(base / table[key])

    fix(raw.get("mesh"), "file")
    fix(raw.get("output"), "folder")
    stages = raw.get("stages")
    for stage in stages.values() if isinstance(stages, dict) else ():
        fix(stage, "file")
        if isinstance(stage, dict):
            fix(stage.get("mesh"), "file")


def merge(base: dict, override: dict) -> dict:
    """Deep merge: tables merge key by key, everything else is replaced."""
    out = copy.deepcopy(base)
    for key, value in override.items():
        if isinstance(value, dict) and isinstance(out.get(key), dict):
            out[key] = merge(out[key], value)
        else:
            out[key] = copy.deepcopy(value)
    return out


def apply_sets(raw: dict, sets: list[str], where: str) -> dict:
    """Apply ``KEY.PATH=VALUE`` overrides; VALUE is read as a TOML value (a bare word is a string)."""
    raw = copy.deepcopy(raw)
    for item in sets:
        if "=" not in item:
            raise errors.InputError(f"{where}: --set needs KEY=VALUE, got {item!r}")
        key, text = item.split("=", 1)
        try:
            value = tomllib.loads(f"v = {text}")["v"]
        except tomllib.TOMLDecodeError:
            value = text
        table = raw
        parts = key.strip().split(".")
        for name in parts[:-1]:
            table = table.setdefault(name, {})
            if not isinstance(table, dict):
                raise errors.InputError(f"{where}: --set {key}: '{name}' is not a table")
        table[parts[-1]] = value
    return raw


def load(path: str | Path, sets: list[str] | None = None) -> Workflow:
    """Parse, merge, override and validate a workflow file."""
    path = Path(path)
    raw = apply_sets(read_raw(path), sets or [], str(path))
    try:
        workflow = Workflow.model_validate(raw)
    except ValidationError as exc:
        raise errors.InputError(_messages(path, exc.errors(), raw)) from None
    problems = _cycles(path, workflow)
    if problems:
        raise errors.InputError(problems)
    return workflow


def _cycles(path: Path, workflow: Workflow) -> list[str]:
    """Stages whose sources lead back to themselves (a chain runs heat -> map -> stress)."""
    reads = {n: s.source for n, s in workflow.stages.items() if getattr(s, "source", None) in workflow.stages}
    problems, reported = [], set()
    for start in reads:
        chain = [start]
        while chain[-1] in reads:
            following = reads[chain[-1]]
            if following in chain:
                cycle = chain[chain.index(following):] + [following]
                if frozenset(cycle) not in reported:
                    reported.add(frozenset(cycle))
                    problems.append(f"{path}: stages.{cycle[0]}.source: the stages {' -> '.join(cycle)} form a cycle "
                                    "(each reads the next); a chain runs heat -> map -> stress, so a map stage "
                                    "reads a heat stage and a stress stage reads a map stage")
                break
            chain.append(following)
    return problems


def schema() -> dict:
    """The JSON Schema of a workflow file (for editors)."""
    return Workflow.model_json_schema()


def _messages(path: Path, found: list[dict], raw: dict) -> list[str]:
    """One message per key path (a union reports each of its members; the first is the most specific)."""
    cleaned = [(_clean(e["loc"], raw), e) for e in found]
    missing = {loc for loc, e in cleaned if e["type"] == "missing"}
    misspelt = {}  # missing key path -> the unknown key that is probably it, misspelt
    for loc, e in cleaned:
        if e["type"] == "extra_forbidden":
            match = errors.closest_name(str(loc[-1]), _fields_at(loc[:-1], raw))
            if match and loc[:-1] + (match,) in missing:
                misspelt[loc[:-1] + (match,)] = loc
    out, seen = [], set()
    for loc, e in cleaned:
        if loc in seen or loc in misspelt:
            continue
        seen.add(loc)
        out.append(_message(path, loc, e, raw, set(misspelt)))
    return out


def _message(path: Path, loc: tuple, error: dict, raw: dict, misspelt: set) -> str:
    text = ".".join(str(p) for p in loc)
    kind = error["type"]
    if kind == "extra_forbidden":
        fields = _fields_at(loc[:-1], raw)
        match = errors.closest_name(str(loc[-1]), fields) if fields else None
        hint = ""
        if match:
            hint = f" (did you mean '{match}'?{' it is required and missing' if loc[:-1] + (match,) in misspelt else ''})"
        valid = f"; valid keys: {', '.join(fields)}" if fields else ""
        return f"{path}: unknown key '{text}'{hint}{valid}"
    if kind == "missing":
        return f"{path}: missing required key '{text}'{_about(loc, raw)}"
    if kind == "union_tag_not_found":
        return f"{path}: missing required key '{text}.kind' (the stage kind: {', '.join(KINDS)})"
    if kind == "union_tag_invalid":
        tag = str(error.get("ctx", {}).get("tag"))
        return (f"{path}: {text}.kind: '{tag}' is not a stage kind{errors.closest(tag, KINDS)}; "
                f"valid kinds: {', '.join(KINDS)}")
    message = error["msg"].removeprefix("Value error, ")
    if kind == "literal_error" and isinstance(error.get("input"), str):
        message += errors.closest(error["input"], re.findall(r"'([^']*)'", error.get("ctx", {}).get("expected", "")))
    if "got " not in message:
        message += f" (got {error.get('input')!r})"
    return f"{path}: {text}: {message}"


def _about(loc: tuple, raw: dict) -> str:
    """What a missing key holds: its description and, for a fixed set of words, the choices."""
    model = _model_at(loc[:-1], raw)
    field = model.model_fields.get(str(loc[-1])) if model else None
    if field is None:
        return ""
    words = []
    if field.description:
        words.append(field.description)
    choices = typing.get_args(field.annotation) if typing.get_origin(field.annotation) is Literal else ()
    if choices:
        words.append("one of " + ", ".join(repr(c) for c in choices))
    return f" ({'; '.join(words)})" if words else ""


def _clean(loc: tuple, raw: dict) -> tuple:
    """The key path as the user wrote it: without the discriminator tags pydantic puts into a stage's path
    (stages.NAME.heat.key) and without the tags of union members below a plain value."""
    out = list(loc)
    if len(out) > 2 and out[0] == "stages" and out[2] in KINDS:
        del out[2]
    kept, node = [], raw
    for part in out:
        if isinstance(node, dict):
            node = node.get(part)
        elif isinstance(node, list) and isinstance(part, int):
            node = node[part] if 0 <= part < len(node) else None
        elif node is not None:
            break  # below a plain value: the name of a union member, not a key
        kept.append(part)
    return tuple(kept)


def _fields_at(loc: tuple, raw: dict) -> list[str]:
    """Valid keys of the schema table at a key path (empty inside free-form tables)."""
    model = _model_at(loc, raw)
    return list(model.model_fields) if model else []


def _model_at(loc: tuple, raw: dict) -> type[BaseModel] | None:
    """The schema model of the table at a key path, or None inside free-form tables."""
    model: type[BaseModel] | None = Workflow
    keys = list(loc)
    if keys[:1] == ["stages"] and len(keys) >= 2:  # a stage's schema follows from its kind
        stages = raw.get("stages") if isinstance(raw, dict) else None
        stage = stages.get(keys[1]) if isinstance(stages, dict) else None
        kind = stage.get("kind") if isinstance(stage, dict) else None
        model = {"heat": HeatStage, "map": MapStage, "stress": StressStage}.get(kind) if isinstance(kind, str) else None
        keys = keys[2:]
        if model is None:
            return None
    while keys:
        field = model.model_fields.get(str(keys.pop(0)))
        if field is None:
            return None
        ann = field.annotation
        sub = getattr(ann, "__args__", None)
        if isinstance(ann, type) and issubclass(ann, BaseModel):
            model = ann
        elif sub and isinstance(sub[-1], type) and issubclass(sub[-1], BaseModel):
            model = sub[-1]
            if keys:
                keys.pop(0)  # the table's own key (a part or surface name)
        else:
            return None
    return model
