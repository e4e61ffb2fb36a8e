"""View factors between the patches of surface groups, from the mesh's facets, with obstruction.

A group's facets are clustered into patches (cells of edge ``patch_size`` [m], split by part and by
the dominant direction of the outward normal so that a patch is nearly plane).  The view factor from
patch i to patch j (docs/theory.md, "Radiation exchange"):

    F_ij = (1/A_i) int_{A_i} F_{dA->A_j} dA  ~  F_{dA(x_i)->A_j},
    F_{dA(x)->A_j} = sum_{facets f of j} V(x, f) |sum_{edges k of f} gamma_k n . (g_k x g_k+1) / |g_k x g_k+1|| / (2 pi)

the inner integral exact per facet (the point-to-polygon form of the view factor, Siegel & Howell,
Thermal Radiation Heat Transfer, 4th ed., sec. 4.3), the outer one the midpoint rule at the patch's
centroid x_i, moved into the patch's nearest facet, with that facet's normal (error falling with the
patch size), and V(x, f) in {0, 1} the visibility of the
facet's centroid from x: a ray cast against every boundary facet of the mesh (Embree, through the
``embreex`` binding).  The raw matrix is then made to satisfy reciprocity A_i F_ij = A_j F_ji
(symmetric mean) and the summation rule: sum_j F_ij = 1 in an enclosure (symmetric scaling
D S D, S = A F), <= 1 in an open group, whose remainder F_i,s = 1 - sum_j F_ij goes to the
surroundings.  The raw residuals are reported: they measure the discretisation.  Lengths in m.
"""

from __future__ import annotations

import time
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from .. import errors
from ..fields import GroupView, ViewFactors

STAGE_VERSION = 1
#: pair evaluations per chunk (memory: about 400 bytes each)
CHUNK = 400_000


@dataclass(frozen=True)
class Group:
    """Surfaces that exchange radiation.  enclosure: they close a cavity (no view to surroundings)."""

    surfaces: tuple[str, ...]
    enclosure: bool = False


@dataclass(frozen=True)
class ViewSpec:
    """groups: name -> Group.  patch_size [m]: edge of the cells that cluster facets into patches
    (0: one patch per facet)."""

    groups: Mapping[str, Group]
    patch_size: float = 0.005


def check(domain, spec: ViewSpec, where: str = "view") -> None:
    """Raise one ``InputError`` listing every problem of ``spec`` on ``domain``."""
    problems = []
    if not spec.patch_size >= 0:
        problems.append(f"{where}.patch_size: must be >= 0 m (0: one patch per facet), got {spec.patch_size}")
    if not spec.groups:
        problems.append(f"{where}.groups: name at least one group of surfaces that exchange radiation")
    owner: dict[str, str] = {}
    for name, g in spec.groups.items():
        if not g.surfaces:
            problems.append(f"{where}.groups.{name}.surfaces: list at least one surface")
        for s in g.surfaces:
            if s not in domain.surfaces:
                problems.append(errors.unknown_name("surface", s, domain.surfaces, f"{where}.groups.{name}.surfaces"))
                continue
            if s in owner:
                problems.append(f"{where}.groups.{name}: surface '{s}' is in group '{owner[s]}' already; "
                                "a surface belongs to one group")
            owner[s] = name
            inner = int((domain.mesh.f2t[1, domain.surfaces[s]] >= 0).sum())
            if inner:
                problems.append(f"{where}.groups.{name}: surface '{s}' has {inner} facets inside the body; "
                                "radiation needs a boundary surface")
    try:
        import embreex  # noqa: F401
    except ImportError:
        problems.append(f"{where}: view factors need the 'embreex' package (pip install embreex)")
    if problems:
        raise errors.InputError(problems)


def solve(domain, spec: ViewSpec, where: str = "view", checked: bool = False) -> ViewFactors:
    """View factors of every group of ``spec`` on ``domain`` (see the module docstring)."""
    if not checked:
        check(domain, spec, where)
    start = time.perf_counter()
    scene, scale = _scene(domain)
    groups, rays = {}, 0
    for name, g in spec.groups.items():
        facets, patch, labels, label_of = _patches(domain, g.surfaces, spec.patch_size)
        geo = _facet_geometry(domain, facets)
        area = np.bincount(patch, geo["area"])
        x, n = _samples(geo, patch, area)
        raw, cast = _raw(x, n, geo, patch, len(area), scene, 1e-5 * scale)
        rays += cast
        F, out, residuals = _corrected(raw, area, g.enclosure)
        if g.enclosure and np.any(raw.sum(axis=1) == 0):
            raise errors.PhysicsError(f"{where}.groups.{name}: {int(np.sum(raw.sum(axis=1) == 0))} patches see no "
                                      "other patch, so the group is no enclosure; set enclosure = false")
        groups[name] = GroupView(facets=facets, patch=patch, area=area, F=F, surroundings=out, label=label_of,
                                 labels=tuple(labels), enclosure=g.enclosure, residuals=residuals)
    return ViewFactors(groups=groups, patch_size=spec.patch_size, domain_hash=domain.source_hash,
                       meta={"seconds": time.perf_counter() - start, "rays": rays, "stage_version": STAGE_VERSION})


