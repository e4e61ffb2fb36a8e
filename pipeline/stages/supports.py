"""Supports as constraints d.u = g at displacement points, applied exactly in rotated local frames.

Each support adds (point, direction, value) constraints: fixed (x, y, z), displacement (chosen global
components), symmetry (the surface's normal, any orientation), minimal (3-2-1 on every body: a point
fixed, a second held across the line to it, a third held against rotation about that line, so any
free thermal expansion is allowed).  At each point the constraint directions are orthonormalised and
the point's three unknowns are expressed in a local frame whose first axes are those directions; the
constrained local components are then ordinary fixed unknowns and the system stays symmetric
positive definite.  Units: m.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from .. import errors

KINDS = ("fixed", "symmetry", "displacement", "spring", "minimal")
AXES = {"x": 0, "y": 1, "z": 2}
MOTIONS = ("translation in x", "translation in y", "translation in z",
           "rotation about x", "rotation about y", "rotation about z")


@dataclass(frozen=True)
class Support:
    """kind: one of KINDS.  components: for "displacement", axis -> value [m] or function of x (3, n).
    stiffness: for "spring", stiffness per area [N/m^3] acting on all three components."""

    kind: str
    components: Mapping[str, float | Callable] | None = None
    stiffness: float | None = None


@dataclass(frozen=True)
class Constraints:
    """Local frames and fixed local unknowns.

    transform: sparse T with u = T u_local.  fixed: indices of fixed local unknowns; values: their values.
    owner: support name -> point ids it constrains (a point shared by supports counts for the first).
    """

    transform: sp.csr_matrix
    fixed: np.ndarray
    values: np.ndarray
    owner: dict[str, np.ndarray]


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
        elif s.kind == "symmetry":
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
    """Orthonormalise the constraints at each point and build the local frames."""
    by_point: dict[int, list] = {}
    owner: dict[str, list] = {}
    claimed = set()
    for points, directions, values, name in rows:
        for p, d, v in zip(points.tolist(), directions, values):
            by_point.setdefault(p, []).append((d, v, name))
        new = [p for p in points.tolist() if p not in claimed]
        claimed.update(new)
        owner.setdefault(name, []).extend(new)
    t_rows, t_cols, t_vals, fixed, fixed_values = [], [], [], [], []
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
                       {k: np.array(v, dtype=np.int64) for k, v in owner.items()})


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
