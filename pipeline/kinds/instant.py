"""The ``instant`` stage kind: one kept field of a transient stage as a TemperatureField.

A map stage reads temperatures from any stage whose result is a TemperatureField, so an instant
stage between a transient stage and a map stage is all the map and stress stages need: each instant
is its own stage with its own key (the transient stage's key and the instant), so choosing another
instant reruns only the instant, map and stress stages after it.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

from pydantic import Field

from .. import errors
from ..fields import TemperatureField
from ..flow.workflow import Strict
from ..notices import Problem
from ..stages import transient
from . import base
from . import heat as heat_kind

NAME = "instant"
RESULT = TemperatureField
SOURCE = transient.TransientField
READS: tuple[str, ...] = ()
STAGE_VERSION = 1


@dataclass(frozen=True)
class Pick:
    """What an instant stage reads: the snapshot label and the transient stage's heat spec."""

    label: str
    heat: object

    @property
    def order(self) -> int:
        return self.heat.order


class InstantStage(Strict):
    kind: Literal["instant"]
    source: str = Field(description="the transient stage")
    at: float | str = Field(description="a time [s] listed in the transient stage's `instants`, `end`, "
                            "`max_difference:PART` (the instant of the largest max - min within the part) or "
                            "`max_difference:A:B` (largest max(A) - min(B); the pair listed in `differences`)")


Schema = InstantStage


def label(stage: InstantStage, spec: transient.TransientSpec, where: str) -> str:
    """The transient result's snapshot label that ``at`` names; every problem reported at once."""
    at = stage.at
    if isinstance(at, (int, float)):
        for t in spec.instants:
            if abs(t - at) <= 1e-9 * max(1.0, abs(t)):
                return f"t={t:g}"
        raise errors.InputError(Problem("instant.time", f"{at:g} s is not among the transient stage "
                                        f"'{stage.source}''s instants ({', '.join(f'{t:g}' for t in spec.instants) or 'none'}); "
                                        "add it there", f"{where}.at", {"at": at}))
    kept = ["end"] + [f"max_difference:{p}" for p in sorted(spec.heat.materials)]
    kept += [f"max_difference:{a}:{b}" for a, b in spec.differences]
    if at not in kept:
        raise errors.InputError(errors.unknown_name("instant", at, kept, f"{where}.at"))
    return at


def plan(ctx: base.Context, name: str, stage: InstantStage, where: str) -> base.StagePlan:
    up = base.upstream(ctx, stage.source, SOURCE, where)
    chosen = label(stage, up.spec, where)
    inputs = ctx.base_inputs(NAME, STAGE_VERSION) | {"options": {"at": chosen}, "upstream": up.key}
    return base.StagePlan(name, NAME, up.domain, Pick(chosen, up.spec.heat), inputs, source=stage.source)


def compute(plan: base.StagePlan, upstream) -> TemperatureField:
    result, domain = upstream
    return transient.at_instant(domain, plan.spec.heat, result, plan.spec.label, where=plan.where)


def summary(plan: base.StagePlan, field: TemperatureField) -> dict:
    out = heat_kind.summary(plan, field) | {"instant": field.meta["instant"], "time_s": field.meta["time_s"]}
    out["adiabatic_intended"] = []
    return out


outputs = heat_kind.outputs


def console(entry) -> list[str]:
    return [f"  {entry['instant']} at {entry['time_s']:.6g} s"] + heat_kind.console(entry)
