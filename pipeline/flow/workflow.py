"""The workflow file: schema, validation, ``extends`` and ``--set`` overrides.

A workflow is TOML.  A quantity is a bare number in SI units (m, K, W, Pa, N) or a string with a unit
("35 degC", "6 W/(m^2*K)", "2 mm"), converted once by pint.  Paths are relative to the file that names
them.  Every problem is reported at once, with the file and the key path.  See docs/workflow.md.
"""

from __future__ import annotations

import copy
import logging
import math
import re
import tomllib
import typing
from pathlib import Path
from typing import Annotated, Literal, Union

from pydantic import (BaseModel, BeforeValidator, ConfigDict, Field, ValidationError, WithJsonSchema, create_model,
                      model_validator)

from .. import errors, files
from ..model.finishes import FINISHES
from ..model.units import ZERO_CELSIUS, to_si
from ..stages import solvers

log = logging.getLogger(__name__)

#: a workflow file larger than this is refused unread (workflows are a few kB)
MAX_FILE_BYTES = 1 << 20
#: longest ``extends`` chain
MAX_EXTENDS = 32
#: a bare temperature below this [K] gets a hint: an ambient of 35 K is more often 35 degC mistyped
COLD_HINT_K = 150.0
#: a name that becomes part of a file name (stage, probe, line): a plain identifier
PLAIN_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_-]{0,63}$")
RESERVED = {"con", "prn", "aux", "nul", *(f"com{i}" for i in range(1, 10)), *(f"lpt{i}" for i in range(1, 10))}


#: JSON Schema words for pydantic's bounds
_JSON_BOUNDS = {"gt": "exclusiveMinimum", "ge": "minimum", "lt": "exclusiveMaximum", "le": "maximum"}


def _quantity_schema(unit: str, bounds: dict) -> WithJsonSchema:
    """In JSON Schema a quantity is a number in SI units (with its bounds) or a string with a unit."""
    number = {"type": "number", "description": f"[{unit}]"} | {_JSON_BOUNDS[k]: v for k, v in bounds.items()}
    text = {"type": "string", "description": f"a number and a unit of the dimension of {unit}, e.g. \"2 mm\""}
    return WithJsonSchema({"anyOf": [number, text], "description": f"[{unit}]", "x-unit": unit})


def quantity(unit: str, limit: float = 1e20, **bounds):
    """A finite float in ``unit`` (SI) that may be written as a string with any unit of the same dimension;
    its magnitude is at most ``limit`` (beyond any physical value here, and safe from overflow)."""
    return Annotated[float, BeforeValidator(lambda v: _finite_si(v, unit, limit)),
                     Field(description=f"[{unit}]", **bounds), _quantity_schema(unit, bounds)]


def _finite_si(value, unit: str, limit: float = 1e20) -> float:
    try:
        out = to_si(value, unit)
    except OverflowError:
        raise ValueError(f"the number is too large (give a value in {unit})") from None
    if not math.isfinite(out):
        raise ValueError(f"must be a finite number in {unit}, got {value!r}")
    if abs(out) > limit:
        raise ValueError(f"{out:.3g} {unit} is beyond any plausible value here (at most {limit:g} {unit} in "
                         f"magnitude); check the number and its unit, got {value!r}")
    return out


_CELSIUS = {"c", "deg c", "degc", "celsius", "ºc", "° c", "oc", "degree c", "degrees c", "degree celsius",
            "degrees celsius", "centigrade"}
_FAHRENHEIT = {"f", "deg f", "degf", "fahrenheit", "ºf", "° f", "degree f", "degrees f", "degrees fahrenheit"}


def _temperature(value) -> float:
    try:
        kelvin = _finite_si(value, "K", 1e5)
    except ValueError:
        match = re.match(r"^\s*([-+]?[0-9.eE+-]+)\s*(.*?)\s*$", value) if isinstance(value, str) else None
        unit = match.group(2).lower() if match else ""
        for words, name in ((_CELSIUS, "degC"), (_FAHRENHEIT, "degF")):
            if unit in words:
                raise ValueError(f"'{match.group(2)}' is not a temperature unit here ('C' is the coulomb, 'F' the "
                                 f"farad); did you mean '{match.group(1)} {name}'? (temperature units: K, degC, "
                                 f"degF), got {value!r}") from None
        raise
    if kelvin < 0:
        raise ValueError(f"a temperature must be greater than or equal to 0 K (absolute zero, -273.15 degC); "
                         f"got {value!r} = {kelvin:g} K")
    return kelvin


