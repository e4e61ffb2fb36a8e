"""The ``cycle`` stage kind: ranges between solved states and solder-joint life (pipeline/stages/cycle.py,
pipeline/stages/life.py).  Each state is a stress stage, i.e. a cached heat -> map -> stress chain."""

from __future__ import annotations

from typing import Annotated, Literal

import numpy as np
from pydantic import Field

from .. import errors
from ..fields import CycleField, StressField
from ..flow.workflow import Length, PositiveLength, Power, Strict, Temperature, quantity
from ..notices import Notice, Problem
from ..stages import cycle, life, superpose
from . import base

NAME = "cycle"
RESULT = CycleField
SOURCE = None  # it reads several stress stages: ``states``
#: what the strain ranges and life estimates read (the stresses come from the states' own keys)
READS = ("youngs_modulus", "poisson_ratio", "shear_modulus", "expansion")
COMPONENTS = ("xx", "yy", "zz", "yz", "xz", "xy")


class JointSection(Strict):
    part: str = Field(description="the meshed solder part of the joint")
    component: str = Field(description="the part on the joint's component side (its expansion)")
    board: str = Field(description="the part the component is mounted on (its expansion)")
    model: Literal[life.MODELS] = Field(default="leadless", description="Engelmaier form: leadless or leaded")  # type: ignore[valid-type]
    distance: PositiveLength | None = Field(default=None, description="distance from the neutral point L_D; default "
                                            "the largest in-plane distance of the part's points from neutral_point")
    neutral_point: Annotated[list[Length], Field(min_length=3, max_length=3)] = Field(
        default_factory=lambda: [0.0, 0.0, 0.0], description="the point that does not move (a symmetry corner); default the origin")
    height: PositiveLength | None = Field(default=None, description="joint height h; default the part's z extent")
    factor: float = Field(default=1.0, gt=0, description="Engelmaier's empirical factor F (about 1 leadless)")
    cycles_per_day: float = Field(default=24.0, gt=0, description="cyclic frequency f (model limits 1-1000)")
    lead_stiffness: quantity("N/m", gt=0) | None = Field(default=None, description="lead diagonal stiffness K_D (leaded)")
    area: quantity("m**2", gt=0) | None = Field(default=None, description="effective solder attach area A (leaded)")
    ductility: float | None = Field(default=None, gt=0, description="Coffin-Manson fatigue ductility coefficient eps_f")
    exponent: float | None = Field(default=None, lt=0, description="Coffin-Manson fatigue ductility exponent c")
    source: str = Field(default="", description="where the Coffin-Manson constants come from (required with them)")


class StateSection(Strict):
    ambient: Temperature = Field(description="ambient of every convection surface of the template's heat stage")
    power: dict[str, Power] = Field(default_factory=dict, description="part powers of the state (parts not named: 0 W)")


class CycleStage(Strict):
    kind: Literal["cycle"]
    states: list[str] = Field(min_length=2, description="the states compared, in order: stress stages, or names "
                              "under `superposed` (two or more states of one model)")
    template: str | None = Field(default=None, description="a stress stage whose heat -> map -> stress chain the "
                                 "`superposed` states vary (their ambient and powers)")
    superposed: dict[str, StateSection] = Field(default_factory=dict, description="states given by ambient and "
                                                "powers, built from unit solutions when the chain is linear")
    superposition: Literal["auto", "off"] = Field(default="auto", description="`off`: solve each superposed state "
                                                  "through the whole chain instead (e.g. to compare)")
    joints: dict[str, JointSection] = Field(default_factory=dict, description="named solder joints: life estimates")

    def upstream_names(self) -> list[str]:
        direct = [s for s in self.states if s not in self.superposed]
        return direct + ([self.template] if self.template and self.superposed else [])


Schema = CycleStage


def _chain(ctx: base.Context, stage: CycleStage, where: str, problems: list) -> superpose.Chain | None:
    """The template's heat -> map -> stress chain, or None (problems say why)."""
    if not stage.superposed:
        if stage.template:
            problems.append(f"{where}.template: a template is read by `superposed` states; there are none")
        return None
    if stage.template is None:
        problems.append(f"{where}.template: superposed states need a template stress stage (its chain is varied)")
        return None
    t = ctx.planned.get(stage.template)
    m = ctx.planned.get(t.source) if t is not None and t.source else None
    h = ctx.planned.get(m.source) if m is not None and m.source else None
    if t is None or t.kind != "stress" or m is None or h is None or h.kind != "heat":
        valid = [n for n, p in ctx.planned.items() if p.kind == "stress"]
        problems.append(errors.unknown_name("stress stage reading a map of a heat stage", stage.template, valid,
                                            f"{where}.template"))
        return None
    for state, s in stage.superposed.items():
        problems += [errors.unknown_name("part", p, h.domain.parts, f"{where}.superposed.{state}.power")
                     for p in s.power if p not in h.domain.parts]
    return superpose.Chain(h.domain, h.spec, m.spec, t.domain, t.spec)


