"""The ``heat`` stage kind: steady conduction with loads and boundaries (pipeline/stages/heat.py)."""

from __future__ import annotations

from dataclasses import replace
from typing import Annotated, Literal

from pydantic import Field

from .. import errors
from ..fields import TemperatureField
from ..flow.workflow import (Emissivity, FilmCoefficient, Generation, HeatFluxDensity, Power, Strict, Temperature,
                             MemoryLimit, SolverMethod, quantity)
from ..model import finishes
from ..model.units import celsius
from ..notices import Notice
from ..stages import exchange, heat
from . import base

NAME = "heat"
RESULT = TemperatureField
SOURCE = None
#: material properties the heat stage reads (its store key holds only these)
READS = ("conductivity",)


class ConvectionSection(Strict):
    film_coefficient: FilmCoefficient = Field(description="film coefficient")
    ambient: Temperature = Field(description="ambient temperature")
    exponent: Annotated[float, Field(ge=0)] = Field(default=0.0, description="power law h = film_coefficient "
                                                    "(abs(T - ambient) / reference_difference)^exponent (0.25: laminar natural convection)")
    reference_difference: quantity("K", gt=0) = Field(default=1.0, description="temperature difference at "
                                                      "which h equals film_coefficient")


class RadiationSection(Strict):
    emissivity: Emissivity = Field(description="0..1, or a finish name: " + ", ".join(f"`{k}` {v[0]:g}" for k, v in finishes.FINISHES.items()) + " (sources in pipeline/model/finishes.py)")
    surroundings: Temperature = Field(description="temperature of the surroundings")


class ExchangeSection(Strict):
    emissivity: dict[str, Emissivity] = Field(description="by surface or part of the group (a part's value wins): "
                                              "0..1 or a finish name")
    surroundings: Temperature | None = Field(default=None, description="temperature of the surroundings an open "
                                             "group sees (none for an enclosure)")


class FluxSection(Strict):
    per_area: HeatFluxDensity | None = Field(default=None, description="into the body")
    total: Power | None = Field(default=None, description="into the body, spread over the surface")


class HeatStage(Strict):
    kind: Literal["heat"]
    order: Literal[1, 2] = Field(default=1, description="element order")
    solver: SolverMethod = Field(default="auto", description="linear solver (auto: by size, docs/performance.md)")
    memory_limit: MemoryLimit = None
    materials: dict[str, str] = Field(default_factory=dict, description="material for this stage only")
    power: dict[str, Power] = Field(default_factory=dict, description="power spread over the part's meshed volume")
    generation: dict[str, Generation] = Field(default_factory=dict, description="volumetric generation")
    flux: dict[str, FluxSection] = Field(default_factory=dict, description="heat flux into the body")
    convection: dict[str, ConvectionSection] = Field(default_factory=dict)
    radiation: dict[str, RadiationSection] = Field(default_factory=dict)
    view: str | None = Field(default=None, description="the view stage whose view factors radiation_exchange uses")
    radiation_exchange: dict[str, ExchangeSection] = Field(default_factory=dict, description="grey exchange "
                                                           "among the surfaces of a view-factor group, by group")
    fixed_temperature: dict[str, Temperature] = Field(default_factory=dict, description="fixed temperature; not combined with another condition on the same surface")
    max_iterations: Annotated[int, Field(gt=0)] = Field(default=30, description="Newton iterations at most (nonlinear problems)")
    adiabatic: list[str] = Field(default_factory=list, description="surfaces meant to be adiabatic (symmetry "
                                 "planes, insulation): not warned about")


    @property
    def source(self) -> str | None:
        """The stage this one reads (its view factors)."""
        return self.view


Schema = HeatStage