Temperature = Annotated[float, BeforeValidator(_temperature), Field(description="[K]", ge=0),
                        _quantity_schema("K", {"ge": 0})]
Length = quantity("m")
PositiveLength = quantity("m", gt=0)
#: bounds of plausibility (common practice: far beyond any electronics load; they keep the solve finite)
Power = quantity("W", limit=1e9)
Generation = quantity("W/m**3", limit=1e16)
HeatFluxDensity = quantity("W/m**2", limit=1e10)
FilmCoefficient = quantity("W/(m**2*K)", gt=0)
Pressure = quantity("Pa", limit=1e12)
Force = quantity("N", limit=1e10)
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
    material: str = Field(description="the part's material: a name in the material library or in [materials]")
    axes: list[list[float]] | None = Field(
        default=None, description="material x and y (and z) directions in model coordinates, for orthotropic parts (default: the model axes)")
    temperature_limit: Temperature | None = Field(default=None, description="the part's allowed peak temperature, checked in the report")


class OutputSection(Strict):
    folder: str = Field(default="results", description="results folder, relative to the workflow file")
    vtu: bool = Field(default=True, description="write `<stage>.vtu` for stages with fields, and `results.pvd`")
    figures: bool = Field(default=True, description="PNG figures (pyvista off-screen, matplotlib)")
    report: bool = Field(default=True, description="report.html with the figures embedded")
    required_safety_factor: Annotated[float, Field(gt=0)] = Field(
        default=1.5, description="pass/fail threshold of the stress verdict (1.5 against yield is common practice)")


class LineSection(Strict):
    start: Annotated[list[Length], Field(min_length=3, max_length=3)] = Field(description="first point of a straight line along which the stress stage reports temperature, displacement and stress (as for probes); points outside the mesh are listed with `outside = true`")
    end: Annotated[list[Length], Field(min_length=3, max_length=3)] = Field(description="last point")
    points: Annotated[int, Field(ge=2)] = Field(default=50, description="equally spaced points, ends included")


class InterfaceSection(Strict):
    """A joint between two parts (docs/workflow.md, [interfaces]): by its parts or by a surface group on it."""

    kind: Literal["contact", "tie", "insulated", "section"] = Field(
        description="contact: split the shared interface, a conductance acts across it (sides stay together in "
                    "the stress stage); tie: parts meshed apart, heat and displacement continuous (mortar); "
                    "insulated: no heat crosses; section: a bolt's pretension section (a planar interface "
                    "across the shank between two parts) for stages.NAME.preload")
    parts: Annotated[list[str], Field(min_length=2, max_length=2)] | None = Field(
        default=None, description="the two parts (for a tie: the part that follows first)")
    surface: str | None = Field(default=None, description="or a surface group lying on the interface")
    conductance: quantity("W/(m**2*K)", ge=0) | None = Field(default=None, description="contact conductance h_c")
    resistance: quantity("m**2*K/W", gt=0) | None = Field(default=None, description="or contact resistance R''")

    @model_validator(mode="after")
    def _values(self):
        if (self.parts is None) == (self.surface is None):
            raise ValueError("give either parts = [a, b] or surface = NAME")
        given = (self.conductance is not None) + (self.resistance is not None)
        if self.kind == "contact" and given != 1:
            raise ValueError("a contact needs exactly one of conductance [W/(m^2*K)] or resistance [m^2*K/W]")
        if self.kind != "contact" and given:
            raise ValueError(f"a {self.kind} joint takes no conductance or resistance")
        return self

    @property
    def heat_conductance(self) -> float:
        """h_c [W/(m^2*K)]: the given one, 1/R'', or 0 for an insulated interface."""
        if self.kind in ("insulated", "section"):
            return 0.0
        return self.conductance if self.conductance is not None else 1.0 / self.resistance


