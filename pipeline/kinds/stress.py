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
    kind: Literal[supports.KINDS] = Field(description="support; `minimal` takes any name that is not a surface; `contact`: a planar surface resting on a rigid flat frictionless foundation, compression only (it lifts off where it would pull; contact and separated area are reported)")  # type: ignore[valid-type]
    x: Length | None = Field(default=None, description="given displacement component (`displacement`); default free")
    y: Length | None = Field(default=None, description="given displacement component (`displacement`); default free")
    z: Length | None = Field(default=None, description="given displacement component (`displacement`); default free")
    stiffness: SpringStiffness | None = Field(default=None, description="stiffness per area (required for `spring`)")
    mirror: bool = Field(default=False, description="symmetry only: the surface is a plane of symmetry of the model "
                         "(it may pull; no caution); otherwise a symmetry support is a surface held flat, free "
                         "to slide, and tension there is cautioned (use kind = \"contact\" where it rests)")


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
    preload: dict[str, Force] = Field(default_factory=dict, description="pretension section ([interfaces] kind = "
                                      "'section') -> bolt preload, tension positive")


Schema = StressStage


def plan(ctx: base.Context, name: str, stage: StressStage, where: str) -> base.StagePlan:
    upstream = base.upstream(ctx, stage.source, SOURCE, where) if stage.source else None
    domain = upstream.domain if upstream else ctx.domain
    mats, names, problems = base.materials(ctx, stage, domain, where)
    problems += [f"{where}.supports.{s}: mirror applies to kind = \"symmetry\" only" for s, v in stage.supports.items()
                 if v.mirror and v.kind != "symmetry"]
    sups = {s: Support(v.kind, {a: getattr(v, a) for a in "xyz" if getattr(v, a) is not None} or None,
                       v.stiffness, v.mirror) for s, v in stage.supports.items()}
    lines = {n: (tuple(v.start), tuple(v.end), v.points) for n, v in ctx.workflow.lines.items()}
    spec = stress.StressSpec(mats, sups, pressure=stage.pressure,
                             force={s: tuple(f) for s, f in stage.force.items()},
                             gravity=tuple(stage.gravity) if stage.gravity else None, probes=ctx.probes,
                             order=stage.order, solver=stage.solver, memory_limit=stage.memory_limit, lines=lines,
                             preload=dict(stage.preload))
    base.checked(stress.check, domain, spec, where, problems)
    base.before_solving(supports.check, domain, spec.supports, where)
    inputs = ctx.base_inputs(NAME, stress.STAGE_VERSION) | {
        "options": stage.model_dump(exclude={"materials", "source", "memory_limit"}),
        "materials": {p: m.reads(*READS) for p, m in sorted(mats.items())},
        "mesh": [domain.source_hash, domain.unit], "probes": ctx.probes, "lines": lines,
        "upstream": upstream.key if upstream else None} | base.interface_inputs(ctx, domain)
    plan = base.StagePlan(name, NAME, domain, spec, inputs, source=stage.source, materials=names,
                          prepared={"required_safety_factor": ctx.workflow.output.required_safety_factor})
    hard = stress.risk(domain, spec, where)  # a stiffness contrast or a nearly incompressible part
    plan.notices = [Notice.of(hard)] if hard else []
    return plan


def compute(plan: base.StagePlan, upstream) -> StressField:
    load = upstream[0] if upstream is not None else None
    return stress.solve(plan.domain, load, plan.spec, where=plan.where, checked=True)


def summary(plan: base.StagePlan, field: StressField) -> dict:
    sups = plan.spec.supports
    required = plan.prepared.get("required_safety_factor", 1.5)
    parts = {p: dict(f) | {"verdict": part_verdict(f, required)} for p, f in field.parts.items()}
    return {
        "order": field.order,
        "recovery": field.meta.get("recovery", ""),
        "parts": parts,
        "verdict": overall_verdict(parts, required),
        "reactions_N": {k: list(v) for k, v in field.reactions.items()},
        "supports": {k: dict(v) for k, v in field.supports.items()},
        "equilibrium": dict(field.equilibrium),
        "probes": dict(field.probes),
        "lines": dict(field.lines),
        "features": dict(field.features),
        "displacement_max_m": float(np.linalg.norm(field.displacement, axis=1).max()),
        "solver": field.solver.to_dict() | {"history": []},
        "notices": [str(n) for n in list(plan.notices) + list(field.notices)],
        "notice_records": [Notice.of(n).to_dict() for n in field.notices],
        "planning_notices": [n.to_dict() for n in plan.notices],
        "cautions": [dict(c) for c in field.cautions],
        "support_surfaces": [n for n, v in sups.items() if v.kind != "minimal"],
        "fixed_supports": [n for n, v in sups.items() if v.kind == "fixed"],
        "bolts": {n: dict(b) for n, b in field.meta.get("preload", {}).items()},
    }


