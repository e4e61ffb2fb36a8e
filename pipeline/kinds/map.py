"""The ``map`` stage kind: temperatures onto the structural model (pipeline/stages/mapping.py)."""

from __future__ import annotations

from pathlib import Path
from typing import Literal

from pydantic import Field, model_validator

from .. import errors
from ..fields import TemperatureField, ThermalLoad
from ..flow.workflow import LengthUnit, MeshSection, PositiveLength, Strict, Temperature
from ..model.units import celsius
from ..notices import Notice
from ..stages import mapping
from . import base

NAME = "map"
RESULT = ThermalLoad
#: a map stage reads the temperatures of any stage whose result is a TemperatureField
SOURCE = TemperatureField
READS: tuple[str, ...] = ()


class MapStage(Strict):
    kind: Literal["map"]
    source: str | None = Field(default=None, description="the heat stage whose temperatures are mapped")
    file: str | None = Field(default=None, description="or an external field: VTU point data or CSV `x, y, z, T` (a header row is skipped)")
    array: str | None = Field(default=None, description="point-data array of the VTU file (default: the only one)")
    file_unit: LengthUnit = Field(default="m", description="length unit of the file's coordinates")
    temperature_unit: Literal["K", "degC"] = Field(default="K", description="unit of the file's temperatures")
    mesh: MeshSection | None = Field(default=None, description="a different structural mesh (cross-mesh mapping); default: the workflow's mesh")
    reference: Temperature | None = Field(default=None, description="stress-free temperature [K], required: the "
                                          "temperature at which the parts carry no thermal stress")
    reference_by_part: dict[str, Temperature] = Field(default_factory=dict, description="stress-free temperature of one part")
    tolerance: PositiveLength | None = Field(default=None, description="distance outside the source still "
                                             "accepted (nearest value, counted); default half the source's median edge")
    order: Literal[1, 2] = Field(default=1, description="order of a cross-mesh or external field (same mesh keeps the heat stage's order)")

    @model_validator(mode="after")
    def _one_source(self):
        if (self.source is None) == (self.file is None):
            raise ValueError("give exactly one of 'source' (a heat stage) or 'file' (a field file)")
        return self


Schema = MapStage


def plan(ctx: base.Context, name: str, stage: MapStage, where: str) -> base.StagePlan:
    from ..flow import store

    target = ctx.domain_of(stage.mesh, f"stages.{name}.mesh") if stage.mesh else ctx.domain
    spec = mapping.MapSpec(stage.reference, stage.reference_by_part, stage.tolerance, stage.order)
    mapping.check(target, spec, where)
    options = stage.model_dump(exclude={"source", "file", "mesh"})
    if stage.source is not None:
        read = {"upstream": base.upstream(ctx, stage.source, SOURCE, where).key}
    else:
        file = Path(stage.file)
        if not file.is_file():
            raise errors.InputError(f"{where}.file: temperature field file not found: {file}")
        read = {"file_sha256": store.file_hash(file)}
    inputs = ctx.base_inputs(NAME, mapping.STAGE_VERSION) | {"options": options,
                                                             "mesh": [target.source_hash, target.unit]} | read
    return base.StagePlan(name, NAME, target, spec, inputs, source=stage.source)


def compute(plan: base.StagePlan, upstream) -> ThermalLoad:
    if upstream is not None:
        field, domain = upstream
        return mapping.transfer(field, domain, plan.domain, plan.spec, where=plan.where)
    stage = plan.stage
    return mapping.from_file(stage.file, plan.domain, plan.spec, array=stage.array, unit=stage.file_unit,
                             temperature_unit=stage.temperature_unit, where=plan.where)


def summary(plan: base.StagePlan, load: ThermalLoad) -> dict:
    return {"order": load.order, "diagnostics": dict(load.diagnostics),
            "reference_degC": {"min": round(celsius(float(load.reference.min())), 4),
                               "max": round(celsius(float(load.reference.max())), 4)}}


def notices(name, entry, domain, context) -> list[Notice]:
    d = entry["diagnostics"]
    if not d.get("outside"):
        return []
    return [Notice("map.outside", f"{d['outside']} structural points lay outside the temperature source (up to "
                   f"{d['max_distance_m'] * 1e3:.3g} mm) and took the nearest value", name,
                   {"points": d["outside"], "max_distance_m": d["max_distance_m"]})]


def report(entry, context) -> list[str]:
    from ..outputs.report import table

    d = entry["diagnostics"]
    return [table(["method", "points outside", "largest distance [mm]", "mapped range [degC]"], [[
        d.get("method"), d.get("outside"), f"{d.get('max_distance_m', 0) * 1e3:.3g}",
        f"{celsius(d['mapped_min_K']):.2f} to {celsius(d['mapped_max_K']):.2f}"]])]
