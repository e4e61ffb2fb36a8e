"""The ``stress`` stage kind: linear thermoelasticity (pipeline/stages/stress.py)."""

from __future__ import annotations

import math
from typing import Annotated, Literal

import numpy as np
from pydantic import Field

from ..fields import StressField, ThermalLoad
from ..flow.workflow import (Acceleration, Force, Length, MemoryLimit, Pressure, SolverMethod, SpringStiffness,
                             Strict)
from ..notices import Notice
from ..stages import stress, supports
from ..stages.supports import Support
from . import base

NAME = "stress"
RESULT = StressField
SOURCE = ThermalLoad
#: material properties the stress stage reads (its store key holds only these)
READS = ("youngs_modulus", "poisson_ratio", "shear_modulus", "expansion", "density", "yield_strength",
         "tensile_strength", "brittle")


class SupportSection(Strict):
    kind: Literal[supports.KINDS] = Field(description="support; `minimal` takes any name that is not a surface")  # type: ignore[valid-type]
    x: Length | None = Field(default=None, description="given displacement component (`displacement`); default free")
    y: Length | None = Field(default=None, description="given displacement component (`displacement`); default free")
    z: Length | None = Field(default=None, description="given displacement component (`displacement`); default free")
    stiffness: SpringStiffness | None = Field(default=None, description="stiffness per area (required for `spring`)")


class StressStage(Strict):
    kind: Literal["stress"]
    source: str | None = Field(default=None, description="the map stage that gives the temperatures (none: no thermal load)")
    order: Literal[1, 2] = Field(default=2, description="element order")
    solver: SolverMethod = Field(default="auto", description="linear solver (auto: by size, docs/performance.md)")
    memory_limit: MemoryLimit = None
    materials: dict[str, str] = Field(default_factory=dict, description="material for this stage only (e.g. a shell swap that keeps the heat result)")
    supports: dict[str, SupportSection] = Field(description="supports by surface")
    pressure: dict[str, Pressure] = Field(default_factory=dict, description="pressure (positive pushes on the surface)")
    force: dict[str, Annotated[list[Force], Field(min_length=3, max_length=3)]] = Field(
        default_factory=dict, description="total force spread evenly over the surface")
    gravity: Annotated[list[Acceleration], Field(min_length=3, max_length=3)] | None = Field(
        default=None, description="gravity acting on each part's density")


Schema = StressStage


def plan(ctx: base.Context, name: str, stage: StressStage, where: str) -> base.StagePlan:
    upstream = base.upstream(ctx, stage.source, SOURCE, where) if stage.source else None
    domain = upstream.domain if upstream else ctx.domain
    mats, names, problems = base.materials(ctx, stage, domain, where)
    sups = {s: Support(v.kind, {a: getattr(v, a) for a in "xyz" if getattr(v, a) is not None} or None,
                       v.stiffness) for s, v in stage.supports.items()}
    spec = stress.StressSpec(mats, sups, pressure=stage.pressure,
                             force={s: tuple(f) for s, f in stage.force.items()},
                             gravity=tuple(stage.gravity) if stage.gravity else None, probes=ctx.probes,
                             order=stage.order, solver=stage.solver, memory_limit=stage.memory_limit)
    base.checked(stress.check, domain, spec, where, problems)
    base.before_solving(supports.check, domain, spec.supports, where)
    inputs = ctx.base_inputs(NAME, stress.STAGE_VERSION) | {
        "options": stage.model_dump(exclude={"materials", "source", "memory_limit"}),
        "materials": {p: m.reads(*READS) for p, m in sorted(mats.items())},
        "mesh": [domain.source_hash, domain.unit], "probes": ctx.probes,
        "upstream": upstream.key if upstream else None}
    plan = base.StagePlan(name, NAME, domain, spec, inputs, source=stage.source, materials=names)
    hard = stress.risk(domain, spec, where)  # a stiffness contrast or a nearly incompressible part
    plan.notices = [Notice.of(hard)] if hard else []
    return plan


