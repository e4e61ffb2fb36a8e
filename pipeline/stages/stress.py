"""Linear thermoelasticity (the ``stress`` stage): div sigma + b = 0, sigma = C (eps(u) - alpha (T - T_ref)).

Weak form: find u with the supports' constraints such that for every admissible v
    int eps(v) : C eps(u) dV + sum_spring int k u.v dA
        = int eps(v) : C alpha (T - T_ref) dV + int b.v dV + sum_pressure int -p n.v dA + sum_force int t.v dA
Parts that share nodes are bonded.  C and alpha are constant per part (in model coordinates, from the
part's material axes), so the thermal mismatch at a bonded interface is never averaged away.
Units: u [m], sigma and p [Pa], k [N/m^3], b [N/m^3], forces [N], T [K].
"""

from __future__ import annotations

import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

import numpy as np

from .. import errors
from ..fields import StressField, ThermalLoad
from ..model.materials import Material
from . import constitutive, fem, kernels, recovery, solvers, supports
from .supports import Support

STAGE_VERSION = 1


@dataclass(frozen=True)
class StressSpec:
    """What the stress stage reads besides the domain and the thermal load.

    materials: part -> material.  supports: surface -> Support (kind "minimal" under any name that is
    not a surface).  pressure: surface -> Pa (positive pushes on the surface).  force: surface ->
    (Fx, Fy, Fz) [N], spread evenly over its area.  gravity: acceleration (gx, gy, gz) [m/s^2] acting
    on each part's density.  body_force: part -> function of x (3, ...) [m] giving (3, ...) [N/m^3].
    probes: name -> (x, y, z) [m].  order: 2 (default) or 1.  solver: "auto", "direct" or "amg".
    memory_limit: bytes the stage may use (default: what is available); checked before assembly.
    """

    materials: Mapping[str, Material]
    supports: Mapping[str, Support]
    pressure: Mapping[str, float] = field(default_factory=dict)
    force: Mapping[str, tuple[float, float, float]] = field(default_factory=dict)
    gravity: tuple[float, float, float] | None = None
    body_force: Mapping[str, Callable] = field(default_factory=dict)
    probes: Mapping[str, tuple[float, float, float]] = field(default_factory=dict)
    order: int = 2
    solver: str = "auto"
    memory_limit: float | None = None


def check(domain, spec: StressSpec, where: str = "stress") -> None:
    """Raise one ``InputError`` listing every problem of ``spec`` on ``domain``."""
    problems = []
    if spec.order not in fem.ORDERS:
        problems.append(f"{where}: order must be 1 or 2, got {spec.order!r}")
    for part in domain.parts:
        if part not in spec.materials:
            problems.append(errors.no_material(part, where))
    for part in list(spec.materials) + list(spec.body_force):
        if part not in domain.parts:
            problems.append(errors.unknown_name("part", part, domain.parts, where))
    for name, s in spec.supports.items():
        if s.kind not in supports.KINDS:
            problems.append(f"{where}.supports.{name}: kind {s.kind!r} is not one of {', '.join(supports.KINDS)}"
                            f"{errors.closest(str(s.kind), supports.KINDS)}")
            continue
        if s.kind != "minimal" and name not in domain.surfaces:
            problems.append(errors.unknown_name("surface", name, domain.surfaces, f"{where}.supports"))
        if s.kind == "spring" and not (s.stiffness and s.stiffness > 0):
            problems.append(f"{where}.supports.{name}: a spring needs stiffness > 0 [N/m^3]")
        if s.kind == "displacement":
            bad = [a for a in (s.components or {}) if a not in supports.AXES]
            if bad or not s.components:
                problems.append(f"{where}.supports.{name}: give components among x, y, z (got {sorted(s.components or {})})")
    for key, group in (("pressure", spec.pressure), ("force", spec.force)):
        for name in group:
            if name not in domain.surfaces:
                problems.append(errors.unknown_name("surface", name, domain.surfaces, f"{where}.{key}"))
    for part, m in spec.materials.items():
        if np.any(np.asarray(m.youngs_modulus) <= 0):
            problems.append(f"{where}: material '{m.name}' of part '{part}' needs a positive Young's modulus")
        if m.kind == "isotropic" and not -1 < m.poisson_ratio[0] < 0.5:
            problems.append(f"{where}: material '{m.name}' needs a Poisson ratio in (-1, 0.5)")
    fem.check_probes(domain, spec.probes, where, problems)
    if spec.order in fem.ORDERS and not problems:
        try:
            solvers.check_memory(3 * fem.unknowns(domain, spec.order), spec.order, 3, spec.solver, spec.memory_limit,
                                 where)
        except errors.InputError as exc:
            problems += exc.problems
    if problems:
        raise errors.InputError(problems)


