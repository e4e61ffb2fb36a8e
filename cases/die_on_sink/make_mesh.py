"""A die on a heat-sink base, meshed two ways with the gmsh Python API (the example of docs/meshing.md).

An invented scenario for thermochain's examples (no real product): a silicon die 10 x 10 x 1 mm
centred on an aluminium base 30 x 30 x 4 mm.  Millimetres, z up.

    sink  30 x 30 x 4   z = 0 .. 4
    die   10 x 10 x 1   z = 4 .. 5, centred

Two meshes are written next to this script:

    die_on_sink_bonded.msh   the volumes fragmented: the die and the base share the nodes of their
                             interface (a bonded joint; what a part-by-part model is checked against)
    die_on_sink_apart.msh    each volume meshed on its own (no fragment), the die finer than the base:
                             the faces touch but the nodes do not match; the workflow must tie them

Physical groups (the names the workflow uses):

    dim 3: sink, die
    dim 2: cold_plate  the bottom of the base (z = 0)
           top         every other outside face but the die's bottom (left adiabatic in the example);
                       in the "apart" mesh the base's top face is one face, so it includes the area
                       under the die: give no boundary condition on it there, or split the face

Usage:  python make_mesh.py [--size 1.0]    (the base's element size in mm; the die gets 0.4 of it)
"""

from __future__ import annotations

import argparse
from pathlib import Path

import gmsh

HERE = Path(__file__).parent
SINK = (0.0, 0.0, 0.0, 30.0, 30.0, 4.0)
DIE = (10.0, 10.0, 4.0, 10.0, 10.0, 1.0)


def build(fragment: bool, size: float, path: Path) -> None:
    gmsh.clear()
    gmsh.model.add(path.stem)
    occ = gmsh.model.occ
    sink, die = occ.addBox(*SINK), occ.addBox(*DIE)
    if fragment:
        # one shared interface surface: both volumes are meshed with the same triangles there
        (_, mapping) = occ.fragment([(3, sink)], [(3, die)])
        sink, die = mapping[0][0][1], mapping[1][0][1]
    occ.synchronize()
    gmsh.model.addPhysicalGroup(3, [sink], name="sink")
    gmsh.model.addPhysicalGroup(3, [die], name="die")
    bottom, rest = [], []
    die_faces = {t for _, t in gmsh.model.getBoundary([(3, die)], oriented=False)}
    for dim, tag in gmsh.model.getBoundary([(3, sink), (3, die)], combined=False, oriented=False):
        z0, z1 = gmsh.model.getBoundingBox(dim, tag)[2::3]  # OCC boxes carry a small tolerance
        if abs(z1) < 1e-6:
            bottom.append(tag)
        elif not (abs(z0 - 4.0) < 1e-6 and abs(z1 - 4.0) < 1e-6 and tag in die_faces):
            rest.append(tag)  # the die's bottom (the interface) is in no group
    gmsh.model.addPhysicalGroup(2, bottom, name="cold_plate")
    gmsh.model.addPhysicalGroup(2, sorted(set(rest)), name="top")
    # element size: the base's size everywhere, the die's points (and so its faces) finer
    gmsh.model.mesh.setSize(gmsh.model.getBoundary([(3, sink)], recursive=True), size)
    gmsh.model.mesh.setSize(gmsh.model.getBoundary([(3, die)], recursive=True), 0.4 * size)
    gmsh.option.setNumber("Mesh.MeshSizeExtendFromBoundary", 1)
    gmsh.option.setNumber("Mesh.ElementOrder", 1)  # thermochain makes P2 itself (order = 2)
    gmsh.option.setNumber("General.NumThreads", 1)  # reproducible output
    gmsh.model.mesh.generate(3)
    gmsh.option.setNumber("Mesh.MshFileVersion", 4.1)
    gmsh.option.setNumber("Mesh.Binary", 1)
    gmsh.write(str(path))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--size", type=float, default=2.0, help="element size of the base [mm]")
    args = parser.parse_args()
    gmsh.initialize()
    gmsh.option.setNumber("General.Terminal", 0)
    try:
        build(True, args.size, HERE / "die_on_sink_bonded.msh")
        build(False, args.size, HERE / "die_on_sink_apart.msh")
    finally:
        gmsh.finalize()


if __name__ == "__main__":
    main()