def compute(plan: base.StagePlan, upstream) -> StressField:
    load = upstream[0] if upstream is not None else None
    return stress.solve(plan.domain, load, plan.spec, where=plan.where, checked=True)


def summary(plan: base.StagePlan, field: StressField) -> dict:
    sups = plan.spec.supports
    return {
        "order": field.order,
        "parts": {p: dict(f) for p, f in field.parts.items()},
        "reactions_N": {k: list(v) for k, v in field.reactions.items()},
        "equilibrium": dict(field.equilibrium),
        "probes": dict(field.probes),
        "displacement_max_m": float(np.linalg.norm(field.displacement, axis=1).max()),
        "solver": field.solver.to_dict() | {"history": []},
        "notices": [str(n) for n in list(plan.notices) + list(field.notices)],
        "notice_records": [Notice.of(n).to_dict() for n in field.notices],
        "planning_notices": [n.to_dict() for n in plan.notices],
        "support_surfaces": [n for n, v in sups.items() if v.kind != "minimal"],
        "fixed_supports": [n for n, v in sups.items() if v.kind == "fixed"],
    }


def outputs(domain, field: StressField):
    """Displacement at the vertices [m] (3-vector, for warping); per cell: stress [Pa] as 6 components
    in the order xx, yy, zz, yz, xz, xy, von Mises, Tresca and principal stresses [Pa], the element
    safety factor [-] (capped at 1e6: unloaded cells would be infinite)."""
    nv = len(domain.points)
    cells = {"stress_xx_yy_zz_yz_xz_xy_Pa": field.stress, "von_mises_Pa": field.von_mises,
             "tresca_Pa": field.tresca, "principal_Pa": field.principal,
             "safety_factor": np.minimum(field.safety, 1e6)}
    return {"displacement_m": field.displacement[:nv]}, cells


def figures(folder, name, entry, field, domain, context: base.OutputContext) -> list[dict]:
    from ..outputs import figures as fig

    out = [fig.von_mises_deformed(folder / f"{name}_von_mises.png", domain, field)]
    if any(f["safety_factor"] is not None for f in entry["parts"].values()):
        out.append(fig.safety_factors(folder / f"{name}_safety.png", entry["parts"], context.required_safety_factor))
    return out


#: code of the notice "a part's peak lies where the elastic stress is singular" (read by the
#: convergence study)
SINGULAR_PEAK = "stress.singular_peak"


def notices(name, entry, domain, context: base.OutputContext) -> list[Notice]:
    out = [Notice.of(n) for n in entry.get("planning_notices", [])]  # e.g. solver.hard_system
    required = context.required_safety_factor
    edges = _singular_nodes(domain, entry.get("support_surfaces", []))
    for part, f in entry["parts"].items():
        where = np.asarray(f["von_mises_max_at_m"])
        node = int(np.argmin(np.linalg.norm(domain.points - where, axis=1)))
        if np.linalg.norm(domain.points[node] - where) < 1e-12 and node in edges:
            out.append(Notice(SINGULAR_PEAK, f"the peak von Mises of {part} lies on a support or on the edge of a "
                              "bonded interface, where stresses are singular and grow with refinement; do not "
                              "compare this peak with a strength without a convergence study", name,
                              {"part": part, "quantity": "von_mises_max_Pa", "at_m": where.tolist()}))
        if f["safety_factor"] is not None and f["safety_factor"] < required:
            out.append(Notice("stress.safety_factor", f"part {part} has a safety factor {f['safety_factor']:.2f}, "
                              f"below the required {required:g} ({f['criterion']})", name,
                              {"part": part, "safety_factor": f["safety_factor"], "required": required}))
    if entry.get("fixed_supports") and entry.get("reads"):
        out.append(Notice("stress.fixed_restrains_expansion", f"fixed supports ({', '.join(entry['fixed_supports'])})"
                          " restrain free thermal expansion; stresses near them are partly an artefact of the "
                          "support model (consider springs or the minimal support)", name,
                          {"supports": entry["fixed_supports"]}))
    return out