def risk(domain, spec: StressSpec, where: str = "stress") -> dict | None:
    """The planning notice of ``solvers.risk`` for this model (stiffness contrast between its parts,
    nearly incompressible parts) with the solver strategy chosen for it, or None."""
    used = {part: spec.materials[part] for part in domain.parts if part in spec.materials}
    if not used:
        return None
    return solvers.risk({p: tuple(m.youngs_modulus) for p, m in used.items()},
                        {p: tuple(m.poisson_ratio) for p, m in used.items()}, 3 * fem.unknowns(domain, spec.order),
                        spec.order, spec.solver, spec.memory_limit, where)


def solve(domain, load: ThermalLoad | None, spec: StressSpec, where: str = "stress",
          checked: bool = False) -> StressField:
    """Displacements, stresses, reactions and safety factors; see the module docstring.

    Quadrature (exact where the integrand is polynomial): stiffness degree 2(p-1); thermal load
    (p-1) + the temperature's order; loads and springs 2p; recovery 2p.  checked: ``check`` ran
    already (the runner checks while planning), so it is not run again."""
    if not checked:
        check(domain, spec, where)
    start = time.perf_counter()
    space, geom = fem.space(domain, spec.order), fem.geometry(domain)
    n = 3 * space.N
    rows, pdofs, xyz = supports.gather(domain, space, spec.supports, where)
    spring_points = [space.facet_dofs(domain.surfaces[name]) for name, s in spec.supports.items() if s.kind == "spring"]
    supports.free_motions(domain, rows, xyz, np.concatenate(spring_points) if spring_points else
                          np.zeros(0, dtype=np.int64), where)
    constraints = supports.build(rows, pdofs, n, where)

    stiffness = kernels.Assembler(n)
    f_thermal, f_mech = np.zeros(n), np.zeros(n)
    loads_ref = kernels.reference(spec.order, kernels.degree_mass(spec.order))
    thermal_ref = kernels.reference(spec.order, spec.order - 1 + (load.order if load is not None else 0))
    per_part = {}
    for part in sorted(domain.parts):
        ids = domain.parts[part]
        material = spec.materials[part]
        c, alpha = constitutive.stiffness_matrix(material), constitutive.expansion_vector(material)
        kernels.stiffness(space, geom, ids, c, kernels.degree_stiffness(spec.order), stiffness)
        if load is not None:
            dt = recovery.temperature_rise(domain, load, ids, thermal_ref)
            f_thermal += kernels.strain_load(space, geom, ids, np.einsum("st,t,nq->nsq", c, alpha, dt), thermal_ref)
        b = np.zeros((len(ids), 3, len(loads_ref.weights)))
        if spec.gravity is not None:
            b += material.density * np.asarray(spec.gravity, float)[None, :, None]
        if part in spec.body_force:
            b += np.moveaxis(spec.body_force[part](geom.points(loads_ref, ids)), 0, 1)
        if b.any():
            f_mech += kernels.vector_load(space, geom, ids, b, loads_ref)
        per_part[part] = recovery.PartModel(ids, c, alpha, material)

    degree = kernels.degree_mass(spec.order)
    for name, p in spec.pressure.items():
        facets = kernels.Facets(space, geom, domain.surfaces[name], degree)
        f_mech += facets.vector_load(np.repeat(-p * facets.normal[:, :, None], facets.nq, axis=2))
    for name, force in spec.force.items():
        facets = kernels.Facets(space, geom, domain.surfaces[name], degree)
        f_mech += facets.vector_load(np.asarray(force, float) / facets.area.sum())
    springs = {name: kernels.Facets(space, geom, domain.surfaces[name], degree).vector_mass(s.stiffness)
               for name, s in spec.supports.items() if s.kind == "spring"}
    K = stiffness.matrix()
    del stiffness
    for ks in springs.values():
        K = K + ks
    assembled = time.perf_counter() - start
    u, residual, record = _solve_constrained(K, f_thermal + f_mech, constraints, space, spec)
    del K
    reactions = {name: [float(residual[pdofs[pts, i]].sum()) for i in range(3)]
                 for name, pts in constraints.owner.items()}
    for name, ks in springs.items():
        force = -(ks @ u)
        reactions[name] = [float(force[pdofs[:, i]].sum()) for i in range(3)]
    applied = [float(f_mech[pdofs[:, i]].sum()) for i in range(3)]
    equilibrium = _equilibrium(reactions, applied, float(np.abs(f_thermal + f_mech).max(initial=0.0)))

    parts, elements, nodal = recovery.recover(domain, per_part, u, spec.order, load)
    probes = _probes(domain, spec.order, u, elements["von_mises"], spec.probes, where)
    return StressField(
        displacement=u[pdofs], order=spec.order, stress=elements["stress"], von_mises=elements["von_mises"],
        tresca=elements["tresca"], principal=elements["principal"], safety=elements["safety"], parts=parts, reactions=reactions,
        equilibrium=equilibrium, probes=probes, solver=record, nodal=nodal, notices=tuple(domain.notices),
        meta={"seconds": time.perf_counter() - start, "stage_version": STAGE_VERSION, "assembly_seconds": assembled,
              "stress_order": "xx, yy, zz, yz, xz, xy"},
    )


