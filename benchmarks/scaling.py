"""Benchmark 1: how the heat stage (P1) and the P2 stress stage scale, and where "auto" switches solver.

Each size runs in its own process (peak RSS is that process's own).  Assembly seconds are the
stage's own record (``meta.assembly_seconds``: spaces, geometry, matrices and loads); solve seconds
are the solver record's (setup and iterations); the fitted exponent is the slope of log time
against log unknowns from 1e5 up.  Usage: ``python benchmarks/scaling.py [--quick]``.
"""

from __future__ import annotations

import argparse
import json
import math
from pathlib import Path

import numpy as np

from common import PEAK, child, machine, table, write_section

HEAT = """
import time
from common import domain
from pipeline.stages import heat
from pipeline.model import materials
d = domain({n})
mat = materials.library()["aluminium_6061_t6"]
conv = {{f: heat.Convection(10.0, 298.15) for f in ("xmin", "xmax", "ymin", "ymax", "zmin", "zmax")}}
t = time.perf_counter()
r = heat.solve(d, heat.HeatSpec({{"block": mat}}, power={{"block": 50.0}}, convection=conv, solver="{solver}"))
print(json.dumps({{"unknowns": r.solver.unknowns, "stage_s": time.perf_counter() - t,
                  "assembly_s": r.meta["assembly_seconds"], "solve_s": r.solver.seconds,
                  "setup_s": r.solver.setup_seconds, "iterations": r.solver.iterations, "peak_mib": peak_mib()}}))
"""

STRESS = """
import time
from common import domain
from pipeline.stages import mapping, stress
from pipeline.stages.supports import Support
from pipeline.model import materials
d = domain({n})
mat = materials.library()["aluminium_6061_t6"]
load = mapping.from_function(d, lambda x: 293.15 + 1000.0 * x[0], mapping.MapSpec(reference=293.15), order=1)
t = time.perf_counter()
r = stress.solve(d, load, stress.StressSpec({{"block": mat}}, {{"xmin": Support("fixed")}}, order={order},
                                            solver="{solver}"))
print(json.dumps({{"unknowns": r.solver.unknowns, "stage_s": time.perf_counter() - t,
                  "assembly_s": r.meta["assembly_seconds"], "solve_s": r.solver.seconds,
                  "setup_s": r.solver.setup_seconds, "iterations": r.solver.iterations, "peak_mib": peak_mib()}}))
"""


def run(code: str, backend: str = "", **fmt) -> dict:
    pre = f"import os; os.environ['THERMOCHAIN_DIRECT'] = {backend!r}\n" if backend else ""
    return child(pre + "import sys; sys.path.insert(0, 'benchmarks')\n" + PEAK + code.format(**fmt))


def exponent(rows: list[dict], key: str) -> float | None:
    big = [r for r in rows if "error" not in r and r["unknowns"] >= 9e4]
    if len(big) < 2:
        return None
    x = np.log([r["unknowns"] for r in big])
    y = np.log([r[key] for r in big])
    return float(np.polyfit(x, y, 1)[0])


DATA = Path(__file__).resolve().parent.parent / "docs" / "performance_data.json"


def _stored() -> dict:
    return json.loads(DATA.read_text()) if DATA.exists() else {}


def scaling(kind: str, sides: list[int], rerun: set[int] | None) -> str:
    """Rows for ``sides``: measured now where ``rerun`` is None or holds the side, else taken from the
    raw results of an earlier run (docs/performance_data.json), which every measurement updates."""
    stored, rows = _stored(), []
    for n in sides:
        key = f"{kind}:{n}"
        if rerun is None or n in rerun or key not in stored:
            stored[key] = run(HEAT if kind == "heat" else STRESS, n=n, order=2, solver="auto")
            print(kind, n, stored[key], flush=True)
            DATA.write_text(json.dumps(stored, indent=1))
        rows.append(stored[key])
    body = []
    for r in rows:
        if "error" in r:
            body.append([None] * 7 + [r["error"]])
            continue
        body.append([r["unknowns"], r["assembly_s"], r["solve_s"], r["iterations"], r["stage_s"], r["peak_mib"],
                     r["peak_mib"] * 2**20 / r["unknowns"], ""])
    fits = f"fitted growth exponent from 1e5 up: solve {_fmt(exponent(rows, 'solve_s'))}, stage {_fmt(exponent(rows, 'stage_s'))}"
    title = "Heat stage, P1" if kind == "heat" else "Stress stage, P2 (3 unknowns per point)"
    return (f"**{title}** (auto solver):\n\n"
            + table(["unknowns", "assembly s", "solve s", "iterations", "stage s", "peak MiB", "bytes/unknown", "note"], body)
            + f"\n\n{fits}\n")


def crossing(kind: str, sides: list[int]) -> str:
    body = []
    for n in sides:
        r = {m: run(HEAT if kind == "heat" else STRESS, backend=b, n=n, order=2, solver=m.split()[0])
             for m, b in (("direct SuperLU", "superlu"), ("direct PARDISO", ""), ("amg", ""))}
        d, p, a = r["direct SuperLU"], r["direct PARDISO"], r["amg"]
        body.append([a.get("unknowns"), d.get("solve_s"), d.get("peak_mib"), p.get("solve_s") if "error" not in p
                     else p["error"], p.get("peak_mib"), a.get("solve_s"), a.get("iterations"), a.get("peak_mib")])
        print(kind, n, body[-1], flush=True)
    return (f"**Solver choice, {'heat P1' if kind == 'heat' else 'stress P2'}** (solve seconds incl. setup, "
            "one run each; PARDISO needs the `direct` extra):\n\n"
            + table(["unknowns", "SuperLU s", "SuperLU peak MiB", "PARDISO s", "PARDISO peak MiB", "AMG-CG s",
                     "AMG iterations", "AMG peak MiB"], body) + "\n")


def _fmt(v):
    return "-" if v is None or math.isnan(v) else f"{v:.2f}"


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__)
    p.add_argument("--quick", action="store_true", help="small sizes only, to check the script")
    p.add_argument("--only", type=int, nargs="*", metavar="SIDE",
                   help="measure only these mesh sides again (the other rows come from docs/performance_data.json); "
                        "skips the solver-choice table")
    args = p.parse_args()
    rerun = set(args.only) if args.only is not None else None
    heat_sides = [22, 30] if args.quick else [22, 47, 80, 100, 126]  # 1e4 ... 2e6 unknowns
    stress_sides = [8, 12] if args.quick else [8, 17, 24, 35]  # 1e4 ... 1e6 unknowns
    text = [f"Machine: {machine()}.\n", scaling("heat", heat_sides, rerun), scaling("stress", stress_sides, rerun)]
    write_section("scaling" if not args.quick else "scaling-quick", "\n".join(text))
    if rerun is not None:
        return
    cross_heat = [12, 17, 22, 30] if not args.quick else [12]
    cross_stress = [6, 8, 10, 12] if not args.quick else [6]
    write_section("solvers" if not args.quick else "solvers-quick",
                  crossing("heat", cross_heat) + "\n" + crossing("stress", cross_stress))


if __name__ == "__main__":
    main()
