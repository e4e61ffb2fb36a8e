"""Supports as constraints d.u = g at displacement points, applied exactly in rotated local frames.

Each support adds (point, direction, value) constraints: fixed (x, y, z), displacement (chosen global
components), symmetry (the surface's normal, any orientation), minimal (3-2-1 on every body: a point
fixed, a second held across the line to it, a third held against rotation about that line, so any
free thermal expansion is allowed), contact (the surface's normal where it presses on a rigid flat
frictionless foundation; released where it would pull, see ``contact``).  At each point the
constraint directions are orthonormalised and the point's three unknowns are expressed in a local
frame whose first axes are those directions; the constrained local components are then ordinary
fixed unknowns and the system stays symmetric positive definite.

Reactions by constraint direction: at a constrained point the residual r = K u - f lies in the span of
the rows d_k of all constraints there.  It is split as r = sum_k a_k d_k with the least-norm a
(a = pinv(D^T) r), and support s receives sum_{k in s} a_k d_k: a symmetry plane only ever carries
force along its normal, and a point shared by two supports is split by their own directions,
independently of the order in which they are listed (equal shares along a direction both hold).
Units: m, N.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from .. import errors

KINDS = ("fixed", "symmetry", "displacement", "spring", "minimal", "contact")
#: supports with rows only along a surface normal (their normal force and tension are reported)
NORMAL_KINDS = ("symmetry", "contact")
AXES = {"x": 0, "y": 1, "z": 2}
MOTIONS = ("translation in x", "translation in y", "translation in z",
           "rotation about x", "rotation about y", "rotation about z")


@dataclass(frozen=True)
class Support:
    """kind: one of KINDS.  components: for "displacement", axis -> value [m] or function of x (3, n).
    stiffness: for "spring", stiffness per area [N/m^3] acting on all three components.
    mirror: for "symmetry", the surface is a plane of symmetry of the model (the mirrored half may
    pull on it, so tension there is no caution); otherwise a symmetry support is a surface held flat
    and free to slide, and tension there means it would lift off (see ``contact``)."""

    kind: str
    components: Mapping[str, float | Callable] | None = None
    stiffness: float | None = None
    mirror: bool = False


@dataclass(frozen=True)
class Constraints:
    """Local frames and fixed local unknowns.

    transform: sparse T with u = T u_local.  fixed: indices of fixed local unknowns; values: their values.
    split: support name -> (point ids, (m, 3, 3) projectors P): the support's reaction at point p is
    P[p] @ r[p] for the residual r[p] (3,) there [N] (see the module docstring).
    """

    transform: sp.csr_matrix
    fixed: np.ndarray
    values: np.ndarray
    split: dict[str, tuple[np.ndarray, np.ndarray]]

    def point_reactions(self, residual: np.ndarray, pdofs: np.ndarray) -> dict[str, tuple[np.ndarray, np.ndarray]]:
        """support -> (point ids, (m, 3) force of the support on the body at each point [N])."""
        r = residual[pdofs]
        return {name: (pts, np.einsum("mij,mj->mi", proj, r[pts])) for name, (pts, proj) in self.split.items()}

    def reactions(self, residual: np.ndarray, pdofs: np.ndarray) -> dict[str, list[float]]:
        """support -> total force of the support on the body (x, y, z) [N]."""
        return {name: f.sum(axis=0).tolist() for name, (_, f) in self.point_reactions(residual, pdofs).items()}


def point_dofs(n_points: int) -> np.ndarray:
    """(n_points, 3) global dof ids of each displacement point: component c of point s is 3 s + c
    (points are the scalar space's dofs: vertices, then edge midpoints for P2)."""
    return np.arange(3 * n_points).reshape(n_points, 3)


def plane_normal(domain, facets: np.ndarray, name: str, where: str) -> np.ndarray:
    """Unit normal of a planar surface; an error if the surface is not planar."""
    tri = domain.points[domain.mesh.facets[:, facets].T]
    n = np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0])
    n /= np.linalg.norm(n, axis=1, keepdims=True)
    ref = n[0]
    if np.abs(np.abs(n @ ref) - 1).max() > 1e-6:
        raise errors.InputError(f"{where}.supports.{name}: a symmetry surface must be planar; '{name}' is not")
    for i in range(3):  # snap nearly axis-aligned normals so that the local frame is the global one
        if abs(abs(ref[i]) - 1) < 1e-12:
            ref = np.eye(3)[i] * np.sign(ref[i])
    return ref


