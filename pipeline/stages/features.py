"""Geometric features where a linear-elastic stress may be singular, found from the mesh and the supports.

Kinds (codes):
  bimaterial_edge   an edge where an interface between two parts meets a free surface (D.B. Bogy,
                    J. Appl. Mech. 38, 1971: the stress at a bonded bimaterial wedge is singular for
                    most material pairs; from memory)
  reentrant_edge    an edge of a part whose angle in the material exceeds 180 degrees by more than
                    ``REENTRANT_MARGIN`` (M.L. Williams, J. Appl. Mech. 19, 1952: corners of an elastic
                    wedge above 180 degrees are singular with free or clamped faces)
  support_edge      the rim of a fixed or displacement support (a clamped face meeting a free one:
                    Williams 1952)
  point_support     a point of a point-like support (the minimal support's 3-2-1 points: a point force
                    in an elastic solid, J. Boussinesq 1885, is singular)
Symmetry and contact supports are not features: a symmetry plane is a mirror (the mirrored model has
no edge there), so interfaces and edges meeting it are judged as in the mirrored model: an interface
reaching a symmetry plane is no free edge, and an edge between a symmetry plane and another face of
angle theta is re-entrant when 2 theta is.  Facetted curved surfaces turn by a few degrees per edge
and stay below the margin.  Units: m.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree

from . import fem

KINDS = ("bimaterial_edge", "reentrant_edge", "support_edge", "point_support")
#: an edge is re-entrant when its material angle exceeds 180 degrees by more than this (degrees): far
#: above the turn of a facetted fillet or bore (360 / 16 = 22.5 degrees per edge is already coarse)
REENTRANT_MARGIN = 30.0
#: a peak within this many local element sizes of a feature is flagged (common practice: the
#: discretisation error of a singular peak spreads over about two elements)
NEAR = 2.0
CLAMPS = ("fixed", "displacement")
MIRRORS = ("symmetry",)


@dataclass(frozen=True)
class Features:
    """Feature segments (n, 2, 3) [m] (a point has both ends equal), their kind (index into KINDS),
    what they belong to (a support, a part, or two parts "a|b") and the parts they touch."""

    segments: np.ndarray
    kind: np.ndarray
    owner: tuple[str, ...]
    parts: tuple[frozenset, ...]

    def __len__(self) -> int:
        return len(self.kind)

    def counts(self) -> dict[str, int]:
        """Number of feature segments or points of each kind."""
        return {k: int((self.kind == i).sum()) for i, k in enumerate(KINDS) if (self.kind == i).any()}

    def nearest(self, x: np.ndarray, part: str | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Distance [m] from points x (n, 3) to the nearest feature touching ``part`` (all if None),
        and that feature's index (-1 where there is none).  Segments are sampled at 9 points: the
        distance is exact to an eighth of a segment (an element edge), well inside ``NEAR`` sizes."""
        keep = np.array([part is None or part in p for p in self.parts], dtype=bool)
        ids = np.flatnonzero(keep)
        if not len(ids):
            return np.full(len(x), np.inf), np.full(len(x), -1)
        s = np.linspace(0.0, 1.0, 9)
        seg = self.segments[ids]
        samples = (seg[:, None, 0] * (1 - s)[None, :, None] + seg[:, None, 1] * s[None, :, None]).reshape(-1, 3)
        dist, near = cKDTree(samples).query(x)
        return dist, ids[near // len(s)]


def find(domain, supports: Mapping) -> Features:
    """The features of ``domain`` with ``supports`` (name -> supports.Support); cached on the domain."""
    key = ("features", _key(supports))
    if key in domain._cache:
        return domain._cache[key]
    mesh = domain.mesh
    p = domain.points
    mirror = np.zeros(mesh.facets.shape[1], dtype=bool)
    for name, s in supports.items():
        if s.kind in MIRRORS and name in domain.surfaces:
            mirror[domain.surfaces[name]] = True
    part_of = domain.part_ids()
    names = sorted(domain.parts)
    segs, kinds, owners, touched = [], [], [], []

    def add(edges, kind, owner, parts):
        for e in np.atleast_1d(edges):
            segs.append(p[mesh.edges[:, e]])
            kinds.append(KINDS.index(kind))
            owners.append(owner)
            touched.append(frozenset(parts))

    boundary = mesh.boundary_facets()
    # the two sides of a split interface (contact conductance) and of a tie are joined, not free surfaces
    joints = [(j.parts, np.concatenate(j.facets)) for j in list(domain.contacts.values()) + list(domain.ties.values())]
    joined = np.concatenate([f for _, f in joints]) if joints else np.zeros(0, dtype=np.int64)
    free = boundary[~mirror[boundary] & ~np.isin(boundary, joined)]
    free_edges = np.unique(mesh.f2e[:, free])
    for (a, b), facets in list(domain.interfaces.items()) + joints:
        add(np.intersect1d(np.unique(mesh.f2e[:, facets]), free_edges), "bimaterial_edge", f"{a}|{b}", (a, b))
    for i, part in enumerate(names):
        add(_reentrant(domain, np.flatnonzero(part_of == i), mirror), "reentrant_edge", part, (part,))
    for name, s in supports.items():
        if s.kind in CLAMPS and name in domain.surfaces:
            facets = domain.surfaces[name]
            edges, count = np.unique(mesh.f2e[:, facets], return_counts=True)
            rim = edges[count == 1]
            owners_ = {names[part_of[t]] for t in mesh.f2t[0, facets]}
            add(rim, "support_edge", name, owners_)
        if s.kind == "minimal":
            from .supports import _minimal

            label = domain.bodies[1]
            for points, _ in _minimal(domain, p):
                for q in np.unique(points):
                    segs.append(np.array([p[q], p[q]]))
                    kinds.append(KINDS.index("point_support"))
                    owners.append(name)
                    touched.append(frozenset(domain.body_parts(int(label[q]))))
    out = Features(np.array(segs).reshape(-1, 2, 3), np.array(kinds, dtype=np.int64), tuple(owners), tuple(touched))
    domain._cache[key] = out
    return out


def _key(supports: Mapping) -> tuple:
    return tuple(sorted((n, s.kind) for n, s in supports.items()))


def _reentrant(domain, ids: np.ndarray, mirror: np.ndarray) -> np.ndarray:
    """Edges of the part made of elements ``ids`` whose material angle exceeds 180 + REENTRANT_MARGIN
    degrees (with facets on mirror planes judged as in the mirrored model)."""
    mesh, p = domain.mesh, domain.points
    facets, count = np.unique(mesh.t2f[:, ids], return_counts=True)
    own = facets[count == 1]  # the part's boundary facets (outer surface and interfaces)
    inside = np.zeros(mesh.facets.shape[1], dtype=np.int64)
    elem_of = np.repeat(ids[None, :], 4, axis=0)
    np.put(inside, mesh.t2f[:, ids].ravel(), elem_of.ravel())  # an element of the part beside each facet
    tri = p[mesh.facets[:, own].T]  # (n, 3, 3)
    normal = np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0])
    normal /= np.linalg.norm(normal, axis=1, keepdims=True)
    centre = p[domain.tetrahedra[inside[own]]].mean(axis=1)
    normal *= np.sign(np.einsum("ij,ij->i", normal, tri.mean(axis=1) - centre))[:, None]  # outward
    edge_of = mesh.f2e[:, own]  # (3, n)
    order = np.argsort(edge_of.ravel(), kind="stable")
    flat = edge_of.ravel()[order]
    facet_index = np.tile(np.arange(len(own)), 3)[order]
    edges, start, count = np.unique(flat, return_index=True, return_counts=True)
    two = count == 2  # manifold edges of the part's surface
    e = edges[two]
    f1, f2 = facet_index[start[two]], facet_index[start[two] + 1]
    n1, n2 = normal[f1], normal[f2]
    a, b = p[mesh.edges[0, e]], p[mesh.edges[1, e]]
    axis = (b - a) / np.linalg.norm(b - a, axis=1, keepdims=True)
    # direction from the edge into facet 1, across the edge
    third = tri[f1].mean(axis=1) - a
    t1 = third - np.einsum("ij,ij->i", third, axis)[:, None] * axis
    t1 /= np.linalg.norm(t1, axis=1, keepdims=True)
    turn = np.degrees(np.arccos(np.clip(np.einsum("ij,ij->i", n1, n2), -1.0, 1.0)))
    reentrant = np.einsum("ij,ij->i", t1, n2) > 0
    angle = np.where(reentrant, 180.0 + turn, 180.0 - turn)  # in the material
    on_mirror = mirror[own[f1]].astype(int) + mirror[own[f2]].astype(int)
    angle = np.where(on_mirror == 1, 2 * angle, angle)  # the mirrored model doubles the angle
    keep = (angle > 180.0 + REENTRANT_MARGIN) & (on_mirror < 2)
    return e[keep]


