"""Benchmarks 2 and 3: the whole pipeline against scripts of the same problem, and reruns.

Two scripts, both heat P1 -> temperature on the P2 elasticity basis -> stress P2, von Mises at the
quadrature points, a VTU written with meshio.  The *expert* script is what an experienced
scikit-fem user writes: generic forms with the exact quadrature degree (2), per-element material
fields, pyamg smoothed aggregation with the rigid-body modes and CG to the pipeline's relative
residual (1e-10) for both solves.  The *bare* script is a first attempt: default quadrature and
``skfem.solve`` (scipy's sparse direct solver).  All read the same Gmsh file and the same material
values; each run is its own process (peak RSS its own).  The pipeline writes its VTU results (no
figures, no report, like the scripts).  Cases: the benchmark cube and the layered assembly with a
soft interlayer (contrast 1e5, nu 0.45; benchmarks/common.py).
Usage: ``python benchmarks/side_by_side.py [--quick] [--repeats 3] [--bare]``.
"""

from __future__ import annotations

import argparse
import shutil
import tempfile
from pathlib import Path

from common import PEAK, child, machine, median, table, write_case, write_layered, write_section

BARE = """
import time
start = time.perf_counter()
import meshio, numpy as np
from skfem import *
from skfem.helpers import ddot, dot, grad, sym_grad, eye, trace
from skfem.models.elasticity import linear_elasticity, lame_parameters
k, E, nu, alpha = {k}, {E}, {nu}, {alpha}
m = meshio.read("{mesh}")
mesh = MeshTet(m.points.T.copy(), m.cells_dict["tetra"].T.copy())
basis = Basis(mesh, ElementTetP1())
fb = FacetBasis(mesh, ElementTetP1(), facets=mesh.boundary_facets())
@BilinearForm
def conduction(u, v, w): return k * dot(grad(u), grad(v))
@BilinearForm
def film(u, v, w): return 10.0 * u * v
@LinearForm
def unit(v, w): return v
q = 50.0 / 0.1**3
A = asm(conduction, basis) + asm(film, fb)
b = q * asm(unit, basis) + 10.0 * 298.15 * asm(unit, fb)
T = solve(A, b)
vb = Basis(mesh, ElementVector(ElementTetP2()))
lam, mu = lame_parameters(E, nu)
@LinearForm
def thermal(v, w):
    return (3 * lam + 2 * mu) * alpha * (w.t - 293.15) * trace(sym_grad(v))
K = asm(linear_elasticity(lam, mu), vb)
f = asm(thermal, vb, t=vb.with_element(ElementTetP1()).interpolate(T))
D = vb.get_dofs(mesh.facets_satisfying(lambda x: x[0] < 1e-9)).all()
u = solve(*condense(K, f, D=D))
e = sym_grad(vb.interpolate(u))
s = 2 * mu * e + eye(lam * trace(e), 3)
dev = s - eye(trace(s) / 3, 3)
vm = np.sqrt(1.5 * ddot(dev, dev))
meshio.write("{out}/bare.vtu", meshio.Mesh(mesh.p.T, [("tetra", mesh.t.T)],
             point_data={{"T": T, "u": u[vb.nodal_dofs].T}}, cell_data={{"von_mises": [vm.max(axis=1)]}}))
print(json.dumps({{"wall_s": time.perf_counter() - start, "peak_mib": peak_mib(), "unknowns": int(K.shape[0]),
                  "max_T": float(T.max()), "max_vm": float(vm.max())}}))
"""

