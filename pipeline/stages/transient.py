"""Transient heat conduction: rho c dT/dt - div(k grad T) = q(t), with the heat stage's boundaries.

Semi-discrete form (theory in docs/theory.md): M dT/dt + R(T, t) = 0, where M is the heat-capacity
matrix int rho c u v dV and R is the steady residual of ``heat._Problem`` (conduction, convection with
its power law, radiation, k(T)) minus the sources at time t.  Time integration:

- backward Euler (Hairer & Wanner, Solving ODEs II, 2nd ed. (1996), Section IV.3), order 1:
      M (T1 - T0) / h + R(T1, t1) = 0
- variable-step BDF2 (Hairer, Norsett & Wanner, Solving ODEs I, 2nd ed. (1993), Section III.5,
  eq. (5.5)), order 2, started by one backward Euler step, with w = h_n / h_{n-1}:
      M (a0 T_{n+1} + a1 T_n + a2 T_{n-1}) / h_n + R(T_{n+1}, t_{n+1}) = 0,
      a0 = (1 + 2w) / (1 + w), a1 = -(1 + w), a2 = w^2 / (1 + w)

Each step solves its nonlinear system by Newton with the consistent tangent (a0/h) M + dR/dT.  The
step size follows a local error estimate (the difference between the step's solution and the
polynomial extrapolation of the previous ones, scaled by the method's error constant) against an
absolute tolerance in K; steps land on load breakpoints, requested instants and period ends, and the
history restarts (one backward Euler step) after a jump of a load.

Units: T [K], t [s], rho [kg/m^3], c [J/(kg*K)], powers [W], heat [J].
"""

from __future__ import annotations

import json
import math
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, replace

import numpy as np

from .. import errors
from ..fields import TemperatureField
from ..model.units import celsius
from . import fem, heat, impedance, kernels, solvers

STAGE_VERSION = 2
METHODS = ("euler", "bdf2")
#: preconditioned CG iterations after which a step's matrix is factorised afresh
REFACTOR = 20
ORDER = {"euler": 1, "bdf2": 2}


@dataclass(frozen=True)
class Profile:
    """A value in time: a table of (time [s], value) rows, linear between rows (``hold``: each value
    held until the next row, a step), held beyond the last row; with ``period`` [s] the table repeats
    (a duty cycle).  ``function``: a callable t -> value instead (manufactured cases)."""

    times: tuple[float, ...] = (0.0,)
    values: tuple[float, ...] = (0.0,)
    hold: bool = False
    period: float | None = None
    function: Callable[[float], float] | None = None

    @classmethod
    def constant(cls, value: float) -> "Profile":
        return cls((0.0,), (float(value),), hold=True)

    @classmethod
    def duty_cycle(cls, period: float, on: float, high: float, low: float = 0.0) -> "Profile":
        """``high`` for the first ``on`` seconds of each ``period``, then ``low``."""
        return cls((0.0, on), (high, low), hold=True, period=period)

    def _local(self, t: float) -> float:
        return t % self.period if self.period else t

    def at(self, t: float, left: bool = False) -> float:
        """The value at time t: after a jump at t the new value, or with ``left`` the old one (what a
        step ending at t has seen)."""
        if self.function is not None:
            return float(self.function(t))
        tl, ts, vs = self._local(t), self.times, self.values
        if self.hold:
            eps = 1e-12 * max(1.0, abs(t))
            if left and self.period and tl < eps:
                tl = self.period  # a period end: the end of the last cycle
            i = int(np.searchsorted(ts, tl - eps if left else tl + eps, side="right")) - 1
            return float(vs[max(i, 0)])
        return float(np.interp(tl, ts, vs))

    @property
    def constant_value(self) -> float | None:
        """The value if it never changes, else None."""
        if self.function is None and len(set(self.values)) == 1:
            return float(self.values[0])
        return None

    def breaks(self, t0: float, t1: float) -> list[float]:
        """Times in (t0, t1] where the value jumps or its slope changes."""
        if self.function is not None or self.constant_value is not None:
            return []
        if not self.period:
            return [t for t in self.times if t0 < t <= t1]
        out, k = [], math.floor(t0 / self.period)
        while k * self.period <= t1:
            out += [k * self.period + t for t in self.times + (self.period,) if t0 < k * self.period + t <= t1]
            k += 1
        return sorted(set(out))

    @property
    def jumps(self) -> bool:
        return self.hold and self.constant_value is None


