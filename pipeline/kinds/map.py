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
    file: str | dict[str, str] | None = Field(
        default=None, description="or an external field: VTU point data or CSV `x, y, z, T` (a header row is skipped; "
                                  "optionally a fifth column, the point's part); or a table part -> file, one file per part")
    array: str | None = Field(default=None, description="point-data array of the VTU file (default: the only one)")
    part_array: str | None = Field(default=None, description="point-data array of the VTU file holding each point's "
                                   "part number (sorted part names, as thermochain's VTU files number them)")
    file_unit: LengthUnit = Field(default="m", description="length unit of the file's coordinates")
    temperature_unit: Literal["K", "degC"] = Field(default="K", description="unit of the file's temperatures")
    mesh: MeshSection | None = Field(default=None, description="a different structural mesh (cross-mesh mapping); default: the workflow's mesh")
    reference: Temperature | None = Field(default=None, description="stress-free temperature (required): where the "
                                          "parts carry no thermal stress. For parts bonded at T_b (solder, sinter, cured adhesive) give T_b: "
                                          "both joined parts are stress-free there, and the operating state is a load step from T_b "
                                          "(docs/theory.md, \"Stress-free temperature and bonding\")")
    reference_by_part: dict[str, Temperature] = Field(default_factory=dict, description="a part stress-free at its own temperature: a built-in misfit, not a bonding temperature")
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
    problems = [errors.unknown_name("part", p, target.parts, f"{where}.reference_by_part")
                for p in stage.reference_by_part if p not in target.parts]
    prepared = {}
    if stage.source is not None:
        read = {"upstream": base.upstream(ctx, stage.source, SOURCE, where).key}
    else:
        files = stage.file if isinstance(stage.file, dict) else {"": stage.file}
        problems += [f"{where}.file{'.' + p if p else ''}: temperature field file not found: {f}"
                     for p, f in files.items() if not Path(f).is_file()]
        problems += [errors.unknown_name("part", p, target.parts, f"{where}.file") for p in files if p and p not in
                     target.parts]
        if problems:
            raise errors.InputError(problems)
        read = {"file_sha256": {p: store.file_hash(Path(f)) for p, f in files.items()} if isinstance(stage.file, dict)
                else store.file_hash(Path(stage.file))}
        for f in files.values():  # the field is read and mapped now, so its problems are found before any solve
            _finite_field(Path(f), stage.array, stage.part_array, target)
        prepared["load"] = mapping.from_file(stage.file, target, spec, array=stage.array, unit=stage.file_unit,
                                             temperature_unit=stage.temperature_unit, part_array=stage.part_array,
                                             where=where)
    if problems:
        raise errors.InputError(problems)
    inputs = ctx.base_inputs(NAME, mapping.STAGE_VERSION) | {"options": options,
                                                             "mesh": [target.source_hash, target.unit]} | read
    inputs |= base.interface_inputs(ctx, target)
    return base.StagePlan(name, NAME, target, spec, inputs, source=stage.source, prepared=prepared)


def _finite_field(file: Path, array: str | None, part_array: str | None, domain) -> None:
    """Every point of a field file needs finite coordinates and a finite temperature."""
    import numpy as np

    points, values = mapping._read_point_field(file, array, part_array, domain)[:2]
    bad = np.flatnonzero(~(np.isfinite(points).all(axis=1) & np.isfinite(values)))
    if len(bad):
        shown = ", ".join(str(i + 1) for i in bad[:10]) + (", ..." if len(bad) > 10 else "")
        raise errors.InputError(f"{file}: {len(bad)} of {len(values)} points have a coordinate or temperature that is "
                                f"not a finite number (NaN or infinity), points {shown} (from 1, in file order); "
                                "every point needs numbers x, y, z, T")


def compute(plan: base.StagePlan, upstream) -> ThermalLoad:
    if "load" in plan.prepared:  # an external field, mapped while planning
        return plan.prepared["load"]
    if upstream is not None:
        field, domain = upstream
        return mapping.transfer(field, domain, plan.domain, plan.spec, where=plan.where)
    stage = plan.stage
    return mapping.from_file(stage.file, plan.domain, plan.spec, array=stage.array, unit=stage.file_unit,
                             temperature_unit=stage.temperature_unit, part_array=stage.part_array, where=plan.where)


def summary(plan: base.StagePlan, load: ThermalLoad) -> dict:
    return {"order": load.order, "diagnostics": dict(load.diagnostics),
            "reference_degC": {"min": round(celsius(float(load.reference.min())), 4),
                               "max": round(celsius(float(load.reference.max())), 4)}}


def notices(name, entry, domain, context) -> list[Notice]:
    d = entry["diagnostics"]
    out = []
    if d.get("outside"):
        out.append(Notice("map.outside", f"{d['outside']} structural points lay outside the temperature source (up "
                          f"to {d['max_distance_m'] * 1e3:.3g} mm) and took the nearest value", name,
                          {"points": d["outside"], "max_distance_m": d["max_distance_m"]}))
    if d.get("duplicate_points_with_jump") and not d.get("by_part"):
        out.append(Notice("map.jump_smeared", f"{d['duplicate_points_with_jump']} points of the field file are given "
                          f"twice with values up to {d['largest_duplicate_jump_K']:.4g} K apart (a jump between parts); "
                          "without part labels the jump is smeared over the elements beside it: give each point's "
                          "part (a fifth CSV column, part_array, or one file per part)", name,
                          {"points": d["duplicate_points_with_jump"], "largest_K": d["largest_duplicate_jump_K"]}))
    if d.get("shared_nodes_with_jump"):
        out.append(Notice("map.jump_on_shared_nodes", f"{d['shared_nodes_with_jump']} structural nodes are shared by "
                          f"parts whose temperatures there differ by up to {d['largest_shared_jump_K']:.4g} K; they "
                          "took the mean: split that interface ([interfaces] kind = 'contact') to keep the jump",
                          name, {"nodes": d["shared_nodes_with_jump"], "largest_K": d["largest_shared_jump_K"]}))
    if d.get("read_across_parts_without_labels"):
        out.append(Notice("map.labels_mattered", f"{d['read_across_parts_without_labels']} structural points would "
                          "have read another part's points without the part labels (across an interface or an air "
                          "gap)", name, {"points": d["read_across_parts_without_labels"]}))
    return out


def report(entry, context) -> list[str]:
    from ..outputs.report import table

    d = entry["diagnostics"]
    return [table(["method", "points outside", "largest distance [mm]", "mapped range [degC]"], [[
        d.get("method"), d.get("outside"), f"{d.get('max_distance_m', 0) * 1e3:.3g}",
        f"{celsius(d['mapped_min_K']):.2f} to {celsius(d['mapped_max_K']):.2f}"]])]


def loads(name: str, entry: dict) -> list[list[str]]:
    """The report's rows of the stress-free temperatures: [stage, kind, where, value]."""
    o = entry.get("inputs", {}).get("options", {})
    rows = [[name, "stress-free temperature", "all parts", f"{celsius(o['reference']):.1f} degC"]] \
        if o.get("reference") is not None else []
    return rows + [[name, "stress-free temperature", p, f"{celsius(t):.1f} degC"]
                   for p, t in o.get("reference_by_part", {}).items()]