EXPERT = """
import time
start = time.perf_counter()
import meshio, numpy as np, pyamg
from skfem import *
from skfem.helpers import dot, grad, sym_grad, eye, trace, ddot
materials, power_part, clamp_axis = {materials}, "{power_part}", {clamp_axis}
m = meshio.read("{mesh}")
mesh = MeshTet(m.points.T.copy(), m.cells_dict["tetra"].T.copy())
tags = m.cell_data_dict["gmsh:physical"]["tetra"]
names = {{v[0]: k for k, v in m.field_data.items() if v[1] == 3}}
part = np.array([names[t] for t in tags])
def per_element(key, nq):
    return np.repeat(np.array([materials[p][key] for p in part])[:, None], nq, axis=1)
# exact quadrature: degree 2 covers P1 films and sources, the P2 stiffness and P1 dT x div(P2 v)
basis = Basis(mesh, ElementTetP1(), intorder=2)
fb = FacetBasis(mesh, ElementTetP1(), facets=mesh.boundary_facets(), intorder=2)
nq = basis.X.shape[1]
@BilinearForm
def conduction(u, v, w): return w.k * dot(grad(u), grad(v))
@BilinearForm
def film(u, v, w): return 10.0 * u * v
@LinearForm
def source(v, w): return w.q * v
@LinearForm
def unit(v, w): return v
inside = (part == power_part).astype(float)
volume = float(np.sum(basis.dx * inside[:, None]))
A = asm(conduction, basis, k=per_element("k", nq)) + asm(film, fb)
b = asm(source, basis, q=inside[:, None] * 50.0 / volume * np.ones((1, nq))) + 10.0 * 298.15 * asm(unit, fb)
T = pyamg.smoothed_aggregation_solver(A).solve(b, tol=1e-10, accel="cg", maxiter=500)
vb = Basis(mesh, ElementVector(ElementTetP2()), intorder=2)
lam = per_element("E", nq) * per_element("nu", nq) / ((1 + per_element("nu", nq)) * (1 - 2 * per_element("nu", nq)))
mu = per_element("E", nq) / (2 * (1 + per_element("nu", nq)))
@BilinearForm
def stiffness(u, v, w):
    e, f = sym_grad(u), sym_grad(v)
    return 2 * w.mu * ddot(e, f) + w.lam * trace(e) * trace(f)
@LinearForm
def thermal(v, w):
    return (3 * w.lam + 2 * w.mu) * w.alpha * (w.t - 293.15) * trace(sym_grad(v))
K = asm(stiffness, vb, lam=lam, mu=mu)
f = asm(thermal, vb, lam=lam, mu=mu, alpha=per_element("alpha", nq), t=vb.with_element(ElementTetP1()).interpolate(T))
D = vb.get_dofs(mesh.facets_satisfying(lambda x: x[clamp_axis] < 1e-9)).all()
Kc, fc, u, I = condense(K, f, D=D)
x = vb.doflocs[:, I] - vb.doflocs.mean(axis=1, keepdims=True)
c = I % 3  # scikit-fem interleaves the components
modes = np.zeros((len(I), 6))
modes[np.arange(len(I)), c] = 1.0
for k, (i, j) in enumerate(((1, 2), (2, 0), (0, 1))):
    modes[c == i, 3 + k] = -x[j, c == i]
    modes[c == j, 3 + k] = x[i, c == j]
res = []
u[I] = pyamg.smoothed_aggregation_solver(Kc, B=modes).solve(fc, tol=1e-10, accel="cg", maxiter=500, residuals=res)
e = sym_grad(vb.interpolate(u))
s = 2 * mu * e + eye(lam * trace(e), 3)
dev = s - eye(trace(s) / 3, 3)
vm = np.sqrt(1.5 * ddot(dev, dev))
meshio.write("{out}/expert.vtu", meshio.Mesh(mesh.p.T, [("tetra", mesh.t.T)],
             point_data={{"T": T, "u": u[vb.nodal_dofs].T}}, cell_data={{"von_mises": [vm.max(axis=1)]}}))
print(json.dumps({{"wall_s": time.perf_counter() - start, "peak_mib": peak_mib(), "unknowns": int(Kc.shape[0]),
                  "max_T": float(T.max()), "max_vm": float(vm.max()), "iterations": len(res) - 1,
                  "residual": float(np.linalg.norm(fc - Kc @ u[I]) / np.linalg.norm(fc))}}))
"""

