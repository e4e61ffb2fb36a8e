"""Linear solves for symmetric positive definite systems, chosen by size, with reusable preparations.

``prepare(A)`` factorises (sparse direct, SuperLU with iterative refinement) or builds the smoothed-
aggregation AMG hierarchy (pyamg, rigid-body modes as near-null space for elasticity) once;
``Prepared.solve(b)`` then serves any number of right-hand sides on the same matrix.  Every solve
returns a ``SolveRecord``: method, unknowns, iterations, relative residual and its history, seconds.
``estimate_memory`` and ``check_memory`` refuse a model that cannot fit before it is assembled.
"""

from __future__ import annotations

import logging
import os
import time
import warnings
from dataclasses import asdict, dataclass, field

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from .. import errors

log = logging.getLogger(__name__)

#: Unknowns up to which "auto" takes the sparse direct solver, by backend and by the number of
#: components per point; above it AMG-preconditioned CG.  Measured by benchmarks/scaling.py
#: (docs/performance.md, solver choice): SuperLU and AMG take equal time near 3.5e3 unknowns for P1
#: heat and 5e3 for P2 elasticity.  PARDISO (the optional ``direct`` extra, MKL) never beats AMG on
#: heat, but factorises P2 elasticity faster than AMG converges from about 1.5e4 to several 1e4
#: unknowns, and it does not stall: smoothed aggregation can on slender P2 models (boards, thin walls);
#: such a solve falls back to the direct solver (FALLBACK_LIMIT).
DIRECT_LIMIT = {("SuperLU", 1): 5_000, ("SuperLU", 3): 5_000, ("PARDISO", 1): 5_000, ("PARDISO", 3): 50_000}
#: Unknowns up to which an "auto" AMG solve that fails is retried with the direct solver.
FALLBACK_LIMIT = 200_000
METHODS = ("auto", "direct", "amg")
REFINEMENT_STEPS = 3


@dataclass(frozen=True)
class SolveRecord:
    """How a system was solved: method, unknowns, iterations, relative residual, wall time [s]
    (``setup_seconds`` of it spent factorising or building the hierarchy, shared by reuses)."""

    method: str
    unknowns: int
    iterations: int
    residual: float
    seconds: float
    history: tuple[float, ...] = field(default=())
    setup_seconds: float = 0.0
    reused: bool = False
    backend: str = ""

    def to_dict(self) -> dict:
        out = asdict(self)
        out["history"] = list(self.history)
        return out


def direct_backend() -> str:
    """"PARDISO" when pypardiso is installed (the ``direct`` extra), else scipy's "SuperLU";
    ``THERMOCHAIN_DIRECT=superlu`` in the environment keeps SuperLU."""
    if os.environ.get("THERMOCHAIN_DIRECT", "").lower() == "superlu":
        return "SuperLU"
    import importlib.util

    return "PARDISO" if importlib.util.find_spec("pypardiso") is not None else "SuperLU"


def choose(n: int, method: str = "auto", components: int = 1) -> str:
    """The method for ``n`` unknowns: "direct" up to DIRECT_LIMIT, else "amg", unless one is asked for."""
    if method not in METHODS:
        raise errors.InputError(f"solver method {method!r} is not known; valid: {', '.join(METHODS)}")
    if method != "auto":
        return method
    return "direct" if n <= DIRECT_LIMIT[(direct_backend(), 3 if components > 1 else 1)] else "amg"


#: Below this size SuperLU is used even where PARDISO is installed: it is as fast there, and loading
#: MKL costs about half a second (measured).
SMALL = 5_000


class _Direct:
    """A sparse LU/Cholesky factorisation kept for reuse: PARDISO (symmetric positive definite mode
    on the upper triangle, or general mode for an unsymmetric tangent) if installed, else SuperLU."""

    def __init__(self, A: sp.csr_matrix):
        self.backend = direct_backend() if A.shape[0] > SMALL else "SuperLU"
        if self.backend == "PARDISO":
            import pypardiso

            symmetric = abs(A - A.T).max() <= 1e-12 * abs(A).max()
            self._solver = pypardiso.PyPardisoSolver(mtype=2 if symmetric else 11)
            # pypardiso searches the installation for MKL on every solver it makes unless told where
            # it is (its documented PYPARDISO_MKL_RT variable): tell it once
            os.environ.setdefault("PYPARDISO_MKL_RT", self._solver.libmkl._name)
            self._matrix = sp.triu(A, format="csr") if symmetric else A
            self._solver.factorize(self._matrix)
        else:
            self._lu = spla.splu(A.tocsc())

    def solve(self, b: np.ndarray) -> np.ndarray:
        if self.backend == "PARDISO":
            return np.asarray(self._solver.solve(self._matrix, b), dtype=float)
        return self._lu.solve(b)


