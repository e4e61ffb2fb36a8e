"""Linear thermoelasticity (the ``stress`` stage): div sigma + b = 0, sigma = C (eps(u) - alpha (T - T_ref)).

Weak form: find u with the supports' constraints such that for every admissible v
    int eps(v) : C eps(u) dV + sum_spring int k u.v dA
        = int eps(v) : C alpha (T - T_ref) dV + int b.v dV + sum_pressure int -p n.v dA + sum_force int t.v dA
Parts that share nodes are bonded; split interfaces and ties keep their sides together (``ties``).  C and
alpha are per part (in model coordinates, from the part's material axes), so the thermal mismatch at a
bonded interface is never averaged away; with E(T), nu(T) or an expansion curve (``model.curves``) they
are evaluated at each quadrature point from the mapped temperature, and the thermal strain is the
curve's strain from the stress-free temperature T_ref.
Units: u [m], sigma and p [Pa], k [N/m^3], b [N/m^3], forces [N], T [K].
"""

from __future__ import annotations

import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from .. import errors
from ..fields import StressField, ThermalLoad
from ..model.materials import Material
from ..model.mesh import touching_problems
from . import constitutive, features, fem, kernels, recovery, solvers, supports, ties
from .supports import Support

STAGE_VERSION = 2
#: a bilateral normal support is cautioned when more than this share of its normal force pulls (a few
#: percent: below it the tension is round-off or a sliver of the surface; a choice of ours)
TENSION_SHARE = 0.01