def gather(domain, space, supports: Mapping[str, Support], where: str):
    """Constraint rows (point, direction, value, support name) for every support but springs, on the
    points of the scalar ``space``; also the points' dofs (n, 3) and coordinates (n, 3) [m]."""
    pdofs = point_dofs(space.N)
    xyz = space.doflocs.T
    rows: list[tuple[np.ndarray, np.ndarray, np.ndarray, str]] = []  # (points, directions (n,3), values)
    for name, s in supports.items():
        if s.kind == "minimal":
            for points, directions in _minimal(domain, xyz):
                rows.append((points, directions, np.zeros(len(points)), name))
            continue
        if s.kind == "spring":
            continue
        facets = domain.surfaces[name]
        points = space.facet_dofs(facets)
        if s.kind == "fixed":
            for axis in range(3):
                rows.append((points, np.tile(np.eye(3)[axis], (len(points), 1)), np.zeros(len(points)), name))
        elif s.kind in NORMAL_KINDS:
            n = plane_normal(domain, facets, name, where)
            rows.append((points, np.tile(n, (len(points), 1)), np.zeros(len(points)), name))
        elif s.kind == "displacement":
            for axis, value in (s.components or {}).items():
                v = value(xyz[points].T) if callable(value) else np.full(len(points), float(value))
                rows.append((points, np.tile(np.eye(3)[AXES[axis]], (len(points), 1)), np.asarray(v, float), name))
    return rows, pdofs, xyz


def _minimal(domain, xyz):
    """3-2-1 constraints for every connected body, on its vertices."""
    count, label = domain.bodies
    out = []
    for c in range(count):
        nodes = np.flatnonzero(label == c)
        p = xyz[nodes]
        a = nodes[np.argmin(np.linalg.norm(p - p.mean(axis=0), axis=1))]
        b = nodes[np.argmax(np.linalg.norm(p - xyz[a], axis=1))]
        ab = xyz[b] - xyz[a]
        ab /= np.linalg.norm(ab)
        off = np.cross(ab, p - xyz[a])
        ci = np.argmax(np.linalg.norm(off, axis=1))
        cpt, normal = nodes[ci], off[ci] / np.linalg.norm(off[ci])
        across = np.cross(normal, ab)
        out.append((np.array([a, a, a, b, b, cpt]),
                    np.vstack([np.eye(3), normal, across, normal])))
    return out


def build(rows, pdofs, n_dofs: int, where: str) -> Constraints:
    """Orthonormalise the constraints at each point, build the local frames and the reaction split."""
    by_point: dict[int, list] = {}
    for points, directions, values, name in rows:
        for p, d, v in zip(points.tolist(), directions, values):
            by_point.setdefault(p, []).append((d, v, name))
    t_rows, t_cols, t_vals, fixed, fixed_values = [], [], [], [], []
    split: dict[str, tuple[list, list]] = {}
    conflicts: dict[tuple[str, ...], int] = {}
    for p, items in by_point.items():
        d = np.array([i[0] for i in items])
        g = np.array([i[1] for i in items])
        u, s, vt = np.linalg.svd(d)
        rank = int((s > 1e-9 * s[0]).sum())
        sol = vt[:rank].T @ ((u[:, :rank].T @ g) / s[:rank])  # least-squares displacement of the point
        if np.abs(d @ sol - g).max() > 1e-12 + 1e-9 * np.abs(g).max(initial=0.0):
            names = tuple(sorted({i[2] for i in items}))
            conflicts[names] = conflicts.get(names, 0) + 1
        share = (u[:, :rank] / s[:rank]) @ vt[:rank]  # pinv(D^T): a = share @ r, least-norm
        for name in dict.fromkeys(i[2] for i in items):
            mine = np.array([i[2] == name for i in items])
            pts, proj = split.setdefault(name, ([], []))
            pts.append(p)
            proj.append(d[mine].T @ share[mine])
        frame = vt  # orthonormal; its first ``rank`` rows span the constraint directions
        dofs = pdofs[p]
        for i in range(3):  # u_global[dofs] = frame.T @ u_local[dofs]
            for j in range(3):
                t_rows.append(dofs[i])
                t_cols.append(dofs[j])
                t_vals.append(frame[j, i])
        fixed.extend(dofs[:rank].tolist())
        fixed_values.extend((frame[:rank] @ sol).tolist())
    if conflicts:
        raise errors.InputError([f"{where}.supports: supports {' and '.join(c)} conflict: they prescribe different "
                                 f"displacements at {n} shared points (where the surfaces meet); give them the same "
                                 "values there or support only one of these surfaces" for c, n in sorted(conflicts.items())])
    free = np.setdiff1d(np.arange(n_dofs), np.array(t_rows, dtype=np.int64))
    t = sp.coo_matrix((np.concatenate([t_vals, np.ones(len(free))]),
                       (np.concatenate([t_rows, free]), np.concatenate([t_cols, free]))), shape=(n_dofs, n_dofs))
    return Constraints(t.tocsr(), np.array(fixed, dtype=np.int64), np.array(fixed_values),
                       {k: (np.array(v[0], dtype=np.int64), np.array(v[1]).reshape(-1, 3, 3))
                        for k, v in split.items()})