PIPELINE = """
import time
start = time.perf_counter()
from pipeline.flow import runner
t = time.perf_counter()
r = runner.run("{workflow}", {sets}, store="{store}", out="{out}")
print(json.dumps({{"wall_s": time.perf_counter() - start, "run_s": time.perf_counter() - t, "peak_mib": peak_mib(),
                  "stages": {{n: s["seconds"] for n, s in r["stages"].items()}},
                  "status": {{n: s["status"] for n, s in r["stages"].items()}},
                  "max_T": max(p["max"] for p in r["stages"]["heat"]["parts_degC"].values()) + 273.15,
                  "unknowns": r["stages"]["stress"].get("solver", {{}}).get("unknowns"),
                  "solver": {{k: v for k, v in r["stages"]["stress"].get("solver", {{}}).items() if k != "history"}}}}))
"""

RERUNS = """
import time
from pipeline.flow import runner
out = {{}}
for name, sets in (("full", []), ("unchanged", []), ("swap", ["stages.stress.materials.block=magnesium_az91d"])):
    t = time.perf_counter()
    r = runner.run("{workflow}", sets, store="{store}", out="{out}")
    out[name] = time.perf_counter() - t
    out[name + "_stress"] = r["stages"]["stress"]["seconds"]
    out[name + "_status"] = ", ".join(f"{{n}} {{s['status']}}" for n, s in r["stages"].items())
print(json.dumps(out))
"""


def _values(name: str, **override) -> dict:
    from pipeline.model import materials

    m = materials.library()[name]
    k = m.conductivity[0] if isinstance(m.conductivity, tuple) else m.conductivity
    out = {"k": float(k), "E": float(m.youngs_modulus[0]), "nu": float(m.poisson_ratio[0]), "alpha": float(m.expansion[0])}
    return out | override


def case_materials(case: str, contrast: float = 1e5, poisson: float = 0.45) -> dict:
    """Part -> k, E, nu, alpha of a benchmark case, as the workflows of benchmarks/common.py give them."""
    if case == "cube":
        return {"block": _values("aluminium_6061_t6")}
    return {"base": _values("aluminium_6061_t6"), "die": _values("silicon"),
            "interlayer": {"k": 3.0, "E": 162e9 / contrast, "nu": poisson, "alpha": 2e-4}}


def pipeline(workflow: Path, store: Path, out: Path, sets: list[str] | None = None) -> dict:
    code = PEAK + PIPELINE.format(workflow=workflow, sets=repr(sets or []), store=store, out=out)
    return child(code)


def bare(mesh: Path, out: Path, timeout: float) -> dict:
    return child(PEAK + BARE.format(mesh=mesh, out=out, **_values("aluminium_6061_t6")), timeout=timeout)


def expert(case: str, mesh: Path, out: Path, timeout: float) -> dict:
    power, axis = ("block", 0) if case == "cube" else ("die", 2)
    return child(PEAK + EXPERT.format(materials=repr(case_materials(case)), power_part=power, clamp_axis=axis,
                                      mesh=mesh, out=out), timeout=timeout)