def _singular_nodes(domain, support_surfaces: list[str]) -> set[int]:
    """Nodes on support surfaces and on the boundary edges of interfaces."""
    nodes = set()
    for s in support_surfaces:
        if s in domain.surfaces:
            nodes.update(np.unique(domain.mesh.facets[:, domain.surfaces[s]]).tolist())
    boundary = set(np.unique(domain.mesh.facets[:, domain.boundary_facets()]).tolist())
    for facets in domain.interfaces.values():
        nodes.update(set(np.unique(domain.mesh.facets[:, facets]).tolist()) & boundary)
    return nodes


def report(entry, context: base.OutputContext) -> list[str]:
    from ..outputs.report import table, verdict

    required = context.required_safety_factor
    out = [table(["part", "peak von Mises [MPa]", "at [mm]", "max principal [MPa]", "criterion",
                  "safety factor", f"verdict (required {required:g})"], [
        [p, f"{f['von_mises_max_Pa'] / 1e6:.4g}", ", ".join(f"{c * 1e3:.2f}" for c in f["von_mises_max_at_m"]),
         f"{f['principal_max_Pa'] / 1e6:.4g}", f["criterion"],
         "n/a" if f["safety_factor"] is None else f"{f['safety_factor']:.3g}",
         verdict(None if f["safety_factor"] is None else f["safety_factor"] >= required)]
        for p, f in entry["parts"].items()])]
    eq = entry["equilibrium"]
    out.append(table(["support", "Rx [N]", "Ry [N]", "Rz [N]"], [[k] + [f"{v:.5g}" for v in r]
                                                                for k, r in entry["reactions_N"].items()]))
    out.append(f"<p>Applied loads {[round(v, 6) for v in eq['applied_N']]} N; sum of reactions and loads "
               f"{[f'{v:.2e}' for v in eq['sum_N']]} N (relative {eq['relative']:.1e}).</p>")
    return out


def console(entry) -> list[str]:
    lines = []
    for part, f in entry["parts"].items():
        sf = f["safety_factor"]
        lines.append(f"  {part:<16} von Mises max {f['von_mises_max_Pa'] / 1e6:9.2f} MPa at "
                     f"{[round(c * 1e3, 2) for c in f['von_mises_max_at_m']]} mm; safety factor "
                     f"{'n/a' if sf is None else f'{sf:.2f}'} ({f['criterion'].split(':')[0]})")
    lines.append(f"  reactions {', '.join(f'{k} {[round(v, 3) for v in r]} N' for k, r in entry['reactions_N'].items())};"
                 f" equilibrium {entry['equilibrium']['relative']:.1e}")
    return lines


def quantities(name: str, entry: dict) -> dict[str, float | None]:
    """Named figures for study tables: ``NAME.PART.von_mises_max_MPa`` (also principal_max, principal_min),
    ``NAME.PART.safety_factor``, ``NAME.safety_factor_min``, ``NAME.displacement_max_mm``,
    ``NAME.probes.P.von_mises_MPa`` and ``.displacement_mm`` (magnitude), ``NAME.reactions.S.x_N``."""
    out: dict[str, float | None] = {}
    factors = []
    for part, f in entry.get("parts", {}).items():
        for k in ("von_mises_max", "principal_max", "principal_min"):
            out[f"{name}.{part}.{k}_MPa"] = f[f"{k}_Pa"] / 1e6
        out[f"{name}.{part}.safety_factor"] = f["safety_factor"]
        if f["safety_factor"] is not None:
            factors.append(f["safety_factor"])
    out[f"{name}.safety_factor_min"] = min(factors) if factors else None
    out[f"{name}.displacement_max_mm"] = entry["displacement_max_m"] * 1e3
    for p, v in entry.get("probes", {}).items():
        out[f"{name}.probes.{p}.von_mises_MPa"] = v["von_mises_Pa"] / 1e6
        out[f"{name}.probes.{p}.displacement_mm"] = math.hypot(*v["displacement_m"]) * 1e3
    for support, r in entry.get("reactions_N", {}).items():
        out |= {f"{name}.reactions.{support}.{a}_N": v for a, v in zip("xyz", r)}
    return out
