"""Benchmark 5: the cost of a transient time step against the steady solve of the same model.

The benchmark cube (benchmarks/common.py: aluminium, 50 W in the block, 10 W/(m^2*K) on every face;
invented for measurement), P1.  Per size, each in its own process, median of the repeats: the steady
heat solve; 20 fixed steps of BDF2 (a linear problem: one factorisation of (a0/h) M + K, reused by
every step); an adaptive BDF2 warm-up to 600 s (the step changes, so most steps factorise again); 20
fixed steps with radiation added on every face (Newton at each step).  Reported: seconds per step and
per step over the steady solve.  Usage: ``python benchmarks/transient.py [--quick]``.
"""

from __future__ import annotations

import argparse

from common import PEAK, child, machine, median, table, write_section

CODE = """
import sys, time
sys.path.insert(0, "benchmarks")
from common import domain
from pipeline.model import materials
from pipeline.stages import heat, transient as tr
d = domain({n})
mat = materials.library()["aluminium_6061_t6"]
faces = ["xmin", "xmax", "ymin", "ymax", "zmin", "zmax"]
what = "{what}"
conv = {{f: heat.Convection(10.0, 298.15) for f in faces}}
rad = {{f: heat.Radiation(0.8, 298.15) for f in faces}} if what == "radiation" else {{}}
t = time.perf_counter()
if what == "steady":
    f = heat.solve(d, heat.HeatSpec({{"block": mat}}, power={{"block": 50.0}}, convection=conv))
    steps, unknowns = 1, len(f.temperature)
else:
    hs = heat.HeatSpec({{"block": mat}}, convection=conv, radiation=rad)
    adaptive = what == "adaptive"
    spec = tr.TransientSpec(hs, power={{"block": tr.Profile.constant(50.0)}}, initial=298.15,
                            end=600.0 if adaptive else 20.0, step=1.0 if not adaptive else 0.1,
                            adaptive=adaptive, tolerance=0.01)
    f = tr.solve(d, spec)
    steps, unknowns = f.record["accepted"], len(f.snapshots["end"][1])
print(json.dumps({{"seconds": time.perf_counter() - t, "steps": steps, "unknowns": unknowns, "peak_mib": peak_mib()}}))
"""


def measure(n, what, repeats):
    runs = [child(PEAK + CODE.format(n=n, what=what)) for _ in range(repeats)]
    bad = [r for r in runs if "error" in r]
    if bad:
        raise SystemExit(f"{what} n={n}: {bad[0]['error']}")
    return runs[0]["unknowns"], runs[0]["steps"], median([r["seconds"] for r in runs])


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__)
    p.add_argument("--quick", action="store_true")
    p.add_argument("--repeats", type=int, default=3)
    args = p.parse_args()
    sizes = (8, 12) if args.quick else (12, 22, 35)
    rows = []
    for n in sizes:
        unknowns, _, steady = measure(n, "steady", args.repeats)
        for what in ("fixed", "adaptive", "radiation"):
            _, steps, seconds = measure(n, what, args.repeats)
            rows.append([unknowns, what, steps, seconds, seconds / steps, seconds / steps / steady, steady])
            print(rows[-1], flush=True)
    write_section("transient" + ("-quick" if args.quick else ""), f"Machine: {machine()}; median of {args.repeats} "
                  "runs, each in its own process (a run's time includes assembling M and the per-step "
                  "statistics).\n\n" + table(["unknowns", "run", "steps", "run s", "s per step",
                                              "step / steady solve", "steady solve s"], rows))


if __name__ == "__main__":
    main()
