"""Steady heat conduction: -div(k grad T) = q in each part, with surface fluxes, convection and fixed T.

Weak form (theory in docs/theory.md): find T with T = T_fixed on fixed surfaces such that
    int k grad T . grad v dV + sum_conv int h T v dA = int q v dV + sum_conv int h T_amb v dA + int q'' v dA
for every v vanishing on fixed surfaces.  Heat flows are positive into the body.  Units: T [K],
k [W/(m*K)], q [W/m^3], q'' [W/m^2], h [W/(m^2*K)].
Contacts add int h_c (T_a - T_b)(v_a - v_b) dA across split interfaces (``ties``); ties of parts meshed
apart constrain T = P T_r.  A cavity's air is one more unknown T_air: its films exchange
int h (T - T_air) dA with the solids, and its balance is sum_s int h (T - T_air) dA = m_dot c_p (T_air - T_in).
"""

from __future__ import annotations

import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from .. import errors
from ..fields import TemperatureField
from ..model.materials import Material
from ..model.units import celsius
from . import exchange as exchange_mod, fem, kernels, solvers, ties

STAGE_VERSION = 3


@dataclass(frozen=True)
class Convection:
    """Film coefficient [W/(m^2*K)] to an ambient temperature [K].

    exponent: with n > 0 the coefficient follows the natural-convection power law
    h = film_coefficient * (|T - ambient| / reference_difference)^n (e.g. n = 0.25 for laminar flow);
    reference_difference [K] is the temperature difference at which h equals film_coefficient."""

    film_coefficient: float
    ambient: float
    exponent: float = 0.0
    reference_difference: float = 1.0


@dataclass(frozen=True)
class Radiation:
    """Radiation to surroundings: q = emissivity * sigma * (T^4 - surroundings^4); temperatures in K."""

    emissivity: float
    surroundings: float


STEFAN_BOLTZMANN = 5.670374419e-8  # W/(m^2*K^4), CODATA 2018 exact value


@dataclass(frozen=True)
class HeatFlux:
    """Heat into the body through a surface: per area [W/m^2] or in total [W] (spread evenly)."""

    per_area: float | None = None
    total: float | None = None


@dataclass(frozen=True)
class Cavity:
    """Enclosed air with one unknown temperature.

    films: surface -> film coefficient [W/(m^2*K)] to the air.  ventilation: m_dot * c_p [W/K] of air
    flowing through (0: sealed, then the net exchange with the solids is zero at steady state).
    inlet: temperature of the incoming air [K]."""

    films: Mapping[str, float]
    ventilation: float = 0.0
    inlet: float = 293.15


#: A fixed ambient that supplies more than this fraction of the largest heat flow gets a warning.
SUPPLY_WARNING = 1e-6


@dataclass(frozen=True)
class HeatSpec:
    """What the heat stage reads besides the domain.

    materials: part -> material (oriented where orthotropic).  power: part -> W, spread over the
    part's meshed volume.  generation: part -> W/m^3, a number or a function of the coordinates
    ``x`` (shape (3, ...), m) for a measured or manufactured distribution.  flux: surface -> HeatFlux.
    convection: surface -> Convection.  radiation: surface -> Radiation.
    fixed_temperature: surface -> K, a number or a function of x.
    contacts: contact name (``domain.contacts``) -> conductance per area h_c = 1/R'' [W/(m^2*K)]; 0 for
    an insulated interface.  tied: split interfaces that conduct perfectly (bolt pretension sections).
    cavities: name -> Cavity (enclosed air as an unknown).
    exchange: view-factor group -> ExchangeGroup (grey exchange among surfaces, pipeline/stages/
    exchange.py); view: the view factors (a ViewFactors; while planning the view stage's ViewSpec).
    Nonlinear terms (radiation, k(T), power-law convection) are solved by Newton-Raphson with the
    consistent Jacobian; ``max_iterations`` bounds it, ``tolerance`` is the relative residual.
    probes: name -> (x, y, z) [m].  order: 1 or 2.  solver: "auto", "direct" or "amg".
    memory_limit: bytes the stage may use (default: what the machine has available); a model whose
    estimate exceeds it is refused before assembly.
    """

    materials: Mapping[str, Material]
    power: Mapping[str, float] = field(default_factory=dict)
    generation: Mapping[str, float | Callable] = field(default_factory=dict)
    flux: Mapping[str, HeatFlux] = field(default_factory=dict)
    convection: Mapping[str, Convection] = field(default_factory=dict)
    radiation: Mapping[str, Radiation] = field(default_factory=dict)
    fixed_temperature: Mapping[str, float | Callable] = field(default_factory=dict)
    contacts: Mapping[str, float] = field(default_factory=dict)
    tied: tuple[str, ...] = ()
    cavities: Mapping[str, Cavity] = field(default_factory=dict)
    probes: Mapping[str, tuple[float, float, float]] = field(default_factory=dict)
    order: int = 1
    solver: str = "auto"
    max_iterations: int = 30
    tolerance: float = 1e-10
    memory_limit: float | None = None
    exchange: Mapping[str, exchange_mod.ExchangeGroup] = field(default_factory=dict)
    view: object = None


