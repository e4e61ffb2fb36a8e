"""Benchmark 1b: assembly alone, the pipeline's kernels against scikit-fem's generic forms, side by side.

The same mesh and the same matrices: P2 elasticity (``skfem.models.elasticity.linear_elasticity`` with
the default quadrature, as a bare script would write it) and P1 conduction (``laplace``).  Each
variant runs in its own process, median of 3; the matrices agree to round-off (checked in
tests/test_kernels.py).  Usage: ``python benchmarks/assembly.py [--quick]``.
"""

from __future__ import annotations

import argparse

from common import PEAK, child, machine, median, table, write_section

CODE = """
import sys, time
sys.path.insert(0, "benchmarks")
import numpy as np
from common import box
m = box({n})
order, kind, how = {order}, "{kind}", "{how}"
t = time.perf_counter()
if how == "generic":
    from skfem import Basis, ElementTetP1, ElementTetP2, ElementVector, asm
    from skfem.models.elasticity import linear_elasticity, lame_parameters
    from skfem.models.poisson import laplace
    if kind == "elasticity":
        K = asm(linear_elasticity(*lame_parameters(68.9e9, 0.33)), Basis(m, ElementVector(ElementTetP2())))
    else:
        K = asm(laplace, Basis(m, ElementTetP1()))
else:
    from pipeline.stages import constitutive, kernels
    space, geom = kernels.Space(m, order), kernels.Geometry(m)
    ids = np.arange(m.nelements)
    if kind == "elasticity":
        mat = type("M", (), {{"youngs_modulus": (68.9e9,), "poisson_ratio": (0.33,), "kind": "isotropic",
                             "shear_modulus": ()}})()
        K = kernels.stiffness(space, geom, ids, constitutive.stiffness_matrix(mat), 2).matrix()
    else:
        K = kernels.conduction(space, geom, ids, 1.0, 0).matrix()
print(json.dumps({{"seconds": time.perf_counter() - t, "unknowns": int(K.shape[0]), "peak_mib": peak_mib()}}))
"""


def measure(n, order, kind, how, repeats):
    runs = [child(PEAK + CODE.format(n=n, order=order, kind=kind, how=how)) for _ in range(repeats)]
    bad = [r for r in runs if "error" in r]
    if bad:
        raise SystemExit(f"{kind} {how}: {bad[0]['error']}")
    return runs[0]["unknowns"], median([r["seconds"] for r in runs]), median([r["peak_mib"] for r in runs])


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__)
    p.add_argument("--quick", action="store_true")
    p.add_argument("--repeats", type=int, default=3)
    args = p.parse_args()
    cases = [("elasticity", 2, 8), ("conduction", 1, 22)] if args.quick else \
        [("elasticity", 2, 17), ("conduction", 1, 47), ("conduction", 1, 100)]
    rows = []
    for kind, order, n in cases:
        unknowns, t_generic, m_generic = measure(n, order, kind, "generic", args.repeats)
        _, t_kernel, m_kernel = measure(n, order, kind, "kernel", args.repeats)
        rows.append([f"{kind} P{order}", unknowns, t_generic, t_kernel, t_generic / t_kernel, m_generic, m_kernel])
        print(rows[-1], flush=True)
    write_section("assembly" + ("-quick" if args.quick else ""), f"Machine: {machine()}; median of {args.repeats} "
                  "runs, each in its own process.\n\n" + table(
                      ["matrix", "unknowns", "scikit-fem generic s", "pipeline kernel s", "speed-up",
                       "generic peak MiB", "kernel peak MiB"], rows))


if __name__ == "__main__":
    main()
