"""The workflow file: schema, validation and conversion to stage inputs.

A workflow is TOML.  Bare numbers are SI (temperatures in K); probe coordinates are in the mesh's
length unit.  Paths are relative to the workflow file.  Every problem is reported at once, with the
file and the key path.  See docs/workflow.md for every key.
"""

from __future__ import annotations

import tomllib
from pathlib import Path
from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError

from .. import errors
from ..model.units import LENGTH_UNITS

Positive = Annotated[float, Field(gt=0)]
Kelvin = Annotated[float, Field(ge=0, description="absolute temperature [K]")]


class Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", strict=False, frozen=True)


class MeshSection(Strict):
    file: str = Field(description="mesh file, relative to the workflow file; any format meshio reads")
    unit: Literal["m", "cm", "mm", "um", "in"] = Field(description="length unit the mesh was drawn in")


class PartSection(Strict):
    material: str = Field(description="name in the material library or in [materials]")
    axes: list[list[float]] | None = Field(
        default=None, description="material x and y (and z) directions in model coordinates, for orthotropic parts")


class ConvectionSection(Strict):
    film_coefficient: Positive = Field(description="W/(m^2*K)")
    ambient: Kelvin


class FluxSection(Strict):
    per_area: float | None = Field(default=None, description="W/m^2 into the body")
    total: float | None = Field(default=None, description="W into the body, spread over the surface")


class HeatStage(Strict):
    kind: Literal["heat"]
    order: Literal[1, 2] = 1
    solver: Literal["auto", "direct", "amg"] = "auto"
    power: dict[str, float] = Field(default_factory=dict, description="part -> W")
    generation: dict[str, float] = Field(default_factory=dict, description="part -> W/m^3")
    flux: dict[str, FluxSection] = Field(default_factory=dict)
    convection: dict[str, ConvectionSection] = Field(default_factory=dict)
    fixed_temperature: dict[str, Kelvin] = Field(default_factory=dict, description="surface -> K")


class OutputSection(Strict):
    folder: str = Field(default="results", description="results folder, relative to the workflow file")
    vtu: bool = True


class Workflow(Strict):
    title: str = ""
    mesh: MeshSection
    materials: dict[str, dict] = Field(default_factory=dict, description="inline materials, as in the library")
    parts: dict[str, PartSection]
    stages: dict[str, HeatStage]
    probes: dict[str, Annotated[list[float], Field(min_length=3, max_length=3)]] = Field(default_factory=dict)
    output: OutputSection = OutputSection()


def load(path: str | Path) -> tuple[Workflow, Path]:
    """Parse and validate a workflow file; returns the workflow and the folder paths are relative to."""
    path = Path(path)
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise errors.InputError(f"{path}: workflow file not found") from None
    except tomllib.TOMLDecodeError as exc:
        raise errors.InputError(f"{path}: TOML syntax error: {exc}") from None
    try:
        workflow = Workflow.model_validate(raw)
    except ValidationError as exc:
        raise errors.InputError([_message(path, e) for e in exc.errors()]) from None
    return workflow, path.parent


def _message(path: Path, error: dict) -> str:
    loc = ".".join(str(p) for p in error["loc"])
    if error["type"] == "extra_forbidden":
        parent = _model_at(error["loc"][:-1])
        hint = errors.closest(str(error["loc"][-1]), parent.model_fields) if parent else ""
        valid = f"; valid keys: {', '.join(parent.model_fields)}" if parent else ""
        return f"{path}: unknown key '{loc}'{hint}{valid}"
    if error["type"] == "missing":
        return f"{path}: missing required key '{loc}'"
    return f"{path}: {loc}: {error['msg']} (got {error.get('input')!r})"


def _model_at(loc: tuple) -> type[BaseModel] | None:
    """The schema class at a key path (for listing valid keys), or None inside free-form tables."""
    model: type[BaseModel] = Workflow
    keys = list(loc)
    while keys:
        key = keys.pop(0)
        field = model.model_fields.get(str(key))
        if field is None:
            return None
        ann = field.annotation
        sub = getattr(ann, "__args__", None)
        if isinstance(ann, type) and issubclass(ann, BaseModel):
            model = ann
        elif sub and isinstance(sub[-1], type) and issubclass(sub[-1], BaseModel):
            model = sub[-1]
            if keys:
                keys.pop(0)  # the dict key (a stage, part or surface name)
        else:
            return None
    return model


def unit_factor(workflow: Workflow) -> float:
    return LENGTH_UNITS[workflow.mesh.unit]