def check(domain, spec: HeatSpec, where: str = "heat") -> None:
    """Raise one ``InputError`` listing every problem of ``spec`` on ``domain``."""
    problems: list[str] = []
    if spec.order not in fem.ORDERS:
        problems.append(f"{where}: order must be 1 or 2, got {spec.order!r}")
    for part in domain.parts:
        if part not in spec.materials:
            problems.append(errors.no_material(part, where))
    named_parts = [(k, "materials") for k in spec.materials] + [(k, "power") for k in spec.power]
    named_parts += [(k, "generation") for k in spec.generation]
    for part, key in named_parts:
        if part not in domain.parts:
            problems.append(errors.unknown_name("part", part, domain.parts, f"{where}.{key}"))
    claimed: dict[str, str] = {}
    groups = [("fixed_temperature", spec.fixed_temperature), ("convection", spec.convection),
              ("radiation", spec.radiation), ("flux", spec.flux)]
    groups += [(f"cavities.{name}.films", c.films) for name, c in spec.cavities.items()]
    for key, group in groups:
        for surface in group:
            if surface not in domain.surfaces:
                problems.append(errors.unknown_name("surface", surface, domain.surfaces, f"{where}.{key}"))
                continue
            if key.startswith("cavities") and claimed.get(surface, "").startswith(("cavities", "convection")):
                problems.append(f"{where}.{key}: surface '{surface}' already has a film ({claimed[surface]}); "
                                "give each surface one film, to a fixed ambient or to one cavity")
            if key == "convection" and claimed.get(surface, "").startswith("cavities"):
                problems.append(f"{where}.convection: surface '{surface}' already has a film to a cavity")
            if surface in claimed and "fixed_temperature" in (claimed[surface], key):
                problems.append(f"{where}: surface '{surface}' has both {claimed[surface]} and {key}; "
                                "a fixed temperature cannot be combined with another condition")
            claimed.setdefault(surface, key)
            if key != "fixed_temperature":
                inner = int((domain.mesh.f2t[1, domain.surfaces[surface]] >= 0).sum())
                if inner:
                    problems.append(f"{where}.{key}: surface '{surface}' has {inner} facets inside the body, "
                                    "not on its boundary; convection and flux need a boundary surface")
    problems += _value_problems(spec, where) + _exchange_problems(domain, spec, where)
    problems += _interface_problems(domain, spec, where)
    fem.check_probes(domain, spec.probes, where, problems)
    if spec.order in fem.ORDERS and not problems:
        try:
            solvers.check_memory(fem.unknowns(domain, spec.order), spec.order, 1, spec.solver, spec.memory_limit, where)
        except errors.InputError as exc:
            problems += exc.problems
    if problems:
        raise errors.InputError(problems)


