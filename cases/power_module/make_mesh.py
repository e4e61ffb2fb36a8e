"""Build the thermochain "power_module" demo mesh with the gmsh Python API.

The scenario is invented for this project's examples: a small power module
made of a copper baseplate, a solder layer, a ceramic substrate with copper
on both sides and silicon dies on the top copper.  The layer sizes are
plausible round numbers chosen for the demo; they do not describe any real
product.

All dimensions are in millimetres, z points up.  The full module is centred
on the origin and has four identical dies, one per quadrant (full-model die
centres at x = +-8, y = +-6).  Only the quarter x >= 0, y >= 0 is meshed; the
planes x = 0 and y = 0 are symmetry planes.

    part            full size (mm)   quarter box (mm)                z (mm)
    baseplate       50 x 40 x 3.0    x 0..25, y 0..20                0.00 .. 3.00
    solder          40 x 30 x 0.2    x 0..20, y 0..15                3.00 .. 3.20
    copper_bottom   40 x 30 x 0.3    x 0..20, y 0..15                3.20 .. 3.50
    substrate       42 x 32 x 0.63   x 0..21, y 0..16                3.50 .. 4.13
    copper_top      36 x 26 x 0.3    x 0..18, y 0..13                4.13 .. 4.43
    die_1           10 x 10 x 0.35   x 3..13, y 1..11                4.43 .. 4.78

(The solder is 0.2 mm thick, a little thicker than a typical solder joint,
so that it can be meshed cheaply.)

The volumes are fragmented together so that the interfaces are conforming
(shared nodes).  Physical groups:

    dim 3: baseplate, solder, copper_bottom, substrate, copper_top, die_1
    dim 2: cold_plate   bottom face of the baseplate (z = 0)
           symmetry_x   every boundary face on the plane x = 0
           symmetry_y   every boundary face on the plane y = 0
           die_top      top face of die_1
           free         every other external boundary face

Every external boundary face is in exactly one surface group; internal
interface faces are in none.

Usage (from any folder; the output is written next to this script):

    python make_mesh.py [--size coarse|fine] [--format 41|22] [--binary|--ascii]

Output: power_module_<size>.msh, linear tetrahedra, MSH 4.1 binary by default.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import gmsh

HERE = Path(__file__).parent
TOL = 1e-6

# Quarter-model part boxes: name -> (x0, y0, z0, dx, dy, dz), millimetres.
BASEPLATE = (0.0, 0.0, 0.0, 25.0, 20.0, 3.0)
SOLDER = (0.0, 0.0, 3.0, 20.0, 15.0, 0.2)
COPPER_BOTTOM = (0.0, 0.0, 3.2, 20.0, 15.0, 0.3)
SUBSTRATE = (0.0, 0.0, 3.5, 21.0, 16.0, 0.63)
COPPER_TOP = (0.0, 0.0, 4.13, 18.0, 13.0, 0.3)
DIE_1 = (3.0, 1.0, 4.43, 10.0, 10.0, 0.35)
PARTS = {
    "baseplate": BASEPLATE,
    "solder": SOLDER,
    "copper_bottom": COPPER_BOTTOM,
    "substrate": SUBSTRATE,
    "copper_top": COPPER_TOP,
    "die_1": DIE_1,
}
SURFACES = ("cold_plate", "symmetry_x", "symmetry_y", "die_top", "free")

# Mesh size presets: (global characteristic length, size in the thin layer
# stack from the solder up to the die top).  The layer size is applied with
# a Box field; it is larger than the layer thicknesses, so the thin layers
# are one element thick (an element cannot cross a fragment interface).
SIZES = {
    "coarse": (3.0, 0.9),
    "fine": (1.5, 0.45),
}


def _centre(box):
    x0, y0, z0, dx, dy, dz = box
    return (x0 + 0.5 * dx, y0 + 0.5 * dy, z0 + 0.5 * dz)


def _close(a, b, tol=TOL):
    return abs(a - b) <= tol


def _identify_volumes():
    """Map part name -> volume tag after fragment, using the centre of mass
    and the bounding box."""
    found = {}
    for dim, tag in gmsh.model.getEntities(3):
        com = gmsh.model.occ.getCenterOfMass(dim, tag)
        bbox = gmsh.model.getBoundingBox(dim, tag)
        for name, box in PARTS.items():
            c = _centre(box)
            x0, y0, z0, dx, dy, dz = box
            want = (x0, y0, z0, x0 + dx, y0 + dy, z0 + dz)
            if all(abs(com[i] - c[i]) <= 1e-4 for i in range(3)) and all(
                abs(bbox[i] - want[i]) <= 1e-4 for i in range(6)
            ):
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
    """Split the external boundary into the five surface groups."""
    boundary = gmsh.model.getBoundary(
        [(3, t) for t in volume_tags], combined=True, oriented=False
    )
    dx0, dy0, dz0, ddx, ddy, ddz = DIE_1
    die_z1 = dz0 + ddz
    groups = {name: [] for name in SURFACES}
    for dim, tag in boundary:
        tag = abs(tag)
        xmin, ymin, zmin, xmax, ymax, zmax = gmsh.model.getBoundingBox(dim, tag)
        if _close(zmin, 0.0) and _close(zmax, 0.0):
            groups["cold_plate"].append(tag)
        elif _close(xmin, 0.0) and _close(xmax, 0.0):
            groups["symmetry_x"].append(tag)
        elif _close(ymin, 0.0) and _close(ymax, 0.0):
            groups["symmetry_y"].append(tag)
        elif (
            _close(zmin, die_z1)
            and _close(zmax, die_z1)
            and xmin >= dx0 - TOL
            and xmax <= dx0 + ddx + TOL
            and ymin >= dy0 - TOL
            and ymax <= dy0 + ddy + TOL
        ):
            groups["die_top"].append(tag)
        else:
            groups["free"].append(tag)
    if len(groups["cold_plate"]) != 1 or len(groups["die_top"]) != 1:
        raise RuntimeError(f"unexpected surface classification: {groups}")
    # One face per part on each symmetry plane, except the die, which does
    # not reach either plane.
    n_sym = len(PARTS) - 1
    if len(groups["symmetry_x"]) != n_sym or len(groups["symmetry_y"]) != n_sym:
        raise RuntimeError(f"unexpected surface classification: {groups}")
    return groups


def _check_quality():
    """Return (number of tets, minimum gamma); fail on a degenerate tet."""
    etypes, etags, _ = gmsh.model.mesh.getElements(3)
    tags = []
    for etype, et in zip(etypes, etags):
        if etype != 4:  # 4 = 4-node tetrahedron
            raise RuntimeError(f"unexpected 3D element type {etype}")
        tags.extend(int(t) for t in et)
    gamma = gmsh.model.mesh.getElementQualities(tags, "gamma")
    volume = gmsh.model.mesh.getElementQualities(tags, "volume")
    if min(volume) <= 0.0 or min(gamma) <= 0.0:
        raise RuntimeError("mesh has a tetrahedron with zero or negative volume")
    return len(tags), float(min(gamma))


def build(size: str, fmt: str, binary: bool, out_dir: Path = HERE) -> Path:
    h, h_thin = SIZES[size]
    gmsh.initialize()
    try:
        gmsh.option.setNumber("General.Terminal", 1)
        gmsh.model.add("power_module")
        occ = gmsh.model.occ

        boxes = [(3, occ.addBox(*box)) for box in PARTS.values()]
        occ.fragment(boxes[:1], boxes[1:])
        occ.synchronize()

        vols = _identify_volumes()
        for name in PARTS:
            gmsh.model.addPhysicalGroup(3, [vols[name]], name=name)

        surfaces = _classify_surfaces(list(vols.values()))
        for name in SURFACES:
            gmsh.model.addPhysicalGroup(2, sorted(surfaces[name]), name=name)

        # Mesh size: global length h, smaller length h_thin in a box around
        # the layer stack (solder bottom to die top, over the substrate
        # footprint), with a transition of width h around the box.
        sx0, sy0, _, sdx, sdy, _ = SUBSTRATE
        field = gmsh.model.mesh.field
        box_field = field.add("Box")
        field.setNumber(box_field, "VIn", h_thin)
        field.setNumber(box_field, "VOut", h)
        field.setNumber(box_field, "XMin", sx0)
        field.setNumber(box_field, "XMax", sx0 + sdx)
        field.setNumber(box_field, "YMin", sy0)
        field.setNumber(box_field, "YMax", sy0 + sdy)
        field.setNumber(box_field, "ZMin", SOLDER[2])
        field.setNumber(box_field, "ZMax", DIE_1[2] + DIE_1[5])
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
        n_tets, min_gamma = _check_quality()
        print(f"{n_tets} tetrahedra, minimum gamma quality {min_gamma:.4f}")

        out = out_dir / f"power_module_{size}.msh"
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