def free_motions(domain, rows, xyz, spring_points: np.ndarray, where: str) -> None:
    """Refuse a body whose supports leave rigid-body motion free; name the body and the motions."""
    count, label = domain.bodies
    n = len(domain.points)
    # map displacement points to bodies: vertices directly, edge points by their nearest vertex's body
    point_body = np.empty(len(xyz), dtype=np.int64)
    point_body[:n] = label
    if len(xyz) > n:
        from scipy.spatial import cKDTree

        _, near = cKDTree(domain.points).query(xyz[n:])
        point_body[n:] = label[near]
    all_points = [r[0] for r in rows] + [np.repeat(spring_points, 3)]
    all_dirs = [r[1] for r in rows] + [np.tile(np.eye(3), (len(spring_points), 1))]
    points = np.concatenate(all_points) if all_points else np.zeros(0, dtype=np.int64)
    dirs = np.vstack(all_dirs) if all_dirs else np.zeros((0, 3))
    problems = []
    for c in range(count):
        sel = point_body[points] == c
        body = domain.points[label == c]
        centre = body.mean(axis=0)
        size = np.linalg.norm(body - centre, axis=1).max() or 1.0
        x = (xyz[points[sel]] - centre) / size  # rotations in units of the body's size
        d = dirs[sel]
        m = np.zeros((len(d), 6))
        m[:, :3] = d
        for k in range(3):
            m[:, 3 + k] = np.einsum("ij,ij->i", d, np.cross(np.eye(3)[k], x))
        s = np.linalg.svd(m, compute_uv=False) if len(m) else np.zeros(0)
        rank = int((s > 1e-8 * s.max(initial=0.0)).sum())
        if rank < 6:
            _, _, vt = np.linalg.svd(m if len(m) else np.zeros((1, 6)))
            null = vt[rank:]
            motions = [MOTIONS[k] for k in range(6) if np.linalg.norm(null[:, k]) > 0.3]
            parts = domain.body_parts(c)
            problems.append(
                f"{where}.supports: the body made of parts {', '.join(parts)} is free to move ({6 - rank} rigid-body "
                f"motions: {', '.join(motions) or 'a combined motion'}); add supports, or use the minimal "
                "support (kind = \"minimal\") for a free assembly"
            )
    if problems:
        raise errors.PhysicsError(problems)


def check(domain, supports: Mapping[str, Support], where: str) -> None:
    """Before any solve: supports that conflict or leave a body free to move are an ``InputError``.

    Checked on the vertices (the P1 points): a P2 model's edge midpoints lie on the same surfaces and
    are affine combinations of the vertices, so they add no rank against rigid motion and no shared
    point that the vertices do not share."""
    from . import fem

    space = fem.space(domain, 1)
    rows, pdofs, xyz = gather(domain, space, supports, where)
    springs = [space.facet_dofs(domain.surfaces[n]) for n, s in supports.items() if s.kind == "spring"]
    problems = []
    try:
        free_motions(domain, rows, xyz, np.concatenate(springs) if springs else np.zeros(0, dtype=np.int64), where)
    except errors.PhysicsError as exc:
        problems += exc.problems
    try:
        build(rows, pdofs, 3 * space.N, where)
    except errors.InputError as exc:
        problems += exc.problems
    if problems:
        raise errors.InputError(problems)


# ---------------------------------------------------------------------------------------------
# Contact: a rigid flat frictionless foundation, compression only

