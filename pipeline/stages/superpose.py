"""States of a linear heat -> map -> stress chain built from unit solutions (superposition).

When the heat problem is linear (constant conductivities, film coefficients independent of
temperature, no radiation: ``studies.linear.nonlinear_terms``) with one ambient temperature T_a for
all its convection surfaces and part powers P_i as its only loads, its temperature is
    T = T_a + sum_i P_i G_i,     G_i [K/W] the solution for 1 W in part i with the ambient at 0 K.
Mapping is linear in the field, and with constant stiffness and expansion, bilateral supports with
zero given displacements and no mechanical loads, the stress is linear in T - T_ref:
    sigma(T_a, P) = T_a S_1 + S_ref + sum_i P_i S_i,
S_1 the response to a uniform rise of 1 K, S_ref to T - T_ref = -T_ref (= -T_ref S_1 for a uniform
T_ref), S_i to G_i.  So any number of states (ambients and powers) costs n_parts heat solves and
1 + n_parts (+1 with per-part stress-free temperatures) stress solves, exactly up to the solvers'
round-off.  ``linear_terms`` lists what breaks this; then each state is solved directly (``direct``).
Units: K, W, Pa, m.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from ..fields import StressField, ThermalLoad
from ..stages.solvers import SolveRecord
from . import constitutive, fem, heat, mapping, recovery, stress


@dataclass(frozen=True)
class Chain:
    """A template chain: the heat, map and stress specs with their domains (heat's and the structure's)."""

    heat_domain: object
    heat: heat.HeatSpec
    map: mapping.MapSpec
    domain: object
    stress: stress.StressSpec


def linear_terms(chain: Chain) -> list[str]:
    """Why superposition would not be exact for this chain (empty: it is exact)."""
    from ..studies.linear import nonlinear_terms

    h, s = chain.heat, chain.stress
    out = nonlinear_terms(h)
    out += [f"a fixed temperature on {n}" for n in h.fixed_temperature]
    out += [f"heat flux on {n}" for n in h.flux] + [f"generation in {n}" for n in h.generation]
    if len({c.ambient for c in h.convection.values()}) > 1:
        out.append("convection surfaces with different ambients (a state gives one ambient)")
    if not h.convection:
        out.append("no convection boundary (a state's ambient would act nowhere)")
    out += [f"temperature-dependent stiffness or expansion of part {p} ({m.name})"
            for p, m in s.materials.items() if m.stiffness_varies or "expansion" in m.curves]
    out += [f"a contact support on {n} (it lifts off: not linear)" for n, v in s.supports.items() if v.kind == "contact"]
    out += [f"a given displacement on {n}" for n, v in s.supports.items()
            if v.kind == "displacement" and any(x != 0 for x in (v.components or {}).values())]
    out += [f"pressure on {n}" for n in s.pressure] + [f"force on {n}" for n in s.force]
    out += ["gravity"] if s.gravity is not None else []
    out += [f"a body force in {n}" for n in s.body_force]
    return out


def template_loads(chain: Chain) -> tuple[float, dict[str, float]]:
    """The template's own ambient [K] and powers [W]."""
    return next(iter(chain.heat.convection.values())).ambient, dict(chain.heat.power)


def _state_heat(chain: Chain, ambient: float, powers: dict[str, float]) -> heat.HeatSpec:
    return dataclasses.replace(chain.heat, power={p: w for p, w in powers.items() if w != 0.0},
                               convection={n: dataclasses.replace(c, ambient=ambient) for n, c in chain.heat.convection.items()})


def direct(chain: Chain, ambient: float, powers: dict[str, float], where: str) -> StressField:
    """One state solved through the whole chain."""
    t = heat.solve(chain.heat_domain, _state_heat(chain, ambient, powers), where=where)
    load = mapping.transfer(t, chain.heat_domain, chain.domain, chain.map, where=where)
    return stress.solve(chain.domain, load, chain.stress, where=where)