def _superposition(chain, stage: CycleStage) -> dict:
    """Whether the superposed states are built from unit solutions, and why (or why not)."""
    if chain is None:
        return {"used": False, "why": "each state is its own stress stage, solved and stored on its own"}
    terms = superpose.linear_terms(chain)
    if terms:
        return {"used": False, "why": f"refused, each superposed state solved directly: not exact with "
                                      f"{'; '.join(terms)}"}
    if stage.superposition == "off":
        return {"used": False, "why": "superposition = \"off\": each superposed state solved directly"}
    parts = sorted({p for s in stage.superposed.values() for p in s.power})
    return {"used": True, "parts": parts,
            "why": (f"{len(stage.superposed)} states from {len(parts)} heat and {1 + len(parts)} stress unit solutions "
                    "(+1 with per-part stress-free temperatures); exact because the heat problem is linear "
                    "(constant conductivities, film coefficients independent of temperature, no radiation), the "
                    "states differ only in the ambient and part powers, mapping is linear in the field, stiffness "
                    "and expansion do not depend on temperature, the supports are bilateral and hold at zero, and "
                    "there are no mechanical loads")}


def plan(ctx: base.Context, name: str, stage: CycleStage, where: str) -> base.StagePlan:
    problems, planned = [], []
    chain = _chain(ctx, stage, where, problems)
    for state in (s for s in stage.states if s not in stage.superposed):
        kind = ctx.kinds.get(state)
        if kind is not None and kind != "stress":
            problems.append(Problem("stage.source_kind", f"stage '{state}' is a {kind} stage; a cycle compares "
                                    "stress stages", f"{where}.states", {"source": state, "kind": kind}))
        elif state not in ctx.planned:
            valid = [n for n, p in ctx.planned.items() if p.kind == "stress"]
            problems.append(errors.unknown_name("stress stage", state, valid, f"{where}.states"))
        else:
            planned.append(ctx.planned[state])
    if len(set(stage.states)) != len(stage.states):
        problems.append(f"{where}.states: a state is named twice")
    unused = sorted(set(stage.superposed) - set(stage.states))
    if unused:
        problems.append(f"{where}.superposed: {', '.join(unused)} not among the states")
    if problems:
        raise errors.InputError(problems)
    if chain is not None:
        planned.append(ctx.planned[stage.template])
    domain = planned[0].domain
    for p in planned[1:]:
        if p.domain.source_hash != domain.source_hash or p.spec.order != planned[0].spec.order:
            problems.append(f"{where}.states: {p.name} is on another mesh or order than {planned[0].name}; a cycle "
                            "compares states of one structural model")
    mats = planned[0].spec.materials
    for p in planned[1:]:
        differ = sorted(part for part in mats if p.spec.materials[part].reads(*READS) != mats[part].reads(*READS))
        if differ:
            problems.append(f"{where}.states: {p.name} gives parts {', '.join(differ)} other materials than "
                            f"{planned[0].name}; a cycle compares states of one structure")
    joints = {n: life.Joint(j.part, j.component, j.board, j.model, j.distance, tuple(j.neutral_point), j.height,
                            j.factor, j.cycles_per_day, j.lead_stiffness, j.area, j.ductility, j.exponent, j.source)
              for n, j in stage.joints.items()}
    spec = cycle.CycleSpec(tuple(stage.states), mats, joints, planned[0].spec.supports)
    problems += life.check(domain, joints, mats, where)
    if problems:
        raise errors.InputError(problems)
    inputs = ctx.base_inputs(NAME, cycle.STAGE_VERSION) | {
        "options": stage.model_dump(), "materials": {p: m.reads(*READS) for p, m in sorted(mats.items())},
        "mesh": [domain.source_hash, domain.unit], "upstream": {p.name: p.key for p in planned}}
    return base.StagePlan(name, NAME, domain, spec, inputs, materials=planned[0].materials,
                          sources=tuple(stage.upstream_names()),
                          prepared={"chain": chain, "superposition": _superposition(chain, stage)})


