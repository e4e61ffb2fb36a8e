"""Build the thermochain "le11" verification mesh with the gmsh Python API.

Geometry of the NAFEMS thermoelastic benchmark LE11 ("solid cylinder/taper/
sphere - temperature", The Standard NAFEMS Benchmarks, TNSB Rev. 3, 1990) as a
3-D quarter model, 0 <= theta <= 90 deg about the z axis.  Units: metres.
The profile coordinates are as recalled from memory of the publication (see
README.md); points are given as (r, z):

    A (1.0,     0.0)      B (1.4,     0.0)
    D (1.4 cos 30, 1.4 sin 30) = (1.21244, 0.7)
    G (1.0,     1.39)     I (1.0,     1.79)
    H (1/sqrt2, 1.79)     E (cos 45, sin 45) = (0.70711, 0.70711)

    A-B  straight, z = 0 (bottom annulus)
    B-D  arc of radius 1.4 about the origin (outer sphere)
    D-G  straight (cone, the "taper")
    G-I  straight, r = 1.0 (outer cylinder)
    I-H  straight, z = 1.79 (top annulus)
    H-E  straight, r = 1/sqrt2 (inner cylinder)
    E-A  arc of radius 1.0 about the origin (inner sphere)

The planar profile is built in the x-z plane (y = 0, x = r) and revolved by
90 deg about the z axis with the OpenCASCADE kernel.

Physical groups:

    dim 3: body
    dim 2: bottom       z = 0 face
           top          z = 1.79 face
           symmetry_xz  y = 0 plane face
           symmetry_yz  x = 0 plane face
           outer        outer sphere + cone + r = 1 cylinder
           inner        inner sphere + r = 1/sqrt2 cylinder

Every boundary face is in exactly one surface group.

Usage (the output is written next to this script):

    python make_mesh.py [--size H] [--name NAME]

H is the characteristic element length in metres (default 0.1); NAME defaults
to le11_h<H>.  Output: NAME.msh, linear tetrahedra, MSH 4.1 binary.
"""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

import gmsh

HERE = Path(__file__).parent
TOL = 1e-6

R_IN_SPHERE = 1.0
R_OUT_SPHERE = 1.4
R_IN_CYL = 1.0 / math.sqrt(2.0)
R_OUT_CYL = 1.0
Z_TOP = 1.79
Z_G = 1.39

# Profile key points, (r, z).
PTS = {
    "A": (1.0, 0.0),
    "B": (1.4, 0.0),
    "D": (1.4 * math.cos(math.radians(30.0)), 1.4 * math.sin(math.radians(30.0))),
    "G": (1.0, Z_G),
    "I": (1.0, Z_TOP),
    "H": (R_IN_CYL, Z_TOP),
    "E": (math.cos(math.radians(45.0)), math.sin(math.radians(45.0))),
}


def _classify_curved(r: float, z: float) -> str | None:
    """Return 'outer' or 'inner' for a point (r, z) on a revolved face."""
    rho = math.hypot(r, z)
    # outer sphere, 0..30 deg
    if abs(rho - R_OUT_SPHERE) < TOL and z <= PTS["D"][1] + TOL:
        return "outer"
    # cone D-G: point on the straight line between D and G
    (rd, zd), (rg, zg) = PTS["D"], PTS["G"]
    if zd - TOL <= z <= zg + TOL:
        r_line = rd + (rg - rd) * (z - zd) / (zg - zd)
        if abs(r - r_line) < TOL:
            return "outer"
    # outer cylinder r = 1, z in [1.39, 1.79]
    if abs(r - R_OUT_CYL) < TOL and Z_G - TOL <= z <= Z_TOP + TOL:
        return "outer"
    # inner sphere, 0..45 deg
    if abs(rho - R_IN_SPHERE) < TOL and z <= PTS["E"][1] + TOL:
        return "inner"
    # inner cylinder r = 1/sqrt2, z in [0.70711, 1.79]
    if abs(r - R_IN_CYL) < TOL and PTS["E"][1] - TOL <= z <= Z_TOP + TOL:
        return "inner"
    return None


def _point_on_surface(tag: int) -> tuple[float, float, float]:
    """A point on surface `tag`, at the middle of its parameter range."""
    lo, hi = gmsh.model.getParametrizationBounds(2, tag)
    uv = [(lo[0] + hi[0]) / 2.0, (lo[1] + hi[1]) / 2.0]
    x, y, z = gmsh.model.getValue(2, tag, uv)
    return x, y, z