def _scene(domain):
    """An Embree scene of every boundary facet of the mesh (what can block a view), and the model size."""
    from embreex import rtcore_scene
    from embreex.mesh_construction import TriangleMesh

    scene = rtcore_scene.EmbreeScene()
    TriangleMesh(scene, np.ascontiguousarray(domain.points, dtype=np.float32),
                 np.ascontiguousarray(domain.mesh.facets[:, domain.boundary_facets()].T, dtype=np.int32))
    lo, hi = domain.bounding_box
    return scene, float(np.linalg.norm(hi - lo))


def _owners(domain, surface: str):
    """The part (index into sorted parts) each facet of ``surface`` bounds."""
    part_of = np.full(len(domain.tetrahedra), -1)
    for i, p in enumerate(sorted(domain.parts)):
        part_of[domain.parts[p]] = i
    return part_of[domain.mesh.f2t[0, np.asarray(domain.surfaces[surface])]]


def labels(domain, surfaces) -> tuple[tuple[str, str], ...]:
    """The (surface, part) pairs of a group's facets, in the order the patches use."""
    parts = sorted(domain.parts)
    return tuple((s, parts[q]) for s in surfaces for q in np.unique(_owners(domain, s)))


def _patches(domain, surfaces, size: float):
    """Facet ids of the group, the patch of each, the (surface, part) labels and each patch's label."""
    parts = sorted(domain.parts)
    facets, keys, labels = [], [], []
    for s in surfaces:
        f = np.asarray(domain.surfaces[s])
        owner = _owners(domain, s)
        geo = _facet_geometry(domain, f)
        axis = np.argmax(np.abs(geo["normal"]), axis=1)
        direction = 2 * axis + (geo["normal"][np.arange(len(f)), axis] > 0)
        cell = np.floor(geo["centroid"] / size).astype(np.int64) if size > 0 else np.arange(len(f))[:, None]
        for q in np.unique(owner):
            labels.append((s, parts[q]))
            mine = owner == q
            facets.append(f[mine])
            keys.append(np.column_stack([np.full(mine.sum(), len(labels) - 1), direction[mine], cell[mine]]))
    width = max(k.shape[1] for k in keys)
    keys = np.vstack([np.pad(k, ((0, 0), (0, width - k.shape[1]))) for k in keys])
    unique, patch = np.unique(keys, axis=0, return_inverse=True)
    return np.concatenate(facets), patch.ravel(), labels, unique[:, 0].astype(np.int64)


def _facet_geometry(domain, facets) -> dict[str, np.ndarray]:
    """Vertices (n, 3, 3), centroid, outward unit normal and area of boundary facets."""
    mesh = domain.mesh
    tri = domain.points[mesh.facets[:, facets].T]
    normal = np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0])
    area = 0.5 * np.linalg.norm(normal, axis=1)
    normal /= 2 * area[:, None]
    tets = mesh.t[:, mesh.f2t[0, facets]].T
    inside = domain.points[tets].mean(axis=1)
    centroid = tri.mean(axis=1)
    normal *= np.where(np.einsum("nd,nd->n", normal, centroid - inside) < 0, -1.0, 1.0)[:, None]
    return {"tri": tri, "centroid": centroid, "normal": normal, "area": area}


def _samples(geo, patch, area):
    """Each patch's quadrature point (its area centroid, moved into its facet nearest to it: on the
    surface, so that a concave patch does not hide it behind its own facets, and off the facet's
    edges, where another part's wall may stand) and the normal there (that facet's: on a curved
    patch the mean normal would tilt the point's hemisphere into its own surface)."""
    c = np.stack([np.bincount(patch, geo["area"] * geo["centroid"][:, d]) for d in range(3)], axis=1) / area[:, None]
    gap = np.linalg.norm(geo["centroid"] - c[patch], axis=1)
    order = np.lexsort((gap, patch))
    nearest = order[np.r_[True, patch[order][1:] != patch[order][:-1]]]
    tri = geo["tri"][nearest]
    e1, e2, w = tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0], c - tri[:, 0]
    g = np.stack([np.einsum("nd,nd->n", e1, e1), np.einsum("nd,nd->n", e1, e2), np.einsum("nd,nd->n", e2, e2)])
    rhs = np.stack([np.einsum("nd,nd->n", w, e1), np.einsum("nd,nd->n", w, e2)])
    det = g[0] * g[2] - g[1] ** 2
    b = np.stack([(g[2] * rhs[0] - g[1] * rhs[1]) / det, (g[0] * rhs[1] - g[1] * rhs[0]) / det])
    bary = np.clip(np.vstack([1 - b.sum(axis=0), b]), 0.0, None)  # the plane projection, clipped to the facet
    bary = 0.9 * bary / bary.sum(axis=0) + 0.1 / 3  # inside the facet, off its edges (a wall may stand there)
    return np.einsum("kn,nkd->nd", bary, tri), geo["normal"][nearest]