def part_verdict(f: dict, required: float) -> dict:
    """'pass', 'fail' or 'no criterion' for one part, with the quantity it used and why."""
    sf = f.get("safety_factor")
    if f.get("criterion") is None or sf is None and f.get("safety_factor_peak") is None:
        return {"verdict": "no criterion", "quantity": None, "safety_factor": None, "required": required,
                "why": "the material gives no strength" if f.get("criterion") is None else "the part is unloaded"}
    uses = f.get("verdict_uses", "peak")
    return {"verdict": "pass" if sf is None or sf >= required else "fail", "quantity": f"utilisation ({uses})",
            "safety_factor": sf, "required": required, "criterion": f["criterion"],
            "why": ("the recovered field's largest value" if uses == "peak" else
                    "the recovered field's largest value away from singular features (the peak there is "
                    "mesh-dependent and reported beside it)")}


def overall_verdict(parts: dict, required: float) -> dict:
    """'fail' if any part fails, 'pass' if every part with a criterion passes, else 'no criterion'."""
    verdicts = {p: f["verdict"]["verdict"] for p, f in parts.items()}
    judged = [v for v in verdicts.values() if v != "no criterion"]
    overall = "fail" if "fail" in judged else "pass" if judged else "no criterion"
    return {"verdict": overall, "required": required, "failing": sorted(p for p, v in verdicts.items() if v == "fail"),
            "without_criterion": sorted(p for p, v in verdicts.items() if v == "no criterion")}


def outputs(domain, field: StressField):
    """A mesh of its own, one copy of each part's points (nothing averaged across parts): P1 tetra or
    P2 tetra10 cells (VTK's node order is scikit-fem's: vertices, then edges 01, 12, 02, 03, 13, 23).
    Point data: displacement [m], stress [Pa] as a symmetric tensor xx, yy, zz, xy, yz, xz (the order
    viewers read six components in), von Mises and principal stresses (largest first) [Pa], safety
    factor [-] by the part's criterion (capped at 1e6), mapped temperature and temperature rise over
    the part's stress-free temperature [K]; cell data: part_id."""
    import meshio

    from ..stages import fem

    space = fem.space(domain, field.order)
    points, cells, ids, data = [], [], [], {k: [] for k in ("displacement_m", "stress_Pa", "von_mises_Pa",
                                                           "principal_Pa", "safety_factor", "temperature_K",
                                                           "temperature_rise_K")}
    offset = 0
    pid = domain.part_ids()
    from ..stages import constitutive

    for part in sorted(domain.parts):
        elements = domain.parts[part]
        dofs, s = field.nodal[part]
        local = np.searchsorted(dofs, space.element_dofs[:, elements])
        points.append(space.doflocs[:, dofs].T)
        cells.append(local.T + offset)
        ids.append(pid[elements])
        offset += len(dofs)
        data["displacement_m"].append(field.displacement[dofs])
        data["stress_Pa"].append(s[:, [0, 1, 2, 5, 3, 4]])
        data["von_mises_Pa"].append(constitutive.von_mises(s.T))
        data["principal_Pa"].append(constitutive.principal(s.T))
        data["safety_factor"].append(np.minimum(field.nodal_safety.get(part, np.full(len(dofs), np.nan)), 1e6))
        t = field.temperature[dofs] if len(field.temperature) else np.full(len(dofs), np.nan)
        ref = field.reference[elements[0]] if len(field.reference) else np.nan
        data["temperature_K"].append(t)
        data["temperature_rise_K"].append(t - ref)
    cell_type = "tetra10" if field.order == 2 else "tetra"
    return meshio.Mesh(np.vstack(points), [(cell_type, np.vstack(cells))],
                       point_data={k: np.concatenate(v) for k, v in data.items()},
                       cell_data={"part_id": [np.concatenate(ids)]})


