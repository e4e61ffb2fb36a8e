"""Exact superposition for power sweeps of a linear heat problem.

With constant conductivities, film coefficients that do not depend on temperature (exponent 0) and no
radiation, the steady heat equation is linear in its loads: T(P) = T_0 + sum_i P_i G_i, where T_0 is the
solution with the swept powers at zero and G_i [K/W] the solution for 1 W in part i with every fixed
temperature and ambient at 0 K.  A sweep whose variants differ in a heat stage only by part powers then
needs 1 + (number of swept parts) solves instead of one per variant.  The superposed fields go into the
store under the variants' own keys, so the map and stress stages read them as usual; their solver record
says "superposition".  Anything nonlinear, or any other difference between the variants, means every
variant is solved, and the reason is given.
"""

from __future__ import annotations

import dataclasses
import json
import time

import numpy as np

from .. import errors
from ..fields import TemperatureField
from ..stages import heat
from ..stages.solvers import SolveRecord


def nonlinear_terms(spec: heat.HeatSpec) -> list[str]:
    """What makes a heat problem nonlinear (empty when it is linear)."""
    out = [f"radiation on {s}" for s in spec.radiation]
    out += [f"radiation exchange in group {g}" for g in spec.exchange]
    out += [f"convection exponent {c.exponent:g} on {s}" for s, c in spec.convection.items() if c.exponent != 0]
    out += [f"temperature-dependent conductivity of part {p} ({m.name})"
            for p, m in spec.materials.items() if m.conductivity_varies]
    return out


def prepare(tasks: list[dict]) -> dict:
    """Store superposed heat results for the variants that need them; say per heat stage what was done.

    Runs as one task (on a worker); returns only small records.  A nonlinear heat stage is recognised
    from the first variant, without planning the others."""
    from ..flow import runner

    plans = []
    swept = {k for t in tasks for k in t["values"]}
    for t in tasks:
        try:
            plans.append(runner.plan(t["workflow"], t["sets"], t["store"], t["folder"]))
        except errors.ThermochainError:
            continue  # the variant's own run records the problem
        if len(plans) == 1:
            heats = [s for s in plans[0].stages if isinstance(s.spec, heat.HeatSpec)]
            out = {s.name: _refusal(s.name, nonlinear_terms(s.spec)) for s in heats if nonlinear_terms(s.spec)}
            out |= {s.name: {"superposed": False, "reason": f"{s.name}: each variant solved: no part power of "
                             "this stage is swept (superposition is used for power sweeps)"}
                    for s in heats if s.name not in out and not any(k.startswith(f"stages.{s.name}.power")
                                                                    for k in swept)}
            if len(out) == len(heats):
                return out  # nothing to superpose: the other variants are planned when they run
    out = {}
    names = [s.name for s in plans[0].stages if isinstance(s.spec, heat.HeatSpec)] if plans else []
    for name in names:
        stages = {}
        for p in plans:
            s = next(s for s in p.stages if s.name == name)
            if not p.store.holds(s.kind, s.key):
                stages.setdefault(s.key, (s, p.store))
        out[name] = _superpose(name, list(stages.values()))
    return out


def _refusal(name: str, terms: list[str]) -> dict:
    return {"superposed": False, "reason": f"{name}: each variant solved: the heat problem is nonlinear "
                                           f"({'; '.join(terms)}), so superposition would not be exact"}


def _without_power(inputs: dict) -> str:
    options = dict(inputs["options"], power=None)
    return json.dumps(dict(inputs, options=options), sort_keys=True)


def _superpose(name: str, missing: list) -> dict:
    if len(missing) < 2:
        return {"superposed": False, "reason": f"{name}: {len(missing)} heat result(s) to compute; nothing to gain"}
    first = missing[0][0]
    terms = nonlinear_terms(first.spec)
    if terms:
        return _refusal(name, terms)
    if len({_without_power(s.inputs) for s, _ in missing}) > 1:
        return {"superposed": False, "reason": f"{name}: each variant solved: the variants differ in more than "
                                               "part powers (superposition is used for power sweeps)"}
    swept = sorted({p for s, _ in missing for p in s.spec.power}
                   - {p for p in first.spec.power if len({s.spec.power.get(p) for s, _ in missing}) == 1})
    if len(missing) <= len(swept) + 1:
        return {"superposed": False, "reason": f"{name}: each variant solved: {len(missing)} variants need no "
                                               f"more solves than superposition ({len(swept) + 1})"}
    start = time.perf_counter()
    domain, spec = first.domain, first.spec
    base = heat.solve(domain, dataclasses.replace(spec, power={p: v for p, v in spec.power.items()
                                                               if p not in swept}), where=first.where)
    homogeneous = dataclasses.replace(
        spec, generation={}, flux={}, fixed_temperature={s: 0.0 for s in spec.fixed_temperature},
        convection={s: dataclasses.replace(c, ambient=0.0) for s, c in spec.convection.items()},
        cavities={n: dataclasses.replace(c, inlet=0.0) for n, c in spec.cavities.items()})
    units = {p: heat.solve(domain, dataclasses.replace(homogeneous, power={p: 1.0}), where=first.where)
             for p in swept}
    solve_seconds = time.perf_counter() - start
    for s, store in missing:
        with store.lock(s.kind, s.key):
            if store.holds(s.kind, s.key):
                continue  # another run computed it meanwhile
            t0 = time.perf_counter()
            field = combine(domain, s.spec, base, units)
            arrays, meta = field.to_arrays()
            store.put(s.kind, s.key, arrays, meta, {"inputs": s.inputs, "stage": s.name,
                                                    "seconds": time.perf_counter() - t0, "method": field.solver.method})
    return {"superposed": True, "solves": 1 + len(swept), "variants": len(missing), "parts": swept,
            "seconds": solve_seconds,
            "reason": f"{name}: superposed from {1 + len(swept)} linear solves (the swept powers at zero, and 1 W in "
                      f"each of {', '.join(swept)}) for {len(missing)} variants; exact because the problem is "
                      "linear (constant conductivities, film coefficients independent of temperature, no radiation)"}