def _interface_problems(domain, spec: HeatSpec, where: str) -> list[str]:
    """Every contact needs a conductance; touching parts need a choice (``mesh.join``)."""
    from ..model.mesh import touching_problems

    bad = touching_problems(domain, where)
    for name in domain.contacts:
        if name not in spec.contacts and name not in spec.tied:
            bad.append(f"{where}.contacts: interface '{name}' is split but has no conductance; give h_c "
                       "[W/(m^2*K)] or a resistance R'' [m^2*K/W] (0 conductance for an insulated interface)")
    for name, h in spec.contacts.items():
        if name not in domain.contacts:
            bad.append(errors.unknown_name("interface", name, domain.contacts, f"{where}.contacts"))
        elif not (np.isfinite(h) and h >= 0):
            bad.append(f"{where}.contacts.{name}: conductance must be a finite number >= 0 W/(m^2*K), got {h}")
    for name, c in spec.cavities.items():
        if not c.films:
            bad.append(f"{where}.cavities.{name}: give the surfaces that face the air (films)")
        for surface, h in c.films.items():
            if not (np.isfinite(h) and h > 0):
                bad.append(f"{where}.cavities.{name}.films.{surface}: film coefficient must be > 0 W/(m^2*K), got {h}")
        if not (np.isfinite(c.ventilation) and c.ventilation >= 0) or not c.inlet >= 0:
            bad.append(f"{where}.cavities.{name}: ventilation must be >= 0 W/K and inlet >= 0 K")
    return bad


def _value_problems(spec: HeatSpec, where: str) -> list[str]:
    bad = []
    for part, m in spec.materials.items():
        if np.any(np.asarray(m.conductivity) <= 0):
            bad.append(f"{where}: material '{m.name}' of part '{part}' needs a positive conductivity")
    for name, c in spec.convection.items():
        if not c.film_coefficient > 0:
            bad.append(f"{where}.convection.{name}: film_coefficient must be > 0 W/(m^2*K), got {c.film_coefficient}")
        if not c.ambient >= 0:
            bad.append(f"{where}.convection.{name}: ambient must be >= 0 K, got {c.ambient}")
    for name, r in spec.radiation.items():
        if not 0 <= r.emissivity <= 1:
            bad.append(f"{where}.radiation.{name}: emissivity must lie in 0..1, got {r.emissivity}")
        if not r.surroundings >= 0:
            bad.append(f"{where}.radiation.{name}: surroundings must be >= 0 K, got {r.surroundings}")
    for name, c in spec.convection.items():
        if c.exponent < 0 or not c.reference_difference > 0:
            bad.append(f"{where}.convection.{name}: exponent must be >= 0 and reference_difference > 0 K")
    for name, t in spec.fixed_temperature.items():
        if not callable(t) and not t >= 0:
            bad.append(f"{where}.fixed_temperature.{name}: temperature must be >= 0 K, got {t}")
    for name, f in spec.flux.items():
        if (f.per_area is None) == (f.total is None):
            bad.append(f"{where}.flux.{name}: give exactly one of per_area [W/m^2] or total [W]")
    for key, group in (("power", spec.power), ("generation", spec.generation)):
        for name, value in group.items():
            if not callable(value) and not np.isfinite(value):
                bad.append(f"{where}.{key}.{name}: must be a finite number, got {value}")
    return bad


def _exchange_problems(domain, spec: HeatSpec, where: str) -> list[str]:
    if not spec.exchange:
        return []
    if spec.view is None:
        return [f"{where}.radiation_exchange: needs the view factors of a view stage (give 'view')"]
    out = exchange_mod.problems(domain, spec.view, spec.exchange, where)
    if getattr(spec.view, "domain_hash", domain.source_hash) != domain.source_hash:
        out.append(f"{where}.view: the view factors belong to another mesh; the view stage must use this one")
    for s in {s for n in spec.exchange if n in spec.view.groups for s in spec.view.groups[n].surfaces}:
        if s in spec.radiation:
            out.append(f"{where}.radiation.{s}: surface '{s}' radiates in a radiation_exchange group already; "
                       "remove one of the two")
    return out


