"""Benchmark 5: which preconditioner holds on multi-material assemblies (the solver strategy).

The stress system of a workflow is captured as the stage builds it (matrix, load, rigid-body modes,
nodal layout) and solved by each strategy in the same process: pyamg's smoothed aggregation with
its defaults and the rigid-body modes (what a script would use), nodal aggregation with the strength
threshold and energy smoothing on the P2 matrix itself, and the pipeline's choice (``solvers.solve``: two-level P2/P1 for P2).  Cases: the layered
assembly (benchmarks/common.py) over stiffness contrasts and interlayer Poisson ratios, and the
shipped housing at P2.  CG to a relative residual of 1e-10, at most ``MAXITER`` iterations; the
stall test of the pipeline does not apply to the first two columns.
``--large`` runs the whole pipeline on the layered assembly (contrast 1e5, nu 0.45) at 1e5 and 1e6
P2 stress unknowns and on the shipped housing at P2 on its coarse and fine meshes (the fine one is
made by cases/housing/make_mesh.py --size fine, which needs gmsh).
Usage: ``python benchmarks/strategy.py [--quick] [--large [--fine-mesh PATH]]``.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from common import PEAK, ROOT, child, machine, table, write_section

MAXITER = 300

CASE = """
import sys, time, tempfile
from pathlib import Path
sys.path.insert(0, "benchmarks")
import dataclasses
import numpy as np, pyamg
from common import capture, write_layered
from pipeline.stages import solvers
if {layered}:
    workflow = write_layered(Path(tempfile.mkdtemp()), {n}, contrast={contrast}, poisson={poisson})
else:
    workflow = Path("{workflow}")
system = capture(workflow, {sets})
A, b, B, layout = system["A"], system["b"], system["near_null"], system["layout"]
out = {{"unknowns": A.shape[0]}}

def plain(**options):
    t = time.perf_counter()
    ml = pyamg.smoothed_aggregation_solver(A, B=B, **options)
    res = []
    x = ml.solve(b, tol=1e-10, accel="cg", maxiter={maxiter}, residuals=res)
    return {{"s": time.perf_counter() - t, "it": len(res) - 1,
            "res": float(np.linalg.norm(b - A @ x) / np.linalg.norm(b))}}

def pipeline(layout, method="auto"):
    t = time.perf_counter()
    try:
        x, rec = solvers.solve(A, b, method=method, near_null=B, layout=layout)
        return {{"s": time.perf_counter() - t, "it": rec.iterations, "res": rec.residual, "method": rec.method}}
    except Exception as exc:
        return {{"s": time.perf_counter() - t, "it": None, "res": None, "method": str(exc)[:80]}}

if "sa" in {columns}:
    out["sa"] = plain()
if "nodal" in {columns}:
    out["nodal"] = pipeline(dataclasses.replace(layout, edges=None), "amg")
out["pipeline"] = pipeline(layout)
out["peak_mib"] = peak_mib()
print(json.dumps(out))
"""


def case(columns: tuple[str, ...], layered: bool = True, n: int = 17, contrast: float = 1e5, poisson: float = 0.45,
         workflow: str = "", sets: list[str] | None = None) -> dict:
    code = PEAK + CASE.format(layered=layered, n=n, contrast=contrast, poisson=poisson, workflow=workflow,
                              sets=repr(sets or []), maxiter=MAXITER, columns=repr(columns))
    return child(code, timeout=3600)


def _cell(r: dict | None) -> str:
    if not r:
        return "-"
    if r.get("it") is None:
        return f"failed: {r.get('method', '')}"
    mark = "" if r["res"] <= 1e-7 else f", stalled at {r['res']:.1e}"
    return f"{r['it']} it, {r['s']:.3g} s{mark}"


def large(fine_mesh: str | None) -> None:
    """Whole pipeline, each run in its own process: layered at 1e5 and 1e6, housing coarse and fine."""
    import shutil
    import tempfile

    from common import write_layered
    from side_by_side import pipeline

    rows = []
    runs = [("layered", 17, None), ("layered", 35, None), ("housing coarse", None, None)]
    if fine_mesh:
        runs.append(("housing fine", None, fine_mesh))
    for label, n, mesh in runs:
        work = Path(tempfile.mkdtemp(prefix="thermochain-bench-"))
        try:
            if n:
                workflow, sets = write_layered(work, n), []
            else:
                workflow, sets = ROOT / "workflows" / "housing.toml", ["stages.stress.order=2"]
                sets += [f"mesh.file={Path(mesh).resolve()}"] if mesh else []
            r = pipeline(workflow, work / "store", work / "out", sets)
        finally:
            shutil.rmtree(work, ignore_errors=True)
        print(label, r, flush=True)
        if "error" in r:
            rows.append([label, None, None, None, None, None, None, r["error"]])
            continue
        s = r["solver"]
        rows.append([label, s["unknowns"], s["iterations"], s["setup_seconds"], s["seconds"], r["stages"]["stress"],
                     r["peak_mib"], s["method"]])
    write_section("strategy-large", f"Machine: {machine()}.\n\n" + table(
        ["case", "P2 stress unknowns", "CG iterations", "AMG setup s", "solve s", "stress stage s", "peak MiB (process)",
         "method"], rows))


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__)
    p.add_argument("--quick", action="store_true", help="one small layered case, to check the script")
    p.add_argument("--large", action="store_true", help="whole pipeline at 1e5 and 1e6 (minutes)")
    p.add_argument("--fine-mesh", help="the housing's fine mesh file, for --large")
    args = p.parse_args()
    if args.large:
        large(args.fine_mesh)
        return
    both = ("sa", "nodal")
    if args.quick:
        cases = [("layered", dict(n=9, contrast=1e5, poisson=0.45))]
    else:
        cases = [("layered", dict(contrast=c, poisson=0.45)) for c in (1.0, 1e2, 1e4, 1e5, 1e6)]
        cases += [("layered", dict(contrast=1e5, poisson=nu)) for nu in (0.3, 0.49)]
        cases += [("layered", dict(contrast=1.0, poisson=0.49))]
        cases += [("housing", dict(layered=False, workflow=str(ROOT / "workflows" / "housing.toml"),
                                   sets=["stages.stress.order=2"]))]
    rows = []
    for label, kw in cases:
        r = case(both, **kw)
        print(label, kw, r, flush=True)
        if "error" in r:
            rows.append([label, "-", "-", "-", r["error"], "-", "-", "-"])
            continue
        what = (f"contrast {kw['contrast']:.0e}, nu {kw['poisson']}" if label == "layered" else "P2, shipped mesh")
        rows.append([label, what, r["unknowns"], _cell(r.get("sa")), _cell(r.get("nodal")), _cell(r["pipeline"]),
                     r["pipeline"]["method"], r["peak_mib"]])
    write_section("strategy" + ("-quick" if args.quick else ""), f"Machine: {machine()}.\n\n" + table(
        ["case", "materials", "unknowns", "SA defaults + rigid-body modes", "nodal SA on P2 (no P1 level)",
         "pipeline (auto)", "pipeline method", "peak MiB"], rows))


if __name__ == "__main__":
    main()