def combine(domain, spec: heat.HeatSpec, base: TemperatureField, units: dict[str, TemperatureField]) -> TemperatureField:
    """The field for ``spec``'s powers: base + sum of power x unit response (all [K], powers [W])."""
    coeff = {p: float(spec.power.get(p, 0.0)) for p in units}
    T = base.temperature + sum(c * units[p].temperature for p, c in coeff.items())
    parts = {}
    for part, stats in base.parts.items():
        values = T[_part_dofs(domain, part, base.order)]
        mean = stats["mean"] + sum(c * units[p].parts[part]["mean"] for p, c in coeff.items())
        parts[part] = {"min": float(values.min()), "max": float(values.max()), "mean": float(mean)}
    loads = [{"part": p, "power_W": w, "generation_W_per_m3": w / domain.part_volume(p),
              "volume_m3": domain.part_volume(p)} for p, w in spec.power.items()]
    loads += [r for r in base.loads if r["part"] in spec.generation]
    balance = [{"name": r["part"], "kind": "power", "heat_in_W": r["power_W"]} for r in loads]
    for row in base.balance:
        if row["kind"] == "power":
            continue
        heat_in = row["heat_in_W"] + sum(c * _row(units[p], row)["heat_in_W"] for p, c in coeff.items()
                                         if _row(units[p], row) is not None)
        balance.append(dict(row, heat_in_W=float(heat_in)))
    probes = {n: float(v + sum(c * units[p].probes[n] for p, c in coeff.items())) for n, v in base.probes.items()}
    solves = [base] + list(units.values())
    record = SolveRecord(method=f"superposition of {len(solves)} linear solves ({base.solver.method})",
                         unknowns=base.solver.unknowns, iterations=0,
                         residual=max(f.solver.residual for f in solves), seconds=sum(f.solver.seconds for f in solves))
    notices = list(domain.notices) + heat._validity_notices(spec, parts)
    return TemperatureField(
        temperature=T, order=base.order, vertices=base.vertices, parts=parts, balance=tuple(balance), probes=probes,
        loads=tuple(loads), adiabatic=base.adiabatic, solver=record, notices=tuple(notices),
        interfaces=tuple(_interfaces(domain, spec, base.order, T)), cavities=tuple(_cavities(base, units, coeff)),
        domain_hash=base.domain_hash, meta={"stage_version": heat.STAGE_VERSION, "newton": [],
                                            "superposition": {"unit_W": coeff, "parts": sorted(units)}})


def _interfaces(domain, spec: heat.HeatSpec, order: int, T: np.ndarray) -> list[dict]:
    """Interface records recomputed from the superposed field (the largest drop is not a sum)."""
    from ..stages import fem, ties

    space, geom = fem.space(domain, order), fem.geometry(domain)
    return [ties.contact_term(space, geom, domain.contacts[n], h).record(n, domain.contacts[n], T)
            for n, h in spec.contacts.items()]


def _cavities(base: TemperatureField, units: dict[str, TemperatureField], coeff: dict[str, float]) -> list[dict]:
    """Cavity records: air temperature and heat flows are linear in the powers."""
    out = []
    for i, c in enumerate(base.cavities):
        def add(key, sub=None):
            pick = (lambda r: r[key][sub]) if sub else (lambda r: r[key])
            return float(pick(c) + sum(w * pick(units[p].cavities[i]) for p, w in coeff.items()))

        out.append(dict(c, temperature_K=add("temperature_K"), from_solids_W=add("from_solids_W"),
                        ventilation_W=add("ventilation_W"), films_W={s: add("films_W", s) for s in c["films_W"]}))
    return out


def _row(field: TemperatureField, row: dict) -> dict | None:
    return next((r for r in field.balance if r["name"] == row["name"] and r["kind"] == row["kind"]), None)


def _part_dofs(domain, part: str, order: int) -> np.ndarray:
    """Degrees of freedom of a part: its vertices, and for P2 its edge midpoints numbered after them."""
    ids = domain.parts[part]
    dofs = domain.tetrahedra[ids].ravel()
    if order == 2:
        dofs = np.concatenate([dofs, domain.mesh.nvertices + domain.mesh.t2e[:, ids].ravel()])
    return np.unique(dofs)