@dataclass(frozen=True)
class ImpedanceSpec:
    """Z_th(t) = (T(t) - T(0)) / P for a power step: T the maximum over ``part`` [K], P the step [W];
    a Foster network of at most ``terms`` terms is fitted within ``tolerance`` (relative to Z_th at
    the end)."""

    part: str
    terms: int = 6
    tolerance: float = 0.01


@dataclass(frozen=True)
class TransientSpec:
    """What the transient stage reads besides the domain and the initial field.

    heat: the boundaries (a constant flux too), materials, probes, order and solver (a ``heat.HeatSpec``;
    its ``power`` and ``generation`` must be empty: power varies here).  power: part -> Profile [W].
    ambient: convection surface -> Profile [K] (replaces that surface's ambient).
    initial: uniform starting temperature [K] when no initial field is given.
    method: "euler" or "bdf2".  end: final time [s].  periodic: stop at the first period end at which
    no temperature changed by more than this [K] over the last period (needs a periodic load).
    step: first step [s]; min_step, max_step [s]; tolerance: local error per step [K]; adaptive:
    False keeps ``step`` fixed.  instants: times [s] whose full field is kept.  differences: part
    pairs (a, b) whose largest max(a) - min(b) is tracked (within each part max - min always is).
    impedance: Z_th(t) and its Foster network, or None.  max_steps: bound on the accepted steps."""

    heat: heat.HeatSpec
    power: Mapping[str, Profile] = field(default_factory=dict)
    ambient: Mapping[str, Profile] = field(default_factory=dict)
    initial: float = 293.15
    method: str = "bdf2"
    end: float = 1.0
    periodic: float | None = None
    step: float = 1e-3
    min_step: float = 1e-9
    max_step: float = math.inf
    tolerance: float = 0.05
    adaptive: bool = True
    instants: tuple[float, ...] = ()
    differences: tuple[tuple[str, str], ...] = ()
    impedance: ImpedanceSpec | None = None
    max_steps: int = 100000