def compute(plan: base.StagePlan, upstream) -> CycleField:
    import dataclasses

    fields = {name: result for name, (result, _) in zip(plan.sources, upstream)}
    stage, chain, record = plan.stage, plan.prepared["chain"], dict(plan.prepared["superposition"])
    if chain is not None:
        if record["used"]:
            units = superpose.units(chain, record["parts"], plan.where)
            for state, s in stage.superposed.items():
                fields[state] = superpose.state(units, s.ambient, s.power)
            own = superpose.state(units, *superpose.template_loads(chain))
            record |= {"solves": units.solves, "template_check": {
                "stage": stage.template, "relative_difference": superpose.relative_difference(own, fields[stage.template]),
                "what": "the template's own loads superposed against its direct solve (recovered nodal stresses)"}}
        else:
            for state, s in stage.superposed.items():
                fields[state] = superpose.direct(chain, s.ambient, s.power, plan.where)
            record["solves"] = {"heat": len(stage.superposed), "stress": len(stage.superposed)}
    field = cycle.evaluate(plan.domain, fields, plan.spec, plan.where)
    return dataclasses.replace(field, meta=field.meta | {"superposition": record})


def summary(plan: base.StagePlan, field: CycleField) -> dict:
    return {"states": list(field.states), "recovery": field.meta.get("recovery", ""),
            "parts": {p: dict(f) for p, f in field.parts.items()}, "joints": dict(field.life),
            "equivalent_range_max_Pa": float(field.equivalent_range.max()),
            "superposition": field.meta.get("superposition", {"used": False, "why": ""})}


def outputs(domain, field: CycleField):
    """The workflow's mesh (P1 cells) with cell data: equivalent, von Mises and component ranges [Pa], mean
    stress [Pa] (xx, yy, zz, xy, yz, xz), equivalent mechanical strain range [-], the governing states and
    the states of the largest and smallest von Mises (indices into ``states``), part_id."""
    import meshio

    reorder = [0, 1, 2, 5, 3, 4]
    data = {"equivalent_range_Pa": field.equivalent_range, "von_mises_range_Pa": field.von_mises_range,
            "stress_range_Pa": field.component_range[:, reorder], "mean_stress_Pa": field.mean[:, reorder],
            "strain_range": field.strain_range, "state_a": field.pair[:, 0], "state_b": field.pair[:, 1],
            "state_of_max": field.state_max, "state_of_min": field.state_min, "part_id": domain.part_ids()}
    return meshio.Mesh(domain.points, [("tetra", domain.tetrahedra)], cell_data={k: [np.asarray(v)] for k, v in data.items()})


def figures(folder, name, entry, field, domain, context) -> list[dict]:
    from ..outputs import figures as fig

    return [fig.cell_values(folder / f"{name}_range.png", domain, field.equivalent_range / 1e6,
                            f"{name}: equivalent stress range", "von Mises of the stress difference between "
                            f"{' / '.join(field.states)} (largest pair), element means", "MPa")]


def notices(name, entry, domain, context) -> list[Notice]:
    out = []
    for joint, j in entry.get("joints", {}).items():
        out.append(Notice("cycle.life_screening", f"joint {joint}: {j['caution']}", name, {"joint": joint}))
        for limit in j["limits"]:
            out.append(Notice("cycle.life_limits", f"joint {joint}: {limit}", name, {"joint": joint}))
    return out


def _flag(rec: dict) -> str:
    near = rec.get("near")
    return "" if near is None else f"singular: {near['code'].replace('_', ' ')} ({near['owner']})"


def _away(rec: dict) -> str:
    return "" if rec.get("away") is None else _mpa(rec["away"])


def _checked(record: dict) -> str:
    check = record.get("template_check")
    if not check:
        return ""
    return (f"; checked: {check['what']}, stage {check['stage']}, relative difference "
            f"{check['relative_difference']:.1e}")


def _count(n) -> str:
    return "no strain range" if n is None else f"{n:.3g}"


def _mpa(v) -> str:
    return f"{v / 1e6:.4g}"