def solve(domain, spec: HeatSpec, where: str = "heat", checked: bool = False) -> TemperatureField:
    """Solve steady conduction on ``domain``; see the module docstring for the equations.

    checked: the inputs were checked already (``check`` and ``check_steady_state``, as the runner does
    while planning), so they are not checked again."""
    if not checked:
        check(domain, spec, where)
        check_steady_state(domain, spec, where)
    start = time.perf_counter()
    problem = _Problem(domain, spec)
    space, geom, ref = problem.space, problem.geom, problem.ref

    loads, balance = [], []
    q = np.zeros((len(domain.tetrahedra), len(ref.weights)))  # W/m^3 at quadrature points
    for part, power in spec.power.items():
        volume = domain.part_volume(part)
        q[domain.parts[part]] += power / volume
        loads.append({"part": part, "power_W": power, "generation_W_per_m3": power / volume, "volume_m3": volume})
    for part, gen in spec.generation.items():
        ids = domain.parts[part]
        g = gen(geom.points(ref, ids)) if callable(gen) else np.full((len(ids), len(ref.weights)), float(gen))
        q[ids] += g
        volume = domain.part_volume(part)
        power = float(np.sum(g * geom.det[ids][:, None] * ref.weights))
        loads.append({"part": part, "power_W": power, "generation_W_per_m3": power / volume, "volume_m3": volume})
    b = kernels.load(space, geom, np.arange(len(domain.tetrahedra)), q, ref) if loads else np.zeros(space.N)
    for rec in loads:
        balance.append({"name": rec["part"], "kind": "power", "heat_in_W": rec["power_W"]})
    for name, f in spec.flux.items():
        facets = kernels.Facets(space, geom, domain.surfaces[name], kernels.degree_mass(spec.order))
        per_area = f.per_area if f.per_area is not None else f.total / facets.area.sum()
        b = b + facets.load(per_area)
        balance.append({"name": name, "kind": "heat_flux", "heat_in_W": float(per_area * facets.area.sum())})
    problem.b = np.r_[b, [c.ventilation * c.inlet for c in spec.cavities.values()]]

    T = np.full(problem.n, _initial_temperature(spec))
    owner: dict[str, np.ndarray] = {}
    fixed = np.zeros(0, dtype=np.int64)
    for name, value in spec.fixed_temperature.items():
        dofs = np.setdiff1d(space.facet_dofs(domain.surfaces[name]), fixed)
        owner[name] = dofs
        T[dofs] = value(space.doflocs[:, dofs]) if callable(value) else value
        fixed = np.union1d(fixed, dofs)
    problem.tie = problem.tie.release(fixed)  # a fixed temperature prevails over a tie
    free = np.setdiff1d(np.arange(problem.n), np.union1d(fixed, problem.tie.tied))
    assembled = time.perf_counter() - start
    T, record, newton, outside = _newton(problem, T, free, spec, where)

    reaction = problem.residual(T)  # nodal heat supplied through fixed-temperature dofs [W]
    for name, dofs in owner.items():
        balance.append({"name": name, "kind": "fixed_temperature", "heat_in_W": float(reaction[dofs].sum())})
    for name, kind, facets, c in problem.losses:
        loss, _ = _surface_loss(kind, c, facets.values(T))
        balance.append({"name": name, "kind": kind, "heat_in_W": -facets.integral(loss)})
    cavities = problem.cavity_records(T)
    for cavity in cavities:
        balance += [{"name": s, "kind": "cavity", "cavity": cavity["name"], "heat_in_W": -w}
                    for s, w in cavity["films_W"].items()]
    interfaces = [term.record(name, domain.contacts[name], T) for name, term in problem.contacts.items()]
    T = T[: space.N]
    paths = []
    if problem.exchange:
        rows, paths = problem.exchange.balance(T)
        balance += rows

    parts = _part_statistics(domain, problem, T)
    notices = list(domain.notices) + _validity_notices(spec, parts)
    if outside:
        notices.append(f"{outside} quadrature-point temperatures lay outside a conductivity table's range; "
                       "the end values were held there")
    return TemperatureField(
        temperature=T, order=spec.order, vertices=int(domain.mesh.nvertices), parts=parts, balance=tuple(balance),
        probes=_probe_values(domain, spec.order, T, spec.probes, where), loads=tuple(loads),
        adiabatic=_adiabatic(domain, spec), solver=record, notices=tuple(notices),
        interfaces=tuple(interfaces), cavities=tuple(cavities), domain_hash=domain.source_hash,
        meta={"seconds": time.perf_counter() - start, "stage_version": STAGE_VERSION, "assembly_seconds": assembled,
              "newton": newton, "radiative_paths": paths},
    )


