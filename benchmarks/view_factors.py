"""5. Cost of view factors and radiation exchange on the housing demo (workflows/housing_radiation.toml).

Each case runs the workflow in its own process with a fresh store, on the shipped coarse mesh and on the
fine mesh (built with gmsh by cases/housing/make_mesh.py into a temporary folder unless --fine-mesh
names one), at several patch sizes; it reports the view stage (patches, facets, rays, seconds, raw
summation residual of the enclosure), the heat stage with the exchange (Newton iterations, seconds) and
the radiative paths, and writes the table into docs/performance.md (section "view-factors").
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from common import PEAK, ROOT, child, machine, table, write_section  # noqa: E402

CODE = PEAK + """
import time
from pipeline.flow import runner
sets = ['mesh.file="{mesh}"', 'stages.view.patch_size="{size} mm"', 'output.vtu=false', 'output.figures=false',
        'output.report=false']
s = runner.run("{workflow}", sets=sets, store="{store}", out="{out}")
v, h = s["stages"]["view"], s["stages"]["heat"]
paths = {{(p["from"], p["to"]): p["W"] for p in h["radiative_paths_W"]}}
print(json.dumps({{"view_s": v["seconds"], "heat_s": h["seconds"], "rays": v["rays"],
    "groups": {{n: [g["patches"], g["facets"], g["residuals"]["raw"]["summation"],
                   g["residuals"]["raw"]["summation_mean"]] for n, g in v["groups"].items()}},
    "nodes": s["mesh"]["nodes"],
    "board_to_shell": paths.get(("cavity/board", "cavity/shell")),
    "fins_to_surroundings": paths.get(("fins/shell", "surroundings")),
    "cpu_max": h["parts_degC"]["cpu"]["max"], "peak_mib": peak_mib()}}))
"""


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__)
    p.add_argument("--quick", action="store_true", help="coarse mesh, one patch size")
    p.add_argument("--fine-mesh", help="an existing housing_fine.msh (else built with gmsh)")
    args = p.parse_args()
    workflow = ROOT / "workflows" / "housing_radiation.toml"
    coarse = ROOT / "cases" / "housing" / "housing_coarse.msh"
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        meshes = [("coarse", coarse)]
        if not args.quick:
            fine = Path(args.fine_mesh) if args.fine_mesh else None
            if fine is None:
                sys.path.insert(0, str(ROOT / "cases" / "housing"))
                import make_mesh

                fine = make_mesh.build("fine", "41", True, Path(tmp))
            meshes.append(("fine", fine))
        for label, mesh in meshes:
            for size in ((10,) if args.quick else (10, 5)):
                folder = Path(tmp) / f"{label}_{size}"
                r = child(CODE.format(mesh=mesh.resolve(), size=size, workflow=workflow, store=folder / "store",
                                      out=folder / "out"))
                if "error" in r:
                    rows.append([label, None, size, r["error"]] + [None] * 12)
                    continue
                cav, out = r["groups"]["cavity"], r["groups"]["outside"]
                rows.append([label, r["nodes"], size, cav[0], cav[1], out[0], out[1], r["rays"], r["view_s"],
                             cav[2], cav[3], r["heat_s"], r["board_to_shell"], r["fins_to_surroundings"], r["cpu_max"],
                             r["peak_mib"]])
                print(rows[-1], flush=True)
    write_section("view-factors" + ("-quick" if args.quick else ""), f"Machine: {machine()}.\n\n" + table(
        ["mesh", "nodes", "patch mm", "cavity patches", "cavity facets", "outside patches", "outside facets",
         "rays", "view s", "cavity raw summation residual, max", "area mean", "heat s (with exchange)", "board -> shell W",
         "fins -> surroundings W", "cpu max degC", "peak MiB"], rows))


if __name__ == "__main__":
    main()
