"""Sanity checks for the le11 meshes written by make_mesh.py (uses meshio).

    python check_mesh.py [FILE.msh ...]     (default: every le11_*.msh here)

Checks: tetrahedra present; the 7 physical names with the right dimensions;
every node used by a tetrahedron; every boundary facet of the tet mesh lies
in exactly one surface group (and no group triangle is interior); the nodes
of each surface group lie on that group's geometry; point A = (1, 0, 0) is a
node; no inverted tets; the summed
tet volume against the exact quarter volume from Pappus' theorem,
V = (pi/2) * integral of r dA over the (r, z) profile, evaluated on a finely
discretised polygon of the profile (shoelace-type first moment).
"""

from __future__ import annotations

import math
import sys
from pathlib import Path

import meshio
import numpy as np

HERE = Path(__file__).parent

EXPECTED = {"body": 3, "bottom": 2, "top": 2, "symmetry_xz": 2, "symmetry_yz": 2,
            "outer": 2, "inner": 2}


def profile_polygon(n_arc: int) -> np.ndarray:
    """Closed (r, z) polygon of the LE11 profile, arcs split into n_arc pieces."""
    d30, d45 = math.radians(30.0), math.radians(45.0)
    t_out = np.linspace(0.0, d30, n_arc + 1)              # B -> D
    t_in = np.linspace(d45, 0.0, n_arc + 1)               # E -> A
    pts = [(1.0, 0.0)]                                     # A
    pts += list(zip(1.4 * np.cos(t_out), 1.4 * np.sin(t_out)))   # B .. D
    pts += [(1.0, 1.39), (1.0, 1.79), (1.0 / math.sqrt(2.0), 1.79)]  # G, I, H
    pts += list(zip(np.cos(t_in), np.sin(t_in)))[:-1]      # E .. (before A)
    return np.array(pts)


def pappus_quarter_volume(n_arc: int) -> float:
    """(pi/2) * int r dA over the polygon; int x dA = 1/6 sum (x_i+x_j)(x_i y_j - x_j y_i)."""
    p = profile_polygon(n_arc)
    x, y = p[:, 0], p[:, 1]
    xj, yj = np.roll(x, -1), np.roll(y, -1)
    cross = x * yj - xj * y
    area = 0.5 * cross.sum()
    moment = ((x + xj) * cross).sum() / 6.0
    if area < 0:  # orientation
        moment = -moment
    return 0.5 * math.pi * moment


def _on_group(name: str, p: np.ndarray, tol: float = 1e-6) -> np.ndarray:
    """True where the points p (n, 3) lie on the geometry of surface group `name`."""
    x, y, z = p.T
    r = np.hypot(x, y)
    rho = np.sqrt(r**2 + z**2)
    if name == "bottom":
        return np.abs(z) < tol
    if name == "top":
        return np.abs(z - 1.79) < tol
    if name == "symmetry_xz":
        return np.abs(y) < tol
    if name == "symmetry_yz":
        return np.abs(x) < tol
    if name == "outer":
        rd, zd = 1.4 * math.cos(math.radians(30.0)), 0.7
        cone_r = rd + (1.0 - rd) * (z - zd) / (1.39 - zd)
        return ((np.abs(rho - 1.4) < tol) & (z <= zd + tol)) | (
            (np.abs(r - cone_r) < tol) & (z >= zd - tol) & (z <= 1.39 + tol)) | (
            (np.abs(r - 1.0) < tol) & (z >= 1.39 - tol))
    if name == "inner":
        ze = math.sin(math.radians(45.0))
        return ((np.abs(rho - 1.0) < tol) & (z <= ze + tol)) | (
            (np.abs(r - 1.0 / math.sqrt(2.0)) < tol) & (z >= ze - tol))
    raise KeyError(name)


def tet_volumes(points: np.ndarray, tets: np.ndarray) -> np.ndarray:
    a, b, c, d = (points[tets[:, i]] for i in range(4))
    return np.einsum("ij,ij->i", b - a, np.cross(c - a, d - a)) / 6.0