def check(domain, spec: TransientSpec, initial: TemperatureField | None = None, where: str = "transient") -> None:
    """Raise one ``InputError`` listing every problem of ``spec`` (and of the heat spec it holds)."""
    problems: list = []
    try:
        heat.check(domain, spec.heat, where)
    except errors.InputError as exc:
        problems += exc.records
    h = spec.heat
    for key, group in (("power", h.power), ("generation", h.generation)):
        if group:
            problems.append(f"{where}.{key}: the transient stage takes power per part as profiles "
                            "(power = {part = ...}); volumetric generation is not supported yet")
    for part, m in h.materials.items():
        if m.specific_heat is None:
            problems.append(f"{where}: material '{m.name}' of part '{part}' has no specific_heat [J/(kg*K)]; "
                            "add it to the material (thermochain materials --file)")
    for part in spec.power:
        if part not in domain.parts:
            problems.append(errors.unknown_name("part", part, domain.parts, f"{where}.power"))
    for surface in spec.ambient:
        if surface not in h.convection:
            problems.append(errors.unknown_name("convection surface", surface, h.convection, f"{where}.ambient"))
    for name, p in list(spec.power.items()) + list(spec.ambient.items()):
        if p.function is None and (len(p.times) != len(p.values) or np.any(np.diff(p.times) <= 0)
                                   or p.times[0] < 0 or not np.all(np.isfinite(p.values))):
            problems.append(f"{where}: profile of '{name}': times must start at or after 0 s and increase, "
                            "one finite value per time")
        if p.period is not None and not (p.period > 0 and p.times[-1] < p.period):
            problems.append(f"{where}: profile of '{name}': the period must exceed the last time of the cycle")
    if spec.method not in METHODS:
        problems.append(f"{where}.method: must be one of {', '.join(METHODS)}, got {spec.method!r}")
    if not (spec.end > 0 and spec.step > 0 and spec.min_step > 0 and spec.tolerance > 0 and spec.max_step > 0):
        problems.append(f"{where}: end, step, min_step, max_step and tolerance must be positive")
    if spec.periodic is not None and not any(p.period for p in list(spec.power.values()) + list(spec.ambient.values())):
        problems.append(f"{where}.periodic: a periodic steady state needs a periodic load (a duty cycle)")
    for t in spec.instants:
        if not 0 <= t <= spec.end:
            problems.append(f"{where}.instants: {t:g} s lies outside 0..{spec.end:g} s")
    for a, b in spec.differences:
        for part in (a, b):
            if part not in domain.parts:
                problems.append(errors.unknown_name("part", part, domain.parts, f"{where}.differences"))
    if spec.impedance is not None:
        z = spec.impedance
        if z.part not in domain.parts:
            problems.append(errors.unknown_name("part", z.part, domain.parts, f"{where}.impedance.part"))
        steps = [p.constant_value for p in spec.power.values()] + [1.0 for _ in h.flux]
        if not steps or None in steps or not sum(steps) > 0 or any(p.constant_value is None for p in spec.ambient.values()):
            problems.append(f"{where}.impedance: Z_th needs a power step: constant powers (total > 0) from 0 s "
                            "and constant ambients")
        sinks = [c.ambient for c in h.convection.values()] + [r.surroundings for r in h.radiation.values()]
        sinks += [v for v in h.fixed_temperature.values() if not callable(v)]
        if initial is None and any(abs(v - spec.initial) > 1e-9 * max(1.0, v) for v in sinks):
            problems.append(f"{where}.impedance: Z_th is the response to a power step from equilibrium: the uniform "
                            f"initial temperature ({spec.initial:g} K) must equal every ambient, surroundings and "
                            "fixed temperature (or start from a steady heat stage)")
        if not (1 <= z.terms <= 12 and 0 < z.tolerance < 1):
            problems.append(f"{where}.impedance: terms must lie in 1..12 and tolerance in (0, 1)")
    if initial is not None and (initial.order != h.order or len(initial.temperature) != fem.unknowns(domain, h.order)):
        problems.append(f"{where}.source: the initial field (P{initial.order}, {len(initial.temperature)} dofs) does "
                        f"not match this stage's mesh and order P{h.order}; give the heat stage the same order")
    if problems:
        raise errors.InputError(problems)


@dataclass(frozen=True, repr=False)
class TransientField:
    """Temperature history on a domain.

    times: accepted step times [s] (n,), from 0.  parts: part names; part_history (n, parts, 3): min,
    max, mean [K].  probes: probe names; probe_history (n, probes) [K].  power: total power (n,) [W].
    energy: (n, 4) stored (relative to t = 0), supplied, lost and their residual [J], each step's heat
    by the method's own quadrature.  snapshots: label -> (time [s], temperature at the dofs [K]);
    labels "t=TIME", "max_difference:PART", "max_difference:A:B" (the instant of the largest max(A) -
    min(B)), "end".  impedance: {"times_s", "zth_K_per_W", "foster": [{"R_K_per_W", "tau_s"}],
    "fit_error", ...} or {}.  order: element order.  vertices: mesh vertices.  record: steps,
    rejections, Newton iterations, seconds, periods and the periodic change."""

    times: np.ndarray
    parts: tuple[str, ...]
    part_history: np.ndarray
    probes: tuple[str, ...]
    probe_history: np.ndarray
    power: np.ndarray
    energy: np.ndarray
    snapshots: dict[str, tuple[float, np.ndarray]]
    order: int
    vertices: int
    impedance: dict = field(default_factory=dict)
    record: dict = field(default_factory=dict)
    notices: tuple[str, ...] = ()
    domain_hash: str = ""

    def peak(self, part: str) -> tuple[float, float]:
        """(largest temperature [K], its time [s]) of a part."""
        i = self.parts.index(part)
        n = int(np.argmax(self.part_history[:, i, 1]))
        return float(self.part_history[n, i, 1]), float(self.times[n])

    def to_arrays(self) -> tuple[dict[str, np.ndarray], dict]:
        labels = list(self.snapshots)
        arrays = {"times": self.times, "part_history": self.part_history, "probe_history": self.probe_history,
                  "power": self.power, "energy": self.energy}
        arrays |= {f"snapshot_{i}": self.snapshots[k][1] for i, k in enumerate(labels)}
        meta = {"parts": list(self.parts), "probes": list(self.probes), "order": self.order,
                "vertices": self.vertices, "impedance": self.impedance, "record": self.record,
                "notices": list(self.notices), "domain_hash": self.domain_hash,
                "snapshots": [[k, self.snapshots[k][0]] for k in labels]}
        json.dumps(meta, allow_nan=False)
        return arrays, meta

    @classmethod
    def from_arrays(cls, arrays: dict[str, np.ndarray], meta: dict) -> "TransientField":
        snaps = {k: (float(t), np.asarray(arrays[f"snapshot_{i}"])) for i, (k, t) in enumerate(meta["snapshots"])}
        return cls(times=np.asarray(arrays["times"]), parts=tuple(meta["parts"]),
                   part_history=np.asarray(arrays["part_history"]), probes=tuple(meta["probes"]),
                   probe_history=np.asarray(arrays["probe_history"]), power=np.asarray(arrays["power"]),
                   energy=np.asarray(arrays["energy"]), snapshots=snaps, order=meta["order"],
                   vertices=meta["vertices"], impedance=meta["impedance"], record=meta["record"],
                   notices=tuple(meta["notices"]), domain_hash=meta["domain_hash"])

    def __repr__(self) -> str:
        t = celsius(self.part_history[:, :, 1].max()) if len(self.times) else float("nan")
        return (f"<TransientField P{self.order}, {len(self.times) - 1} steps to {self.times[-1]:.4g} s, peak "
                f"{t:.2f} degC, {len(self.snapshots)} snapshots>")


