"""The ``heat`` stage kind: steady conduction with loads and boundaries (pipeline/stages/heat.py)."""

from __future__ import annotations

from dataclasses import replace
from typing import Annotated, Literal

from pydantic import Field

from .. import errors
from ..fields import TemperatureField
from ..flow.workflow import (Emissivity, FilmCoefficient, Generation, HeatFluxDensity, Power, Strict, Temperature,
                             MemoryLimit, SolverMethod, quantity)  # noqa: I001
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


class CavitySection(Strict):
    films: dict[str, FilmCoefficient] = Field(description="film coefficient of a surface to the enclosed air")
    ventilation: quantity("W/K", ge=0) = Field(default=0.0, description="m_dot c_p of the air flowing through; "
                                               "0: sealed")
    inlet: Temperature = Field(default=293.15, description="temperature of the incoming air")


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
    cavities: dict[str, CavitySection] = Field(default_factory=dict, description="enclosed air as an unknown "
                                               "temperature: its films' net exchange balances the ventilation")
    max_iterations: Annotated[int, Field(gt=0)] = Field(default=30, description="Newton iterations at most (nonlinear problems)")
    adiabatic: list[str] = Field(default_factory=list, description="surfaces meant to be adiabatic (symmetry "
                                 "planes, insulation): not warned about")

    def upstream_names(self) -> list[str]:
        """The stages this one reads: its view factors' stage."""
        return [self.view] if self.view else []


Schema = HeatStage


def plan(ctx: base.Context, name: str, stage: HeatStage, where: str) -> base.StagePlan:
    domain = ctx.domain
    spec, names, problems = heat_spec(ctx, stage, where)
    mats = spec.materials
    if stage.view and spec.view is None:  # a misnamed view stage: its groups cannot be checked
        spec = replace(spec, exchange={})
    problems += [errors.unknown_name("surface", a, domain.surfaces, f"{where}.adiabatic")
                 for a in stage.adiabatic if a not in domain.surfaces]
    base.checked(heat.check, domain, spec, where, problems)
    base.before_solving(heat.check_steady_state, domain, spec, where)
    inputs = ctx.base_inputs(NAME, heat.STAGE_VERSION) | {
        "options": stage.model_dump(exclude={"materials", "memory_limit"}),
        "materials": {p: m.reads(*READS) for p, m in sorted(mats.items())},
        "mesh": [domain.source_hash, domain.unit], "probes": ctx.probes} | base.interface_inputs(ctx, domain)
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


def heat_spec(ctx: base.Context, stage: HeatStage, where: str, power: bool = True):
    """The HeatSpec of a heat section (also the boundaries of a transient stage, ``power=False``:
    its power is a profile): (spec, material names by part, problems found)."""
    mats, names, problems = base.materials(ctx, stage, ctx.domain, where)
    spec = heat.HeatSpec(
        materials=mats, power=stage.power if power else {}, generation=stage.generation,
        flux={s: heat.HeatFlux(f.per_area, f.total) for s, f in stage.flux.items()},
        convection={s: heat.Convection(c.film_coefficient, c.ambient, c.exponent, c.reference_difference)
                    for s, c in stage.convection.items()},
        radiation=_radiation(stage, where, problems),
        fixed_temperature=stage.fixed_temperature, probes=ctx.probes, order=stage.order, solver=stage.solver,
        memory_limit=stage.memory_limit, max_iterations=stage.max_iterations,
        contacts={n: j.heat_conductance for n, j in ctx.workflow.interfaces.items()
                  if n in ctx.domain.contacts and j.kind != "section"},
        tied=tuple(n for n, j in ctx.workflow.interfaces.items() if n in ctx.domain.contacts and j.kind == "section"),
        cavities={n: heat.Cavity(dict(c.films), c.ventilation, c.inlet)
                  for n, c in getattr(stage, "cavities", {}).items()},
        exchange=_exchange(stage, where, problems) if hasattr(stage, "radiation_exchange") else {},
        view=_view(ctx, stage, where, problems) if hasattr(stage, "view") else None)
    return spec, names, problems


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
    found = list(field.notices) + _conductivity_notices(plan, field)
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
        "interfaces": [dict(r) for r in field.interfaces],
        "cavities": [dict(c, temperature_degC=round(celsius(c["temperature_K"]), 4)) for c in field.cavities],
        "notices": [str(n) for n in found],
        "notice_records": [Notice.of(n).to_dict() for n in found],
    }