def figures(folder, name, entry, field, domain, context: base.OutputContext) -> list[dict]:
    from ..outputs import figures as fig

    parts, required = entry["parts"], context.required_safety_factor
    out = []
    if any(f["safety_factor"] is not None for f in parts.values()):
        out.append(fig.safety_factors(folder / f"{name}_safety.png", parts, required))
    singular = _feature_vertices(domain, entry)
    for part in verdict_parts(parts, required):
        f = parts[part]
        quantity = "principal" if (f.get("criterion") or "").startswith("brittle") else "von_mises"
        flags = f.get("principal_max" if quantity == "principal" else "von_mises")
        out.append(fig.stress_part(folder / f"{name}_{_stem(domain, part)}.png", domain, field, part, singular, f.get("strength_Pa"),
                                   quantity, flags if isinstance(flags, dict) else None))
    board = fig.most_bonded(domain)
    if fig.plate_like(domain, board):
        out.append(fig.warpage(folder / f"{name}_warpage_{_stem(domain, board)}.png", domain, field, board))
    for line, records in getattr(field, "lines", {}).items():
        out.append(fig.line_records(folder / f"{name}_line_{line}.png", line, records))
    out.append(fig.von_mises_deformed(folder / f"{name}_von_mises.png", domain, field))
    return out


def _stem(domain, part: str) -> str:
    """A part's name in a file name: the name itself when it is a plain name, else ``part`` and its
    ``part_id`` (mesh group names may hold spaces, slashes or dots; none may reach a path)."""
    from ..flow.workflow import plain_name

    return part if plain_name(part) else f"part{sorted(domain.parts).index(part)}"


def _feature_vertices(domain, entry: dict) -> np.ndarray:
    """Vertices [ids] that lie on a singular feature of the model (stages/features.py: bimaterial free
    edges, re-entrant edges, clamp rims, point supports), for the figures' markers and colour ranges."""
    from ..stages import features

    found = features.find(domain, {n: Support(r["kind"]) for n, r in entry.get("supports", {}).items()})
    dist, _ = found.nearest(domain.points)
    return np.flatnonzero(dist <= 1e-9 * float(np.linalg.norm(np.ptp(domain.points, axis=0))))


#: At most this many parts get a stress figure of their own.
FIGURE_PARTS = 4


def verdict_parts(parts: dict, required: float) -> list[str]:
    """The parts whose stress carries the verdict: those below the required safety factor and the one
    with the lowest (most critical first, at most FIGURE_PARTS); without safety factors, the part with
    the highest von Mises peak."""
    rated = sorted((f["safety_factor"], p) for p, f in parts.items() if f["safety_factor"] is not None)
    if not rated:
        return [max(parts, key=lambda p: parts[p]["von_mises_max_Pa"])] if parts else []
    chosen = [p for sf, p in rated if sf < required] or [rated[0][1]]
    return chosen[:FIGURE_PARTS]


#: code of the notice "a part's peak lies where the elastic stress is singular" (read by the
#: convergence study)
SINGULAR_PEAK = "stress.singular_peak"


def notices(name, entry, domain, context: base.OutputContext) -> list[Notice]:
    out = [Notice.of(n) for n in entry.get("planning_notices", [])]  # e.g. solver.hard_system
    required = context.required_safety_factor
    for c in entry.get("cautions", []):
        code = SINGULAR_PEAK if c["code"] == "singular_peak" else f"stress.{c['code']}"
        out.append(Notice(code, c["message"], name, c["data"]))
    for part, f in entry["parts"].items():
        if f["safety_factor"] is not None and f["safety_factor"] < required:
            out.append(Notice("stress.safety_factor", f"part {part} has a safety factor {f['safety_factor']:.2f}, "
                              f"below the required {required:g} ({f['criterion']}; {f.get('verdict_uses')})", name,
                              {"part": part, "safety_factor": f["safety_factor"], "required": required}))
    if entry.get("fixed_supports") and entry.get("reads"):
        out.append(Notice("stress.fixed_restrains_expansion", f"fixed supports ({', '.join(entry['fixed_supports'])})"
                          " restrain free thermal expansion; stresses near them are partly an artefact of the "
                          "support model (consider springs or the minimal support)", name,
                          {"supports": entry["fixed_supports"]}))
    return out


def _mpa(v) -> str:
    return "n/a" if v is None else f"{v / 1e6:.4g}"


def _flag(rec: dict) -> str:
    near = rec.get("near")
    return "" if near is None else f"singular: {near['code'].replace('_', ' ')} ({near['owner']})"