def solve(domain, spec: TransientSpec, initial: TemperatureField | None = None, where: str = "transient",
          checked: bool = False) -> TransientField:
    """Integrate from the initial field (or ``spec.initial`` everywhere) to ``spec.end`` or to a
    periodic steady state; see the module docstring."""
    if not checked:
        check(domain, spec, initial, where)
    start = time.perf_counter()
    run = _Integration(domain, spec, initial, where)
    run.integrate()
    result = run.result()
    result.record["seconds"] = time.perf_counter() - start
    return result


def capacity_matrix(domain, space, geom, materials, order: int):
    """M = int rho c u v dV, exact quadrature for rho c constant per part [J/K]."""
    out = kernels.Assembler(space.N)
    for part in sorted(domain.parts):
        m = materials[part]
        kernels.mass(space, geom, domain.parts[part], m.density * m.specific_heat, kernels.degree_mass(order), out)
    return out.matrix().tocsr()


def _error_constant(method: str, h: float, times: list[float]) -> tuple[int, float] | None:
    """(n, C): the local error of a step of size h is about C * (T - P), P the extrapolation to the
    new time of the last n solutions (at ``times``); None when there are too few (docs/theory.md).

    Backward Euler: error h^2/2 T'', linear extrapolation misses h (h + k)/2 T'' (k the previous step).
    BDF2: error c3 h^3 T''' with c3 = (1 + w)^2 / (6 w (1 + 2 w)), w = h / k1; quadratic extrapolation
    misses h (h + k1)(h + k1 + k2)/6 T'''."""
    if method == "euler":
        if len(times) < 2:
            return None
        k = times[-1] - times[-2]
        return 2, h / (2 * h + k)
    if len(times) < 3:
        return None
    k1, k2 = times[-1] - times[-2], times[-2] - times[-3]
    w = h / k1
    c3 = (1 + w) ** 2 / (6 * w * (1 + 2 * w)) * h ** 3
    return 3, c3 / (c3 + h * (h + k1) * (h + k1 + k2) / 6)


