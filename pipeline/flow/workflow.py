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

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field, ValidationError, WithJsonSchema, create_model

from .. import errors
from ..model.finishes import FINISHES
from ..model.units import to_si
from ..stages import solvers


#: JSON Schema words for pydantic's bounds
_JSON_BOUNDS = {"gt": "exclusiveMinimum", "ge": "minimum", "lt": "exclusiveMaximum", "le": "maximum"}


def _quantity_schema(unit: str, bounds: dict) -> WithJsonSchema:
    """In JSON Schema a quantity is a number in SI units (with its bounds) or a string with a unit."""
    number = {"type": "number", "description": f"[{unit}]"} | {_JSON_BOUNDS[k]: v for k, v in bounds.items()}
    text = {"type": "string", "description": f"a number and a unit of the dimension of {unit}, e.g. \"2 mm\""}
    return WithJsonSchema({"anyOf": [number, text], "description": f"[{unit}]", "x-unit": unit})


def quantity(unit: str, **bounds):
    """A finite float in ``unit`` (SI) that may be written as a string with any unit of the same dimension."""
    return Annotated[float, BeforeValidator(lambda v: _finite_si(v, unit)), Field(description=f"[{unit}]", **bounds),
                     _quantity_schema(unit, bounds)]


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


Temperature = Annotated[float, BeforeValidator(_temperature), Field(description="[K]", ge=0),
                        _quantity_schema("K", {"ge": 0})]
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
MemoryLimit = Annotated[quantity("B", gt=0) | None, Field(
    description="bytes the stage may use, e.g. \"8 GiB\" (default: what the machine has available); "
                "not part of the store key")]
SolverMethod = Literal[solvers.METHODS]  # type: ignore[valid-type]


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
    file: str = Field(description="mesh file, relative to the workflow file; any format meshio reads (Gmsh MSH 2.2/4.1 is the main path)")
    unit: LengthUnit = Field(description="length unit the mesh was drawn in")


class PartSection(Strict):
    material: str = Field(description="library or inline material of the mesh part (volume group)")
    axes: list[list[float]] | None = Field(
        default=None, description="material x and y (and z) directions in model coordinates, for orthotropic parts (default: the model axes)")
    temperature_limit: Temperature | None = Field(default=None, description="the part's allowed peak temperature, checked in the report")


class OutputSection(Strict):
    folder: str = Field(default="results", description="results folder, relative to the workflow file")
    vtu: bool = Field(default=True, description="write `<stage>.vtu` for stages with fields, and `results.pvd`")
    figures: bool = Field(default=True, description="PNG figures (pyvista off-screen, matplotlib)")
    report: bool = Field(default=True, description="report.html with the figures embedded")
    required_safety_factor: Annotated[float, Field(gt=0)] = Field(
        default=1.5, description="pass/fail threshold in the report (1.5 against yield is common practice)")


class LineSection(Strict):
    start: Annotated[list[Length], Field(min_length=3, max_length=3)] = Field(description="first point [m]")
    end: Annotated[list[Length], Field(min_length=3, max_length=3)] = Field(description="last point [m]")
    points: Annotated[int, Field(ge=2)] = Field(default=50, description="equally spaced points, ends included")


class WorkflowBase(Strict):
    """The workflow file's tables except ``stages``, whose members come from the stage kinds."""

    title: str = Field(default="", description="shown in the summary and the report")
    mesh: MeshSection
    materials: dict[str, dict] = Field(default_factory=dict, description="inline materials, same keys (SI numbers) as the library (`thermochain materials NAME`); `conductivity_table = [[T, k], ...]` (or `[T, kx, ky, kz]`) or `conductivity_polynomial = [c0, c1, ...]` make k depend on T [K]; likewise `youngs_modulus_table`, `poisson_ratio_table`, `expansion_table` (or `_polynomial`) make E, nu, alpha depend on T, with `expansion_convention = \"instantaneous\"` (default) or `\"mean\"` from `expansion_base` [K]; `kind = \"laminate\"` with `layers = [{material, thickness, fraction, fill}, ...]` computes a board's orthotropic constants from its stack-up")
    parts: dict[str, PartSection]
    probes: dict[str, Annotated[list[Length], Field(min_length=3, max_length=3)]] = Field(
        default_factory=dict, description="named points (x, y, z) whose values every stage reports")
    lines: dict[str, LineSection] = Field(default_factory=dict, description="name -> a straight line along which "
                                          "temperature, displacement and stress are reported")
    output: OutputSection = OutputSection()
    # read by `thermochain sweep` only (pipeline/studies/sweep.py validates it); no stage reads it, so it
    # is in no store key
    sweep: dict | None = Field(default=None, description="a parameter study: grid and paired value lists "
                               "by key path (docs/studies.md)")