def build(size: float) -> None:
    occ = gmsh.model.occ
    p = {k: occ.addPoint(r, 0.0, z) for k, (r, z) in PTS.items()}
    origin = occ.addPoint(0.0, 0.0, 0.0)
    curves = [
        occ.addLine(p["A"], p["B"]),
        occ.addCircleArc(p["B"], origin, p["D"]),
        occ.addLine(p["D"], p["G"]),
        occ.addLine(p["G"], p["I"]),
        occ.addLine(p["I"], p["H"]),
        occ.addLine(p["H"], p["E"]),
        occ.addCircleArc(p["E"], origin, p["A"]),
    ]
    loop = occ.addCurveLoop(curves)
    face = occ.addPlaneSurface([loop])
    occ.revolve([(2, face)], 0, 0, 0, 0, 0, 1, math.pi / 2.0)
    occ.remove([(0, origin)])
    occ.synchronize()

    vols = gmsh.model.getEntities(3)
    if len(vols) != 1:
        raise RuntimeError(f"expected one volume, got {len(vols)}")
    vol = vols[0][1]

    groups: dict[str, list[int]] = {
        "bottom": [], "top": [], "symmetry_xz": [], "symmetry_yz": [],
        "outer": [], "inner": [],
    }
    for _, s in gmsh.model.getBoundary([(3, vol)], oriented=False):
        s = abs(s)
        x0, y0, z0, x1, y1, z1 = occ.getBoundingBox(2, s)
        if abs(z1 - z0) < TOL and abs(z0) < TOL:
            name = "bottom"
        elif abs(z1 - z0) < TOL and abs(z0 - Z_TOP) < TOL:
            name = "top"
        elif abs(y1 - y0) < TOL and abs(y0) < TOL:
            name = "symmetry_xz"
        elif abs(x1 - x0) < TOL and abs(x0) < TOL:
            name = "symmetry_yz"
        else:
            x, y, z = _point_on_surface(s)
            name = _classify_curved(math.hypot(x, y), z)
            if name is None:
                cm = occ.getCenterOfMass(2, s)
                raise RuntimeError(f"cannot classify surface {s} (point {x, y, z}, centre {cm})")
        groups[name].append(s)

    for name, tags in groups.items():
        if not tags:
            raise RuntimeError(f"surface group {name!r} is empty")
    expected = {"bottom": 1, "top": 1, "symmetry_xz": 1, "symmetry_yz": 1, "outer": 3, "inner": 2}
    counts = {k: len(v) for k, v in groups.items()}
    if counts != expected:
        raise RuntimeError(f"unexpected face counts {counts}, expected {expected}")

    gmsh.model.addPhysicalGroup(3, [vol], name="body")
    for name, tags in groups.items():
        gmsh.model.addPhysicalGroup(2, sorted(tags), name=name)

    gmsh.option.setNumber("Mesh.MeshSizeMax", size)
    gmsh.option.setNumber("Mesh.MeshSizeMin", 0.0)
    gmsh.option.setNumber("Mesh.MeshSizeFromCurvature", 0)
    gmsh.model.mesh.setSize(gmsh.model.getEntities(0), size)
    gmsh.option.setNumber("Mesh.ElementOrder", 1)
    gmsh.option.setNumber("Mesh.Algorithm3D", 1)  # Delaunay


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=float, default=0.1,
                    help="characteristic element length in metres (default 0.1)")
    ap.add_argument("--name", default=None,
                    help="output name without extension (default le11_h<size>)")
    args = ap.parse_args(argv)
    if args.size <= 0:
        ap.error("--size must be positive")
    name = args.name or f"le11_h{args.size:g}"
    out = HERE / f"{name}.msh"

    gmsh.initialize()
    try:
        gmsh.option.setNumber("General.Terminal", 1)
        gmsh.option.setNumber("General.Verbosity", 2)
        gmsh.model.add("le11")
        build(args.size)
        gmsh.model.mesh.generate(3)
        gmsh.option.setNumber("Mesh.MshFileVersion", 4.1)
        gmsh.option.setNumber("Mesh.Binary", 1)
        gmsh.option.setNumber("Mesh.SaveAll", 0)
        gmsh.write(str(out))
        ntags, _, _ = gmsh.model.mesh.getNodes()
        etypes, etags, _ = gmsh.model.mesh.getElements(3)
        ntet = sum(len(t) for et, t in zip(etypes, etags) if et == 4)
        print(f"wrote {out.name}: {len(ntags)} nodes, {ntet} tetrahedra, "
              f"{out.stat().st_size} bytes")
    finally:
        gmsh.finalize()
    return 0


if __name__ == "__main__":
    sys.exit(main())