def plan(ctx: base.Context, name: str, stage: HeatStage, where: str) -> base.StagePlan:
    domain = ctx.domain
    mats, names, problems = base.materials(ctx, stage, domain, where)
    spec = heat.HeatSpec(
        materials=mats, power=stage.power, generation=stage.generation,
        flux={s: heat.HeatFlux(f.per_area, f.total) for s, f in stage.flux.items()},
        convection={s: heat.Convection(c.film_coefficient, c.ambient, c.exponent, c.reference_difference)
                    for s, c in stage.convection.items()},
        radiation=_radiation(stage, where, problems),
        fixed_temperature=stage.fixed_temperature, probes=ctx.probes, order=stage.order, solver=stage.solver,
        memory_limit=stage.memory_limit, max_iterations=stage.max_iterations,
        exchange=_exchange(stage, where, problems), view=_view(ctx, stage, where, problems))
    if stage.view and spec.view is None:  # a misnamed view stage: its groups cannot be checked
        spec = replace(spec, exchange={})
    problems += [errors.unknown_name("surface", a, domain.surfaces, f"{where}.adiabatic")
                 for a in stage.adiabatic if a not in domain.surfaces]
    base.checked(heat.check, domain, spec, where, problems)
    base.before_solving(heat.check_steady_state, domain, spec, where)
    inputs = ctx.base_inputs(NAME, heat.STAGE_VERSION) | {
        "options": stage.model_dump(exclude={"materials", "memory_limit"}),
        "materials": {p: m.reads(*READS) for p, m in sorted(mats.items())},
        "mesh": [domain.source_hash, domain.unit], "probes": ctx.probes}
    if stage.view:
        inputs["upstream"] = ctx.planned[stage.view].key
    return base.StagePlan(name, NAME, domain, spec, inputs, materials=names, source=stage.view)


def _view(ctx: base.Context, stage: HeatStage, where: str, problems: list):
    """The view stage's spec (its groups) while planning; the solve gets its view factors."""
    if stage.view is None:
        return None
    planned = ctx.planned.get(stage.view)
    if planned is None or planned.kind != "view":
        problems.append(errors.unknown_name("view stage", stage.view, [n for n, k in ctx.kinds.items() if k == "view"],
                                            f"{where}.view"))
        return None
    return planned.spec


def _exchange(stage: HeatStage, where: str, problems: list) -> dict:
    out = {}
    for group, x in stage.radiation_exchange.items():
        eps = {}
        for k, e in x.emissivity.items():
            try:
                eps[k], _ = finishes.emissivity(e, f"{where}.radiation_exchange.{group}.emissivity.{k}")
            except errors.InputError as exc:
                problems += exc.records
        out[group] = exchange.ExchangeGroup(eps, x.surroundings)
    return out


def _radiation(stage: HeatStage, where: str, problems: list) -> dict:
    out = {}
    for surface, r in stage.radiation.items():
        try:
            eps, _ = finishes.emissivity(r.emissivity, f"{where}.radiation.{surface}.emissivity")
        except errors.InputError as exc:
            problems += exc.records
            continue
        out[surface] = heat.Radiation(eps, r.surroundings)
    return out


def compute(plan: base.StagePlan, upstream) -> TemperatureField:
    spec = replace(plan.spec, view=upstream[0]) if upstream else plan.spec
    return heat.solve(plan.domain, spec, where=plan.where, checked=upstream is None)


def summary(plan: base.StagePlan, field: TemperatureField) -> dict:
    """The figures of a TemperatureField that a summary shows, in degC and W."""
    return {
        "order": field.order,
        "parts_degC": {p: {k: round(celsius(v), 4) for k, v in s.items()} for p, s in field.parts.items()},
        "probes_degC": {p: round(celsius(v), 4) for p, v in field.probes.items()},
        "heat_balance_W": [dict(r) for r in field.balance],
        "radiative_paths_W": [dict(r) for r in field.meta.get("radiative_paths", [])],
        "heat_in_W": field.heat_in,
        "relative_imbalance": field.imbalance,
        "loads": [dict(r) for r in field.loads],
        "adiabatic_surfaces": list(field.adiabatic),
        "adiabatic_intended": list(plan.inputs["options"].get("adiabatic", [])),
        "solver": field.solver.to_dict() | {"history": []},
        "notices": [str(n) for n in field.notices],
        "notice_records": [Notice.of(n).to_dict() for n in field.notices],
    }


def outputs(domain, field: TemperatureField):
    """Temperature at the vertices [K and degC] (P2 fields at the vertices only)."""
    t = field.at_vertices
    return {"temperature_K": t, "temperature_degC": celsius(t)}, {}


