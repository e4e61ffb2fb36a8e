"""The ``transient`` stage kind: heat conduction in time (pipeline/stages/transient.py).

Its section is the heat section (boundaries, materials, order, solver) with power per part as a
number or a profile, profiles of convection ambients, the initial state (a uniform temperature or
the steady result of a heat stage named by ``source``) and the time-integration settings, all in
its store key.  Its result is a TransientField; an ``instant`` stage picks one kept field of it.
"""

from __future__ import annotations

import math

import numpy as np
from typing import Annotated, Literal

from pydantic import Field, model_validator

from ..fields import TemperatureField
from ..flow.workflow import Power, Strict, Temperature, quantity
from ..model.units import celsius
from ..notices import Notice
from ..stages import impedance, transient
from . import base
from . import heat as heat_kind

NAME = "transient"
RESULT = transient.TransientField
#: the initial field, when ``source`` names a heat stage
SOURCE = TemperatureField
READS = ("conductivity", "density", "specific_heat")

Time = quantity("s", ge=0)
PositiveTime = quantity("s", gt=0)


def _profile(value, what: str, low_default):
    class Profile(Strict):
        table: list[tuple[Time, value]] | None = Field(default=None, description=f"rows [time, {what}], linear between "
                                                       "rows (or held: `hold`), the last value held after the last row")
        hold: bool = Field(default=False, description="hold each row's value until the next row (steps)")
        period: PositiveTime | None = Field(default=None, description="repeat the table, or the duty cycle, with this period")
        on: PositiveTime | None = Field(default=None, description="duty cycle: `high` for this long from the start of each period, then `low`")
        high: value | None = Field(default=None, description=f"duty cycle: {what} while on")
        low: value | None = Field(default=low_default, description=f"duty cycle: {what} while off")

        @model_validator(mode="after")
        def _one_form(self):
            cycle = self.on is not None or self.high is not None
            if (self.table is None) == (not cycle):
                raise ValueError("give either 'table' (rows [time, value]) or a duty cycle ('period', 'on', 'high')")
            if cycle and (self.period is None or self.on is None or self.high is None or self.low is None):
                raise ValueError("a duty cycle needs 'period', 'on', 'high' (and 'low')")
            if cycle and not self.on < self.period:
                raise ValueError("'on' must be shorter than 'period'")
            return self

        def profile(self) -> transient.Profile:
            if self.table is None:
                return transient.Profile.duty_cycle(self.period, self.on, self.high, self.low)
            return transient.Profile(tuple(r[0] for r in self.table), tuple(r[1] for r in self.table),
                                     hold=self.hold, period=self.period)

    Profile.__name__ = Profile.__qualname__ = f"{what.split()[0].capitalize()}Profile"
    return Profile


PowerProfile = _profile(Power, "power", 0.0)
AmbientProfile = _profile(Temperature, "ambient temperature", None)


class ImpedanceSection(Strict):
    part: str = Field(description="part whose hottest point gives Z_th = (T(t) - T(0)) / P for the power step")
    terms: Annotated[int, Field(ge=1, le=12)] = Field(default=6, description="Foster terms at most")
    tolerance: Annotated[float, Field(gt=0, lt=1)] = Field(default=0.01, description="largest fit error relative to Z_th at the end")