class Prepared:
    """A factorisation or AMG hierarchy of one SPD matrix, reused for every right-hand side."""

    def __init__(self, A: sp.spmatrix, method: str = "auto", near_null: np.ndarray | None = None,
                 rtol: float = 1e-10, maxiter: int = 500):
        self.A = A.tocsr()
        self.n = int(A.shape[0])
        components = 1 if near_null is None else 3
        self.method = choose(self.n, method, components)
        self.rtol, self.maxiter, self.solves = rtol, maxiter, 0
        start = time.perf_counter()
        self.backend = "pyamg"
        if self.method == "direct":
            self._direct = _Direct(self.A)
            self.backend = self._direct.backend
        else:
            import pyamg

            with _one_thread():
                self._ml = pyamg.smoothed_aggregation_solver(self.A, B=near_null)
        self.setup_seconds = time.perf_counter() - start

    def solve(self, b: np.ndarray) -> tuple[np.ndarray, SolveRecord]:
        start = time.perf_counter()
        bnorm = float(np.linalg.norm(b)) or 1.0
        history: list[float] = []
        stalled = False
        if self.method == "direct":
            x = self._direct.solve(b)
            iterations = 1
            for _ in range(REFINEMENT_STEPS):  # iterative refinement: recovers digits lost to pivoting
                r = b - self.A @ x
                history.append(float(np.linalg.norm(r)))
                if history[-1] <= self.rtol * bnorm:
                    break
                x = x + self._direct.solve(r)
                iterations += 1
        else:
            with _one_thread(), warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                try:
                    x = self._ml.solve(b, tol=self.rtol, accel="cg", maxiter=self.maxiter, residuals=history,
                                       callback=self._watch(history, bnorm))
                except _Stalled:
                    x, stalled = self._iterate, True
            if any("ndefinite" in str(w.message) for w in caught):  # pyamg's CG gave up
                stalled = True
            iterations = max(len(history) - 1, 0)
        residual = float(np.linalg.norm(self.A @ x - b)) / bnorm
        seconds = time.perf_counter() - start + (0.0 if self.solves else self.setup_seconds)
        self.last_residual, self.spent = residual, seconds
        record = SolveRecord(self.method, self.n, iterations, residual, seconds,
                             tuple(h / bnorm for h in history), self.setup_seconds, self.solves > 0, self.backend)
        self.solves += 1
        # accepted: a relative residual within 1e3 x rtol (1e-7 by default), the round-off floor CG
        # reaches at 2e6 unknowns (measured); a stall above it is a failure (auto falls back)
        if not np.all(np.isfinite(x)) or residual > 1e3 * self.rtol:
            trail = ", ".join(f"{h:.1e}" for h in record.history[-8:])
            hint = ("; try the direct solver (solver = \"direct\")" if self.method == "amg" else
                    "; the matrix may be singular: check the supports and the materials")
            raise errors.SolverError(f"linear solve ({self.method}, {self.n} unknowns) did not converge"
                                     f"{' (stalled)' if stalled else ''}: relative "
                                     f"residual {residual:.3e} after {iterations} iterations (last residuals "
                                     f"{trail}){hint}")
        log.info("solved %d unknowns with %s in %.2f s (%d iterations, residual %.1e)",
                 self.n, self.method, record.seconds, iterations, residual)
        return x, record

    def approximate_inverse(self):
        """x -> A^-1 x approximately, a fixed linear map for preconditioning an outer Krylov solve:
        the factorisation (exact), or one AMG V-cycle."""
        if self.method == "direct":
            return self._direct.solve
        return self._ml.aspreconditioner(cycle="V").matvec

    def _watch(self, history: list[float], bnorm: float):
        """Log every tenth iteration; stop a stalled iteration: less than 2x in the last 30, which is
        where CG sits when it has reached its round-off floor above rtol (measured at 2e6 unknowns)."""
        def report(xk):
            self._iterate = xk
            k = len(history) - 1
            if k % 10 == 0:
                log.info("AMG-CG iteration %d: relative residual %.2e", k, history[-1] / bnorm)
            if k >= 30 and history[-1] > 0.5 * history[-31]:
                raise _Stalled()
        return report