@dataclass
class Units:
    """Unit responses: uniform 1 K, the stress-free temperatures (None when uniform), 1 W per part."""

    uniform: StressField
    reference: StressField | None
    refs: np.ndarray  # stress-free temperature per element [K]
    power: dict[str, StressField]
    solves: dict[str, int]


def units(chain: Chain, parts: list[str], where: str) -> Units:
    """The unit solutions for the powered ``parts``."""
    refs = fem.part_values(chain.domain, dict(chain.map.reference_by_part), default=chain.map.reference)
    zero = dataclasses.replace(chain.map, reference=0.0, reference_by_part={})
    homogeneous = dataclasses.replace(chain.heat, power={}, convection={
        n: dataclasses.replace(c, ambient=0.0) for n, c in chain.heat.convection.items()})
    power = {}
    order = chain.heat.order
    for p in parts:
        g = heat.solve(chain.heat_domain, dataclasses.replace(homogeneous, power={p: 1.0}), where=where)
        load = mapping.transfer(g, chain.heat_domain, chain.domain, zero, where=where)
        order = load.order
        power[p] = stress.solve(chain.domain, load, chain.stress, where=where)
    n = fem.space(chain.domain, order).N
    nel = len(chain.domain.tetrahedra)
    uniform = stress.solve(chain.domain, ThermalLoad(np.ones(n), order, np.zeros(nel)), chain.stress, where=where)
    uniform_ref = bool(np.all(refs == refs[0]))
    reference = None if uniform_ref else stress.solve(
        chain.domain, ThermalLoad(np.zeros(n), order, refs), chain.stress, where=where)
    return Units(uniform, reference, refs, power,
                 {"heat": len(parts), "stress": 1 + len(parts) + (0 if uniform_ref else 1)})


def state(u: Units, ambient: float, powers: dict[str, float]) -> StressField:
    """The state (ambient [K], powers [W]) as a combination of the unit responses."""
    watts = {p: float(powers.get(p, 0.0)) for p in u.power}
    temperature = np.full(len(u.uniform.temperature), ambient) + sum(
        (w * u.power[p].temperature for p, w in watts.items()), np.zeros(len(u.uniform.temperature)))
    terms = [(ambient if u.reference is not None else ambient - float(u.refs[0]), u.uniform)]
    terms += [(w, u.power[p]) for p, w in watts.items()]
    if u.reference is not None:
        terms.append((1.0, u.reference))
    return combine(terms, temperature, u.refs)


def combine(terms: list[tuple[float, StressField]], temperature: np.ndarray, refs: np.ndarray) -> StressField:
    """sum c_k F_k of stress fields on one model (displacement, element and recovered nodal stress),
    with the state's temperature at the displacement points [K] and stress-free temperatures [K]."""
    first = terms[0][1]

    def total(get):
        return sum(c * get(f) for c, f in terms)

    s = total(lambda f: f.stress)
    nodal = {p: (first.nodal[p][0], total(lambda f, p=p: f.nodal[p][1])) for p in first.nodal}
    principal = constitutive.principal(s.T)
    record = SolveRecord(method=f"superposition of {len(terms)} unit solutions", unknowns=first.solver.unknowns,
                         iterations=0, residual=max(f.solver.residual for _, f in terms),
                         seconds=0.0)
    return StressField(displacement=total(lambda f: f.displacement), order=first.order, stress=s,
                       von_mises=constitutive.von_mises(s.T), tresca=principal[:, 0] - principal[:, 2],
                       principal=principal, parts={}, reactions={}, equilibrium={}, probes={}, solver=record,
                       nodal=nodal, temperature=temperature, reference=refs)


def relative_difference(a: StressField, b: StressField) -> float:
    """max |sigma_a - sigma_b| / max |sigma_b| over the recovered nodal fields of every part."""
    diff = max(float(np.abs(a.nodal[p][1] - b.nodal[p][1]).max()) for p in b.nodal)
    scale = max(float(np.abs(b.nodal[p][1]).max()) for p in b.nodal)
    return diff / scale if scale > 0 else diff