def _solve_constrained(K, f, constraints, space, spec):
    """Solve in the local frames of the constrained points, with rigid-body modes and the nodal
    layout for AMG; returns u, the residual K u - f (the nodal reactions at constrained points [N])
    and the solve record.  The residual comes from the local-frame matrix (T is orthogonal:
    K u - f = T (K_l u_l - f_l))."""
    T = constraints.transform
    Kl = (T.T @ K @ T).tocsr()
    fl = T.T @ f
    ul = np.zeros(len(f))
    ul[constraints.fixed] = constraints.values
    free = np.setdiff1d(np.arange(len(f)), constraints.fixed)
    rhs = fl[free] - Kl[free][:, constraints.fixed] @ ul[constraints.fixed]
    modes = rigid_body_modes(space.doflocs)
    mesh = space.mesh
    layout = solvers.Layout(free, space.N, mesh.nvertices, mesh.edges if space.order == 2 else None, T)
    ul[free], record = solvers.solve(Kl[free][:, free], rhs, method=spec.solver, near_null=(T.T @ modes)[free],
                                     layout=layout, memory_limit=spec.memory_limit)
    return T @ ul, T @ (Kl @ ul - fl), record


def rigid_body_modes(x: np.ndarray) -> np.ndarray:
    """(3 n, 6) translations and rotations about the centroid of the points x (3, n) [m]."""
    n = x.shape[1]
    rel = x - x.mean(axis=1, keepdims=True)
    modes = np.zeros((n, 3, 6))
    for k in range(3):
        modes[:, k, k] = 1.0
    for k, (i, j) in enumerate(((1, 2), (2, 0), (0, 1))):  # rotation about axis k turns axis i towards j
        modes[:, i, 3 + k] = -rel[j]
        modes[:, j, 3 + k] = rel[i]
    return modes.reshape(3 * n, 6)


def _equilibrium(reactions: dict, applied: list[float], nodal_scale: float) -> dict:
    """Sum of reactions and applied loads [N], relative to the largest of them or of the nodal loads."""
    total = np.array(applied, float) + np.sum(list(reactions.values()) or [np.zeros(3)], axis=0)
    scale = max([np.linalg.norm(applied), nodal_scale] + [np.linalg.norm(r) for r in reactions.values()])
    return {"applied_N": applied, "sum_N": total.tolist(),
            "relative": float(np.linalg.norm(total) / scale) if scale > 0 else 0.0}


def _probes(domain, order, u, vm, probes, where) -> dict[str, dict]:
    if not probes:
        return {}
    names, points, cells = fem.probe_points(domain, probes, where)
    dofs, phi = fem.probe_weights(domain, order, points, cells)
    disp = np.einsum("ip,ipc->cp", phi, u.reshape(-1, 3)[dofs])
    return {n: {"displacement_m": disp[:, i].tolist(), "von_mises_Pa": float(vm[cells[i]])}
            for i, n in enumerate(names)}
