"""Benchmark 4: the machine's memory bandwidth and the lower bound it sets on one CG iteration.

Bandwidth: ``np.copyto`` of 1 GiB arrays (16 bytes moved per element, the STREAM copy convention),
best of 5, one thread.  The heat matrix of the benchmark cube at 1e6 unknowns is assembled by the
pipeline's kernels; one CSR matrix-vector product moves at least 12 bytes per entry (8 value +
4 index) + 20 per row (row pointer, x read, y written).  An AMG-preconditioned CG iteration with
pyamg's default V-cycle (one symmetric Gauss-Seidel sweep before and one after, i.e. two matrix
passes each, and one residual per level) reads the matrices of all levels about 5 times, i.e.
5 C_op fine-matrix passes with operator complexity C_op, plus CG's own product and about 10
vector passes; the bound is those bytes over the bandwidth (our own count of the passes).
Usage: ``python benchmarks/limit.py [--quick]``.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from common import ENV, domain, machine, table, write_section


def bandwidth(n_bytes: int) -> float:
    a = np.ones(n_bytes // 8)
    b = np.empty_like(a)
    best = np.inf
    for _ in range(5):
        t = time.perf_counter()
        np.copyto(b, a)
        best = min(best, time.perf_counter() - t)
    return 16 * len(a) / best


def main() -> None:
    import os

    os.environ.update(ENV)
    from threadpoolctl import threadpool_limits

    threadpool_limits(1)
    p = argparse.ArgumentParser(description=__doc__)
    p.add_argument("--quick", action="store_true")
    args = p.parse_args()
    side = 30 if args.quick else 100
    bw = bandwidth(2**27 if args.quick else 2**30)
    from pipeline.stages import fem, kernels, solvers

    d = domain(side)
    space, geom = fem.space(d, 1), fem.geometry(d)
    ids = np.arange(len(d.tetrahedra))
    t = time.perf_counter()
    A = kernels.conduction(space, geom, ids, 167.0, 0).matrix()
    film = kernels.Assembler(space.N)
    for name in d.surfaces:
        kernels.Facets(space, geom, d.surfaces[name], 2).mass(10.0, film)
    A = (A + film.matrix()).tocsr()
    assembly = time.perf_counter() - t
    n, nnz = A.shape[0], A.nnz
    x = np.random.default_rng(0).random(n)
    best = np.inf
    for _ in range(10):
        t = time.perf_counter()
        A @ x
        best = min(best, time.perf_counter() - t)
    spmv_bytes = 12 * nnz + 20 * n
    prepared = solvers.Prepared(A, "amg")
    _, record = prepared.solve(A @ x)
    c_op = prepared._amg.ml.operator_complexity()
    per_iteration = (record.seconds - record.setup_seconds) / max(record.iterations, 1)
    passes = 5 * c_op + 1
    bound = (passes * spmv_bytes + 10 * 8 * n) / bw
    rows = [[n, nnz, f"{bw / 1e9:.1f} GB/s", best * 1e3, spmv_bytes / bw * 1e3, record.iterations, c_op,
             per_iteration * 1e3, bound * 1e3, per_iteration / bound]]
    write_section("limit" + ("-quick" if args.quick else ""), f"Machine: {machine()}; heat matrix assembled in "
                  f"{assembly:.1f} s.\n\n" + table(
                      ["unknowns", "entries", "copy bandwidth", "SpMV ms", "SpMV bound ms", "AMG-CG iterations",
                       "operator complexity", "measured ms / iteration", "bound ms / iteration",
                       "measured / bound"], rows))


if __name__ == "__main__":
    main()