def element_sizes(domain, ids: np.ndarray) -> np.ndarray:
    """Longest edge of each element ``ids`` [m]."""
    x = domain.points[domain.tetrahedra[ids]]
    pairs = ((0, 1), (0, 2), (0, 3), (1, 2), (1, 3), (2, 3))
    return np.max([np.linalg.norm(x[:, i] - x[:, j], axis=1) for i, j in pairs], axis=0)


def point_sizes(domain, order: int, ids: np.ndarray, dofs: np.ndarray) -> np.ndarray:
    """Local element size at each point ``dofs`` of a part (its elements ``ids``): the longest edge of
    the part's elements that contain it [m]."""
    space = fem.space(domain, order)
    h = np.zeros(space.N)
    np.maximum.at(h, space.element_dofs[:, ids], np.broadcast_to(element_sizes(domain, ids), space.element_dofs[:, ids].shape))
    return h[dofs]


def flag(values: np.ndarray, where: np.ndarray, sizes: np.ndarray, features: Features, part: str) -> dict:
    """The peak of ``values`` at points ``where`` (n, 3) [m] and whether it lies within NEAR local sizes
    of a feature touching ``part``; also the peak away from every such feature.
    Returns {"peak", "at_m", "near": None or {"code", "owner", "distance_m"}, "away", "away_at_m"}."""
    dist, which = features.nearest(where, part)
    near = dist <= NEAR * sizes
    i = int(np.argmax(values))
    out = {"peak": float(values[i]), "at_m": where[i].tolist(), "near": None}
    if near[i]:
        out["near"] = {"code": KINDS[features.kind[which[i]]], "owner": features.owner[which[i]],
                       "distance_m": float(dist[i])}
    away = np.flatnonzero(~near)
    if len(away):
        j = away[int(np.argmax(values[away]))]
        out |= {"away": float(values[j]), "away_at_m": where[j].tolist()}
    else:
        out |= {"away": None, "away_at_m": None}
    return out