def _conductivity_notices(plan: base.StagePlan, field: TemperatureField) -> list[Notice]:
    """A temperature-dependent conductivity that is not positive somewhere in its part's solved temperature
    range: the field there is not physical (heat would flow from cold to hot)."""
    out = []
    for part, material in sorted(getattr(plan.spec, "materials", {}).items()):  # an instant's spec has none
        if not material.conductivity_varies or part not in field.parts:
            continue
        low, high = field.parts[part]["min"], field.parts[part]["max"]
        t, k = material.lowest_conductivity(low, high)
        if k <= 0:
            out.append(Notice("heat.conductivity_not_positive",
                              f"part {part}: the conductivity of {material.name} falls to {k:.3g} W/(m*K) at "
                              f"{celsius(t):.1f} degC, inside the part's range {celsius(low):.1f} to "
                              f"{celsius(high):.1f} degC: the temperatures there are not physical; correct its "
                              "conductivity_polynomial (and give valid_from/valid_to)",
                              "", {"part": part, "material": material.name, "temperature_K": t, "conductivity": k}))
    return out


def outputs(domain, field: TemperatureField):
    """Temperature at the vertices [K and degC] (P2 fields at the vertices only)."""
    t = field.at_vertices
    return {"temperature_K": t, "temperature_degC": celsius(t)}, {}


def figures(folder, name, entry, field, domain, context: base.OutputContext) -> list[dict]:
    from ..outputs import figures as fig

    inside = fig.temperature_inside(folder / f"{name}_inside.png", domain, field)
    return [fig.temperature_outside(folder / f"{name}_outside.png", domain, field)] + ([inside] if inside else []) + [
        fig.temperature_section(folder / f"{name}_section.png", domain, field),
        fig.part_temperatures(folder / f"{name}_parts.png", entry["parts_degC"], context.limits_degC)]


def notices(name, entry, domain, context: base.OutputContext) -> list[Notice]:
    out = []
    open_ = [a for a in entry["adiabatic_surfaces"] if a not in entry.get("adiabatic_intended", [])]
    if open_:
        out.append(Notice("heat.adiabatic", f"adiabatic (no heat leaves): {', '.join(open_)}; check that no "
                          "convection or fixed temperature was forgotten (list intended ones under 'adiabatic')",
                          name, {"surfaces": open_}))
    out += over_limit(name, entry["parts_degC"], context.limits_degC)
    for r in heat.supplying(entry["heat_balance_W"]):
        out.append(Notice("heat.ambient_supplies", f"surface '{r['name']}' ({r['kind']} to a fixed ambient) supplies "
                          f"{r['heat_in_W']:+.4g} W to the solids; if it faces enclosed air, model the air as a "
                          "cavity (stages.NAME.cavities), whose temperature follows from its balance", name,
                          {"surface": r["name"], "kind": r["kind"], "heat_in_W": r["heat_in_W"]}))
    out += [Notice.of(n).at(name) for n in entry.get("notice_records", [])]
    return out


def over_limit(name: str, parts_degC: dict, limits: dict[str, float]) -> list[Notice]:
    """A ``heat.over_limit`` notice for every part whose peak [degC] exceeds its limit [degC] (the peak's
    time [s] is said where the part's figures carry one, as a transient stage's do)."""
    out = []
    for part, s in parts_degC.items():
        if part in limits and s["max"] > limits[part]:
            when = f" at {s['time_s']:.4g} s" if "time_s" in s else ""
            out.append(Notice("heat.over_limit", f"part {part} reaches {s['max']:.1f} degC{when}, above its limit "
                              f"{limits[part]:.1f} degC", name,
                              {"part": part, "max_degC": s["max"], "limit_degC": limits[part]}))
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
    if entry.get("interfaces"):
        out.append("<p>Interfaces with a contact conductance (heat from the first part to the second):</p>" + table(
            ["interface", "parts", "h_c [W/(m^2*K)]", "area [mm^2]", "heat [W]", "mean drop [K]", "largest drop [K]"],
            [[r["name"], " / ".join(r["parts"]), f"{r['conductance_W_per_m2K']:.4g}", f"{r['area_m2'] * 1e6:.4g}",
              f"{r['heat_W']:+.4g}", f"{r['mean_drop_K']:.4g}", f"{r['max_drop_K']:.4g}"] for r in entry["interfaces"]]))
    if entry.get("cavities"):
        out.append("<p>Enclosed air:</p>" + table(
            ["cavity", "air [degC]", "from the solids [W]", "ventilation [W]"],
            [[c["name"], f"{c['temperature_degC']:.2f}", f"{c['from_solids_W']:+.4g}", f"{c['ventilation_W']:+.4g}"]
             for c in entry["cavities"]]))
    if entry.get("probes_degC"):
        out.append(table(["probe", "temperature [degC]"], [[p, f"{t:.2f}"] for p, t in entry["probes_degC"].items()]))
    return out