def check(path: Path, v_exact: float) -> bool:
    m = meshio.read(path)
    ok = True
    tets = np.vstack([c.data for c in m.cells if c.type == "tetra"]) if any(
        c.type == "tetra" for c in m.cells) else None
    if tets is None:
        print("  FAIL no tetrahedra")
        return False
    got = {k: int(v[1]) for k, v in m.field_data.items()}
    if got != EXPECTED:
        print(f"  FAIL field_data {got}")
        ok = False
    # boundary facets of the tet mesh (faces used by exactly one tet)
    faces = np.sort(np.vstack([tets[:, [0, 1, 2]], tets[:, [0, 1, 3]],
                               tets[:, [0, 2, 3]], tets[:, [1, 2, 3]]]), axis=1)
    uniq, cnt = np.unique(faces, axis=0, return_counts=True)
    bfaces = {tuple(f) for f in uniq[cnt == 1]}
    tag_to_name = {int(v[0]): k for k, v in m.field_data.items() if int(v[1]) == 2}
    tri_owner: dict[tuple, list[str]] = {}
    group_tris: dict[str, int] = {}
    phys = m.cell_data.get("gmsh:physical", [None] * len(m.cells))
    for block, tags in zip(m.cells, phys):
        if block.type != "triangle":
            continue
        for tri, tag in zip(block.data, tags):
            name = tag_to_name[int(tag)]
            tri_owner.setdefault(tuple(sorted(tri)), []).append(name)
            group_tris[name] = group_tris.get(name, 0) + 1
    multi = sum(1 for v in tri_owner.values() if len(v) > 1)
    missing = len(bfaces - tri_owner.keys())
    interior = len(tri_owner.keys() - bfaces)
    cover_ok = multi == 0 and missing == 0 and interior == 0
    ok &= cover_ok
    geom_bad = {}
    for name in group_tris:
        nodes = np.unique([n for k, v in tri_owner.items() if name in v for n in k])
        bad = int((~_on_group(name, m.points[nodes])).sum())
        if bad:
            geom_bad[name] = bad
    ok &= not geom_bad
    used = np.unique(tets)
    all_used = used.size == len(m.points)
    ok &= all_used
    dA = np.min(np.linalg.norm(m.points - np.array([1.0, 0.0, 0.0]), axis=1))
    ok &= dA < 1e-9
    vol = tet_volumes(m.points, tets)
    n_neg = int((vol <= 0).sum())
    ok &= n_neg == 0
    rel = (vol.sum() - v_exact) / v_exact
    cell_types = sorted({c.type for c in m.cells})
    print(f"  {path.name}: {len(m.points)} nodes, {len(tets)} tets, "
          f"{path.stat().st_size} bytes, cell types {cell_types}")
    print(f"    physical names ok: {got == EXPECTED}; all nodes used by tets: {all_used}; "
          f"non-positive tets: {n_neg}; distance of nearest node to A: {dA:.1e}")
    print(f"    boundary facets {len(bfaces)}: in >1 group {multi}, in no group {missing}, "
          f"group triangles not on boundary {interior}; triangles per group {group_tris}")
    print(f"    group nodes off their geometry: {geom_bad or 'none'}")
    print(f"    tet volume sum {vol.sum():.8f} m^3, exact {v_exact:.8f} m^3, "
          f"relative difference {rel:+.3e}")
    return ok


def main(argv: list[str]) -> int:
    files = [Path(a) for a in argv] or sorted(HERE.glob("le11_*.msh"))
    v = [pappus_quarter_volume(n) for n in (1000, 10000, 100000)]
    print(f"Pappus quarter volume: n_arc=1e3 {v[0]:.12f}, 1e4 {v[1]:.12f}, 1e5 {v[2]:.12f}")
    ok = all([check(f, v[-1]) for f in files])
    print("ALL OK" if ok else "SOME CHECKS FAILED")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
