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
from skfem import Basis, BilinearForm, ElementVector, FacetBasis, LinearForm, asm
from skfem.helpers import ddot, dot, sym_grad

from .. import errors
from ..fields import StressField, ThermalLoad
from ..model.materials import Material
from . import constitutive, fem, recovery, supports
from .solvers import solve_spd
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


def elasticity_forms(c: np.ndarray, alpha: np.ndarray):
    """The stiffness and thermal-load forms of one part, sharing the constitutive closure C(eps)."""

    def C(strain):
        s = np.einsum("ij,j...->i...", c, strain)
        return np.array([[s[0], s[5], s[4]], [s[5], s[1], s[3]], [s[4], s[3], s[2]]])

    @BilinearForm
    def stiffness(u, v, w):
        return ddot(C(constitutive.voigt(sym_grad(u))), sym_grad(v))

    @LinearForm
    def thermal_load(v, w):
        return ddot(C(np.einsum("i,...->i...", alpha, w.temperature - w.reference)), sym_grad(v))

    return stiffness, thermal_load, C


@LinearForm
def body_load(v, w):
    return dot(w.b, v)


@LinearForm
def traction(v, w):
    return dot(w.t, v)


@LinearForm
def pressure_load(v, w):
    return -w.p * dot(w.n, v)


@BilinearForm
def spring(u, v, w):
    return w.k * dot(u, v)


def check(domain, spec: StressSpec, where: str = "stress") -> None:
    """Raise one ``InputError`` listing every problem of ``spec`` on ``domain``."""
    problems = []
    if spec.order not in fem.ORDERS:
        problems.append(f"{where}: order must be 1 or 2, got {spec.order!r}")
    for part in domain.parts:
        if part not in spec.materials:
            problems.append(f"{where}: part '{part}' has no material")
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
    try:
        fem.probe_points(domain, spec.probes, where)
    except errors.InputError as exc:
        problems += exc.problems
    if problems:
        raise errors.InputError(problems)


def solve(domain, load: ThermalLoad | None, spec: StressSpec, where: str = "stress") -> StressField:
    """Displacements, stresses, reactions and safety factors; see the module docstring."""
    check(domain, spec, where)
    start = time.perf_counter()
    mesh = domain.mesh
    element = ElementVector(fem.element(spec.order))
    full = Basis(mesh, element, intorder=2 * spec.order)
    rows, pdofs, xyz = supports.gather(domain, full, spec.supports, where)
    spring_points = [supports.surface_points(full, domain.surfaces[n], pdofs)
                     for n, s in spec.supports.items() if s.kind == "spring"]
    supports.free_motions(domain, rows, xyz, np.concatenate(spring_points) if spring_points else
                          np.zeros(0, dtype=np.int64), where)
    constraints = supports.build(rows, pdofs, full.N, where)

    K = None
    f_thermal = np.zeros(full.N)
    f_mech = np.zeros(full.N)
    per_part = {}
    for part in sorted(domain.parts):
        ids = domain.parts[part]
        material = spec.materials[part]
        c, alpha = constitutive.stiffness_matrix(material), constitutive.expansion_vector(material)
        basis = Basis(mesh, element, elements=ids, intorder=2 * spec.order)
        stiffness, thermal_load, C = elasticity_forms(c, alpha)
        K = asm(stiffness, basis) if K is None else K + asm(stiffness, basis)
        temperature = reference = None
        if load is not None:
            temperature = basis.with_element(fem.element(load.order)).interpolate(load.temperature)
            reference = fem.per_element(load.reference[ids], basis)
            f_thermal += asm(thermal_load, basis, temperature=temperature, reference=reference)
        b = np.zeros((3,) + basis.dx.shape)
        if spec.gravity is not None:
            b += material.density * np.asarray(spec.gravity, float)[:, None, None]
        if part in spec.body_force:
            b += spec.body_force[part](basis.mapping.F(basis.X))
        if b.any():
            f_mech += asm(body_load, basis, b=b)
        per_part[part] = recovery.PartModel(basis, c, alpha, temperature, reference, material)

    for name, p in spec.pressure.items():
        f_mech += asm(pressure_load, FacetBasis(mesh, element, facets=domain.surfaces[name], intorder=2 * spec.order),
                      p=p)
    for name, force in spec.force.items():
        facets = domain.surfaces[name]
        t = np.asarray(force, float) / domain.facet_areas(facets).sum()
        fb = FacetBasis(mesh, element, facets=facets, intorder=2 * spec.order)
        f_mech += asm(traction, fb, t=np.broadcast_to(t[:, None, None], (3,) + fb.dx.shape).copy())
    springs = {}
    for name, s in spec.supports.items():
        if s.kind == "spring":
            fb = FacetBasis(mesh, element, facets=domain.surfaces[name], intorder=2 * spec.order)
            springs[name] = asm(spring, fb, k=s.stiffness)
            K = K + springs[name]

    u, record = _solve_constrained(K.tocsr(), f_thermal + f_mech, constraints, full, spec.solver)
    residual = K @ u - f_thermal - f_mech  # nodal reactions at constrained points [N]
    reactions = {name: [float(residual[pdofs[pts, i]].sum()) for i in range(3)]
                 for name, pts in constraints.owner.items()}
    for name, ks in springs.items():
        force = -(ks @ u)
        reactions[name] = [float(force[pdofs[:, i]].sum()) for i in range(3)]
    applied = [float(f_mech[pdofs[:, i]].sum()) for i in range(3)]
    equilibrium = _equilibrium(reactions, applied, float(np.abs(f_thermal + f_mech).max(initial=0.0)))

    parts, elements, nodal = recovery.recover(domain, per_part, u, spec.order)
    probes = _probes(domain, full, u, elements["von_mises"], spec.probes, where)
    return StressField(
        displacement=u[pdofs], order=spec.order, stress=elements["stress"], von_mises=elements["von_mises"],
        tresca=elements["tresca"], principal=elements["principal"], safety=elements["safety"], parts=parts, reactions=reactions,
        equilibrium=equilibrium, probes=probes, solver=record, nodal=nodal, notices=tuple(domain.notices),
        meta={"seconds": time.perf_counter() - start, "stage_version": STAGE_VERSION,
              "stress_order": "xx, yy, zz, yz, xz, xy"},
    )