class _Integration:
    """State of one time integration (kept in one object so that ``solve`` reads like the algorithm)."""

    def __init__(self, domain, spec: TransientSpec, initial, where):
        self.domain, self.spec, self.where = domain, spec, where
        self.problem = heat._Problem(domain, spec.heat)
        p = self.problem
        self.M = capacity_matrix(domain, p.space, p.geom, spec.heat.materials, spec.heat.order)
        self.units = {part: kernels.load(p.space, p.geom, domain.parts[part], 1.0 / domain.part_volume(part), p.ref)
                      for part in spec.power}  # W -> nodal load of 1 W spread over the part
        self.flux = np.zeros(p.space.N)  # constant surface fluxes [W at the dofs]
        self.flux_total = 0.0
        for name, f in spec.heat.flux.items():
            facets = kernels.Facets(p.space, p.geom, domain.surfaces[name], kernels.degree_mass(spec.heat.order))
            per_area = f.per_area if f.per_area is not None else f.total / facets.area.sum()
            self.flux += facets.load(per_area)
            self.flux_total += float(per_area * facets.area.sum())
        T = np.array(initial.temperature, dtype=float) if initial is not None else np.full(p.space.N, spec.initial)
        fixed = np.zeros(0, dtype=np.int64)
        for name, value in spec.heat.fixed_temperature.items():
            dofs = p.space.facet_dofs(domain.surfaces[name])
            T[dofs] = value(p.space.doflocs[:, dofs]) if callable(value) else value
            fixed = np.union1d(fixed, dofs)
        self.fixed, self.free = fixed, np.setdiff1d(np.arange(p.space.N), fixed)
        self.parts = tuple(sorted(domain.parts))
        self.part_dofs = {}
        for part in self.parts:
            used = np.zeros(p.space.N, dtype=bool)
            used[p.space.element_dofs[:, domain.parts[part]].ravel()] = True
            self.part_dofs[part] = np.flatnonzero(used)
        self.part_weights = {part: p.geom.det[domain.parts[part]][:, None] * p.ref.weights for part in self.parts}
        self.probes = tuple(spec.heat.probes)
        if self.probes:
            _, points, cells = fem.probe_points(domain, spec.heat.probes, where)
            self.probe_dofs, self.probe_phi = fem.probe_weights(domain, spec.heat.order, points, cells)
        self.T0 = T.copy()
        self.ones_M = np.asarray(self.M.sum(axis=0)).ravel()  # 1^T M: stored heat per K at each dof [J/K]
        self.E0 = float(self.ones_M @ T)
        self.times, self.solutions = [0.0], [T]
        self.stats, self.probe_rows, self.powers = [], [], []
        self.energy = [[0.0, 0.0, 0.0, 0.0]]
        self.step_heat = (0.0, 0.0)  # supplied and lost heat of the last step [J] (BDF2 recursion)
        self.snapshots: dict[str, tuple[float, np.ndarray]] = {}
        self.best: dict[str, float] = {}
        self.record = {"method": spec.method, "accepted": 0, "rejected": 0, "newton": 0, "linear_solves": 0,
                       "factorisations": 0, "preconditioned_solves": 0,
                       "restarts": 0, "periods": 0, "periodic_change_K": None, "reached": "end"}
        self._factor, self._tangent = None, None
        self._M_free = self.M[self.free][:, self.free].tocsr() if len(self.fixed) else self.M
        self._observe(0.0, T, self._power(0.0))

    # --- loads at a time
    def _power(self, t: float, left: bool = False) -> float:
        """Heat supplied by power and flux at t [W]."""
        return float(sum(p.at(t, left) for p in self.spec.power.values())) + self.flux_total

    def _loads_at(self, t: float) -> None:
        """Loads of a step ending at t (the values before a jump at t)."""
        p = self.problem
        b = self.flux.copy()
        for part, profile in self.spec.power.items():
            b += profile.at(t, left=True) * self.units[part]
        p.b = b
        p.losses = [(name, kind, facets, replace(c, ambient=self.spec.ambient[name].at(t, left=True))
                     if kind == "convection" and name in self.spec.ambient else c)
                    for name, kind, facets, c in p.losses]

    def _breaks(self, t0: float, t1: float) -> tuple[list[float], set[float]]:
        """Times in (t0, t1] a step must land on, and those at which a load jumps."""
        out, jumps = set(), set()
        for p in list(self.spec.power.values()) + list(self.spec.ambient.values()):
            b = p.breaks(t0, t1)
            out.update(b)
            if p.jumps:
                jumps.update(b)
        out.update(t for t in self.spec.instants if t0 < t <= t1)
        period = self._period
        if period:
            k = math.floor(t0 / period + 1e-9) + 1
            if k * period <= t1:
                out.add(k * period)
        return sorted(out), jumps

    @property
    def _period(self) -> float | None:
        periods = [p.period for p in list(self.spec.power.values()) + list(self.spec.ambient.values()) if p.period]
        return max(periods) if periods else None

    # --- one step
    def _solve_step(self, t1: float, h: float, coefficients: tuple[float, ...], previous: list[np.ndarray]):
        """Newton for M (a0 T + sum_i a_i T_prev_i) / h + R(T, t1) = 0; returns T or None (no convergence)."""
        p, M, free = self.problem, self.M, self.free
        self._loads_at(t1)
        a0 = coefficients[0]
        history = sum(a * T for a, T in zip(coefficients[1:], previous))
        T = previous[0].copy()
        if len(previous) > 1:  # linear extrapolation as the Newton start
            T[free] += (previous[0] - previous[1])[free] * (h / max(self.times[-1] - self.times[-2], 1e-300))
        scale = None
        for iteration in range(1, self.spec.heat.max_iterations + 1):
            F = M @ (a0 * T + history) / h + p.residual(T)
            norm = float(np.linalg.norm(F[free]))
            if scale is None:  # the residual of the start or the sources, and the round-off floor of F
                floor = 1e-13 * float(np.linalg.norm((abs(M) @ np.abs(T))[free])) * a0 / h
                scale = max(self.spec.heat.tolerance * max(norm, float(np.linalg.norm(p.b[free]))), floor, 1e-300)
            if iteration > 1 and (p.linear or norm <= scale):
                return T, F
            delta = self._linear_solve(self._matrix(a0 / h, T), -F[free])
            self.record["linear_solves"] += 1
            self.record["newton"] += 1
            T = T.copy()
            T[free] += delta
            if p.linear:
                return T, M @ (a0 * T + history) / h + p.residual(T)
        return None, None

    def _matrix(self, c: float, T):
        """(c M + dR/dT) on the free dofs (a linear problem's dR/dT is assembled once)."""
        p = self.problem
        if p.linear and self._tangent is not None:
            J = self._tangent
        else:
            J = p.tangent(T).tocsr()
            if len(self.free) != J.shape[0]:
                J = J[self.free][:, self.free]
            if p.linear:
                self._tangent = J
        return (c * self._M_free + J).tocsr()

    def _linear_solve(self, A, rhs: np.ndarray) -> np.ndarray:
        """Solve A x = rhs.  The direct factorisation (or the AMG hierarchy's V-cycle) of an earlier
        step's matrix preconditions conjugate gradients (1e-12 relative residual); when that takes more
        than REFACTOR iterations (the step or the tangent moved too far) A is prepared afresh and kept."""
        from scipy.sparse.linalg import LinearOperator, cg

        kept = self._factor
        if kept is not None:
            if kept.method == "direct":
                M = LinearOperator(A.shape, matvec=lambda r: kept.solve(r)[0], dtype=float)
            else:
                M = kept.preconditioner()
            x, info = cg(A, rhs, rtol=1e-12, atol=0.0, maxiter=REFACTOR, M=M)
            if info == 0:
                self.record["preconditioned_solves"] += 1
                return x
        prepared = solvers.Prepared(A, self.spec.heat.solver, None, 1e-12, 500)
        x, _ = prepared.solve(rhs)
        self.record["factorisations"] += 1
        self._factor = prepared
        return x

    # --- the loop
    def integrate(self) -> None:
        spec = self.spec
        h, restart, last_period_T = spec.step, True, None
        order = ORDER[spec.method]
        t = 0.0
        while t < spec.end * (1 - 1e-12):
            if self.record["accepted"] >= spec.max_steps:
                raise errors.SolverError(f"{self.where}: more than {spec.max_steps} time steps; raise max_steps "
                                         "or the tolerance")
            h = min(h, spec.max_step, spec.end - t)
            breaks, jumps = self._breaks(t, t + h)
            if breaks and breaks[0] < t + h * (1 - 1e-9):
                h = breaks[0] - t
            t1 = t + h
            bdf2 = spec.method == "bdf2" and not restart
            if bdf2:
                w = h / (t - self.times[-2])
                coeffs, previous = ((1 + 2 * w) / (1 + w), -(1 + w), w * w / (1 + w)), self.solutions[-1:-3:-1]
            else:
                coeffs, previous = (1.0, -1.0), self.solutions[-1:]
            T1, F = self._solve_step(t1, h, coeffs, previous)
            error = None
            if T1 is not None and spec.adaptive and not restart:
                error = self._local_error(T1, h, order if bdf2 else 1)
            if T1 is None or (error is not None and error > spec.tolerance):
                self.record["rejected"] += 1
                shrink = 0.25 if T1 is None else max(0.2, 0.9 * (spec.tolerance / error) ** (1 / ((order if bdf2 else 1) + 1)))
                h *= shrink
                if h < spec.min_step:
                    raise errors.SolverError(f"{self.where}: the time step fell below min_step = {spec.min_step:g} s "
                                             f"at t = {t:.6g} s (Newton {'failed' if T1 is None else 'error too large'}); "
                                             "raise the tolerance or check the loads and boundaries")
                continue
            self._account(T1, F, h, coeffs, bdf2)
            t = t1
            self.times.append(t)
            self.solutions = self.solutions[-2:] + [T1]
            self.record["accepted"] += 1
            self._observe(t, T1, self._power(t, left=True))
            hit_jump = any(abs(t - j) <= 1e-9 * max(1.0, t) for j in jumps)
            if hit_jump:
                restart, self.record["restarts"] = True, self.record["restarts"] + 1
                self.solutions = [T1]
                h = spec.step
            else:
                restart = False
                if spec.adaptive and error is not None and error > 0:
                    grow = min(2.0, 0.9 * (spec.tolerance / error) ** (1 / ((order if bdf2 else 1) + 1)))
                    if grow >= 1.2 or grow < 1.0:  # small changes are not worth making
                        h *= grow
            if self._period and self._at_period_end(t):
                self.record["periods"] += 1
                if last_period_T is not None:
                    change = float(np.abs(T1 - last_period_T).max())
                    self.record["periodic_change_K"] = change
                    if spec.periodic is not None and change <= spec.periodic:
                        self.record["reached"] = "periodic"
                        break
                last_period_T = T1.copy()

    def _at_period_end(self, t: float) -> bool:
        k = round(t / self._period)
        return k >= 1 and abs(t - k * self._period) <= 1e-9 * max(1.0, t)

    def _local_error(self, T1, h, order) -> float | None:
        """Largest estimated local error of the step [K] over the free dofs."""
        times = self.times[-len(self.solutions):]
        got = _error_constant("euler" if order == 1 else "bdf2", h, times)
        if got is None:
            return None
        n, c = got
        ts = np.array(self.times[-n:])
        sols = self.solutions[-n:]
        t1 = self.times[-1] + h
        # Lagrange extrapolation of the n previous solutions to t1
        P = np.zeros_like(T1)
        for i in range(n):
            li = np.prod([(t1 - ts[j]) / (ts[i] - ts[j]) for j in range(n) if j != i])
            P += li * sols[i]
        return float(np.abs(c * (T1 - P))[self.free].max(initial=0.0))

    def _account(self, T1, F, h, coeffs, bdf2: bool) -> None:
        """Heat of the step by the method's quadrature: supplied (sources, fixed temperatures) and lost
        (surfaces); BDF2's step heat W follows a0 W_{n+1} - a2 W_n = h Q_{n+1} (docs/theory.md)."""
        p = self.problem
        supplied = float(p.b.sum()) + float(F[self.fixed].sum())  # fixed-temperature dofs: the reaction
        lost = sum(facets.integral(heat._surface_loss(kind, c, facets.values(T1))[0])
                   for _, kind, facets, c in p.losses)
        if bdf2:
            a0, a2 = coeffs[0], coeffs[2]
            step = ((h * supplied + a2 * self.step_heat[0]) / a0, (h * lost + a2 * self.step_heat[1]) / a0)
        else:
            step = (h * supplied, h * lost)
        self.step_heat = step
        stored = float(self.ones_M @ T1) - self.E0
        row = self.energy[-1]
        s, l = row[1] + step[0], row[2] + step[1]
        self.energy.append([stored, s, l, stored + l - s])

    def _observe(self, t: float, T: np.ndarray, power: float) -> None:
        p = self.problem
        rows = []
        for part in self.parts:
            v = T[self.part_dofs[part]]
            w = self.part_weights[part]
            mean = float(np.sum(w * kernels.interpolate(p.space, p.geom, self.domain.parts[part], T, p.ref)) / w.sum())
            rows.append((float(v.min()), float(v.max()), mean))
        self.stats.append(rows)
        if self.probes:
            self.probe_rows.append(np.sum(self.probe_phi * T[self.probe_dofs], axis=0))
        self.powers.append(power)
        for ti in self.spec.instants:
            if abs(t - ti) <= 1e-9 * max(1.0, ti):
                self.snapshots[f"t={ti:g}"] = (t, T.copy())
        index = {part: i for i, part in enumerate(self.parts)}
        candidates = {f"max_difference:{part}": rows[index[part]][1] - rows[index[part]][0] for part in self.parts}
        candidates |= {f"max_difference:{a}:{b}": rows[index[a]][1] - rows[index[b]][0] for a, b in self.spec.differences}
        for label, value in candidates.items():
            if label not in self.best or value > self.best[label]:
                self.best[label] = value
                self.snapshots[label] = (t, T.copy())

    def result(self) -> TransientField:
        spec = self.spec
        times = np.array(self.times)
        history = np.array(self.stats)
        self.snapshots["end"] = (float(times[-1]), self.solutions[-1].copy())
        notices = list(self.domain.notices)
        if spec.periodic is not None and self.record["reached"] != "periodic":
            notices.append(f"no periodic steady state within {spec.end:g} s: the last period changed temperatures "
                           f"by {self.record['periodic_change_K'] or float('nan'):.3g} K (tolerance {spec.periodic:g} K); "
                           "raise 'end'")
        z = {}
        if spec.impedance is not None:
            i = self.parts.index(spec.impedance.part)
            rise = history[:, i, 1] - history[0, i, 1]
            z = impedance.summary(times, rise / self._power(0.0), spec.impedance.terms, spec.impedance.tolerance)
            z["part"] = spec.impedance.part
            if z["fit_error"] > spec.impedance.tolerance:
                notices.append(f"the Foster network of {z['terms']} terms fits Z_th within {z['fit_error']:.2%} only "
                               f"(tolerance {spec.impedance.tolerance:.2%})")
        scale = max(float(np.abs(np.array(self.energy)[:, :3]).max()), 1e-300)
        self.record["energy_residual_relative"] = float(np.abs(np.array(self.energy)[:, 3]).max() / scale)
        self.record["stage_version"] = STAGE_VERSION
        self.record["period_s"] = self._period
        return TransientField(
            times=times, parts=self.parts, part_history=history, probes=self.probes,
            probe_history=np.array(self.probe_rows) if self.probes else np.zeros((len(times), 0)),
            power=np.array(self.powers), energy=np.array(self.energy), snapshots=self.snapshots,
            order=spec.heat.order, vertices=int(self.domain.mesh.nvertices), impedance=z, record=self.record,
            notices=tuple(notices), domain_hash=self.domain.source_hash)


def at_instant(domain, spec: heat.HeatSpec, result: TransientField, label: str, where: str = "instant") -> TemperatureField:
    """The kept field ``label`` of a transient result as a TemperatureField (what map stages read):
    per-part statistics and probes at that instant; its balance is empty (a transient instant has
    none) and its meta names the instant."""
    if label not in result.snapshots:
        raise errors.InputError(errors.unknown_name("kept instant", label, list(result.snapshots), f"{where}.at"))
    t, T = result.snapshots[label]
    problem = heat._Problem(domain, spec)
    parts = heat._part_statistics(domain, problem, T)
    probes = heat._probe_values(domain, spec.order, T, spec.probes, where)
    record = solvers.SolveRecord(method="transient", unknowns=len(T), iterations=result.record.get("accepted", 0),
                                 residual=0.0, seconds=0.0)
    return TemperatureField(temperature=T, order=result.order, vertices=result.vertices, parts=parts, balance=(),
                            probes=probes, loads=(), adiabatic=(), solver=record, notices=(),
                            domain_hash=result.domain_hash, meta={"instant": label, "time_s": t})