@dataclass(frozen=True)
class StressSpec:
    """What the stress stage reads besides the domain and the thermal load.

    materials: part -> material.  supports: surface -> Support (kind "minimal" under any name that is
    not a surface).  pressure: surface -> Pa (positive pushes on the surface).  force: surface ->
    (Fx, Fy, Fz) [N], spread evenly over its area.  gravity: acceleration (gx, gy, gz) [m/s^2] acting
    on each part's density.  body_force: part -> function of x (3, ...) [m] giving (3, ...) [N/m^3].
    probes: name -> (x, y, z) [m].  lines: name -> (start (x, y, z) [m], end [m], number of points >= 2).
    order: 2 (default) or 1.  solver: "auto", "direct" or "amg".
    memory_limit: bytes the stage may use (default: what is available); checked before assembly.
    preload: pretension section (a "section" joint) -> bolt preload [N], tension positive (``ties.preloaded``).
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
    lines: Mapping[str, tuple] = field(default_factory=dict)
    preload: Mapping[str, float] = field(default_factory=dict)


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
            elif key == "pressure" and (inner := int((domain.mesh.f2t[1, domain.surfaces[name]] >= 0).sum())):
                problems.append(f"{where}.pressure: surface '{name}' has {inner} facets inside the body, not on its "
                                "boundary; a pressure needs a boundary surface")
    for part, m in spec.materials.items():
        if np.any(np.asarray(m.youngs_modulus) <= 0):
            problems.append(f"{where}: material '{m.name}' of part '{part}' needs a positive Young's modulus")
        if m.kind == "isotropic" and not -1 < m.poisson_ratio[0] < 0.5:
            problems.append(f"{where}: material '{m.name}' needs a Poisson ratio in (-1, 0.5)")
    fem.check_probes(domain, spec.probes, where, problems)
    problems += _line_problems(spec.lines, where)
    problems += touching_problems(domain, where)  # parts meshed apart need a joint first
    problems += [errors.unknown_name("pretension section", n, domain.contacts, f"{where}.preload")
                 for n in spec.preload if n not in domain.contacts]
    problems += [f"{where}.preload.{n}: a preload must be a finite force [N], got {v}" for n, v in spec.preload.items()
                 if not np.isfinite(v)]
    if spec.preload and any(s.kind == "contact" for s in spec.supports.values()):
        problems.append(f"{where}: bolt preloads are found by superposing linear solutions, which a contact support "
                        "(it lifts off: not linear) does not allow; use a fixed, symmetry or spring support with "
                        "preload, or drop the preload")
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
    tie = ties.continuity(domain, space, domain.contacts, where)  # split interfaces and ties move together
    rows, tie = ties.move_rows(tie, rows, {n for n, s in spec.supports.items() if s.kind == "minimal"}, where)
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
        model = recovery.PartModel(ids, constitutive.stiffness_matrix(material),
                                   constitutive.expansion_vector(material), material)
        # with E(T) or nu(T) the integrands are not polynomials: one more degree per temperature order, and
        # for an expansion curve (linear alpha(T): a strain quadratic in T) two
        k_extra = load.order if load is not None and material.stiffness_varies else 0
        k_degree = kernels.degree_stiffness(spec.order, k_extra)
        kernels.stiffness(space, geom, ids, recovery.stiffness_at(domain, model, load, kernels.reference(
            spec.order, k_degree)), k_degree, stiffness)
        if load is not None:
            curved = "expansion" in material.curves
            ref = thermal_ref if not (k_extra or curved) else kernels.reference(
                spec.order, spec.order - 1 + k_extra + load.order * (2 if curved else 1))
            f_thermal += kernels.strain_load(space, geom, ids, recovery.apply(
                recovery.stiffness_at(domain, model, load, ref), recovery.thermal_strain(domain, model, load, ref)), ref)
        b = np.zeros((len(ids), 3, len(loads_ref.weights)))
        if spec.gravity is not None:
            b += material.density * np.asarray(spec.gravity, float)[None, :, None]
        if part in spec.body_force:
            b += np.moveaxis(spec.body_force[part](geom.points(loads_ref, ids)), 0, 1)
        if b.any():
            f_mech += kernels.vector_load(space, geom, ids, b, loads_ref)
        per_part[part] = model

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
    if spec.preload:  # linear superposition of the shortenings (ties.preloaded): no contact supports
        solve_ = lambda A, b, c: _solve_constrained(A, b, c, space, spec)  # noqa: E731
        u, residual, record, bolts = ties.preloaded(K, f_thermal + f_mech, constraints, tie, domain, space,
                                                    dict(spec.preload), solve_)
        held = {}
    else:
        bolts = {}
        u, residual, record, constraints, held = _solve_supported(domain, K, f_thermal + f_mech, rows, pdofs, xyz,
                                                                  constraints, space, spec, where, tie)
    del K
    reactions = constraints.reactions(residual, pdofs)
    for name, ks in springs.items():
        force = -(ks @ u)
        reactions[name] = [float(force[pdofs[:, i]].sum()) for i in range(3)]
    applied = [float(f_mech[pdofs[:, i]].sum()) for i in range(3)]
    equilibrium = _equilibrium(reactions, applied, float(np.abs(f_thermal + f_mech).max(initial=0.0)))
    support_records, cautions = _support_records(domain, space, spec.supports, constraints, residual, pdofs, held,
                                                 reactions, where)  # cautions' places are relative to the stage

    found = features.find(domain, spec.supports)
    parts, elements, nodal, nodal_safety = recovery.recover(domain, per_part, u, spec.order, load, found)
    probes = _probes(domain, spec.order, u, nodal, load, spec.probes, where)
    lines = _lines(domain, spec.order, u, nodal, load, spec.lines)
    return StressField(
        displacement=u[pdofs], order=spec.order, stress=elements["stress"], von_mises=elements["von_mises"],
        tresca=elements["tresca"], principal=elements["principal"], safety=elements["safety"], parts=parts, reactions=reactions,
        equilibrium=equilibrium, probes=probes, solver=record, nodal=nodal, notices=tuple(domain.notices),
        supports=support_records, cautions=tuple(cautions) + _singular_cautions(parts), lines=lines,
        features=found.counts(), nodal_safety=nodal_safety,
        temperature=recovery.at_points(domain, spec.order, load) if load is not None else np.zeros(0),
        reference=np.asarray(load.reference, float) if load is not None else np.zeros(0),
        meta={"seconds": time.perf_counter() - start, "stage_version": STAGE_VERSION, "assembly_seconds": assembled,
              "stress_order": "xx, yy, zz, yz, xz, xy", "preload": bolts,
              "recovery": "L2 projection within each part (nodal peaks; quadrature maximum beside)"},
    )


def _solve_constrained(K, f, constraints, space, spec):
    """Solve in the local frames of the constrained points, with rigid-body modes and the nodal
    layout for AMG; returns u, the residual K u - f (the nodal reactions at constrained points [N])
    and the solve record.  The residual comes from the local-frame matrix (T is orthogonal:
    K u - f = T (K_l u_l - f_l))."""
    T = constraints.transform
    rotated = (T - sp.identity(T.shape[0], format="csr")).count_nonzero() > 0  # else skip two products
    Kl = (T.T @ K @ T).tocsr() if rotated else K.tocsr()
    fl = T.T @ f if rotated else f
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


def _solve_supported(domain, K, f, rows, pdofs, xyz, constraints, space, spec, where, tie):
    """The constrained solve (tied dofs following their partners, ``tie``), repeated by the contact
    active set when a support is of kind contact.  Returns u, residual, solve record, the final
    constraints and the contact records."""
    reduced, load = tie.reduce(K), tie.load(f)

    def solve(c):
        w, r, record = _solve_constrained(reduced, load, ties.with_tied(c, tie), space, spec)
        return tie.expand(w), r, record

    surfaces = supports.normal_surfaces(domain, space, spec.supports, ("contact",), where)
    if not surfaces:
        return (*solve(constraints), constraints, {})
    springs = [space.facet_dofs(domain.surfaces[n]) for n, s in spec.supports.items() if s.kind == "spring"]
    spring_points = np.concatenate(springs) if springs else np.zeros(0, dtype=np.int64)

    def motion(current):
        try:
            supports.free_motions(domain, current, xyz, spring_points, where)
        except errors.PhysicsError as exc:
            raise errors.PhysicsError([p + " (the contact supports lift off where they would pull, and what is left "
                                       "does not hold the body)" for p in exc.problems]) from None

    return supports.contact_solve(solve, rows, pdofs, len(f), surfaces, motion, where)


def _support_records(domain, space, given, constraints, residual, pdofs, held, reactions, where):
    """Per-support records (kind, force [N], normal supports' pressing and pulling totals [N], contact and
    separated area [m^2]) and caution records for bilateral normal supports that pull on the body."""
    records = {name: {"kind": s.kind, "force_N": reactions.get(name, [0.0, 0.0, 0.0])} for name, s in given.items()}
    own = constraints.point_reactions(residual, pdofs)
    cautions = []
    for c in supports.normal_surfaces(domain, space, given, supports.NORMAL_KINDS, where):
        pressed = supports.pressing(c, *own.get(c.name, (np.zeros(0, dtype=np.int64), np.zeros((0, 3)))))
        rec = records[c.name] | supports.normal_forces(pressed) | {"normal": c.normal.tolist()}
        if c.name in held:
            contact, separated = supports.contact_areas(domain, c, held[c.name]["held"])
            rec |= {"contact_area_m2": contact, "separated_area_m2": separated,
                    "iterations": held[c.name]["iterations"],
                    "least_pressing_N": float(np.min(held[c.name]["pressing_N"][np.isin(c.points, held[c.name]["held"])],
                                                     initial=np.inf)),
                    "penetration_max_m": float(held[c.name]["penetration_m"].max(initial=0.0))}
        elif not given[c.name].mirror and rec["tension_N"] > TENSION_SHARE * (rec["tension_N"] + rec["compression_N"]):
            cautions.append({
                "code": "support_pulls", "where": f"supports.{c.name}",
                "message": (f"support {c.name} ({given[c.name].kind}) pulls the body with {rec['tension_N']:.4g} N "
                            f"in total (it presses with {rec['compression_N']:.4g} N elsewhere); a surface resting "
                            "on a foundation cannot pull: use kind = \"contact\", which lets it lift off (or, if "
                            "it is a plane of symmetry of the model, say so with mirror = true)"),
                "data": {"support": c.name, "tension_N": rec["tension_N"], "compression_N": rec["compression_N"]}})
        records[c.name] = rec
    return records, cautions


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


def _probes(domain, order, u, nodal, load, probes, where) -> dict[str, dict]:
    """Probe values from the recovered field (``recovery.sample``)."""
    if not probes:
        return {}
    names, points, cells = fem.probe_points(domain, probes, where)
    values = recovery.sample(domain, order, nodal, load, u, points, cells, _part_names(domain))
    return dict(zip(names, values))


def _part_names(domain) -> np.ndarray:
    return np.array(sorted(domain.parts), dtype=object)[domain.part_ids()]


def _line_problems(lines, where) -> list[str]:
    problems = []
    for name, line in lines.items():
        try:
            start, end, count = np.asarray(line[0], float), np.asarray(line[1], float), line[2]
            ok = start.shape == end.shape == (3,) and isinstance(count, (int, np.integer)) and count >= 2
        except (TypeError, ValueError, IndexError):
            ok = False
        if not ok:
            problems.append(f"{where}.lines.{name}: give start and end as (x, y, z) and points as a whole number >= 2")
        elif np.allclose(start, end):
            problems.append(f"{where}.lines.{name}: start and end are the same point")
    return problems


def _lines(domain, order, u, nodal, load, lines) -> dict[str, list[dict]]:
    """Values along each line at equally spaced points; a point outside the mesh (a cavity, beyond the
    body) is listed with its position only ("outside": true)."""
    out = {}
    finder = domain.mesh.element_finder()
    names = _part_names(domain)
    for name, (start, end, count) in lines.items():
        s = np.linspace(0.0, 1.0, int(count))
        x = np.asarray(start, float)[:, None] * (1 - s) + np.asarray(end, float)[:, None] * s
        length = float(np.linalg.norm(np.subtract(end, start)))
        cells = np.full(len(s), -1)
        for i in range(len(s)):
            try:
                cells[i] = finder(*x[:, i : i + 1])[0]
            except ValueError:
                pass
        inside = np.flatnonzero(cells >= 0)
        values = dict(zip(inside.tolist(), recovery.sample(domain, order, nodal, load, u, x[:, inside],
                                                           cells[inside], names) if len(inside) else []))
        out[name] = [{"distance_m": float(s[i] * length), "x_m": x[:, i].tolist()}
                     | (values[i] | {"outside": False} if i in values else {"outside": True}) for i in range(len(s))]
    return out


def _singular_cautions(parts: dict) -> tuple[dict, ...]:
    """A caution record for each part with a peak (von Mises, largest principal, utilisation) at a
    singular feature; data names the flagged quantities and the feature of the first.  ``where`` is
    relative to the stage (a stored result must not name the workflow file it was computed for)."""
    out = []
    for part, f in parts.items():
        flagged = [q for q in ("von_mises", "principal_max", "utilisation") if q in f and f[q]["near"] is not None]
        if not flagged:
            continue
        near = f[flagged[0]]["near"]
        uses = ("the safety factor uses the peak away from such features" if "utilisation" in flagged else
                "the safety factor's own peak is away from them")
        out.append({"code": "singular_peak", "where": f"parts.{part}",
                    "message": (f"the peak {', '.join(q.replace('_', ' ') for q in flagged)} of {part} lies "
                                f"{near['distance_m'] * 1e3:.3g} mm from a {near['code'].replace('_', ' ')} "
                                f"({near['owner']}), where the elastic stress is singular and grows with refinement; "
                                f"{uses}; judge the feature itself by its real shape (fillet radius) or by a "
                                "convergence study"),
                    "data": {"part": part, "quantities": [q.removesuffix("_max") for q in flagged],
                             "feature": near["code"], "owner": near["owner"], "distance_m": near["distance_m"]}})
    return tuple(out)
