"""Build the thermochain "housing" demo mesh with the gmsh Python API.

The scenario is invented for this project's examples: a sealed outdoor
electronics housing (die-cast aluminium box with cooling fins on the lid)
holding a small FR-4 board with a processor, a regulator and a few passive
parts.  It does not describe any real product.  Full model, no symmetry.

All dimensions are in millimetres, z points up.

    shell      outer box 120 x 80 x 40 (x 0..120, y 0..80, z 0..40), wall 3,
               inner cavity x 3..117, y 3..77, z 3..37.  Lid and base are part
               of the one shell volume (a simplification: no joint, no seal).
               Fused into the shell as well:
                 6 fins on the lid, 2 thick (y), 12 tall (z 40..52),
                   x 5..115, pitch 13 mm, centred at y = 7.5, 20.5, ... 72.5
                 4 bosses r = 5 on the inside of the base, z 3..9
                 a pedestal 20 x 20 under the lid, z 21..37, over the cpu
    standoffs  4 cylinders r = 2.5, z 9..15, on the boss centres
    board      100 x 64 x 1.6    x 10..110, y 8..72, z 15..16.6
    cpu         20 x 20 x 2.0    centred at (45, 40), z 16.6..18.6
    gap_pad     20 x 20 x 2.4    centred at (45, 40), z 18.6..21.0
    regulator    8 x  8 x 1.5    centred at (85, 25), z 16.6..18.1
    passives     3 x  2 x 1.0    centred at (80, 55), (90, 55), (25, 20),
                                 z 16.6..17.6

The boss (and standoff) centres are at x = 14 / 106, y = 12 / 68, so that
each standoff lies entirely under the board (1.5 mm from the board edges).

The cavity is empty: the enclosed air is not meshed, its effect is meant to
be an effective film coefficient on the "cavity" faces.

The volumes are fragmented together so that every contact is a conforming
shared face (standoff/boss, standoff/board, cpu/board, cpu/gap_pad,
gap_pad/pedestal, regulator/board, passives/board).  Four disks of radius 4
on the base face z = 0, under the bosses, are imprinted as bolt patches.

Physical groups:

    dim 3: shell, standoffs, board, cpu, gap_pad, regulator, passives
    dim 2: outside         outer side walls and lid top (z = 40) of the shell,
                           without the fins and without the base
           fins            every exposed face of the fins
           base            bottom face z = 0, without the bolt patches
           bolt_1..bolt_4  disks r = 4 on z = 0 under the bosses at
                           (14,12), (106,12), (14,68), (106,68)
           cavity          every face exposed to the enclosed air (inner
                           walls, bosses, pedestal, standoffs, board, parts)

Every external boundary face is in exactly one surface group; internal
interface faces are in none.

Usage (from any folder; the output is written next to this script):

    python make_mesh.py [--size coarse|fine] [--format 41|22] [--binary|--ascii]

Output: housing_<size>.msh, linear tetrahedra, MSH 4.1 binary by default.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import gmsh

HERE = Path(__file__).parent
TOL = 1e-6

# Shell, millimetres.
OUTER = (0.0, 0.0, 0.0, 120.0, 80.0, 40.0)       # x0, y0, z0, dx, dy, dz
WALL = 3.0
CAVITY = (WALL, WALL, WALL, 120.0 - 2 * WALL, 80.0 - 2 * WALL, 40.0 - 2 * WALL)
TOP = OUTER[2] + OUTER[5]                        # z of the lid top, 40
FIN_T, FIN_H, FIN_X = 2.0, 12.0, (5.0, 115.0)    # thickness (y), height, x range
FIN_PITCH = 13.0
FIN_YC = [40.0 + FIN_PITCH * (i - 2.5) for i in range(6)]   # 7.5 .. 72.5
BOSS_R, BOSS_TOP = 5.0, 9.0
BOSS_XY = [(14.0, 12.0), (106.0, 12.0), (14.0, 68.0), (106.0, 68.0)]
BOLT_R = 4.0
PEDESTAL = (35.0, 30.0, 21.0, 20.0, 20.0, 16.0)  # z 21..37 (lid inner face)
# Shell pieces overlap the wall by this much before the fuse (robust boolean).
OVERLAP = 1.0

STANDOFF_R, STANDOFF_Z = 2.5, (9.0, 15.0)
BOARD = (10.0, 8.0, 15.0, 100.0, 64.0, 1.6)
CPU = (35.0, 30.0, 16.6, 20.0, 20.0, 2.0)
GAP_PAD = (35.0, 30.0, 18.6, 20.0, 20.0, 2.4)
REGULATOR = (81.0, 21.0, 16.6, 8.0, 8.0, 1.5)
PASSIVES = [(78.5, 54.0, 16.6, 3.0, 2.0, 1.0),
            (88.5, 54.0, 16.6, 3.0, 2.0, 1.0),
            (23.5, 19.0, 16.6, 3.0, 2.0, 1.0)]

VOLUME_NAMES = ("shell", "standoffs", "board", "cpu", "gap_pad", "regulator", "passives")
SURFACE_NAMES = ("outside", "fins", "base", "bolt_1", "bolt_2", "bolt_3", "bolt_4", "cavity")

# Mesh size presets: (global length, length on board / parts / fins / pedestal,
# length around the four boss / standoff / bolt-patch columns).
SIZES = {
    "coarse": (6.0, 2.5, 1.8),
    "fine": (3.0, 1.2, 0.8),
}


def _box_centre(box):
    x0, y0, z0, dx, dy, dz = box
    return (x0 + 0.5 * dx, y0 + 0.5 * dy, z0 + 0.5 * dz)


def _close(a, b, tol=TOL):
    return abs(a - b) <= tol


def _build_shell(occ):
    """Outer box minus cavity, fused with fins, bosses and pedestal."""
    outer = occ.addBox(*OUTER)
    cavity = occ.addBox(*CAVITY)
    shell, _ = occ.cut([(3, outer)], [(3, cavity)])
    pieces = []
    for yc in FIN_YC:
        pieces.append((3, occ.addBox(FIN_X[0], yc - 0.5 * FIN_T, TOP - OVERLAP,
                                     FIN_X[1] - FIN_X[0], FIN_T, FIN_H + OVERLAP)))
    for xc, yc in BOSS_XY:
        z0 = WALL - OVERLAP
        pieces.append((3, occ.addCylinder(xc, yc, z0, 0.0, 0.0, BOSS_TOP - z0, BOSS_R)))
    px, py, pz, pdx, pdy, pdz = PEDESTAL
    pieces.append((3, occ.addBox(px, py, pz, pdx, pdy, pdz + OVERLAP)))
    fused, _ = occ.fuse(shell, pieces)
    if len(fused) != 1:
        raise RuntimeError(f"shell fuse gave {len(fused)} volumes")
    return fused[0]


def _identify_volumes():
    """Map part name -> list of volume tags after fragment (centre of mass)."""
    expected = {"board": [_box_centre(BOARD)], "cpu": [_box_centre(CPU)],
                "gap_pad": [_box_centre(GAP_PAD)], "regulator": [_box_centre(REGULATOR)],
                "passives": [_box_centre(b) for b in PASSIVES],
                "standoffs": [(x, y, 0.5 * sum(STANDOFF_Z)) for x, y in BOSS_XY]}
    found = {name: [] for name in VOLUME_NAMES}
    for dim, tag in gmsh.model.getEntities(3):
        com = gmsh.model.occ.getCenterOfMass(dim, tag)
        for name, centres in expected.items():
            if any(all(abs(com[i] - c[i]) <= 1e-4 for i in range(3)) for c in centres):
                found[name].append(tag)
                break
        else:
            # The only other volume must be the shell: its bounding box is the
            # outer box plus the fins.
            bb = gmsh.model.getBoundingBox(dim, tag)
            if not (_close(bb[0], 0.0, 1e-4) and _close(bb[3], 120.0, 1e-4)
                    and _close(bb[5], TOP + FIN_H, 1e-4)):
                raise RuntimeError(f"volume {tag} (centre {com}) matches no part")
            found["shell"].append(tag)
    counts = {"shell": 1, "standoffs": 4, "board": 1, "cpu": 1, "gap_pad": 1,
              "regulator": 1, "passives": 3}
    for name, n in counts.items():
        if len(found[name]) != n:
            raise RuntimeError(f"part {name!r}: {len(found[name])} volumes, expected {n}")
    return found


def _classify_surfaces(volume_tags):
    """Split the external boundary into the surface groups (see docstring)."""
    boundary = gmsh.model.getBoundary(
        [(3, t) for t in volume_tags], combined=True, oriented=False
    )
    groups = {name: [] for name in SURFACE_NAMES}
    x0, y0, z0, dx, dy, dz = OUTER
    x1, y1 = x0 + dx, y0 + dy
    for dim, tag in boundary:
        tag = abs(tag)
        xmin, ymin, zmin, xmax, ymax, zmax = gmsh.model.getBoundingBox(dim, tag)
        if _close(zmin, z0) and _close(zmax, z0):
            cx, cy = 0.5 * (xmin + xmax), 0.5 * (ymin + ymax)
            for i, (bx, by) in enumerate(BOSS_XY):
                if (_close(cx, bx, 1e-4) and _close(cy, by, 1e-4)
                        and _close(xmax - xmin, 2 * BOLT_R, 1e-4)):
                    groups[f"bolt_{i + 1}"].append(tag)
                    break
            else:
                groups["base"].append(tag)
        elif zmax > TOP + TOL:
            groups["fins"].append(tag)
        elif ((_close(xmin, x0) and _close(xmax, x0)) or (_close(xmin, x1) and _close(xmax, x1))
              or (_close(ymin, y0) and _close(ymax, y0)) or (_close(ymin, y1) and _close(ymax, y1))
              or (_close(zmin, TOP) and _close(zmax, TOP))):
            groups["outside"].append(tag)
        else:
            cx0, cy0, cz0, cdx, cdy, cdz = CAVITY
            if not (xmin >= cx0 - TOL and xmax <= cx0 + cdx + TOL
                    and ymin >= cy0 - TOL and ymax <= cy0 + cdy + TOL
                    and zmin >= cz0 - TOL and zmax <= cz0 + cdz + TOL):
                raise RuntimeError(f"surface {tag} is outside the cavity but unclassified")
            groups["cavity"].append(tag)
    for name in SURFACE_NAMES:
        if not groups[name]:
            raise RuntimeError(f"surface group {name!r} is empty")
    if len(groups["base"]) != 1 or any(len(groups[f"bolt_{i}"]) != 1 for i in range(1, 5)):
        raise RuntimeError(f"unexpected base / bolt classification: {groups}")
    return groups


def _box_field(field, box, v_in, v_out, thickness):
    x0, y0, z0, dx, dy, dz = box
    f = field.add("Box")
    field.setNumber(f, "VIn", v_in)
    field.setNumber(f, "VOut", v_out)
    field.setNumber(f, "XMin", x0)
    field.setNumber(f, "XMax", x0 + dx)
    field.setNumber(f, "YMin", y0)
    field.setNumber(f, "YMax", y0 + dy)
    field.setNumber(f, "ZMin", z0)
    field.setNumber(f, "ZMax", z0 + dz)
    field.setNumber(f, "Thickness", thickness)
    return f


def build(size: str, fmt: str, binary: bool, out_dir: Path = HERE) -> Path:
    h, h_fine, h_column = SIZES[size]
    gmsh.initialize()
    try:
        gmsh.option.setNumber("General.Terminal", 1)
        gmsh.model.add("housing")
        occ = gmsh.model.occ

        shell = _build_shell(occ)
        parts = [(3, occ.addCylinder(x, y, STANDOFF_Z[0], 0.0, 0.0,
                                     STANDOFF_Z[1] - STANDOFF_Z[0], STANDOFF_R))
                 for x, y in BOSS_XY]
        for box in (BOARD, CPU, GAP_PAD, REGULATOR, *PASSIVES):
            parts.append((3, occ.addBox(*box)))
        bolts = [(2, occ.addDisk(x, y, OUTER[2], BOLT_R, BOLT_R)) for x, y in BOSS_XY]
        occ.fragment([shell], parts + bolts)
        occ.synchronize()

        # Leftover free surfaces (none expected: the disks are imprinted into
        # the base face) would be meshed as orphans; refuse them.
        vol_faces = {abs(t) for _, t in gmsh.model.getBoundary(
            gmsh.model.getEntities(3), combined=False, oriented=False)}
        orphans = [t for _, t in gmsh.model.getEntities(2) if t not in vol_faces]
        if orphans:
            raise RuntimeError(f"surfaces not bounding any volume: {orphans}")

        vols = _identify_volumes()
        for name in VOLUME_NAMES:
            gmsh.model.addPhysicalGroup(3, sorted(vols[name]), name=name)

        all_vols = [t for name in VOLUME_NAMES for t in vols[name]]
        surfaces = _classify_surfaces(all_vols)
        for name in SURFACE_NAMES:
            gmsh.model.addPhysicalGroup(2, sorted(surfaces[name]), name=name)

        # Mesh size: global length h in the walls; h_fine in the board layer
        # (board, parts, gap pad, standoffs), in the fins and in the pedestal.
        field = gmsh.model.mesh.field
        fin_y0 = FIN_YC[0] - 0.5 * FIN_T
        fin_y1 = FIN_YC[-1] + 0.5 * FIN_T
        regions = [
            (BOARD[0], BOARD[1], STANDOFF_Z[0], BOARD[3], BOARD[4],
             GAP_PAD[2] + GAP_PAD[5] - STANDOFF_Z[0]),
            (FIN_X[0], fin_y0, TOP, FIN_X[1] - FIN_X[0], fin_y1 - fin_y0, FIN_H),
            PEDESTAL,
        ]
        fields = [_box_field(field, r, h_fine, h, 0.5 * h) for r in regions]
        # Finer still around the bolt patch / boss / standoff columns, so the
        # r = 2.5 standoffs and the r = 4 bolt disks are not just hexagons.
        for x, y in BOSS_XY:
            column = (x - BOSS_R, y - BOSS_R, OUTER[2], 2 * BOSS_R, 2 * BOSS_R, STANDOFF_Z[1])
            fields.append(_box_field(field, column, h_column, h, 0.5 * h))
        fmin = field.add("Min")
        field.setNumbers(fmin, "FieldsList", fields)
        field.setAsBackgroundMesh(fmin)

        gmsh.option.setNumber("Mesh.MeshSizeMax", h)
        gmsh.option.setNumber("Mesh.MeshSizeFromPoints", 0)
        gmsh.option.setNumber("Mesh.MeshSizeFromCurvature", 0)
        gmsh.option.setNumber("Mesh.MeshSizeExtendFromBoundary", 0)
        gmsh.option.setNumber("Mesh.ElementOrder", 1)
        # HXT with one thread: reproducible, and it avoids the flat slivers
        # the default 3D algorithm leaves in the 2 mm fins (one tet through).
        gmsh.option.setNumber("Mesh.Algorithm3D", 10)
        gmsh.option.setNumber("General.NumThreads", 1)
        gmsh.option.setNumber("Mesh.Optimize", 1)
        gmsh.option.setNumber("Mesh.SaveAll", 0)
        gmsh.option.setNumber("Mesh.MshFileVersion", 4.1 if fmt == "41" else 2.2)
        gmsh.option.setNumber("Mesh.Binary", 1 if binary else 0)

        gmsh.model.mesh.generate(3)

        # Quality check: gamma (inscribed / circumscribed radius ratio) and
        # the signed volume (no inverted tets).
        types, tags, _ = gmsh.model.mesh.getElements(3)
        tet_tags = [t for et, tt in zip(types, tags) if et == 4 for t in tt]
        if len(tet_tags) != sum(len(tt) for tt in tags):
            raise RuntimeError("volume mesh has elements other than linear tets")
        gamma = gmsh.model.mesh.getElementQualities(tet_tags, "gamma")
        volume = gmsh.model.mesh.getElementQualities(tet_tags, "volume")
        print(f"{len(tet_tags)} tets, min gamma {min(gamma):.4f}, "
              f"min tet volume {min(volume):.3g} mm^3")
        if min(gamma) <= 0.05 or min(volume) <= 0.0:
            raise RuntimeError("poor or inverted tetrahedra")

        out = out_dir / f"housing_{size}.msh"
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
