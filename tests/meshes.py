"""Small tetrahedral meshes with Gmsh-style physical groups, built in the tests (no mesher needed).

``box(...)`` returns a meshio.Mesh whose volume groups are slabs along one axis and whose surface
groups are the six faces, named xmin/xmax/ymin/ymax/zmin/zmax (split per part where asked).
``write_gmsh`` writes it as MSH 2.2, ASCII or binary.
"""

from __future__ import annotations

from pathlib import Path

import meshio
import numpy as np
from skfem import MeshTet

FACES = {"xmin": (0, 0), "xmax": (0, 1), "ymin": (1, 0), "ymax": (1, 1), "zmin": (2, 0), "zmax": (2, 1)}


def tensor(xs, ys, zs, jitter: float = 0.0, seed: int = 0) -> MeshTet:
    """Structured tet mesh of a box; interior nodes moved by up to ``jitter`` of the local spacing."""
    m = MeshTet.init_tensor(np.asarray(xs, float), np.asarray(ys, float), np.asarray(zs, float))
    if jitter:
        rng = np.random.default_rng(seed)
        p = m.p.copy()
        interior = np.setdiff1d(np.arange(m.nvertices), m.boundary_nodes())
        for d, grid in enumerate((xs, ys, zs)):
            h = np.min(np.diff(grid))
            p[d, interior] += jitter * h * rng.uniform(-1, 1, len(interior))
        m = MeshTet(p, m.t)
    return m


def to_meshio(m: MeshTet, parts: dict[str, np.ndarray] | None = None,
              surfaces: dict[str, np.ndarray] | None = None) -> meshio.Mesh:
    """meshio mesh with volume groups ``parts`` (name -> element ids) and surface groups (name -> facet ids)."""
    parts = parts or {"body": np.arange(m.nelements)}
    surfaces = surfaces if surfaces is not None else faces(m)
    t = m.t.T.copy()
    # orient each tetrahedron positively, as Gmsh writes them
    p = m.p.T
    vol = np.einsum("ij,ij->i", p[t[:, 1]] - p[t[:, 0]], np.cross(p[t[:, 2]] - p[t[:, 0]], p[t[:, 3]] - p[t[:, 0]]))
    t[vol < 0, 2], t[vol < 0, 3] = t[vol < 0, 3].copy(), t[vol < 0, 2].copy()
    field_data, cells, phys = {}, [], []
    for tag, (name, facets) in enumerate(surfaces.items(), start=1):
        field_data[name] = np.array([tag, 2])
        cells.append(("triangle", m.facets[:, facets].T.copy()))
        phys.append(np.full(len(facets), tag))
    for tag, (name, ids) in enumerate(parts.items(), start=1):
        field_data[name] = np.array([tag, 3])
        cells.append(("tetra", t[ids]))
        phys.append(np.full(len(ids), tag))
    return meshio.Mesh(p.copy(), cells, cell_data={"gmsh:physical": phys, "gmsh:geometrical": phys},
                       field_data=field_data)


def faces(m: MeshTet, tol: float = 1e-12) -> dict[str, np.ndarray]:
    """The six faces of a box mesh as boundary facet ids."""
    lo, hi = m.p.min(axis=1), m.p.max(axis=1)
    bnd = m.boundary_facets()
    mid = m.p[:, m.facets[:, bnd]].mean(axis=1)
    out = {}
    for name, (d, side) in FACES.items():
        target = hi[d] if side else lo[d]
        out[name] = bnd[np.abs(mid[d] - target) < tol * max(1.0, abs(target)) + 1e-12]
    return out


def layers(m: MeshTet, axis: int, bounds: dict[str, tuple[float, float]]) -> dict[str, np.ndarray]:
    """Parts as slabs ``lo <= x[axis] <= hi`` of element centroids."""
    c = m.p[:, m.t].mean(axis=1)[axis]
    return {name: np.flatnonzero((c >= lo) & (c <= hi)) for name, (lo, hi) in bounds.items()}


def write_gmsh(mesh: meshio.Mesh, path: Path, binary: bool = True) -> Path:
    """Write as Gmsh MSH 2.2 (meshio cannot write MSH 4.1 that it reads back; real Gmsh files in
    tests/data cover 4.1)."""
    meshio.write(path, mesh, file_format="gmsh22", binary=binary)
    return path