def report(entry, context) -> list[str]:
    from ..outputs.report import table

    out = [f"<p>Ranges between the states {', '.join(entry['states'])} ({entry['recovery']}); elastic analysis. "
           f"Superposition: {'used' if entry['superposition']['used'] else 'not used'} "
           f"({entry['superposition']['why']}){_checked(entry['superposition'])}.</p>"]
    out.append(table(["part", "equivalent range [MPa]", "flag", "away from features [MPa]", "between", "at [mm]",
                      "mean von Mises [MPa]",
                      "mean hydrostatic [MPa]", "von Mises range [MPa]", "largest component range [MPa]",
                      "von Mises max [MPa] (state)", "von Mises min [MPa] (state)", "strain range [-]"], [
        [p, _mpa(f["equivalent_range_max_Pa"]), _flag(f["equivalent_range"]), _away(f["equivalent_range"]),
         " / ".join(f["between"]), ", ".join(f"{c * 1e3:.2f}" for c in f["at_m"]),
         _mpa(f["mean_von_mises_Pa"]), _mpa(f["mean_hydrostatic_Pa"]), _mpa(f["von_mises_range_max_Pa"]),
         max(f["component_range_max_Pa"].items(), key=lambda kv: kv[1])[0] + " " +
         _mpa(max(f["component_range_max_Pa"].values())),
         f"{_mpa(f['von_mises_max_Pa'])} ({f['von_mises_max_state']})",
         f"{_mpa(f['von_mises_min_Pa'])} ({f['von_mises_min_state']})", f"{f['strain_range_max']:.3g}"]
        for p, f in entry["parts"].items()]))
    for joint, j in entry.get("joints", {}).items():
        e = j["engelmaier"]
        rows = [["Engelmaier (" + j["model"] + ")", f"{e['shear_strain_range']:.3g} (shear)", f"{e['exponent_c']:.3f}",
                 _count(e["cycles_50pct"]), e["source"]]]
        if "coffin_manson" in j:
            c = j["coffin_manson"]
            rows.append(["Coffin-Manson (meshed part)", f"{c['strain_range_volume_mean']:.3g} (equivalent, volume mean;"
                         f" peak {c['strain_range_peak']:.3g})", f"{c['exponent']:.3f}", _count(c["cycles"]), c["source"]])
        out.append(f"<p>Joint {joint} between {' / '.join(j['between'])}: mean joint temperature "
                   f"{j['joint_temperature_mean_degC']:.1f} degC, swing {j['joint_temperature_range_K']:.1f} K, "
                   f"expansion mismatch {j['mismatch']:.3g}, L_D {j['distance_m'] * 1e3:.3g} mm, "
                   f"h {j['height_m'] * 1e3:.3g} mm, {j['cycles_per_day']:g} cycles/day. "
                   f"<b>Caution: {j['caution']}.</b> {' '.join(j['limits'])}</p>")
        out.append(table([f"{joint}: model", "strain range", "exponent c", "cycles to failure (50 %)", "source"], rows))
    return out


def console(entry) -> list[str]:
    lines = [f"  {p:<16} equivalent range {f['equivalent_range_max_Pa'] / 1e6:9.2f} MPa ({' / '.join(f['between'])}"
             f"{'; at a singular feature, away ' + _away(f['equivalent_range']) + ' MPa' if f['equivalent_range']['near'] else ''}),"
             f" mean von Mises {f['mean_von_mises_Pa'] / 1e6:.2f} MPa, strain range {f['strain_range_max']:.3g}"
             for p, f in entry["parts"].items()]
    for joint, j in entry.get("joints", {}).items():
        cm = j.get("coffin_manson")
        lines.append(f"  joint {joint}: Engelmaier {_count(j['engelmaier']['cycles_50pct'])} cycles (50 %)"
                     + (f", Coffin-Manson {_count(cm['cycles'])}" if cm else "") + " -- screening estimate only")
    return lines


def quantities(name: str, entry: dict) -> dict[str, float | None]:
    """``NAME.PART.equivalent_range_MPa``, ``NAME.PART.strain_range``, ``NAME.joints.J.engelmaier_cycles``."""
    out: dict[str, float | None] = {}
    for part, f in entry.get("parts", {}).items():
        out[f"{name}.{part}.equivalent_range_MPa"] = f["equivalent_range_max_Pa"] / 1e6
        away = f["equivalent_range"]["away"]
        out[f"{name}.{part}.equivalent_range_away_MPa"] = None if away is None else away / 1e6
        out[f"{name}.{part}.strain_range"] = f["strain_range_max"]
    for joint, j in entry.get("joints", {}).items():
        out[f"{name}.joints.{joint}.engelmaier_cycles"] = j["engelmaier"]["cycles_50pct"]
    return out