class WorkflowBase(Strict):
    """The workflow file's tables except ``stages``, whose members come from the stage kinds."""

    title: str = Field(default="", description="shown in the summary and the report")
    mesh: MeshSection
    materials: dict[str, dict] = Field(default_factory=dict, description="inline materials, same keys (SI numbers) as the library (`thermochain materials NAME`); `conductivity_table = [[T, k], ...]` (or `[T, kx, ky, kz]`) or `conductivity_polynomial = [c0, c1, ...]` make k depend on T [K]; a brittle orthotropic material with `tensile_strength_axes = [X, Y, Z]` (and optionally `shear_strength_axes = [S_xy, S_xz, S_yz]`) [Pa] is judged in its material axes (maximum stress per axis); `youngs_modulus_table`, `poisson_ratio_table`, `expansion_table` (or `_polynomial`) make E, nu, alpha depend on T, with `expansion_convention = \"instantaneous\"` (default) or `\"mean\"` from `expansion_base` [K]; `kind = \"laminate\"` with `layers = [{material, thickness, fraction, fill}, ...]` computes a board's orthotropic constants from its stack-up")
    parts: dict[str, PartSection]
    probes: dict[str, Annotated[list[Length], Field(min_length=3, max_length=3)]] = Field(
        default_factory=dict, description="named points (x, y, z) whose values every stage reports (stress: the part it lies in, displacement, temperature, the full stress tensor xx, yy, zz, xy, yz, xz, principal stresses and von Mises of the recovered field)")
    lines: dict[str, LineSection] = Field(default_factory=dict, description="a straight line; the stress stage "
                                          "reports temperature, displacement and stress (as for probes) at equally spaced points along it; "
                                          "points outside the mesh are listed with `outside = true`")
    output: OutputSection = OutputSection()
    interfaces: dict[str, InterfaceSection] = Field(
        default_factory=dict, description="joints between parts: contact conductance, ties of parts meshed apart, "
                                          "insulated interfaces")
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
    """The TOML tables of ``path`` merged over those of the file it ``extends`` (recursively, at most
    ``MAX_EXTENDS`` deep; each file at most ``MAX_FILE_BYTES``).

    Paths in each file are made relative to the file that names them."""
    path = Path(path)
    if path.resolve() in seen:
        chain = " -> ".join(str(p) for p in seen + (path.resolve(),))
        raise errors.InputError(f"{path}: 'extends' loops back on itself: {chain}")
    if len(seen) >= MAX_EXTENDS:
        raise errors.InputError(f"{seen[0]}: the 'extends' chain is more than {MAX_EXTENDS} files deep (at {path}); "
                                "a workflow extends a few shared files at most: shorten the chain")
    raw = files.read_toml(path, "workflow file", MAX_FILE_BYTES)
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
        elif isinstance(table, dict) and isinstance(table.get(key), dict):  # one file per part
            table[key] = {k: str(base / v) if isinstance(v, str) else v for k, v in table[key].items()}

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
    """Parse, merge, override and validate a workflow file; hints (bare temperatures that look like degC)
    are logged as warnings and kept in ``hints(workflow)``."""
    workflow, problems, _ = load_sections(path, sets)
    if problems:
        raise errors.InputError(problems)
    return workflow


_HINTS: dict[int, tuple[WorkflowBase, list[str]]] = {}


def hints(workflow: WorkflowBase) -> list[str]:
    """The hints found when ``workflow`` was loaded (bare temperatures below ``COLD_HINT_K``)."""
    entry = _HINTS.get(id(workflow))
    return list(entry[1]) if entry and entry[0] is workflow else []


def _origin(path: Path, sets: list[str]):
    """Where a key path's value came from: the file, or the --set option that gave it (or its table)."""
    given = [(tuple(item.split("=", 1)[0].strip().split(".")), item) for item in sets if "=" in item]

    def where(loc: tuple) -> str:
        loc = tuple(str(p) for p in loc)
        for keys, item in reversed(given):  # the last --set of a key wins
            n = min(len(keys), len(loc))
            if keys[:n] == loc[:n]:
                return f"--set {item} (over {path})"
        return str(path)
    return where


def plain_name(name: str) -> bool:
    """Whether ``name`` can be part of a file name anywhere: a letter or '_' first, then letters, digits,
    '_' or '-', at most 64 characters, and not a name Windows reserves."""
    return bool(PLAIN_NAME.match(name)) and name.lower() not in RESERVED


def name_problems(path: Path, workflow: WorkflowBase) -> list[str]:
    """Names that become file names (stages, probes, lines) must be plain identifiers (``plain_name``)."""
    out = []
    for table in ("stages", "probes", "lines"):
        for name in getattr(workflow, table, None) or {}:
            if not plain_name(name):
                out.append(f"{path}: {table}.{name!r}: a {table[:-1]} name becomes part of file names in the results "
                           "folder, so it must be a plain name: a letter or '_' first, then letters, digits, '_' or "
                           f"'-' (at most 64; not {', '.join(sorted(RESERVED)[:4])}, ...), for example "
                           f"'{_plain_suggestion(name)}'")
    return out


def _plain_suggestion(name: str) -> str:
    text = re.sub(r"[^A-Za-z0-9_-]+", "_", name).strip("_-")[:64] or "stage"
    return text if re.match(r"[A-Za-z_]", text) and text.lower() not in RESERVED else f"_{text}"[:64]