def report(entry, context: base.OutputContext) -> list[str]:
    from ..outputs.report import table, verdict

    required = context.required_safety_factor
    out = [f"<p>Stresses: {entry.get('recovery', '')}. Each peak is flagged when it lies within two element "
           "sizes of a singular feature (bimaterial free edge, re-entrant edge, clamp rim, point support); the "
           "safety factor then uses the peak away from such features.</p>"]
    out.append(table(["part", "peak von Mises [MPa]", "at [mm]", "flag", "away from features [MPa]",
                      "quadrature max [MPa]", "max principal [MPa]", "flag", "away [MPa]", "criterion",
                      "safety factor (uses)", f"verdict (required {required:g})"], [
        [p, _mpa(f["von_mises"]["peak"]), ", ".join(f"{c * 1e3:.2f}" for c in f["von_mises_max_at_m"]),
         _flag(f["von_mises"]), _mpa(f["von_mises"]["away"]), _mpa(f["von_mises_max_quadrature_Pa"]),
         _mpa(f["principal_max"]["peak"]), _flag(f["principal_max"]), _mpa(f["principal_max"]["away"]),
         f["criterion"] or "no strength",
         "n/a" if f["safety_factor"] is None else f"{f['safety_factor']:.3g} ({f.get('verdict_uses')})",
         verdict(None if f["verdict"]["verdict"] == "no criterion" else f["verdict"]["verdict"] == "pass")]
        for p, f in entry["parts"].items()]))
    if entry.get("bolts"):
        out.append("<p>Bolts (pretension sections; preload set with no other load, then held; the clamp force "
                   "on the members equals the bolt force; joint design itself, e.g. by VDI 2230, is not "
                   "checked):</p>" + table(["bolt", "preload [N]", "after the loads [N]", "shortening [um]"], [
                       [n, f"{b['preload_N']:.5g}", f"{b['force_N']:.5g}", f"{b['shortening_m'] * 1e6:.4g}"]
                       for n, b in entry["bolts"].items()]))
    if entry.get("probes"):
        out.append("<p>Probes (the recovered field at each point):</p>" + table(
            ["probe", "von Mises [MPa]", "largest principal [MPa]", "displacement [um]", "stress xx, yy, zz [MPa]"], [
                [name, f"{v['von_mises_Pa'] / 1e6:.4g}",
                 f"{v['principal_Pa'][0] / 1e6:.4g}" if v.get("principal_Pa") else "-",
                 ", ".join(f"{c * 1e6:.3g}" for c in v["displacement_m"]),
                 ", ".join(f"{c / 1e6:.4g}" for c in v["stress_Pa"][:3]) if v.get("stress_Pa") else "-"]
                for name, v in entry["probes"].items()]))
    eq = entry["equilibrium"]
    rows = []
    for k, r in entry["reactions_N"].items():
        sup = entry.get("supports", {}).get(k, {})
        extra = ""
        if "compression_N" in sup:
            extra = f"presses {sup['compression_N']:.4g} N, pulls {sup['tension_N']:.4g} N"
        if "contact_area_m2" in sup:
            extra += (f"; contact {sup['contact_area_m2'] * 1e6:.4g} mm^2, separated "
                      f"{sup['separated_area_m2'] * 1e6:.4g} mm^2")
        rows.append([k, sup.get("kind", "")] + [f"{v:.5g}" for v in r] + [extra])
    out.append(table(["support", "kind", "Rx [N]", "Ry [N]", "Rz [N]", "normal force"], rows))
    out.append(f"<p>Applied loads {[round(v, 6) for v in eq['applied_N']]} N; sum of reactions and loads "
               f"{[f'{v:.2e}' for v in eq['sum_N']]} N (relative {eq['relative']:.1e}). Each support's reaction is "
               "the residual along its own constrained directions.</p>")
    for name, points in entry.get("lines", {}).items():
        inside = [q for q in points if not q["outside"]]
        out.append(table([f"line {name}: distance [mm]", "part", "T [degC]", "|u| [mm]", "von Mises [MPa]",
                          "max principal [MPa]"], [
            [f"{q['distance_m'] * 1e3:.3g}", q["part"], "" if q["temperature_K"] is None else
             f"{q['temperature_K'] - 273.15:.2f}", f"{np.linalg.norm(q['displacement_m']) * 1e3:.4g}",
             f"{q['von_mises_Pa'] / 1e6:.4g}", f"{q['principal_Pa'][0] / 1e6:.4g}"] for q in inside]))
    return out