def solve_spd(A: sp.spmatrix, b: np.ndarray, method: str = "auto", rtol: float = 1e-10,
              near_null: np.ndarray | None = None, maxiter: int = 500) -> tuple[np.ndarray, SolveRecord]:
    """Solve ``A x = b`` once for a symmetric positive definite ``A``; returns x and its record.

    With ``method="auto"`` an AMG solve that does not converge is retried with the direct solver up
    to FALLBACK_LIMIT unknowns, and the record says so."""
    prepared = Prepared(A, method, near_null, rtol, maxiter)
    try:
        return prepared.solve(b)
    except errors.SolverError as exc:
        if method != "auto" or prepared.method != "amg" or prepared.n > FALLBACK_LIMIT:
            raise
        log.warning("%s; retrying with the direct solver", exc.problems[0])
        x, record = Prepared(A, "direct", rtol=rtol).solve(b)
        return x, SolveRecord(f"direct (after AMG stalled at {prepared.last_residual:.1e})", record.unknowns,
                              record.iterations, record.residual, record.seconds + prepared.spent,
                              record.history, record.setup_seconds, False, record.backend)


class _Stalled(Exception):
    pass


class _one_thread:
    """Numerical libraries on one thread around the CG/AMG loop: their level-1 kernels lose to
    oversubscription on small shared machines (docs/performance.md)."""

    def __enter__(self):
        try:
            from threadpoolctl import threadpool_limits
        except ImportError:  # pragma: no cover - threadpoolctl is a dependency
            self._limit = None
            return self
        self._limit = threadpool_limits(1)
        return self

    def __exit__(self, *exc):
        if self._limit is not None:
            self._limit.restore_original_limits()


# ------------------------------------------------------------------------------------------ memory

#: Peak bytes of a stage per stored matrix entry and per unknown, fitted to benchmarks/scaling.py
#: (docs/performance.md: P1 heat 3.9 KB and P2 stress 6.7 KB per unknown at 1e6, whole process).
#: A direct factor's fill grows faster than the matrix (about N^1.35 in 3-D): its per-entry cost is
#: scaled by (N / 2e4)^0.35 above 2e4 unknowns.
BYTES_PER_ENTRY = {"amg": 45.0, "direct": 400.0}
BYTES_PER_UNKNOWN = 3300.0
#: Stored entries per row of the assembled matrix on tetrahedral meshes (measured: 14.8 for P1 heat,
#: 77 for P2 elasticity on the benchmark cube).
ENTRIES_PER_ROW = {(1, 1): 15.0, (2, 1): 28.0, (1, 3): 45.0, (2, 3): 80.0}


def estimate_memory(unknowns: int, order: int, components: int, method: str) -> int:
    """Peak bytes of a stage with ``unknowns`` unknowns of P``order`` with ``components`` per point."""
    entries = ENTRIES_PER_ROW[(order, components)] * unknowns
    per_entry = BYTES_PER_ENTRY[method] * (max(1.0, unknowns / 2e4) ** 0.35 if method == "direct" else 1.0)
    return int(per_entry * entries + BYTES_PER_UNKNOWN * unknowns)


def available_memory() -> int:
    """Bytes the system can still give (MemAvailable), or the physical memory if that is unknown."""
    try:
        with open("/proc/meminfo") as f:
            for line in f:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return int(os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES"))


def check_memory(unknowns: int, order: int, components: int, method: str, limit: float | None,
                 where: str) -> int:
    """Refuse, before assembly, a model whose estimate exceeds ``limit`` bytes (default: what is
    available); returns the estimate."""
    chosen = choose(unknowns, method, components)
    need = estimate_memory(unknowns, order, components, chosen)
    room = int(limit) if limit is not None else available_memory()
    if need > room:
        other = "; the AMG solver (solver = \"amg\") needs less" if chosen == "direct" else ""
        coarser = "use a coarser mesh" + (" or order = 1" if order > 1 else "")
        raise errors.InputError(
            f"{where}: the model has {unknowns:,} unknowns (P{order}, {components} per point) and needs about "
            f"{_size(need)} with the {chosen} solver, but {_size(room)} "
            f"{'is the memory_limit' if limit is not None else 'is available'}; {coarser}{other}")
    return need


def _size(n: float) -> str:
    return f"{n / 2**30:.2f} GiB" if n >= 2**30 else f"{n / 2**20:.1f} MiB"