class TransientStage(heat_kind.HeatStage):
    kind: Literal["transient"]
    source: str | None = Field(default=None, description="a heat stage whose steady result is the initial field (same order)")
    initial: Temperature = Field(default=293.15, description="uniform initial temperature (without `source`)")
    power: dict[str, Power | PowerProfile] = Field(default_factory=dict, description="power per part: a number, "
                                                   "or a profile (`table`, `hold`, `period`; or a duty cycle `period`, `on`, `high`, `low`)")
    ambient: dict[str, AmbientProfile] = Field(default_factory=dict, description="convection ambient in time, by "
                                               "surface (replaces that surface's `ambient`)")
    method: Literal["euler", "bdf2"] = Field(default="bdf2", description="backward Euler (order 1) or BDF2 (order 2)")
    end: PositiveTime = Field(description="final time (or the longest, with `periodic`)")
    periodic: quantity("K", gt=0) | None = Field(default=None, description="stop at the first period end at which "
                                                 "no temperature changed by more than this over the period")
    step: PositiveTime = Field(default=1e-3, description="first step, and the step after each load jump")
    min_step: PositiveTime = Field(default=1e-9, description="smallest step before the run fails")
    max_step: PositiveTime | None = Field(default=None, description="largest step (default: none)")
    tolerance: quantity("K", gt=0) = Field(default=0.05, description="local error per step")
    adaptive: bool = Field(default=True, description="adapt the step to `tolerance` (false: fixed `step`)")
    max_steps: Annotated[int, Field(gt=0)] = Field(default=100000, description="accepted steps at most")
    instants: list[Time] = Field(default_factory=list, description="times whose full field is kept (for `instant` stages)")
    differences: list[tuple[str, str]] = Field(default_factory=list, description="part pairs [a, b] whose largest "
                                               "max(a) - min(b) is tracked and its field kept")
    impedance: ImpedanceSection | None = Field(default=None, description="Z_th(t) of the power step and its Foster network")

    def upstream_names(self) -> list[str]:
        """The stages this one reads: the steady heat stage of its initial field and its view factors' stage."""
        return [n for n in (self.source, self.view) if n]


Schema = TransientStage


def spec_of(ctx: base.Context, stage: TransientStage, where: str):
    """The TransientSpec of a section: (spec, material names, problems)."""
    hs, names, problems = heat_kind.heat_spec(ctx, stage, where, power=False)
    power = {p: transient.Profile.constant(v) if isinstance(v, float) else v.profile() for p, v in stage.power.items()}
    z = stage.impedance
    spec = transient.TransientSpec(
        heat=hs, power=power, ambient={s: a.profile() for s, a in stage.ambient.items()}, initial=stage.initial,
        method=stage.method, end=stage.end, periodic=stage.periodic, step=stage.step, min_step=stage.min_step,
        max_step=stage.max_step or math.inf, tolerance=stage.tolerance, adaptive=stage.adaptive,
        instants=tuple(stage.instants), differences=tuple(tuple(d) for d in stage.differences),
        impedance=transient.ImpedanceSpec(z.part, z.terms, z.tolerance) if z else None, max_steps=stage.max_steps)
    return spec, names, problems


def plan(ctx: base.Context, name: str, stage: TransientStage, where: str) -> base.StagePlan:
    from .. import errors

    spec, names, problems = spec_of(ctx, stage, where)
    read = {}
    if stage.source is not None:
        up = base.upstream(ctx, stage.source, SOURCE, where)
        if getattr(up.spec, "order", None) != stage.order:
            problems.append(f"{where}.source: heat stage '{stage.source}' is of order {getattr(up.spec, 'order', '?')}; "
                            f"this transient stage's order is {stage.order}: give both the same order")
        read = {"upstream": up.key}
    problems += [errors.unknown_name("surface", a, ctx.domain.surfaces, f"{where}.adiabatic")
                 for a in stage.adiabatic if a not in ctx.domain.surfaces]
    unsupported = [w for w, used in (("cavities (air nodes)", spec.heat.cavities),
                                     ("[interfaces] contacts and sections", spec.heat.contacts or spec.heat.tied),
                                     ("radiation_exchange", spec.heat.exchange)) if used]
    if unsupported or ctx.domain.ties:
        problems.append(f"{where}: the transient stage does not yet take {', '.join(unsupported or ['tied parts'])}; "
                        "run those models in a steady heat stage, or leave them out of the transient workflow")
    base.checked(lambda d, s, w: transient.check(d, s, None, w), ctx.domain, spec, where, problems)
    inputs = ctx.base_inputs(NAME, transient.STAGE_VERSION) | {
        "options": stage.model_dump(exclude={"materials", "memory_limit", "source"}),
        "materials": {p: m.reads(*READS) for p, m in sorted(spec.heat.materials.items())},
        "mesh": [ctx.domain.source_hash, ctx.domain.unit], "probes": ctx.probes} | read
    return base.StagePlan(name, NAME, ctx.domain, spec, inputs, source=stage.source, materials=names)