def console(entry) -> list[str]:
    lines = []
    for part, f in entry["parts"].items():
        sf, v = f["safety_factor"], f["verdict"]["verdict"]
        flag = " (peak at a singular feature; safety factor from the peak away)" if f.get("verdict_uses", "peak") \
            not in ("peak", None) else ""
        lines.append(f"  {part:<16} von Mises max {f['von_mises_max_Pa'] / 1e6:9.2f} MPa at "
                     f"{[round(c * 1e3, 2) for c in f['von_mises_max_at_m']]} mm; safety factor "
                     f"{'n/a' if sf is None else f'{sf:.2f}'} ({(f['criterion'] or 'no strength').split(':')[0]}): "
                     f"{v}{flag}")
    lines.append(f"  verdict: {entry['verdict']['verdict']} (required safety factor {entry['verdict']['required']:g})")
    lines += [f"  bolt {n:<15} preload {b['preload_N']:10.1f} N; after the loads {b['force_N']:10.1f} N (clamp force "
              f"{b['force_N']:.1f} N)" for n, b in entry.get("bolts", {}).items()]
    lines.append(f"  reactions {', '.join(f'{k} {[round(v, 3) for v in r]} N' for k, r in entry['reactions_N'].items())};"
                 f" equilibrium {entry['equilibrium']['relative']:.1e}")
    return lines


def quantities(name: str, entry: dict) -> dict[str, float | None]:
    """Named figures for study tables: ``NAME.PART.von_mises_max_MPa`` (also principal_max, principal_min;
    ``von_mises_away_MPa`` and ``principal_away_MPa``: the peaks away from singular features),
    ``NAME.PART.safety_factor``, ``NAME.safety_factor_min``, ``NAME.displacement_max_mm``,
    ``NAME.probes.P.von_mises_MPa`` and ``.displacement_mm`` (magnitude), ``NAME.reactions.S.x_N``."""
    out: dict[str, float | None] = {}
    factors = []
    for part, f in entry.get("parts", {}).items():
        for k in ("von_mises_max", "principal_max", "principal_min"):
            out[f"{name}.{part}.{k}_MPa"] = f[f"{k}_Pa"] / 1e6
        for k in ("von_mises", "principal_max"):
            away = f[k]["away"]
            out[f"{name}.{part}.{k.removesuffix('_max')}_away_MPa"] = None if away is None else away / 1e6
        out[f"{name}.{part}.safety_factor"] = f["safety_factor"]
        if f["safety_factor"] is not None:
            factors.append(f["safety_factor"])
    out[f"{name}.safety_factor_min"] = min(factors) if factors else None
    out |= {f"{name}.bolts.{n}.force_N": b["force_N"] for n, b in entry.get("bolts", {}).items()}
    out[f"{name}.displacement_max_mm"] = entry["displacement_max_m"] * 1e3
    for p, v in entry.get("probes", {}).items():
        out[f"{name}.probes.{p}.von_mises_MPa"] = v["von_mises_Pa"] / 1e6
        out[f"{name}.probes.{p}.displacement_mm"] = math.hypot(*v["displacement_m"]) * 1e3
    for support, r in entry.get("reactions_N", {}).items():
        out |= {f"{name}.reactions.{support}.{a}_N": v for a, v in zip("xyz", r)}
    return out


def loads(name: str, entry: dict) -> list[list[str]]:
    """The report's rows of the supports and mechanical loads: [stage, kind, where, value with units]."""
    o = entry.get("inputs", {}).get("options", {})
    rows = []
    for s, sup in o.get("supports", {}).items():
        given = ", ".join(f"{a} = {sup[a]:g} m" for a in "xyz" if sup.get(a) is not None)
        stiff = f", {sup['stiffness']:g} N/m^3" if sup.get("stiffness") is not None else ""
        rows.append([name, "support", s, sup["kind"] + (f" ({given})" if given else "") + stiff
                     + (", a plane of symmetry" if sup.get("mirror") else "")])
    rows += [[name, "force", s, f"{f} N"] for s, f in o.get("force", {}).items()]
    rows += [[name, "pressure", s, f"{p:g} Pa"] for s, p in o.get("pressure", {}).items()]
    rows += [[name, "bolt preload", s, f"{f:g} N"] for s, f in o.get("preload", {}).items()]
    if o.get("gravity") is not None:
        rows.append([name, "gravity", "all parts", f"{o['gravity']} m/s^2"])
    return rows