def console(entry) -> list[str]:
    lines = [f"  {part:<16} min {s['min']:8.2f}  mean {s['mean']:8.2f}  max {s['max']:8.2f} degC"
             for part, s in entry["parts_degC"].items()]
    lines += [f"  probe {probe:<10} {t:8.2f} degC" for probe, t in entry["probes_degC"].items()]
    lines += [f"  {r['kind']:<18} {r['name']:<16} {r['heat_in_W']:+10.4f} W" for r in entry["heat_balance_W"]]
    lines += [f"  interface {r['name']:<14} {r['heat_W']:+10.4f} W  drop mean {r['mean_drop_K']:.3f} K, "
              f"largest {r['max_drop_K']:.3f} K" for r in entry.get("interfaces", [])]
    lines += [f"  cavity {c['name']:<17} air {c['temperature_degC']:8.2f} degC; from the solids "
              f"{c['from_solids_W']:+.3g} W, ventilation {c['ventilation_W']:+.3g} W" for c in entry.get("cavities", [])]
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
    for r in entry.get("interfaces", []):
        out |= {f"{name}.interfaces.{r['name']}.heat_W": r["heat_W"],
                f"{name}.interfaces.{r['name']}.mean_drop_K": r["mean_drop_K"]}
    out |= {f"{name}.cavities.{c['name']}.temperature_degC": c["temperature_degC"] for c in entry.get("cavities", [])}
    return out


def loads(name: str, entry: dict) -> list[list[str]]:
    """The report's rows of the heat stage's loads and boundaries: [stage, kind, where, value with units]."""
    from ..model.finishes import FINISHES

    o = entry.get("inputs", {}).get("options", {})
    rows = [[name, "power", p, f"{w:g} W"] for p, w in o.get("power", {}).items()]
    rows += [[name, "generation", p, f"{q:g} W/m^3"] for p, q in o.get("generation", {}).items()]
    for s, f in o.get("flux", {}).items():
        value = f"{f['per_area']:g} W/m^2" if f.get("per_area") is not None else f"{f.get('total', 0):g} W in total"
        rows.append([name, "heat flux", s, value])
    for s, c in o.get("convection", {}).items():
        law = (f", h ~ dT^{c['exponent']:g} from {c['reference_difference']:g} K" if c.get("exponent") else "")
        rows.append([name, "convection", s, f"h = {c['film_coefficient']:g} W/(m^2 K) to {_degC(c['ambient'])}{law}"])
    for s, r in o.get("radiation", {}).items():
        e = r["emissivity"]
        value = f"{FINISHES[e][0]:g} ({e})" if isinstance(e, str) and e in FINISHES else f"{e}"
        rows.append([name, "radiation", s, f"emissivity {value} to surroundings at {_degC(r['surroundings'])}"])
    for g, x in o.get("radiation_exchange", {}).items():
        sur = f"; rest of the view to {_degC(x['surroundings'])}" if x.get("surroundings") is not None else " (enclosure)"
        rows.append([name, "radiation exchange", g, ", ".join(f"{k} {v}" for k, v in x.get("emissivity", {}).items()) + sur])
    for c, cav in o.get("cavities", {}).items():
        films = ", ".join(f"{s} {h:g} W/(m^2 K)" for s, h in cav.get("films", {}).items())
        vent = f"; ventilation {cav['ventilation']:g} W/K from {_degC(cav['inlet'])}" if cav.get("ventilation") else "; sealed"
        rows.append([name, "enclosed air (unknown temperature)", c, films + vent])
    for i in entry.get("inputs", {}).get("interfaces", {}).items():
        n, j = i
        h = j.get("conductance") if j.get("conductance") is not None else (1 / j["resistance"] if j.get("resistance") else None)
        value = j["kind"] + (f", h_c = {h:g} W/(m^2 K)" if h is not None else "")
        rows.append([name, "interface", n + (f" ({' / '.join(j['parts'])})" if j.get("parts") else ""), value])
    rows += [[name, "fixed temperature", s, _degC(t)] for s, t in o.get("fixed_temperature", {}).items()]
    adiabatic = entry.get("adiabatic_surfaces", [])
    if adiabatic:
        rows.append([name, "adiabatic (no heat leaves)", ", ".join(adiabatic), "-"])
    return rows


def _degC(kelvin: float) -> str:
    return f"{celsius(kelvin):.1f} degC"