def compare(case: str, n: int, repeats: int, bare_runs: int, timeout: float, with_reruns: bool = False
            ) -> tuple[list, list | None]:
    """Pipeline and expert script ``repeats`` times each, alternating, and the bare script
    ``bare_runs`` times (cube only); reruns (cube) when asked."""
    work = Path(tempfile.mkdtemp(prefix="thermochain-bench-"))
    try:
        workflow = write_case(work, n) if case == "cube" else write_layered(work, n)
        mesh = work / ("cube.msh" if case == "cube" else "layered.msh")
        runs_p, runs_e, runs_b, reruns, swaps = [], [], [], [], []
        for i in range(repeats):
            store = work / f"store{i}"
            runs_p.append(pipeline(workflow, store, work / f"out{i}"))
            runs_e.append(expert(case, mesh, work, timeout))
            if with_reruns:
                reruns.append(pipeline(workflow, store, work / f"out{i}"))
                swaps.append(child(PEAK + RERUNS.format(workflow=workflow, store=work / f"warm{i}", out=work / f"wout{i}")))
            if i < bare_runs:
                runs_b.append(bare(mesh, work, timeout))
            print(case, n, i, runs_p[-1], runs_e[-1], runs_b[-1] if i < bare_runs else "", flush=True)
            if "error" in runs_p[-1]:
                raise SystemExit("a pipeline run failed; see the line above")
    finally:
        shutil.rmtree(work, ignore_errors=True)

    def stats(runs):
        good = [r for r in runs if "error" not in r]
        return (median([r["wall_s"] for r in good]), median([r["peak_mib"] for r in good])) if good else (None, None)

    (p_wall, p_mem), (e_wall, e_mem), (b_wall, b_mem) = stats(runs_p), stats(runs_e), stats(runs_b)
    ratio = lambda a, b: a / b if a is not None and b else None  # noqa: E731
    e0 = runs_e[0]
    check = f"max T {runs_p[0]['max_T']:.3f} / " + (f"{e0['max_T']:.3f} K" if "error" not in e0 else e0["error"])
    if "error" not in e0:
        check += f"; expert CG {e0['iterations']} iterations to {e0['residual']:.1e}"
    row = [case, runs_p[0].get("unknowns"), f"{repeats} / {len([r for r in runs_e if 'error' not in r])} / {len(runs_b)}",
           p_wall, e_wall, ratio(p_wall, e_wall), p_mem, e_mem, ratio(p_mem, e_mem), b_wall, ratio(p_wall, b_wall),
           b_mem, ratio(p_mem, b_mem), check]
    if not swaps:
        return row, None
    full, again, swap, stress_alone = (median([r[k] for r in swaps]) for k in ("full", "unchanged", "swap", "full_stress"))
    rerun_row = [runs_p[0].get("unknowns"), full, again, again / full, stress_alone, swap, swap / stress_alone,
                 p_wall, median([r["wall_s"] for r in reruns]), swaps[0]["swap_status"]]
    return row, rerun_row


HEADER = ["case", "stress unknowns", "runs (pipeline / expert / bare)", "pipeline s", "expert s", "time ratio to expert",
          "pipeline MiB", "expert MiB", "memory ratio to expert", "bare s", "time ratio to bare", "bare MiB",
          "memory ratio to bare", "check"]


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__)
    p.add_argument("--quick", action="store_true", help="small sizes only, to check the script")
    p.add_argument("--repeats", type=int, default=3)
    p.add_argument("--bare", action="store_true", help="also the bare script at 1.1e5 (over 10 minutes, 8 GiB)")
    p.add_argument("--bare-timeout", type=float, default=1800.0, help="seconds before a script is stopped")
    p.add_argument("--reruns-only", action="store_true", help="only the reruns table (benchmark 3), at 1.1e5")
    args = p.parse_args()
    if args.reruns_only:
        _, rerun = compare("cube", 17, args.repeats, 0, args.bare_timeout, with_reruns=True)
        write_section("reruns", _rerun_table([rerun]))
        return
    # (case, vertices per side, bare runs): 12 -> 3.6e4 and 17 -> 1.1e5 P2 stress unknowns.  The bare
    # script's SuperLU takes over 10 minutes at 1.1e5 and does not fit at 1e6 (docs/performance.md).
    r = args.repeats
    sizes = ([("cube", 8, 1), ("layered", 8, 0)] if args.quick else
             [("cube", 12, 1), ("cube", 17, 1 if args.bare else 0), ("layered", 17, 0)])
    rows = [compare(case, n, r, bare_runs, args.bare_timeout)[0] for case, n, bare_runs in sizes]
    name = "side-by-side" + ("-quick" if args.quick else "")
    write_section(name, f"Machine: {machine()}.\n\n" + table(HEADER, rows))


def _rerun_table(reruns: list) -> str:
    return table(["stress unknowns", "full run s", "unchanged rerun s", "ratio", "stress stage s",
                  "material-swap rerun s", "ratio to stress stage", "full run, new process s",
                  "unchanged rerun, new process s", "swap statuses"], reruns)


if __name__ == "__main__":
    main()