_MODEL: type[WorkflowBase] | None = None


def model() -> type[WorkflowBase]:
    """The schema of a workflow file: ``stages`` is a union of the registered kinds' sections,
    told apart by their ``kind`` key (built once, again after a kind is registered)."""
    global _MODEL
    if _MODEL is None:
        from .. import kinds

        members = tuple(k.Schema for k in kinds.all_kinds().values())
        stage = Annotated[Union[members], Field(discriminator="kind")]  # type: ignore[valid-type]
        _MODEL = create_model("Workflow", __base__=WorkflowBase,
                              stages=(dict[str, stage], Field(description="stage name -> stage")))
    return _MODEL


def forget_model() -> None:
    """Rebuild the schema on next use (the registered kinds changed)."""
    global _MODEL
    _MODEL = None


def kind_names() -> tuple[str, ...]:
    """The stage kinds a workflow may name."""
    from .. import kinds

    return kinds.names()


def stage_schema(kind: object) -> type[BaseModel] | None:
    """The section model of a stage kind, or None for a word that is no kind."""
    from .. import kinds

    return kinds.all_kinds()[kind].Schema if isinstance(kind, str) and kind in kinds.names() else None


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


def load(path: str | Path, sets: list[str] | None = None) -> WorkflowBase:
    """Parse, merge, override and validate a workflow file."""
    path = Path(path)
    raw = apply_sets(read_raw(path), sets or [], str(path))
    try:
        workflow = model().model_validate(raw)
    except ValidationError as exc:
        raise errors.InputError(_messages(path, exc.errors(), raw)) from None
    problems = _cycles(path, workflow)
    if problems:
        raise errors.InputError(problems)
    return workflow


def load_sections(path: str | Path, sets: list[str] | None = None) -> tuple[WorkflowBase | None, list, list[str]]:
    """Like ``load``, but a schema error does not stop the checks of the rest: returns the workflow
    made of every table that is valid, the schema problems and the names of the stages left out
    (None as the workflow when the mesh, parts or output tables themselves are invalid)."""
    path = Path(path)
    raw = apply_sets(read_raw(path), sets or [], str(path))
    try:
        workflow = model().model_validate(raw)
    except ValidationError as exc:
        problems: list = _messages(path, exc.errors(), raw)
    else:
        cycles = _cycles(path, workflow)
        return (None if cycles else workflow), cycles, []
    try:
        rest = WorkflowBase.model_validate({k: v for k, v in raw.items() if k != "stages"})
    except ValidationError:
        return None, problems, []
    stages, left_out = {}, []
    tables = raw.get("stages") if isinstance(raw.get("stages"), dict) else {}
    for name, table in tables.items():
        schema = stage_schema(table.get("kind")) if isinstance(table, dict) else None
        try:
            stages[name] = schema.model_validate(table) if schema else None
        except ValidationError:
            stages[name] = None
        if stages[name] is None:
            left_out.append(name)
            del stages[name]
    workflow = model().model_construct(**dict(rest), stages=stages)
    cycles = _cycles(path, workflow)
    return (None if cycles else workflow), problems + cycles, left_out