def supplying(balance) -> list[dict]:
    """Balance records of fixed ambients (convection or radiation to a given temperature) that supply net
    heat to the solids: in a sealed box at steady state that is heat from nothing (model the air as a
    cavity).  Flows below ``SUPPLY_WARNING`` of the largest one are round-off."""
    scale = max((abs(r["heat_in_W"]) for r in balance), default=0.0)
    return [r for r in balance if r["kind"] in ("convection", "radiation") and r["heat_in_W"] > 0
            and r["heat_in_W"] > SUPPLY_WARNING * scale]


def _initial_temperature(spec: HeatSpec) -> float:
    """Uniform start of the Newton iteration: the mean of the prescribed temperatures; the first
    iterate is then the solution linearised about it (exact for a linear problem)."""
    values = [v for v in spec.fixed_temperature.values() if not callable(v)]
    values += [c.ambient for c in spec.convection.values()] + [r.surroundings for r in spec.radiation.values()]
    values += [g.surroundings for g in spec.exchange.values() if g.surroundings is not None]
    return float(np.mean(values)) if values else 293.15


def _surface_loss(kind: str, c, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Heat leaving a surface per area [W/m^2] at temperatures t [K], and its derivative [W/(m^2*K)]."""
    if kind == "radiation":
        es = c.emissivity * STEFAN_BOLTZMANN
        return es * (t**4 - c.surroundings**4), 4 * es * t**3
    d = t - c.ambient
    if c.exponent == 0:
        return c.film_coefficient * d, np.full_like(t, c.film_coefficient)
    # h = h0 (|d| / dref)^n, floored so that the derivative stays finite at d = 0
    m = np.maximum(np.abs(d), 1e-6 * c.reference_difference) / c.reference_difference
    h = c.film_coefficient * m**c.exponent
    return h * d, h * (1 + c.exponent)


class _Problem:
    """Residual R(T) = conduction + surface losses - sources - fluxes, and its Jacobian (the tangent).

    Quadrature: degree 2p on cells and facets, exact for sources, films and a conductivity that is
    constant per part (then the conduction matrix is assembled once, with the exact degree 2(p-1));
    radiation and k(T) are not polynomial and use the same degree 2p."""

    def __init__(self, domain, spec):
        self.domain, self.spec = domain, spec
        self.space, self.geom = fem.space(domain, spec.order), fem.geometry(domain)
        self.ref = kernels.reference(spec.order, kernels.degree_mass(spec.order))
        self.ordered = sorted(domain.parts)
        self.n = self.space.N + len(spec.cavities)  # the cavities' air temperatures follow the dofs
        self.b = np.zeros(self.n)
        degree = kernels.degree_mass(spec.order)
        self.contacts = {name: ties.contact_term(self.space, self.geom, domain.contacts[name], h)
                         for name, h in spec.contacts.items()}
        self.cavities = [(name, c, [(s, h, kernels.Facets(self.space, self.geom, domain.surfaces[s], degree))
                                    for s, h in c.films.items()]) for name, c in spec.cavities.items()]
        tie = ties.continuity(domain, self.space, spec.tied)
        pad = sp.identity(len(spec.cavities), format="csr")
        self.tie = ties.Continuity(sp.block_diag([tie.P, pad], format="csr"), tie.tied)
        #: the field's dofs from the unknowns (tied dofs recomputed, the cavities' air left out)
        self.lift = (sp.eye(self.space.N, self.n, format="csr") @ self.tie.P).tocsr()
        self.losses = [(name, "convection", kernels.Facets(self.space, self.geom, domain.surfaces[name], degree), c)
                       for name, c in spec.convection.items()]
        self.losses += [(name, "radiation", kernels.Facets(self.space, self.geom, domain.surfaces[name], degree), r)
                        for name, r in spec.radiation.items()]
        self.varies = any(m.conductivity_varies for m in spec.materials.values())
        self._fixed = self._fixed_terms()
        self.linear = not spec.radiation and all(c.exponent == 0 for c in spec.convection.values()) and \
            not self.varies
        self.exchange = exchange_mod.Coupling(self.space, self.geom, spec.view, spec.exchange, degree) \
            if spec.exchange else None
        self.linear = self.linear and not self.exchange
        self.outside = 0
        self._constant = None if self.varies else self._conduction_matrix()

    def _conduction_matrix(self):
        """Conduction matrix for conductivities constant per part (exact quadrature), with the contacts
        and cavities, on all unknowns."""
        out = kernels.Assembler(self.space.N)
        for part in self.ordered:
            k = self.spec.materials[part].conductivity_tensor()
            kernels.conduction(self.space, self.geom, self.domain.parts[part], k,
                               kernels.degree_stiffness(self.spec.order), out)
        return self._pad(out.matrix()) + self._fixed

    def _pad(self, J):
        """A matrix on the field's dofs extended by zeros to all unknowns (the cavities' air)."""
        extra = self.n - self.space.N
        return sp.block_diag([J, sp.csr_matrix((extra, extra))], format="csr") if extra else J.tocsr()

    def _fixed_terms(self):
        """Matrix of the terms linear in T with constant coefficients: contacts, and the cavities'
        films and ventilation: [[M_s, -m_s], [-m_s^T, sum_s h A_s + m_dot c_p]] per cavity."""
        n, N = self.n, self.space.N
        out = sp.csr_matrix((n, n))
        for term in self.contacts.values():
            out = out + self._pad(term.matrix)
        for i, (_, c, films) in enumerate(self.cavities):
            a = N + i
            for _, h, facets in films:
                couple = facets.load(h)  # int h v_i dA
                air = sp.csr_matrix((-couple, (np.arange(N), np.full(N, a))), shape=(n, n))
                out = out + self._pad(facets.mass(h).matrix()) + air + air.T
                out = out + sp.csr_matrix(([couple.sum()], ([a], [a])), shape=(n, n))
            out = out + sp.csr_matrix(([c.ventilation], ([a], [a])), shape=(n, n))
        return out.tocsr()

    def cavity_records(self, T) -> list[dict]:
        """Per cavity: air temperature [K], heat from each film surface into the air [W], ventilation [W]."""
        out = []
        for i, (name, c, films) in enumerate(self.cavities):
            air = float(T[self.space.N + i])
            watts = {s: facets.integral(h * (facets.values(T) - air)) for s, h, facets in films}
            out.append({"name": name, "temperature_K": air, "films_W": watts, "from_solids_W": float(sum(watts.values())),
                        "ventilation_W": float(c.ventilation * (air - c.inlet)), "ventilation_W_per_K": c.ventilation,
                        "inlet_K": c.inlet})
        return out

    def complete(self, T):
        """T with its tied dofs recomputed from the others."""
        return self.tie.expand(T)

    def _conductivity(self, t_qp):
        """K(T) and dK/dT at the quadrature points: (nel, 3, 3, nq)."""
        k = np.zeros(t_qp.shape[:1] + (3, 3) + t_qp.shape[1:])
        dk = np.zeros_like(k)
        self.outside = 0
        for part in self.ordered:
            ids = self.domain.parts[part]
            m = self.spec.materials[part]
            r = np.asarray(m.axes, dtype=float)
            kp, dkp, out = m.conductivity_at(t_qp[ids])
            self.outside += out
            k[ids] = np.einsum("ai,anq,aj->nijq", r, kp, r)
            dk[ids] = np.einsum("ai,anq,aj->nijq", r, dkp, r)
        return k, dk

    def _field(self, T):
        ids = np.arange(len(self.domain.tetrahedra))
        return kernels.interpolate(self.space, self.geom, ids, T, self.ref, grad=True)

    def residual(self, T):
        """P^T R(T) on all unknowns (rows of tied dofs are zero) [W]."""
        if self._constant is not None:
            r = self._constant @ T - self.b
        else:
            t, g = self._field(T)
            k, _ = self._conductivity(t)
            flux = np.einsum("nijq,njq->niq", k, g)
            r = self._fixed @ T - self.b
            r[: self.space.N] += kernels.flux_load(self.space, self.geom, np.arange(len(t)), flux, self.ref)
        for _, kind, facets, c in self.losses:
            loss, _ = _surface_loss(kind, c, facets.values(T))
            r[: self.space.N] += facets.load(loss)
        if self.exchange:
            r[: self.space.N] += self.exchange.residual(T[: self.space.N])
        return self.tie.load(r)

    def tangent(self, T):
        if self._constant is not None:
            J = self._constant
        else:
            t, g = self._field(T)
            k, dk = self._conductivity(t)
            ids, degree = np.arange(len(t)), kernels.degree_mass(self.spec.order)
            out = kernels.conduction(self.space, self.geom, ids, k, degree)
            kernels.advection(self.space, self.geom, ids, np.einsum("nijq,njq->niq", dk, g), degree, out)
            J = self._pad(out.matrix()) + self._fixed
        if self.losses:
            films = kernels.Assembler(self.space.N)
            for _, kind, facets, c in self.losses:
                _, slope = _surface_loss(kind, c, facets.values(T))
                facets.mass(slope, films)
            J = J + self._pad(films.matrix())
        if self.exchange:
            J = J + self._pad(self.exchange.tangent(T[: self.space.N]))
        return self.tie.reduce(J)


def _newton(problem: _Problem, T, free, spec: HeatSpec, where: str):
    """Newton-Raphson with a backtracking line search; stops on the residual and on the update."""
    history = []
    r = problem.residual(T)
    scale = max(float(np.linalg.norm(problem.b[free])), float(np.linalg.norm(r[free])), 1e-30)
    record = None
    for iteration in range(1, spec.max_iterations + 1):
        J = problem.tangent(T)
        if iteration == 1:  # measure residuals against the size of the terms that cancel in them
            scale = max(scale, float(np.linalg.norm((abs(J) @ np.abs(T))[free])))
        A = J if len(free) == len(T) else J[free][:, free]
        if problem.exchange:  # its exact tangent adds a dense low-rank block (stages/exchange.py)
            delta, record = problem.exchange.step(A, -r[free], free, spec.solver, problem.lift)
        else:
            delta, record = solvers.solve(A, -r[free], method=spec.solver, memory_limit=spec.memory_limit)
        step, norm0 = 1.0, float(np.linalg.norm(r[free]))
        while True:
            trial = T.copy()
            trial[free] += step * delta
            trial = problem.complete(trial)
            r_trial = problem.residual(trial)
            if np.linalg.norm(r_trial[free]) <= (1 - 1e-4 * step) * norm0 or step < 1 / 64 or problem.linear:
                break
            step /= 2
        T, r = trial, r_trial
        res = float(np.linalg.norm(r[free])) / scale
        update = float(np.abs(step * delta).max(initial=0.0))
        rate = None
        if len(history) >= 2 and history[-1]["residual"] > 0 and history[-2]["residual"] > 0 and res > 0:
            rate = float(np.log(res / history[-1]["residual"]) / np.log(history[-1]["residual"] / history[-2]["residual"]))
        history.append({"iteration": iteration, "residual": res, "update_K": update, "step": step, "rate": rate})
        if problem.linear or (res <= spec.tolerance and update <= 1e-10 * float(np.abs(T).max())):
            return T, record, history, problem.outside
    lines = ", ".join(f"{h['residual']:.2e}" for h in history)
    raise errors.SolverError(f"{where}: the nonlinear heat solve did not converge in {spec.max_iterations} "
                             f"Newton iterations (relative residuals {lines}); check emissivities and "
                             "conductivity tables, or raise max_iterations")


def check_steady_state(domain, spec: HeatSpec, where: str) -> None:
    """A steady state needs every connected body to reach a convection or fixed-temperature surface."""
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    count, label = domain.bodies
    sinks = list(spec.convection) + list(spec.fixed_temperature) + [
        s for s, r in spec.radiation.items() if r.emissivity > 0]  # emissivity 0 removes no heat
    sinks += [s for n, g in spec.exchange.items() if g.surroundings is not None for s in spec.view.groups[n].surfaces]
    reached = np.zeros(count + len(spec.cavities), dtype=bool)
    for name in sinks:
        reached[label[domain.mesh.facets[:, domain.surfaces[name]].ravel()]] = True
    links = [(count, count)]  # bodies that exchange heat through a cavity's air form one group
    for i, c in enumerate(spec.cavities.values()):
        reached[count + i] = c.ventilation > 0
        links += [(count + i, int(b)) for s in c.films for b in np.unique(label[domain.mesh.facets[:, domain.surfaces[s]]])]
    for name in spec.exchange:  # bodies that exchange radiation with each other form one group too
        bodies = np.unique(label[domain.mesh.facets[:, np.concatenate([domain.surfaces[s] for s in
                                                                       spec.view.groups[name].surfaces])].ravel()])
        links += [(int(bodies[0]), int(b)) for b in bodies]
    r, c = np.array(links).T
    n = count + len(spec.cavities) + 1
    _, group = connected_components(coo_matrix((np.ones(len(r)), (r, c)), shape=(n, n)), directed=False)
    reached = np.isin(group[:count], group[: n - 1][reached])
    problems = []
    for c in np.flatnonzero(~reached):
        parts = domain.body_parts(c)
        heated = [p for p in parts if spec.power.get(p, 0) or spec.generation.get(p, 0)]
        if heated:
            problems.append(
                f"{where}: parts {', '.join(parts)} receive power ({', '.join(heated)}) but no convection, "
                "radiation with emissivity > 0 or fixed temperature reaches them: there is no steady state; add a "
                "boundary that removes heat"
            )
        else:
            problems.append(
                f"{where}: parts {', '.join(parts)} touch no convection or fixed-temperature surface, so their "
                "temperature is undetermined; add such a boundary or join them to a part that has one"
            )
    if problems:
        raise errors.PhysicsError(problems)


def _part_statistics(domain, problem: _Problem, T: np.ndarray) -> dict[str, dict[str, float]]:
    """Per part: min and max over its dofs, volume mean [K]."""
    space, geom, ref = problem.space, problem.geom, problem.ref
    out = {}
    for name in sorted(domain.parts):
        ids = domain.parts[name]
        used = np.zeros(space.N, dtype=bool)
        used[space.element_dofs[:, ids].ravel()] = True
        values = T[used]
        weights = geom.det[ids][:, None] * ref.weights
        mean = float(np.sum(weights * kernels.interpolate(space, geom, ids, T, ref)) / weights.sum())
        out[name] = {"min": float(values.min()), "max": float(values.max()), "mean": mean}
    return out


def _probe_values(domain, order, T, probes, where) -> dict[str, float]:
    if not probes:
        return {}
    names, points, cells = fem.probe_points(domain, probes, where)
    dofs, phi = fem.probe_weights(domain, order, points, cells)
    return {n: float(v) for n, v in zip(names, np.sum(phi * T[dofs], axis=0))}


def _adiabatic(domain, spec: HeatSpec) -> tuple[str, ...]:
    used = set(spec.convection) | set(spec.fixed_temperature) | set(spec.flux) | set(spec.radiation)
    used |= {s for c in spec.cavities.values() for s in c.films}
    used |= {s for n in spec.exchange for s in spec.view.groups[n].surfaces}
    out = [s for s in sorted(domain.surfaces) if s not in used]
    boundary = domain.boundary_facets()
    joined = [f for c in domain.contacts.values() for f in c.facets] + [f for t in domain.ties.values() for f in t.facets]
    named = np.concatenate([domain.surfaces[s] for s in domain.surfaces] + joined or [np.zeros(0, dtype=np.int64)])
    rest = np.setdiff1d(boundary, named)
    if len(rest):
        out.append(f"(boundary in no surface group: {len(rest)} facets, {domain.facet_areas(rest).sum():.4g} m^2)")
    return tuple(out)


def _validity_notices(spec: HeatSpec, parts: dict) -> list[str]:
    out = []
    for part, stats in parts.items():
        m = spec.materials[part]
        if m.valid_to is not None and stats["max"] > m.valid_to:
            out.append(f"part '{part}' reaches {celsius(stats['max']):.1f} degC, above the {celsius(m.valid_to):.0f} "
                       f"degC to which the data of '{m.name}' hold")
        if m.valid_from is not None and stats["min"] < m.valid_from:
            out.append(f"part '{part}' falls to {celsius(stats['min']):.1f} degC, below the {celsius(m.valid_from):.0f} "
                       f"degC from which the data of '{m.name}' hold")
    return out