def point_to_triangles(x: np.ndarray, n: np.ndarray, tri: np.ndarray) -> np.ndarray:
    """View factor from a differential area at x (k, 3) with unit normal n (k, 3) to triangles
    tri (k, 3, 3) that lie wholly in front of it (the contour form, Siegel & Howell sec. 4.3)."""
    g = tri - x[:, None, :]
    total = np.zeros(len(x))
    for a in range(3):
        b = (a + 1) % 3
        c = np.cross(g[:, a], g[:, b])
        norm = np.linalg.norm(c, axis=1)
        gamma = np.arctan2(norm, np.einsum("kd,kd->k", g[:, a], g[:, b]))
        total += gamma * np.einsum("kd,kd->k", n, c) / np.maximum(norm, 1e-300)
    return np.abs(total) / (2 * np.pi)


def _raw(x, n, geo, patch, npatch, scene, eps):
    """Uncorrected F (npatch, npatch) and the number of rays cast."""
    raw = np.zeros((npatch, npatch))
    cf, nf = geo["centroid"], geo["normal"]
    rows = max(1, CHUNK // max(len(cf), 1))
    rays = 0
    for s0 in range(0, npatch, rows):
        s = np.arange(s0, min(npatch, s0 + rows))
        d = cf[None, :, :] - x[s, None, :]
        dist = np.linalg.norm(d, axis=2)
        front = (np.einsum("sd,sfd->sf", n[s], d) > 1e-9 * dist) & (np.einsum("fd,sfd->sf", nf, -d) > 1e-9 * dist)
        si, fi = np.nonzero(front)
        if not len(si):
            continue
        origin = x[s][si] + eps * n[s][si]
        target = cf[fi] + eps * nf[fi]
        ray = target - origin
        length = np.linalg.norm(ray, axis=1)
        hit = scene.run(np.ascontiguousarray(origin, dtype=np.float32),
                        np.ascontiguousarray(ray / length[:, None], dtype=np.float32),
                        dists=np.ascontiguousarray(length * (1 - 1e-6), dtype=np.float32), query="OCCLUDED")
        rays += len(si)
        seen = np.asarray(hit) < 0
        si, fi = si[seen], fi[seen]
        value = point_to_triangles(x[s][si], n[s][si], geo["tri"][fi])
        np.add.at(raw, (s[si], patch[fi]), value)
    return raw, rays


def _corrected(raw, area, enclosure: bool):
    """F with reciprocity and the summation rule enforced, the view to the surroundings and the
    residuals before and after (reciprocity: max |A_i F_ij - A_j F_ji| over the largest patch area;
    summation: the largest miss of a row sum, and its area-weighted mean)."""
    S = 0.5 * (area[:, None] * raw + (area[:, None] * raw).T)
    d = np.ones(len(area))
    for _ in range(500):  # symmetric scaling d_i (S d)_i = A_i (enclosure) or <= A_i (open)
        row = d * (S @ d)
        target = area if enclosure else np.minimum(area, row)
        new = d * np.sqrt(np.divide(target, row, out=np.ones_like(row), where=row > 0))
        if np.max(np.abs(new - d)) <= 1e-15:
            break
        d = new
    d = new
    F = (d[:, None] * S * d[None, :]) / area[:, None]
    out = np.zeros(len(area)) if enclosure else np.clip(1 - F.sum(axis=1), 0.0, 1.0)

    def residuals(M):
        AF = area[:, None] * M
        miss = np.abs(1 - M.sum(axis=1)) if enclosure else np.maximum(M.sum(axis=1) - 1, 0)
        return {"reciprocity": float(np.abs(AF - AF.T).max() / area.max()), "summation": float(miss.max()),
                "summation_mean": float(area @ miss / area.sum())}

    return F, out, {"raw": residuals(raw), "corrected": residuals(F)}