def compute(plan: base.StagePlan, upstream) -> transient.TransientField:
    initial = upstream[0] if upstream is not None else None
    return transient.solve(plan.domain, plan.spec, initial, where=plan.where, checked=initial is None)


def summary(plan: base.StagePlan, field: transient.TransientField) -> dict:
    """Peaks per part (degC and when), the last state, kept instants, steps, energy and Z_th."""
    peaks = {}
    for i, part in enumerate(field.parts):
        t, when = field.peak(part)
        peaks[part] = {"max": round(celsius(t), 4), "time_s": when,
                       "end": {k: round(celsius(float(field.part_history[-1, i, j])), 4)
                               for j, k in enumerate(("min", "max", "mean"))}}
    period = field.record.get("period_s")
    if period and field.times[-1] >= period:  # the last period: the periodic state when one was reached
        last = field.times >= field.times[-1] - period * (1 + 1e-9)
        for i, part in enumerate(field.parts):
            n = int(np.argmax(np.where(last, field.part_history[:, i, 1], -np.inf)))
            peaks[part]["last_period"] = {"max": round(celsius(float(field.part_history[n, i, 1])), 4),
                                          "min": round(celsius(float(field.part_history[last, i, 0].min())), 4),
                                          "time_s": float(field.times[n])}
    out = {"order": field.order, "parts_degC": peaks, "time_s": float(field.times[-1]),
           "probes_peak_degC": {p: round(celsius(float(field.probe_history[:, j].max())), 4)
                                for j, p in enumerate(field.probes)},
           "instants_s": {k: v[0] for k, v in field.snapshots.items()},
           "steps": dict(field.record), "notices": list(field.notices)}
    if field.impedance:
        z = field.impedance
        out["impedance"] = {k: z[k] for k in ("part", "terms", "foster", "fit_error", "tolerance", "steady_K_per_W")}
    return out


def outputs(domain, field: transient.TransientField):
    """Temperature at the vertices at the end and at each kept instant [degC]."""
    point = {}
    for label, (t, T) in field.snapshots.items():
        point[f"temperature_degC[{label}]"] = celsius(T[: field.vertices])
    return point, {}


def tables(folder, name: str, entry: dict, field: transient.TransientField) -> list[str]:
    """CSV files: the history (time, power, per part min/max/mean, probes; degC), Z_th(t) and the
    Foster network (plain numbers, a header row)."""
    head = ["time_s", "power_W"] + [f"{p}_{k}_degC" for p in field.parts for k in ("min", "max", "mean")]
    head += [f"probe_{p}_degC" for p in field.probes]
    rows = np.column_stack([field.times, field.power, celsius(field.part_history.reshape(len(field.times), -1)),
                            celsius(field.probe_history)])
    files = [folder / f"{name}_history.csv"]
    np.savetxt(files[0], rows, delimiter=",", header=",".join(head), comments="", fmt="%.10g")
    if field.impedance:
        z = field.impedance
        files.append(folder / f"{name}_zth.csv")
        np.savetxt(files[-1], np.column_stack([z["times_s"], z["zth_K_per_W"]]), delimiter=",",
                   header="time_s,zth_K_per_W", comments="", fmt="%.10g")
        files.append(folder / f"{name}_foster.csv")
        files[-1].write_text(impedance.table(z))
    return [f.name for f in files]


def _plot(path, curves, ylabel: str, title: str = "", log: bool = False) -> None:
    """A line chart of (x, y, style, label) curves against time [s]."""
    from matplotlib.figure import Figure

    fig = Figure(figsize=(7, 3.5), dpi=110)
    ax = fig.subplots()
    for x, y, style, label in curves:
        (ax.loglog if log else ax.plot)(x, y, style, label=label)
    ax.set_xlabel("time [s]")
    ax.set_ylabel(ylabel)
    ax.set_title(title)
    ax.legend(fontsize=7)
    fig.tight_layout()
    fig.savefig(path)


