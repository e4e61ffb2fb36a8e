"""Structured tetrahedral meshes for the verification cases, written as Gmsh MSH 2.2 files.

A box is divided into hexahedra, six tetrahedra each (scikit-fem's ``MeshTet.init_tensor``).  Its
faces are named ``xmin`` ... ``zmax`` in the box's own coordinates, before an optional ``shape``
maps the points (a quarter annulus from (r, theta, z), a spherical sector), so that ``xmin`` of an
annulus is its inner surface.  Volume groups are slabs of element centroids along one axis.
Lengths are in metres.  No mesher is needed: these meshes build from numpy alone.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from pathlib import Path

import meshio
import numpy as np

FACES = {"xmin": (0, 0), "xmax": (0, 1), "ymin": (1, 0), "ymax": (1, 1), "zmin": (2, 0), "zmax": (2, 1)}


def box(path: Path, xs: Sequence[float], ys: Sequence[float], zs: Sequence[float], *,
        parts: Mapping[str, tuple[int, float, float]] | None = None,
        surfaces: Mapping[str, Sequence[str]] | None = None,
        shape: Callable[[np.ndarray], np.ndarray] | None = None,
        jitter: float = 0.0, seed: int = 0) -> Path:
    """Write a box mesh with node planes ``xs``, ``ys``, ``zs`` [m] to ``path`` (MSH 2.2, binary).

    parts: name -> (axis, lo, hi), elements whose centroid lies in lo..hi along axis (default: one
    part "body").  surfaces: name -> box faces it is made of (default: the six faces by name).
    shape: maps (3, n) box points to model points.  jitter: interior nodes move by up to this
    fraction of the smallest spacing (a distorted mesh for patch tests), reproducibly by ``seed``."""
    from skfem import MeshTet

    grids = [np.asarray(g, dtype=float) for g in (xs, ys, zs)]
    m = MeshTet.init_tensor(*grids)
    p = m.p.copy()
    if jitter:
        rng = np.random.default_rng(seed)
        inner = np.setdiff1d(np.arange(m.nvertices), m.boundary_nodes())
        for d, g in enumerate(grids):
            p[d, inner] += jitter * np.diff(g).min() * rng.uniform(-1, 1, len(inner))
    m = MeshTet(p, m.t)
    faces = _faces(m, grids)
    groups = {name: np.concatenate([faces[f] for f in names]) for name, names in (surfaces or {}).items()}
    centroid = m.p[:, m.t].mean(axis=1)
    volumes = {name: np.flatnonzero((centroid[axis] >= lo) & (centroid[axis] <= hi))
               for name, (axis, lo, hi) in (parts or {"body": (0, -np.inf, np.inf)}).items()}
    points = (shape(m.p) if shape else m.p).T
    return _write(path, points, m.t.T.copy(), m.facets, groups or faces, volumes)


def _faces(m, grids) -> dict[str, np.ndarray]:
    """The six faces of the box as boundary facet ids (found in box coordinates)."""
    bnd = m.boundary_facets()
    mid = m.p[:, m.facets[:, bnd]].mean(axis=1)
    out = {}
    for name, (d, side) in FACES.items():
        target = grids[d][-1] if side else grids[d][0]
        out[name] = bnd[np.abs(mid[d] - target) <= 1e-9 * max(1.0, abs(target))]
    return out


def _write(path: Path, points, tets, facets, surfaces, parts) -> Path:
    """Gmsh MSH 2.2 with physical groups: surfaces as triangles, parts as positively oriented tetrahedra."""
    a, b, c, d = (points[tets[:, i]] for i in range(4))
    negative = np.einsum("ij,ij->i", b - a, np.cross(c - a, d - a)) < 0
    tets[negative, 2], tets[negative, 3] = tets[negative, 3].copy(), tets[negative, 2].copy()
    cells, tags, field_data = [], [], {}
    for tag, (name, ids) in enumerate(surfaces.items(), start=1):
        field_data[name] = np.array([tag, 2])
        cells.append(("triangle", facets[:, ids].T.copy()))
        tags.append(np.full(len(ids), tag))
    for tag, (name, ids) in enumerate(parts.items(), start=1):
        field_data[name] = np.array([tag, 3])
        cells.append(("tetra", tets[ids]))
        tags.append(np.full(len(ids), tag))
    mesh = meshio.Mesh(np.ascontiguousarray(points), cells, field_data=field_data,
                       cell_data={"gmsh:physical": tags, "gmsh:geometrical": tags})
    path.parent.mkdir(parents=True, exist_ok=True)
    meshio.write(path, mesh, file_format="gmsh22", binary=True)
    return path


def annulus(p: np.ndarray) -> np.ndarray:
    """(r, theta, z) -> (x, y, z): a box in r, theta [rad], z becomes a sector of a hollow cylinder."""
    r, t, z = p
    return np.array([r * np.cos(t), r * np.sin(t), z])


def spherical(p: np.ndarray) -> np.ndarray:
    """(r, azimuth, polar) [m, rad, rad] -> (x, y, z): a box becomes a sector of a hollow sphere."""
    r, az, po = p
    return np.array([r * np.sin(po) * np.cos(az), r * np.sin(po) * np.sin(az), r * np.cos(po)])


def planes(lo: float, hi: float, n: int) -> np.ndarray:
    """n divisions between lo and hi: n + 1 node planes."""
    return np.linspace(lo, hi, int(n) + 1)


def carved(path: Path, xs: Sequence[float], ys: Sequence[float], zs: Sequence[float], *,
           keep: Callable[[np.ndarray], np.ndarray],
           surfaces: Mapping[str, Callable[[np.ndarray, np.ndarray], np.ndarray]],
           shape: Callable[[np.ndarray], np.ndarray] | None = None,
           parts: Mapping[str, Callable[[np.ndarray], np.ndarray]] | None = None) -> Path:
    """A box mesh with the elements whose centroid (3, n) fails ``keep`` removed (two plates facing
    each other, an L-shaped block), written like ``box``.  surfaces: name -> predicate on the
    boundary facets' midpoints and outward normals, both (3, n) in box coordinates; the boundary
    facets in no surface form ``rest`` (empty groups are left out).  parts: name -> predicate on the
    element centroids in box coordinates (default: one part ``body``).  Lengths in m."""
    from skfem import MeshTet

    m = MeshTet.init_tensor(*[np.asarray(g, dtype=float) for g in (xs, ys, zs)])
    m = MeshTet(m.p, np.ascontiguousarray(m.t[:, keep(m.p[:, m.t].mean(axis=1))]))
    used = np.unique(m.t)
    renumber = np.full(m.nvertices, -1)
    renumber[used] = np.arange(len(used))
    m = MeshTet(np.ascontiguousarray(m.p[:, used]), np.ascontiguousarray(renumber[m.t]))
    bnd = m.boundary_facets()
    tri = m.p[:, m.facets[:, bnd]]
    mid = tri.mean(axis=1)
    normal = np.cross((tri[:, 1] - tri[:, 0]).T, (tri[:, 2] - tri[:, 0]).T).T
    inside = m.p[:, m.t[:, m.f2t[0, bnd]]].mean(axis=1)
    normal *= np.sign(np.einsum("dn,dn->n", normal, mid - inside))
    normal /= np.linalg.norm(normal, axis=0)
    groups, taken = {}, np.zeros(len(bnd), dtype=bool)
    for name, where in surfaces.items():
        chosen = np.asarray(where(mid, normal), dtype=bool) & ~taken
        groups[name], taken = bnd[chosen], taken | chosen
    groups["rest"] = bnd[~taken]
    groups = {k: v for k, v in groups.items() if len(v)}
    points = (shape(m.p) if shape else m.p).T
    centroid = m.p[:, m.t].mean(axis=1)
    volumes = {name: np.flatnonzero(where(centroid)) for name, where in
               (parts or {"body": lambda c: np.ones(c.shape[1], dtype=bool)}).items()}
    return _write(path, points, m.t.T.copy(), m.facets, groups, volumes)


def disc(p: np.ndarray) -> np.ndarray:
    """(x, y, z) in [-1, 1]^2 x z -> a disc of radius 1 in x, y (the elliptical square-to-disc map)."""
    x, y, z = p
    return np.array([x * np.sqrt(1 - y**2 / 2), y * np.sqrt(1 - x**2 / 2), z])


def shells(path: Path, radii: Sequence[float], n: int, layers: int = 1, cylinder_length: float | None = None) -> Path:
    """Two concentric shells, radii r0 < r1 (inner solid) < r2 < r3 (outer solid) [m], with the gap
    between them not meshed: spheres, or cylinders of length ``cylinder_length`` along z.  A cube
    shell (n divisions a side) is mapped radially (a "cube sphere").  Surfaces: ``inner`` (r1, facing
    the gap), ``outer`` (r2, facing the gap), ``core`` (r0), ``skin`` (r3), ``rest`` (the ends of
    cylinders).  Parts ``inside`` (r0..r1) and ``outside`` (r2..r3)."""
    r0, r1, r2, r3 = radii
    s = [0.25, 0.5, 0.75, 1.0]  # the shells' sup-norm radii in the cube
    cube = np.unique(np.concatenate([np.linspace(-1, 1, 2 * n + 1)] + [np.linspace(a, b, layers + 1) * k for a, b in
                                    ((s[0], s[1]), (s[2], s[3])) for k in (1, -1)]))
    axes = 2 if cylinder_length is None else 1
    zs = cube if cylinder_length is None else np.linspace(0, cylinder_length, n + 1)

    def norm(p):
        return np.abs(p[:axes + 1]).max(axis=0)

    def keep(c):
        m = norm(c)
        return ((m > s[0]) & (m < s[1])) | ((m > s[2]) & (m < s[3]))

    def at(value):
        return lambda mid, normal: np.abs(norm(mid) - value) < 1e-9

    def shape(p):
        m = norm(p)
        r = np.interp(m, s, [r0, r1, r2, r3])
        q = p.copy()
        q[:axes + 1] *= r / np.linalg.norm(p[:axes + 1], axis=0)
        return q

    surfaces = {"inner": at(s[1]), "outer": at(s[2]), "core": at(s[0]), "skin": at(s[3])}
    parts = {"inside": lambda c: norm(c) < s[1], "outside": lambda c: norm(c) > s[2]}
    return carved(path, cube, cube, zs, keep=keep, surfaces=surfaces, shape=shape, parts=parts)