@dataclass(frozen=True)
class NormalSurface:
    """A support along a planar surface's normal (symmetry, contact) on the points of the displacement space.

    points: scalar dofs on the surface; normal: unit outward normal of the body there (the foundation
    lies beyond it); vertex: which points are mesh vertices; ends: (points, 2) the two vertex point ids
    of each edge-midpoint point (P2; -1 for vertices); facets: the surface's facet ids."""

    name: str
    points: np.ndarray
    normal: np.ndarray
    vertex: np.ndarray
    ends: np.ndarray
    facets: np.ndarray


def outward_normal(domain, facets: np.ndarray, name: str, where: str) -> np.ndarray:
    """Unit normal of a planar surface pointing out of the body (away from its first facet's element)."""
    n = plane_normal(domain, facets, name, where)
    tet = domain.mesh.f2t[0, facets[0]]
    inside = domain.points[domain.tetrahedra[tet]].mean(axis=0)
    centre = domain.points[domain.mesh.facets[:, facets[0]]].mean(axis=0)
    return n if n @ (centre - inside) > 0 else -n


def normal_surfaces(domain, space, supports: Mapping[str, Support], kinds=NORMAL_KINDS,
                    where: str = "stress") -> list[NormalSurface]:
    """The supports of ``supports`` of the given kinds, on the points of ``space``."""
    out = []
    nv = domain.mesh.nvertices
    for name, s in supports.items():
        if s.kind not in kinds:
            continue
        facets = domain.surfaces[name]
        points = space.facet_dofs(facets)
        ends = np.full((len(points), 2), -1, dtype=np.int64)
        mid = points >= nv
        ends[mid] = domain.mesh.edges[:, points[mid] - nv].T
        out.append(NormalSurface(name, points, outward_normal(domain, facets, name, where), ~mid, ends, facets))
    return out


def active_rows(rows, active: dict[str, np.ndarray]):
    """``rows`` with each contact support's rows kept only at its active points (name -> point ids)."""
    out = []
    for points, directions, values, name in rows:
        if name in active:
            keep = np.isin(points, active[name])
            points, directions, values = points[keep], directions[keep], values[keep]
        out.append((points, directions, values, name))
    return out


def contact_solve(solve, rows, pdofs, n_dofs: int, surfaces: list[NormalSurface], check_motion, where: str,
                  max_iterations: int = 50):
    """Primal-dual active set for frictionless contact with a rigid plane at zero initial gap.

    Conditions at each point (Signorini): gap g = -u.n >= 0, pressure force lam = -r.n >= 0, g lam = 0.
    The active set A (points held on the plane) is updated as A = {lam + c (u.n) > 0}
    (M. Hintermueller, K. Ito, K. Kunisch, SIAM J. Optim. 13(3), 2002, eq. 2.3 with the complementarity
    function of its section 2; any c > 0 gives the same sets here because one of the two terms is
    zero at each point: lam on the free points, u.n on the held ones).  It starts from all points held
    (the bilateral support) and stops when no point violates the conditions (relative 1e-9); each step
    is a linear solve.  Should the full update return to a set already tried (a cycle, possible with the
    P2 lumping below), only the worst violation is corrected in that step (a single-pivot step as in
    K.G. Murty, Opsearch 11, 1974, from memory).
    P2: the set lives on the vertices; an edge midpoint is held when both its vertices are, and the
    force of a midpoint is lumped half to each of its vertices (corner forces of a quadratic face under
    uniform pressure are zero, so the sign of the raw vertex force says nothing); a free midpoint that
    penetrates puts its vertices into the set.

    solve(constraints) -> (u, residual, record); check_motion(rows) raises if a body is left free.
    Returns u, residual, record, constraints and per-surface records (contact and separated area
    [m^2], normal force [N], iterations, the least lumped pressure force and the largest penetration)."""
    active = {c.name: c.points[c.vertex] for c in surfaces}
    history, seen = [], set()
    for iteration in range(1, max_iterations + 1):
        held = {c.name: _held(c, active[c.name]) for c in surfaces}
        current = active_rows(rows, held)
        check_motion(current)
        constraints = build(current, pdofs, n_dofs, where)
        u, residual, record = solve(constraints)
        scale_u = float(np.abs(u).max(initial=0.0)) or 1.0
        own = constraints.point_reactions(residual, pdofs)
        seen.add(_signature(active))
        states, proposed, worst = {}, {}, (0.0, None, None)
        for c in surfaces:
            push = u[pdofs[c.points]] @ c.normal  # > 0 penetrates
            lumped_ = pressing(c, *own.get(c.name, (np.zeros(0, dtype=np.int64), np.zeros((0, 3)))))
            scale_f = float(np.abs(lumped_).max(initial=0.0)) or 1.0
            was = np.isin(c.points, active[c.name])
            # violations, each relative to its own scale: a held vertex pulled, a free point penetrating
            pulled = np.where(was & c.vertex, -lumped_ / scale_f, 0.0)
            pierce = np.where(~np.isin(c.points, held[c.name]), push / scale_u, 0.0)
            into = np.zeros(len(c.points), dtype=bool)  # vertices that a penetrating point puts into the set
            into[c.vertex] = pierce[c.vertex] > 1e-9
            mid = ~c.vertex & (pierce > 1e-9)
            into |= np.isin(c.points, c.ends[mid].ravel()) & c.vertex
            now = ((was & (pulled < 1e-9)) | into) & c.vertex
            proposed[c.name] = now
            states[c.name] = (push, lumped_)
            k = int(np.argmax(np.maximum(pulled, pierce)))
            if len(c.points) and max(pulled[k], pierce[k]) > worst[0]:
                flip = c.points[k] if c.vertex[k] else c.ends[k]
                worst = (max(pulled[k], pierce[k]), c.name, (flip, pulled[k] > pierce[k]))
        if worst[1] is None or worst[0] <= 1e-9:
            return u, residual, record, constraints, {c.name: _contact_record(c, *states[c.name], active[c.name],
                                                                              iteration) for c in surfaces}
        new = {c.name: c.points[proposed[c.name]] for c in surfaces}
        if _signature(new) in seen:  # the full update cycles: change only the worst point (single pivot)
            name, (flip, release) = worst[1], worst[2]
            new = dict(active)
            new[name] = (np.setdiff1d(active[name], flip) if release else np.union1d(active[name], flip))
        active = new
        history.append(sum(len(a) for a in active.values()))
    raise errors.SolverError(f"{where}.supports: the contact active set did not settle in {max_iterations} steps "
                              f"(held vertices per step: {history[-6:]}); check that the contact surfaces are "
                              "loaded against their foundation")


