"""Build the thermochain "heat_spreader" demo mesh with the gmsh Python API.

The scenario is invented for this project's examples: a small electronics
assembly made of an aluminium heat spreader plate, an FR-4 board on top of it,
a processor package in the middle of the board and a smaller regulator
package near one corner.  It does not describe any real product.

All dimensions are in millimetres, z points up.

    spreader   60 x 40 x 4.0   z = 0.0 .. 4.0   corner at the origin
    board      50 x 30 x 1.6   z = 4.0 .. 5.6   centred on the spreader
    chip       12 x 12 x 1.2   z = 5.6 .. 6.8   centred on the board
    regulator   6 x  6 x 1.0   z = 5.6 .. 6.6   centred at x = 15, y = 12

The volumes are fragmented together so that the interfaces are conforming
(shared nodes).  Physical groups:

    dim 3: spreader, board, chip, regulator
    dim 2: mount           bottom face of the spreader (z = 0), cold plate
           top_air         every exposed face of board, chip and regulator
                           plus the exposed top of the spreader
           spreader_sides  the four vertical side faces of the spreader

Every external boundary face is in exactly one surface group; internal
interface faces are in none.

Usage (from any folder; the output is written next to this script):

    python make_mesh.py [--size coarse|fine] [--format 41|22] [--binary|--ascii]

Output: heat_spreader_<size>.msh, linear tetrahedra, MSH 4.1 binary by default.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import gmsh

HERE = Path(__file__).parent
TOL = 1e-6

# Part boxes: name -> (x0, y0, z0, dx, dy, dz), millimetres.
SPREADER = (0.0, 0.0, 0.0, 60.0, 40.0, 4.0)
BOARD = (5.0, 5.0, 4.0, 50.0, 30.0, 1.6)
CHIP = (24.0, 14.0, 5.6, 12.0, 12.0, 1.2)
REGULATOR = (12.0, 9.0, 5.6, 6.0, 6.0, 1.0)
PARTS = {"spreader": SPREADER, "board": BOARD, "chip": CHIP, "regulator": REGULATOR}

# Mesh size presets: (global characteristic length, size in the thin layer of
# board and packages).  The thin-layer size is applied with a Box field.
SIZES = {
    "coarse": (4.0, 2.0),
    "fine": (1.5, 0.8),
}


def _centre(box):
    x0, y0, z0, dx, dy, dz = box
    return (x0 + 0.5 * dx, y0 + 0.5 * dy, z0 + 0.5 * dz)


def _close(a, b, tol=TOL):
    return abs(a - b) <= tol


def _identify_volumes():
    """Map part name -> volume tag after fragment, using the centre of mass."""
    found = {}
    for dim, tag in gmsh.model.getEntities(3):
        com = gmsh.model.occ.getCenterOfMass(dim, tag)
        for name, box in PARTS.items():
            c = _centre(box)
            if all(abs(com[i] - c[i]) <= 1e-4 for i in range(3)):
                if name in found:
                    raise RuntimeError(f"two volumes match part {name!r}")
                found[name] = tag
                break
        else:
            raise RuntimeError(f"volume {tag} (centre {com}) matches no part")
    missing = set(PARTS) - set(found)
    if missing:
        raise RuntimeError(f"parts not found after fragment: {sorted(missing)}")
    return found


def _classify_surfaces(volume_tags):
    """Split the external boundary into mount / spreader_sides / top_air."""
    boundary = gmsh.model.getBoundary(
        [(3, t) for t in volume_tags], combined=True, oriented=False
    )
    sx0, sy0, sz0, sdx, sdy, sdz = SPREADER
    sx1, sy1, sz1 = sx0 + sdx, sy0 + sdy, sz0 + sdz
    groups = {"mount": [], "top_air": [], "spreader_sides": []}
    for dim, tag in boundary:
        xmin, ymin, zmin, xmax, ymax, zmax = gmsh.model.getBoundingBox(dim, abs(tag))
        if _close(zmin, sz0) and _close(zmax, sz0):
            groups["mount"].append(abs(tag))
        elif (
            zmin >= sz0 - TOL
            and zmax <= sz1 + TOL
            and (
                (_close(xmin, sx0) and _close(xmax, sx0))
                or (_close(xmin, sx1) and _close(xmax, sx1))
                or (_close(ymin, sy0) and _close(ymax, sy0))
                or (_close(ymin, sy1) and _close(ymax, sy1))
            )
        ):
            groups["spreader_sides"].append(abs(tag))
        else:
            groups["top_air"].append(abs(tag))
    if len(groups["mount"]) != 1 or len(groups["spreader_sides"]) != 4:
        raise RuntimeError(f"unexpected surface classification: {groups}")
    return groups


def build(size: str, fmt: str, binary: bool, out_dir: Path = HERE) -> Path:
    h, h_thin = SIZES[size]
    gmsh.initialize()
    try:
        gmsh.option.setNumber("General.Terminal", 1)
        gmsh.model.add("heat_spreader")
        occ = gmsh.model.occ

        boxes = [(3, occ.addBox(*box)) for box in PARTS.values()]
        occ.fragment(boxes[:1], boxes[1:])
        occ.synchronize()

        vols = _identify_volumes()
        for name in PARTS:
            gmsh.model.addPhysicalGroup(3, [vols[name]], name=name)

        surfaces = _classify_surfaces(list(vols.values()))
        for name in ("mount", "top_air", "spreader_sides"):
            gmsh.model.addPhysicalGroup(2, sorted(surfaces[name]), name=name)

        # Mesh size: global length h, smaller length h_thin in a box around
        # the thin layer (board and packages) so that it gets a couple of
        # elements through its thickness.
        bx0, by0, bz0, bdx, bdy, _ = BOARD
        thin_top = max(b[2] + b[5] for b in (BOARD, CHIP, REGULATOR))
        field = gmsh.model.mesh.field
        box_field = field.add("Box")
        field.setNumber(box_field, "VIn", h_thin)
        field.setNumber(box_field, "VOut", h)
        field.setNumber(box_field, "XMin", bx0)
        field.setNumber(box_field, "XMax", bx0 + bdx)
        field.setNumber(box_field, "YMin", by0)
        field.setNumber(box_field, "YMax", by0 + bdy)
        field.setNumber(box_field, "ZMin", bz0)
        field.setNumber(box_field, "ZMax", thin_top)
        field.setNumber(box_field, "Thickness", h)
        field.setAsBackgroundMesh(box_field)

        gmsh.option.setNumber("Mesh.MeshSizeMax", h)
        gmsh.option.setNumber("Mesh.MeshSizeFromPoints", 0)
        gmsh.option.setNumber("Mesh.MeshSizeFromCurvature", 0)
        gmsh.option.setNumber("Mesh.MeshSizeExtendFromBoundary", 0)
        gmsh.option.setNumber("Mesh.ElementOrder", 1)
        gmsh.option.setNumber("Mesh.SaveAll", 0)
        gmsh.option.setNumber("Mesh.MshFileVersion", 4.1 if fmt == "41" else 2.2)
        gmsh.option.setNumber("Mesh.Binary", 1 if binary else 0)

        gmsh.model.mesh.generate(3)

        out = out_dir / f"heat_spreader_{size}.msh"
        gmsh.write(str(out))
        return out
    finally:
        gmsh.finalize()


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", choices=sorted(SIZES), default="coarse")
    parser.add_argument("--format", choices=["41", "22"], default="41")
    group = parser.add_mutually_exclusive_group()
    group.add_argument("--binary", dest="binary", action="store_true", default=True,
                       help="write a binary .msh file (default)")
    group.add_argument("--ascii", dest="binary", action="store_false",
                       help="write an ASCII .msh file")
    args = parser.parse_args(argv)
    out = build(args.size, args.format, args.binary)
    print(f"wrote {out.name} ({out.stat().st_size} bytes)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