def _cycles(path: Path, workflow: WorkflowBase) -> list[str]:
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
    """The JSON Schema of a workflow file (for editors and validators).

    A file with ``extends`` may leave out anything its base gives, so it is checked against the same
    tables with no key required; a file without it must be complete."""
    full = model().model_json_schema()
    defs = full.pop("$defs", {})
    partial = _partial({"$defs": defs} | full)
    full["properties"]["extends"] = {"type": "string", "description": "a workflow file this one is merged over"}
    partial["properties"]["extends"] = {"type": "string", "description": "a workflow file this one is merged over"}
    partial_defs = partial.pop("$defs")
    title = full.pop("title", "Workflow")
    return {"$schema": "https://json-schema.org/draft/2020-12/schema", "title": title,
            "description": "A thermochain workflow file (TOML; docs/workflow.md)",
            "$defs": defs | {f"{k}Partial": v for k, v in partial_defs.items()},
            "if": {"required": ["extends"]}, "then": partial, "else": full}


def _partial(node):
    """A copy of a schema with no required keys and no discriminator, its references renamed."""
    if isinstance(node, list):
        return [_partial(v) for v in node]
    if not isinstance(node, dict):
        return node
    out = {}
    for k, v in node.items():
        if k == "required" or k == "discriminator":
            continue
        if k == "$ref" and isinstance(v, str):
            out[k] = f"{v}Partial"
        elif k == "oneOf":
            out["anyOf"] = _partial(v)
        else:
            out[k] = _partial(v)
    return out


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
    error_type = error["type"]
    if error_type == "extra_forbidden":
        fields = _fields_at(loc[:-1], raw)
        match = errors.closest_name(str(loc[-1]), fields) if fields else None
        hint = ""
        if match:
            hint = f" (did you mean '{match}'?{' it is required and missing' if loc[:-1] + (match,) in misspelt else ''})"
        valid = f"; valid keys: {', '.join(fields)}" if fields else ""
        return f"{path}: unknown key '{text}'{hint}{valid}"
    if error_type == "missing":
        return f"{path}: missing required key '{text}'{_about(loc, raw)}"
    if error_type == "union_tag_not_found":
        return f"{path}: missing required key '{text}.kind' (the stage kind: {', '.join(kind_names())})"
    if error_type == "union_tag_invalid":
        tag = str(error.get("ctx", {}).get("tag"))
        return (f"{path}: {text}.kind: '{tag}' is not a stage kind{errors.closest(tag, kind_names())}; "
                f"valid kinds: {', '.join(kind_names())}")
    message = error["msg"].removeprefix("Value error, ")
    if error_type == "literal_error" and isinstance(error.get("input"), str):
        message += errors.closest(error["input"], re.findall(r"'([^']*)'", error.get("ctx", {}).get("expected", "")))
    if "got " not in message:
        message += f" (got {error.get('input')!r})"
    return f"{path}: {text}: {message}"


def _about(loc: tuple, raw: dict) -> str:
    """What a missing key holds: its description and, for a fixed set of words, the choices."""
    table = _model_at(loc[:-1], raw)
    field = table.model_fields.get(str(loc[-1])) if table else None
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
    if len(out) > 2 and out[0] == "stages" and out[2] in kind_names():
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
    table = _model_at(loc, raw)
    return list(table.model_fields) if table else []


def _model_at(loc: tuple, raw: dict) -> type[BaseModel] | None:
    """The schema model of the table at a key path, or None inside free-form tables."""
    schema: type[BaseModel] | None = model()
    keys = list(loc)
    if keys[:1] == ["stages"] and len(keys) >= 2:  # a stage's schema follows from its kind
        stages = raw.get("stages") if isinstance(raw, dict) else None
        stage = stages.get(keys[1]) if isinstance(stages, dict) else None
        kind = stage.get("kind") if isinstance(stage, dict) else None
        schema = stage_schema(kind)
        keys = keys[2:]
        if schema is None:
            return None
    while keys:
        field = schema.model_fields.get(str(keys.pop(0)))
        if field is None:
            return None
        ann = field.annotation
        sub = getattr(ann, "__args__", None)
        if isinstance(ann, type) and issubclass(ann, BaseModel):
            schema = ann
        elif sub and isinstance(sub[-1], type) and issubclass(sub[-1], BaseModel):
            schema = sub[-1]
            if keys:
                keys.pop(0)  # the table's own key (a part or surface name)
        else:
            return None
    return schema