def _is_temperature(annotation) -> bool:
    """Whether a schema annotation is (or holds, in a dict or an optional) a ``Temperature``."""
    if typing.get_origin(annotation) is Annotated:
        args = typing.get_args(annotation)
        if any(getattr(m, "func", None) is _temperature for m in args[1:]):
            return True
        return _is_temperature(args[0])
    return any(_is_temperature(a) for a in typing.get_args(annotation))


def _models_in(annotation) -> list[type[BaseModel]]:
    """The schema models an annotation holds (itself, an optional, a dict's values, a union's members)."""
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return [annotation]
    out = []
    for a in typing.get_args(annotation):
        out += _models_in(a)
    return out


def _is_table_of_tables(annotation) -> bool:
    """dict[str, Model] (possibly optional), as opposed to one Model."""
    if typing.get_origin(annotation) is dict:
        return True
    return any(_is_table_of_tables(a) for a in typing.get_args(annotation) if a is not type(None)
               and typing.get_origin(annotation) is not Annotated)


def _cold_hints(model: type[BaseModel], table: dict, loc: tuple, where) -> list[str]:
    """Hints for bare numbers below ``COLD_HINT_K`` given for temperatures (read as K)."""
    out = []
    for key, value in table.items() if isinstance(table, dict) else ():
        field = model.model_fields.get(str(key))
        if field is None:
            continue
        here = loc + (key,)
        if any(getattr(m, "func", None) is _temperature for m in field.metadata) or _is_temperature(field.annotation):
            values = value.items() if isinstance(value, dict) else [(None, value)]
            for sub, v in values:
                if isinstance(v, (int, float)) and not isinstance(v, bool) and 0 <= v < COLD_HINT_K:
                    at = here + ((sub,) if sub is not None else ())
                    out.append(f"{where(at)}: {'.'.join(map(str, at))}: the bare number {v:g} is read as {v:g} K "
                               f"({v - ZERO_CELSIUS:.2f} degC); if degrees Celsius were meant, write \"{v:g} degC\"")
            continue
        models = _models_in(field.annotation)
        if not models or not isinstance(value, dict):
            continue
        if not _is_table_of_tables(field.annotation):
            out += _cold_hints(models[0], value, here, where)
            continue
        for name, sub in value.items():  # a table of tables (stages by name): the member given by 'kind'
            chosen = models[0] if len(models) == 1 else next(
                (m for m in models if isinstance(sub, dict) and "kind" in m.model_fields
                 and sub.get("kind") in typing.get_args(m.model_fields["kind"].annotation)), None)
            if chosen is not None:
                out += _cold_hints(chosen, sub, here + (name,), where)
    return out


def load_sections(path: str | Path, sets: list[str] | None = None) -> tuple[WorkflowBase | None, list, list[str]]:
    """Like ``load``, but a schema error does not stop the checks of the rest: returns the workflow
    made of every table that is valid, the schema problems and the names of the stages left out
    (None as the workflow when the mesh, parts or output tables themselves are invalid).  A problem in a
    value given with ``--set`` names that option; names that become file names are checked."""
    path = Path(path)
    raw = apply_sets(read_raw(path), sets or [], str(path))
    where = _origin(path, sets or [])
    try:
        workflow = model().model_validate(raw)
    except ValidationError as exc:
        problems: list = _messages(path, exc.errors(), raw, where)
    else:
        problems = _cycles(path, workflow) + name_problems(path, workflow)
        if not problems:
            _remember_hints(workflow, _cold_hints(model(), raw, (), where))
        return (None if problems else workflow), problems, []
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
    more = _cycles(path, workflow) + name_problems(path, workflow)
    return (None if more else workflow), problems + more, left_out


def _remember_hints(workflow: WorkflowBase, found: list[str]) -> None:
    for line in found:
        log.warning("%s", line)
    _HINTS[id(workflow)] = (workflow, found)
    while len(_HINTS) > 64:  # the latest workflows only (a sweep loads hundreds)
        _HINTS.pop(next(iter(_HINTS)))


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


def _messages(path: Path, found: list[dict], raw: dict, where=None) -> list[str]:
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
        out.append(_message((where or (lambda _: str(path)))(loc), loc, e, raw, set(misspelt)))
    return out


def _message(path: str, loc: tuple, error: dict, raw: dict, misspelt: set) -> str:
    """One message; ``path`` is where the value came from (the file, or a --set option over it)."""
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
