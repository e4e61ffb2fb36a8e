"""The ``view`` stage kind: view factors between surface groups (pipeline/stages/view.py).

Its result depends on the geometry only (mesh, groups, patch size), so a heat stage that reads it
(``view = "NAME"``) recomputes radiation exchange after a power or material change without
recomputing the view factors."""

from __future__ import annotations

from typing import Literal

from pydantic import Field

from ..fields import ViewFactors
from ..flow.workflow import Strict, quantity
from ..notices import Notice
from ..stages import view
from . import base

NAME = "view"
RESULT = ViewFactors
SOURCE = None
#: the view factors read no material property
READS = ()


class GroupSection(Strict):
    surfaces: list[str] = Field(description="surfaces that exchange radiation with each other")
    enclosure: bool = Field(default=False, description="true: they close a cavity (no view to the surroundings); "
                            "false: the rest of their view goes to the surroundings")


class ViewStage(Strict):
    kind: Literal["view"]
    patch_size: quantity("m", ge=0) = Field(default=0.005, description="edge of the cells that cluster facets "
                                            "into patches (0: one patch per facet); cost grows as patches x facets")
    groups: dict[str, GroupSection] = Field(description="groups of surfaces that exchange radiation")


Schema = ViewStage


def plan(ctx: base.Context, name: str, stage: ViewStage, where: str) -> base.StagePlan:
    spec = view.ViewSpec({g: view.Group(tuple(s.surfaces), s.enclosure) for g, s in stage.groups.items()},
                         stage.patch_size)
    base.checked(view.check, ctx.domain, spec, where, [])
    inputs = ctx.base_inputs(NAME, view.STAGE_VERSION) | {
        "options": stage.model_dump(), "mesh": [ctx.domain.source_hash, ctx.domain.unit]}
    return base.StagePlan(name, NAME, ctx.domain, spec, inputs)


def compute(plan: base.StagePlan, upstream) -> ViewFactors:
    return view.solve(plan.domain, plan.spec, where=plan.where, checked=True)


def summary(plan: base.StagePlan, result: ViewFactors) -> dict:
    """Per group: patches, facets, area [m^2], mean view to the surroundings, residuals; cost."""
    groups = {}
    for n, g in result.groups.items():
        area = float(g.area.sum())
        groups[n] = {"patches": len(g.area), "facets": len(g.facets), "area_m2": area, "enclosure": g.enclosure,
                     "surroundings_view": float(g.area @ g.surroundings / area), "residuals": g.residuals}
    return {"patch_size_m": result.patch_size, "groups": groups, "rays": result.meta.get("rays"),
            "seconds_view_factors": result.meta.get("seconds")}


#: raw summation residual of an enclosure above which its patches are called coarse: the view factors'
#: discretisation error is then of the order of several per cent (docs/theory.md, "Radiation exchange")
COARSE = 0.05


def notices(name, entry, domain, context: base.OutputContext) -> list[Notice]:
    out = []
    for group, g in entry["groups"].items():
        raw = g["residuals"]["raw"]["summation"]
        if g["enclosure"] and raw > COARSE:
            out.append(Notice("view.coarse_patches", f"the view factors of enclosure {group} missed their sum of 1 "
                              f"by up to {raw:.1%} before correction; halve patch_size and compare", name,
                              {"group": group, "raw_summation": raw}))
    return out


def report(entry, context: base.OutputContext) -> list[str]:
    from ..outputs.report import table

    return ["<p>View factors (patch size {:g} mm; residuals relative, before and after the correction):</p>"
            .format(entry["patch_size_m"] * 1e3) + table(
                ["group", "patches", "facets", "area [m^2]", "enclosure", "view to surroundings",
                 "reciprocity raw", "summation raw (max, area mean)", "summation corrected"],
                [[n, str(g["patches"]), str(g["facets"]), f"{g['area_m2']:.4g}", "yes" if g["enclosure"] else "no",
                  f"{g['surroundings_view']:.3f}", f"{g['residuals']['raw']['reciprocity']:.1e}",
                  f"{g['residuals']['raw']['summation']:.1e}, {g['residuals']['raw'].get('summation_mean', 0):.1e}",
                  f"{g['residuals']['corrected']['summation']:.1e}"]
                 for n, g in entry["groups"].items()])]


def console(entry) -> list[str]:
    return [f"  group {n:<12} {g['patches']:6d} patches  {g['facets']:7d} facets  view to surroundings "
            f"{g['surroundings_view']:.3f}  raw summation residual {g['residuals']['raw']['summation']:.1e} "
            f"(area mean {g['residuals']['raw'].get('summation_mean', 0):.1e})"
            for n, g in entry["groups"].items()]