def figures(folder, name, entry, field, domain, context: base.OutputContext) -> list[dict]:
    peaks = celsius(field.part_history[:, :, 1])
    path = folder / f"{name}_history.png"
    _plot(path, [(field.times, peaks[:, i], "-", part) for i, part in enumerate(field.parts)],
          "peak temperature [degC]", "largest temperature per part")
    out = [{"file": path.name, "range": (float(peaks.min()), float(peaks.max())), "unit": "degC"}]
    if field.impedance:
        z = field.impedance
        t, zth = np.asarray(z["times_s"])[1:], np.asarray(z["zth_K_per_W"])[1:]
        fit = impedance.foster(t, [f["R_K_per_W"] for f in z["foster"]], [f["tau_s"] for f in z["foster"]])
        path = folder / f"{name}_zth.png"
        _plot(path, [(t, zth, "k-", "computed"), (t, fit, "r--", f"Foster, {z['terms']} terms (error "
                                                             f"{z['fit_error']:.2%})")], "Z_th [K/W]", log=True)
        out.append({"file": path.name, "range": (float(zth.min()), float(zth.max())), "unit": "K/W"})
    return out


def notices(name, entry, domain, context: base.OutputContext) -> list[Notice]:
    out = [Notice("transient.notice", n, name) for n in entry.get("notices", [])]
    return out + heat_kind.over_limit(name, entry["parts_degC"], context.limits_degC)


def report(entry, context: base.OutputContext) -> list[str]:
    from ..outputs.report import table

    out = [table(["part", "peak [degC]", "at [s]", "end mean [degC]"],
                 [[p, f"{s['max']:.2f}", f"{s['time_s']:.4g}", f"{s['end']['mean']:.2f}"]
                  for p, s in entry["parts_degC"].items()])]
    st = entry["steps"]
    out.append(f"<p>{st['method']}: {st['accepted']} steps ({st['rejected']} rejected) to {entry['time_s']:.4g} s, "
               f"stopped at the {st['reached']}; energy residual {st['energy_residual_relative']:.1e} of the heat moved.</p>")
    if "impedance" in entry:
        z = entry["impedance"]
        out.append(f"<p>Z_th of {z['part']}: {z['steady_K_per_W']:.4g} K/W at the end; Foster network "
                   f"({z['terms']} terms, fit error {z['fit_error']:.2%}):</p>" + table(
                       ["R [K/W]", "tau [s]"], [[f"{f['R_K_per_W']:.5g}", f"{f['tau_s']:.5g}"] for f in z["foster"]]))
    return out


def console(entry) -> list[str]:
    lines = [f"  {part:<16} peak {s['max']:8.2f} degC at {s['time_s']:.4g} s; end mean {s['end']['mean']:8.2f} degC"
             + (f"; last period {s['last_period']['min']:.2f} to {s['last_period']['max']:.2f} degC"
                if "last_period" in s else "") for part, s in entry["parts_degC"].items()]
    st = entry["steps"]
    lines.append(f"  {st['method']}: {st['accepted']} steps, {st['rejected']} rejected, to {entry['time_s']:.4g} s "
                 f"({st['reached']}); energy residual {st['energy_residual_relative']:.1e}")
    if "impedance" in entry:
        z = entry["impedance"]
        lines.append(f"  Z_th({z['part']}) {z['steady_K_per_W']:.4g} K/W; Foster {z['terms']} terms, "
                     f"fit error {z['fit_error']:.2%}")
    return lines


def quantities(name: str, entry: dict) -> dict[str, float | None]:
    """``NAME.PART.peak_degC`` and ``NAME.zth_K_per_W``."""
    out = {f"{name}.{p}.peak_degC": s["max"] for p, s in entry.get("parts_degC", {}).items()}
    if "impedance" in entry:
        out[f"{name}.zth_K_per_W"] = entry["impedance"]["steady_K_per_W"]
    return out
