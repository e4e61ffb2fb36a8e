"""Regenerate the small Gmsh meshes the tests read (needs the optional gmsh package).

Two stacked boxes in mm: volume groups "lower" (10 x 10 x 4) and "upper" (10 x 10 x 2), surface
groups "bottom" (z = 0) and "top" (z = 6), and one surface group left without a name (the sides of
"lower", tag 7).  Written as MSH 4.1 and 2.2, ASCII and binary.  "split_boxes" has the same boxes
without fragmenting, so they touch but share no nodes.

    python tests/data/make_meshes.py
"""

from pathlib import Path

import gmsh

HERE = Path(__file__).parent


def build(fragment: bool) -> None:
    occ = gmsh.model.occ
    lower = occ.addBox(0, 0, 0, 10, 10, 4)
    upper = occ.addBox(0, 0, 4, 10, 10, 2)
    if fragment:
        occ.fragment([(3, lower)], [(3, upper)])
    occ.synchronize()
    vols = sorted(gmsh.model.getEntities(3), key=lambda e: gmsh.model.occ.getCenterOfMass(*e)[2])
    gmsh.model.setPhysicalName(3, gmsh.model.addPhysicalGroup(3, [vols[0][1]], 1), "lower")
    gmsh.model.setPhysicalName(3, gmsh.model.addPhysicalGroup(3, [vols[1][1]], 2), "upper")
    bottom, top, sides = [], [], []
    for dim, tag in gmsh.model.getEntities(2):
        x0, y0, z0, x1, y1, z1 = gmsh.model.getBoundingBox(dim, tag)
        if abs(z1) < 1e-6:
            bottom.append(tag)
        elif abs(z0 - 6) < 1e-6:
            top.append(tag)
        elif z1 <= 4 + 1e-6 and abs(z1 - z0) > 1e-6:
            sides.append(tag)
    gmsh.model.setPhysicalName(2, gmsh.model.addPhysicalGroup(2, bottom, 5), "bottom")
    gmsh.model.setPhysicalName(2, gmsh.model.addPhysicalGroup(2, top, 6), "top")
    gmsh.model.addPhysicalGroup(2, sides, 7)  # deliberately unnamed
    gmsh.option.setNumber("Mesh.MeshSizeMax", 2.5)
    gmsh.model.mesh.generate(3)


def main() -> None:
    gmsh.initialize()
    gmsh.option.setNumber("General.Terminal", 0)
    for fragment, stem in ((True, "boxes"), (False, "split_boxes")):
        gmsh.clear()
        build(fragment)
        variants = [("41", 4.1, 1), ("41_ascii", 4.1, 0), ("22", 2.2, 1), ("22_ascii", 2.2, 0)]
        for suffix, version, binary in variants if fragment else variants[:1]:
            gmsh.option.setNumber("Mesh.MshFileVersion", version)
            gmsh.option.setNumber("Mesh.Binary", binary)
            gmsh.write(str(HERE / f"{stem}_{suffix}.msh"))
    gmsh.finalize()


if __name__ == "__main__":
    main()