def _solve_constrained(K, f, constraints, basis, method):
    """Solve in the local frames of the constrained points, with rigid-body modes for AMG."""
    T = constraints.transform
    Kl = (T.T @ K @ T).tocsr()
    fl = T.T @ f
    ul = np.zeros(len(f))
    ul[constraints.fixed] = constraints.values
    free = np.setdiff1d(np.arange(len(f)), constraints.fixed)
    rhs = fl[free] - Kl[free][:, constraints.fixed] @ ul[constraints.fixed]
    x = basis.doflocs
    centre = x.mean(axis=1, keepdims=True)
    modes = np.zeros((len(f), 6))
    for k in range(3):
        modes[basis.nodal_dofs[k], k] = 1.0
        if basis.edge_dofs.size:
            modes[basis.edge_dofs[k], k] = 1.0
    rel = x - centre
    for k, (i, j) in enumerate(((1, 2), (2, 0), (0, 1))):  # rotation about axis k turns axis i towards j
        modes[:, 3 + k] = _rotation_mode(basis, rel, i, j, len(f))
    ul[free], record = solve_spd(Kl[free][:, free], rhs, method=method, near_null=(T.T @ modes)[free])
    return T @ ul, record


def _rotation_mode(basis, rel, i, j, n):
    """Displacement of every dof under a unit rotation turning axis i towards axis j: u_i = -x_j, u_j = x_i."""
    mode = np.zeros(n)
    for d in [basis.nodal_dofs] + ([basis.edge_dofs] if basis.edge_dofs.size else []):
        mode[d[i]] = -rel[j, d[j]]
        mode[d[j]] = rel[i, d[i]]
    return mode


def _equilibrium(reactions: dict, applied: list[float], nodal_scale: float) -> dict:
    """Sum of reactions and applied loads [N], relative to the largest of them or of the nodal loads."""
    total = np.array(applied, float) + np.sum(list(reactions.values()) or [np.zeros(3)], axis=0)
    scale = max([np.linalg.norm(applied), nodal_scale] + [np.linalg.norm(r) for r in reactions.values()])
    return {"applied_N": applied, "sum_N": total.tolist(),
            "relative": float(np.linalg.norm(total) / scale) if scale > 0 else 0.0}


def _probes(domain, basis, u, vm, probes, where) -> dict[str, dict]:
    if not probes:
        return {}
    names, points = fem.probe_points(domain, probes, where)
    disp = (basis.probes(points) @ u).reshape(3, -1)
    cells = domain.mesh.element_finder()(*points)
    return {n: {"displacement_m": disp[:, i].tolist(), "von_mises_Pa": float(vm[cells[i]])}
            for i, n in enumerate(names)}