def figures(folder, name, entry, field, domain, context: base.OutputContext) -> list[dict]:
    from ..outputs import figures as fig

    return [fig.temperature_outside(folder / f"{name}_outside.png", domain, field),
            fig.temperature_cut(folder / f"{name}_cut.png", domain, field),
            fig.part_temperatures(folder / f"{name}_parts.png", entry["parts_degC"], context.limits_degC)]


def notices(name, entry, domain, context: base.OutputContext) -> list[Notice]:
    out = []
    open_ = [a for a in entry["adiabatic_surfaces"] if a not in entry.get("adiabatic_intended", [])]
    if open_:
        out.append(Notice("heat.adiabatic", f"adiabatic (no heat leaves): {', '.join(open_)}; check that no "
                          "convection or fixed temperature was forgotten (list intended ones under 'adiabatic')",
                          name, {"surfaces": open_}))
    limits = context.limits_degC
    for part, s in entry["parts_degC"].items():
        if part in limits and s["max"] > limits[part]:
            out.append(Notice("heat.over_limit", f"part {part} reaches {s['max']:.1f} degC, above its limit "
                              f"{limits[part]:.1f} degC", name,
                              {"part": part, "max_degC": s["max"], "limit_degC": limits[part]}))
    out += [Notice.of(n).at(name) for n in entry.get("notice_records", [])]
    return out


def report(entry, context: base.OutputContext) -> list[str]:
    from ..outputs.report import table, verdict, escape

    limits = context.limits_degC
    out = [table(["part", "min [degC]", "mean [degC]", "max [degC]", "limit [degC]", "verdict"], [
        [p, f"{s['min']:.2f}", f"{s['mean']:.2f}", f"{s['max']:.2f}",
         f"{limits[p]:.1f}" if p in limits else "", verdict(s["max"] <= limits[p] if p in limits else None)]
        for p, s in entry["parts_degC"].items()])]
    out.append("<p>Heat balance (positive into the body):</p>" + table(
        ["kind", "load or surface", "heat in [W]"],
        [[r["kind"], r["name"], f"{r['heat_in_W']:+.5g}"] for r in entry["heat_balance_W"]]))
    if entry.get("radiative_paths_W"):
        out.append("<p>Radiative paths (net, from the first to the second):</p>" + table(
            ["group", "from", "to", "net [W]"],
            [[r["group"], r["from"], r["to"], f"{r['W']:+.4g}"] for r in entry["radiative_paths_W"]]))
    out.append(f"<p>Relative imbalance {entry['relative_imbalance']:.1e}. Adiabatic surfaces: "
               f"{escape(', '.join(entry['adiabatic_surfaces']) or 'none')}.</p>")
    if entry.get("probes_degC"):
        out.append(table(["probe", "temperature [degC]"], [[p, f"{t:.2f}"] for p, t in entry["probes_degC"].items()]))
    return out


def console(entry) -> list[str]:
    lines = [f"  {part:<16} min {s['min']:8.2f}  mean {s['mean']:8.2f}  max {s['max']:8.2f} degC"
             for part, s in entry["parts_degC"].items()]
    lines += [f"  probe {probe:<10} {t:8.2f} degC" for probe, t in entry["probes_degC"].items()]
    lines += [f"  {r['kind']:<18} {r['name']:<16} {r['heat_in_W']:+10.4f} W" for r in entry["heat_balance_W"]]
    lines += [f"  radiation {r['from']} -> {r['to']}: {r['W']:+.4f} W" for r in entry.get("radiative_paths_W", [])]
    lines.append(f"  relative imbalance {entry['relative_imbalance']:.1e}; "
                 f"adiabatic: {', '.join(entry['adiabatic_surfaces']) or 'none'}")
    return lines


def quantities(name: str, entry: dict) -> dict[str, float | None]:
    """Named figures for study tables: ``NAME.PART.max_degC`` (also mean, min), ``NAME.probes.P_degC``,
    ``NAME.heat_in_W``."""
    out: dict[str, float | None] = {}
    for part, s in entry.get("parts_degC", {}).items():
        out |= {f"{name}.{part}.{k}_degC": s[k] for k in ("max", "mean", "min")}
    out |= {f"{name}.probes.{p}_degC": t for p, t in entry.get("probes_degC", {}).items()}
    out[f"{name}.heat_in_W"] = entry.get("heat_in_W")
    return out