def _signature(active: dict[str, np.ndarray]) -> tuple:
    return tuple((name, np.sort(v).tobytes()) for name, v in sorted(active.items()))


def _held(c: NormalSurface, active_vertices: np.ndarray) -> np.ndarray:
    """Points held: the active vertices and the midpoints whose two vertices are active."""
    on = np.isin(c.ends, active_vertices).all(axis=1)
    return np.concatenate([active_vertices, c.points[~c.vertex & on]])


def lumped(c: NormalSurface, lam: np.ndarray) -> np.ndarray:
    """Point forces with each midpoint's force moved half to each of its two vertices [N]."""
    out = np.where(c.vertex, lam, 0.0)
    mid = ~c.vertex
    for k in range(2):  # c.points is sorted (facet_dofs), so searchsorted finds each end's position
        np.add.at(out, np.searchsorted(c.points, c.ends[mid, k]), 0.5 * lam[mid])
    return out


def _contact_record(c: NormalSurface, push, lumped_, held_vertices, iterations) -> dict:
    return {"held": held_vertices, "pressing_N": lumped_, "penetration_m": push, "iterations": iterations}


def contact_areas(domain, c: NormalSurface, held: np.ndarray) -> tuple[float, float]:
    """Contact and separated area [m^2]: each facet counts by the share of its three vertices held."""
    area = domain.facet_areas(c.facets)
    on = np.isin(domain.mesh.facets[:, c.facets], held).sum(axis=0) / 3.0
    return float((area * on).sum()), float((area * (1 - on)).sum())


def pressing(c: NormalSurface, points: np.ndarray, forces: np.ndarray) -> np.ndarray:
    """Force with which each point of ``c`` presses on its support [N] (< 0: the support pulls), lumped to
    the vertices (see ``contact_solve``), from the support's own point forces on the body (points, (m, 3))."""
    lam = np.zeros(len(c.points))
    lam[np.searchsorted(c.points, points)] = -(forces @ c.normal)
    return lumped(c, lam)


def normal_forces(pressed: np.ndarray) -> dict:
    """Pressing and pulling totals of a normal support's lumped point forces [N] (both >= 0)."""
    return {"compression_N": float(pressed[pressed > 0].sum()), "tension_N": float(np.abs(pressed[pressed < 0]).sum())}
