"""Linear solves, chosen by size, with reusable preparations.

``Prepared(A)`` factorises (sparse direct, SuperLU or PARDISO, with iterative refinement) or builds an
AMG hierarchy once; ``Prepared.solve(b)`` then serves any number of right-hand sides on the same matrix.
A symmetric positive definite matrix is solved by CG, an unsymmetric one (the Newton tangent of k(T)
conduction) by restarted GMRES, both preconditioned by AMG built on the symmetric part.  Vector
problems that say where their unknowns sit (a ``Layout``) get nodal (3 x 3 block) smoothed
aggregation with a strength threshold, and P2 ones a two-level method: block Gauss-Seidel on P2, AMG
on the P1 (vertex) problem P^T A P, with P the exact interpolation of P1 into P2.  Every solve returns
a ``SolveRecord``; ``estimate_memory`` and ``check_memory`` refuse a model that cannot fit before it
is assembled, and ``risk`` names the hard cases (stiffness contrast, near-incompressibility) at
planning.  Nothing draws random numbers: results are reproducible bit for bit.
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
#: components per point; above it AMG.  Measured by benchmarks/scaling.py (docs/performance.md,
#: solver choice): SuperLU and AMG take equal time near 3.5e3 unknowns for P1 heat and 5e3 for P2
#: elasticity; PARDISO (the optional ``direct`` extra) factorises P2 elasticity faster than AMG
#: converges up to several 1e4 unknowns.
DIRECT_LIMIT = {("SuperLU", 1): 5_000, ("SuperLU", 3): 5_000, ("PARDISO", 1): 5_000, ("PARDISO", 3): 50_000}
METHODS = ("auto", "direct", "amg")
REFINEMENT_STEPS = 3
#: Strength threshold of the nodal aggregation for elasticity: a block coupling counts when its norm
#: is at least THETA sqrt(|A_ii| |A_jj|).  0 (pyamg's default) joins soft and stiff parts into one
#: aggregate and stalls at a 1e5 stiffness contrast; 0.1 converges (docs/performance.md, solver
#: strategy: the housing at P1 takes 133 iterations at 0, 58 at 0.05, 49 at 0.1, 250 at 0.2).
THETA = 0.1
#: Relative residual below which a CG or GMRES iteration that gains less than 2x in 30 iterations
#: counts as stalled at its round-off floor (1e-8 to 1e-9 at 2e6 heat unknowns, measured); above it
#: a plateau runs on to maxiter (the layered assembly at 1e6 unknowns sat at 4.8e-4 after 50).
FLOOR = 1e-6
#: GMRES restart length for unsymmetric systems (memory: RESTART vectors of the system's size).
RESTART = 40
#: Relative asymmetry (``is_symmetric``) above which a matrix is solved as unsymmetric; round-off in
#: the products of a symmetric matrix is near 1e-16 sqrt(n).
SYMMETRY_TOLERANCE = 1e-10


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


@dataclass(frozen=True)
class Layout:
    """Where the unknowns of a vector problem (3 per point) sit, for nodal AMG.

    free: positions of the unknowns in the numbering 3 p + c over ``points`` points (the rest are
    constrained).  vertices: the first ``vertices`` points are mesh vertices; edges (2, ne): for P2,
    the end vertices of the edge whose midpoint is point vertices + e.  frames: the orthogonal T with
    u = T u_local (3 x 3 blocks per point), when the unknowns are in local frames."""

    free: np.ndarray
    points: int
    vertices: int
    edges: np.ndarray | None = None
    frames: sp.spmatrix | None = None


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


def is_symmetric(A: sp.spmatrix) -> bool:
    """Whether A is symmetric to round-off, from two products with fixed vectors (x.Ay = y.Ax for
    every x, y when A = A^T; an unsymmetric part such as the k(T) tangent's shows at the size of its
    entries): |x.Ay - y.Ax| <= SYMMETRY_TOLERANCE |x| |A| |y|, with |A| the largest row sum."""
    rng = np.random.default_rng(0)  # a local generator: the test is the same on every run
    x, y = rng.standard_normal(A.shape[0]), rng.standard_normal(A.shape[0])
    scale = float(abs(A).sum(axis=1).max()) * np.linalg.norm(x) * np.linalg.norm(y)
    return bool(scale == 0 or abs(x @ (A @ y) - y @ (A @ x)) <= SYMMETRY_TOLERANCE * scale)


#: Below this size SuperLU is used even where PARDISO is installed: it is as fast there, and loading
#: MKL costs about half a second (measured).
SMALL = 5_000


class _Direct:
    """A sparse LU/Cholesky factorisation kept for reuse: PARDISO (symmetric positive definite mode
    on the upper triangle, or general mode for an unsymmetric tangent) if installed, else SuperLU."""

    def __init__(self, A: sp.csr_matrix, symmetric: bool):
        self.backend = direct_backend() if A.shape[0] > SMALL else "SuperLU"
        if self.backend == "PARDISO":
            import pypardiso

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


class _Hierarchy:
    """The AMG preconditioner of one matrix (of its symmetric part if it is not symmetric).

    Scalar: smoothed aggregation, pyamg's defaults but for the prolongation smoothing weight.  Vector
    with a ``Layout``: the matrix is embedded in the full nodal numbering (constrained unknowns as
    identity rows scaled to the median diagonal, which leaves the free solution unchanged) as 3 x 3
    blocks, aggregated by nodes with strength threshold THETA and energy-minimising prolongation
    smoothing, applied as a W-cycle; for P2 a two-level method on top of it (module docstring) with
    one forward Gauss-Seidel sweep before and one backward after the coarse correction (a symmetric
    preconditioner at half the cost of symmetric sweeps).  Measurements for each choice:
    docs/performance.md, solver strategy.  No setup step draws random numbers: Jacobi prolongation
    smoothing uses pyamg's documented 'local' (Gershgorin) weight instead of a spectral radius
    estimated from a random start vector, and the energy smoother's default is the same."""

    def __init__(self, A: sp.csr_matrix, near_null: np.ndarray | None, layout: Layout | None):
        import pyamg

        self.layout, self.cycle = layout, "V"
        if layout is None:
            self.A = A
            self.ml = pyamg.smoothed_aggregation_solver(A, B=near_null, smooth=("jacobi", {"omega": 4.0 / 3.0,
                                                                                       "weighting": "local"}))
            self.kind = "smoothed aggregation"
            return
        n_full, free = 3 * layout.points, layout.free
        fixed = np.setdiff1d(np.arange(n_full), free)
        full = _embed(A.tocsr(), free, fixed, float(np.median(A.diagonal())))
        B = np.zeros((n_full, near_null.shape[1]))
        B[free] = near_null
        self.cycle = "W"
        options = {"strength": ("symmetric", {"theta": THETA}), "smooth": ("energy", {"degree": 1})}
        if layout.edges is None:
            self.A = full.tobsr(blocksize=(3, 3))
            self.ml = pyamg.smoothed_aggregation_solver(self.A, B=B, **options)
            self.kind = "nodal smoothed aggregation"
            return
        P = vertex_prolongation(layout, fixed)
        coarse = (P.T @ full @ P).tobsr(blocksize=(3, 3))
        below = pyamg.smoothed_aggregation_solver(coarse, B=B[: 3 * layout.vertices], **options)
        from pyamg.multilevel import MultilevelSolver
        from pyamg.relaxation.smoothing import change_smoothers

        top = MultilevelSolver.Level()
        self.A = top.A = full
        top.P, top.R = P, P.T.tocsr()
        self.ml = MultilevelSolver([top] + below.levels, coarse_solver="pinv")
        rest = len(below.levels) - 1
        sweep = ("block_gauss_seidel", {"sweep": "symmetric"})
        change_smoothers(self.ml, [("gauss_seidel", {"sweep": "forward"})] + [sweep] * rest,
                         [("gauss_seidel", {"sweep": "backward"})] + [sweep] * rest)
        self.kind = "two-level P2/P1 + nodal smoothed aggregation"

    def lift(self, b: np.ndarray) -> np.ndarray:
        if self.layout is None:
            return b
        out = np.zeros(3 * self.layout.points)
        out[self.layout.free] = b
        return out

    def restrict(self, x: np.ndarray) -> np.ndarray:
        return x if self.layout is None else x[self.layout.free]

    def preconditioner(self) -> spla.LinearOperator:
        """One cycle (V; W for vector problems) as an operator on the free unknowns."""
        cycle = self.ml.aspreconditioner(cycle=self.cycle)
        n = len(self.layout.free) if self.layout is not None else self.A.shape[0]
        return spla.LinearOperator((n, n), matvec=lambda r: self.restrict(cycle @ self.lift(r)), dtype=float)


def _embed(A: sp.csr_matrix, free: np.ndarray, fixed: np.ndarray, scale: float) -> sp.csr_matrix:
    """A (on the sorted unknowns ``free``) as rows and columns of the full numbering, with ``scale``
    on the diagonal of each ``fixed`` row; built in CSR directly (free is increasing, so each row's
    columns stay sorted), without the temporaries of a COO conversion or of sparse products."""
    n = len(free) + len(fixed)
    counts = np.ones(n, dtype=np.int64)
    counts[free] = np.diff(A.indptr)
    indptr = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(counts, out=indptr[1:])
    dtype = np.int32 if indptr[-1] < 2**31 - 1 and n < 2**31 - 1 else np.int64
    indices, data = np.empty(indptr[-1], dtype=dtype), np.empty(indptr[-1])
    own = np.ones(indptr[-1], dtype=bool)
    own[indptr[fixed]] = False
    indices[indptr[fixed]], data[indptr[fixed]] = fixed, scale
    indices[own], data[own] = free.astype(dtype)[A.indices], A.data
    return sp.csr_matrix((data, indices, indptr.astype(dtype)), shape=(n, n))


def vertex_prolongation(layout: Layout, fixed: np.ndarray) -> sp.csr_matrix:
    """(3 points, 3 vertices) interpolation of a P1 vector field into P2 in the layout's frames:
    identity at vertices, the mean of the two end vertices at edge midpoints (exact for P1); rows of
    constrained unknowns are zero, and a constrained vertex unknown maps to itself alone."""
    nv, ne = layout.vertices, layout.edges.shape[1]
    rows = np.concatenate([np.arange(nv), nv + np.arange(ne), nv + np.arange(ne)])
    cols = np.concatenate([np.arange(nv), layout.edges[0], layout.edges[1]])
    scalar = sp.csr_matrix((np.r_[np.ones(nv), np.full(2 * ne, 0.5)], (rows, cols)), shape=(layout.points, nv))
    P = sp.kron(scalar, sp.identity(3), format="csr")
    if layout.frames is not None:
        T = sp.csr_matrix(layout.frames)
        P = T.T @ P @ T[: 3 * nv, : 3 * nv]
    keep = np.ones(3 * layout.points)
    keep[fixed] = 0.0
    P = sp.diags(keep) @ P @ sp.diags(keep[: 3 * nv])
    own = fixed[fixed < 3 * nv]
    P = P + sp.csr_matrix((np.ones(len(own)), (own, own)), shape=P.shape)
    P = P.tocsr()
    P.eliminate_zeros()
    return P


class Prepared:
    """A factorisation or AMG hierarchy of one matrix, reused for every right-hand side."""

    def __init__(self, A: sp.spmatrix, method: str = "auto", near_null: np.ndarray | None = None,
                 rtol: float = 1e-10, maxiter: int = 500, layout: Layout | None = None):
        self.A = A.tocsr()
        self.n = int(A.shape[0])
        components = 1 if near_null is None else 3
        self.method = choose(self.n, method, components)
        self.symmetric = is_symmetric(self.A)
        self.rtol, self.maxiter, self.solves = rtol, maxiter, 0
        start = time.perf_counter()
        self.backend = "pyamg"
        if self.method == "direct":
            self._direct = _Direct(self.A, self.symmetric)
            self.backend = self._direct.backend
        else:
            base = self.A if self.symmetric else ((self.A + self.A.T) * 0.5).tocsr()
            with _one_thread():
                self._amg = _Hierarchy(base, near_null, layout)
            self.backend = f"pyamg {'CG' if self.symmetric else f'GMRES({RESTART})'}, {self._amg.kind}" + (
                "" if self.symmetric else " of the symmetric part")
        self.setup_seconds = time.perf_counter() - start

    def preconditioner(self) -> spla.LinearOperator:
        """This preparation as a preconditioner for a nearby matrix (an earlier step's): one AMG cycle,
        or one solve with the kept factorisation."""
        if self.method == "direct":
            return spla.LinearOperator(self.A.shape, matvec=self._direct.solve, dtype=float)
        return self._amg.preconditioner()

    @property
    def accel(self) -> str:
        return "cg" if self.symmetric else "gmres"

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
            x, stalled = self._iterate(b, bnorm, history)
            iterations = max(len(history) - 1, 0)
        residual = float(np.linalg.norm(self.A @ x - b)) / bnorm
        seconds = time.perf_counter() - start + (0.0 if self.solves else self.setup_seconds)
        self.last_residual, self.spent = residual, seconds
        method = self.method
        record = SolveRecord(method, self.n, iterations, residual, seconds,
                             tuple(h / bnorm for h in history), self.setup_seconds, self.solves > 0, self.backend)
        self.solves += 1
        # accepted: a relative residual within 1e3 x rtol (1e-7 by default), the round-off floor CG
        # reaches at 2e6 unknowns (measured); a stall above it is a failure (auto falls back)
        if not np.all(np.isfinite(x)) or residual > 1e3 * self.rtol:
            trail = ", ".join(f"{h:.1e}" for h in record.history[-8:])
            hint = ("; try the direct solver (solver = \"direct\")" if self.method == "amg" else
                    "; the matrix may be singular: check the supports and the materials")
            raise errors.SolverError(f"linear solve ({method}, {self.n} unknowns) did not converge"
                                     f"{' (stalled)' if stalled else ''}: relative "
                                     f"residual {residual:.3e} after {iterations} iterations (last residuals "
                                     f"{trail}){hint}")
        log.info("solved %d unknowns with %s in %.2f s (%d iterations, residual %.1e)",
                 self.n, method, record.seconds, iterations, residual)
        return x, record

    def _iterate(self, b: np.ndarray, bnorm: float, history: list[float]) -> tuple[np.ndarray, bool]:
        """Preconditioned CG (pyamg's, on the residual) or restarted GMRES (scipy's, converged on the
        true residual; history holds its preconditioned residual estimates) from zero."""
        import pyamg.krylov

        M = self._amg.preconditioner()
        watch = self._watch(history, bnorm)
        with _one_thread(), warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                self._last = np.zeros_like(b)
                if self.symmetric:
                    x, _ = pyamg.krylov.cg(self.A, b, tol=self.rtol, maxiter=self.maxiter, M=M,
                                           callback=lambda xk: watch(xk), residuals=history)
                else:
                    history.append(bnorm)
                    x, _ = spla.gmres(self.A, b, rtol=self.rtol, restart=RESTART, M=M,
                                      maxiter=-(-self.maxiter // RESTART), callback_type="pr_norm",
                                      callback=lambda pr: (history.append(pr * bnorm), watch(None)))
                stalled = any("ndefinite" in str(w.message) for w in caught)  # pyamg's CG gave up
            except _Stalled:
                x, stalled = self._last, True
        return np.asarray(x, dtype=float).ravel(), stalled

    def approximate_inverse(self):
        """x -> A^-1 x approximately, a fixed linear map for preconditioning an outer Krylov solve:
        the factorisation (exact), or one AMG V-cycle."""
        if self.method == "direct":
            return self._direct.solve
        return self._amg.preconditioner().matvec

    def _watch(self, history: list[float], bnorm: float):
        """Log every tenth iteration; stop a stalled iteration: less than 2x in the last 30 below a
        relative residual of FLOOR, which is where CG sits when it has reached its round-off floor
        above rtol (measured at 2e6 unknowns).  A plateau above FLOOR is not a floor (CG can leave it
        once it has resolved the few slow modes, e.g. of a soft layer): there only maxiter stops."""
        def report(xk):
            if xk is not None:
                self._last = xk
            k = len(history) - 1
            if k % 10 == 0:
                log.info("AMG-%s iteration %d: relative residual %.2e", self.accel.upper(), k, history[-1] / bnorm)
            if k >= 30 and history[-1] > 0.5 * history[-31] and history[-1] <= FLOOR * bnorm:
                raise _Stalled()
        return report


def solve(A: sp.spmatrix, b: np.ndarray, method: str = "auto", rtol: float = 1e-10,
          near_null: np.ndarray | None = None, maxiter: int = 500, layout: Layout | None = None,
          memory_limit: float | None = None) -> tuple[np.ndarray, SolveRecord]:
    """Solve ``A x = b`` once (CG if A is symmetric, GMRES if not); returns x and its record.

    With ``method="auto"`` an AMG solve that does not converge is retried with the direct solver
    whenever its memory estimate (``direct_memory``) fits in ``memory_limit`` bytes (default: what is
    available), and the record says so; otherwise the error says what the direct solver would need."""
    prepared = Prepared(A, method, near_null, rtol, maxiter, layout)
    try:
        return prepared.solve(b)
    except errors.SolverError as exc:
        if method != "auto" or prepared.method != "amg":
            raise
        need, room = direct_memory(prepared.A), memory_room(memory_limit)
        if need > room:
            raise errors.SolverError(f"{exc.problems[0]}; the direct solver would need about {_size(need)}, "
                                     f"more than the {_size(room)} "
                                     f"{'of the memory_limit' if memory_limit else 'available'}") from None
        log.warning("%s; retrying with the direct solver", exc.problems[0])
        stalled_at, spent = prepared.last_residual, prepared.spent
        del prepared  # the hierarchy's memory goes before the factorisation's comes
        x, record = Prepared(A, "direct", rtol=rtol).solve(b)
        return x, SolveRecord(f"direct (after AMG stalled at {stalled_at:.1e})", record.unknowns,
                              record.iterations, record.residual, record.seconds + spent,
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
    return _peak(unknowns, ENTRIES_PER_ROW[(order, components)] * unknowns, method)


def direct_memory(A: sp.spmatrix) -> int:
    """Peak bytes of a stage that factorises the assembled ``A`` (the estimate from its entries)."""
    return _peak(A.shape[0], A.nnz, "direct")


def _peak(unknowns: int, entries: float, method: str) -> int:
    per_entry = BYTES_PER_ENTRY[method] * (max(1.0, unknowns / 2e4) ** 0.35 if method == "direct" else 1.0)
    return int(per_entry * entries + BYTES_PER_UNKNOWN * unknowns)


def available_memory() -> int:
    """Bytes the system can still give (psutil's ``available``: what can be used without swapping)."""
    import psutil

    return int(psutil.virtual_memory().available)


def memory_room(limit: float | None) -> int:
    """Bytes a stage may use: ``limit`` if given, else what is available."""
    return int(limit) if limit is not None else available_memory()


def check_memory(unknowns: int, order: int, components: int, method: str, limit: float | None,
                 where: str) -> int:
    """Refuse, before assembly, a model whose estimate exceeds ``limit`` bytes (default: what is
    available); returns the estimate."""
    chosen = choose(unknowns, method, components)
    need = estimate_memory(unknowns, order, components, chosen)
    room = memory_room(limit)
    if need > room:
        other = "; the AMG solver (solver = \"amg\") needs less" if chosen == "direct" else ""
        coarser = "use a coarser mesh" + (" or order = 1" if order > 1 else "")
        raise errors.InputError(
            f"{where}: the model has {unknowns:,} unknowns (P{order}, {components} per point) and needs about "
            f"{_size(need)} with the {chosen} solver, but {_size(room)} "
            f"{'is the memory_limit' if limit is not None else 'is available'}; {coarser}{other}")
    return need


# --------------------------------------------------------------------------------------------- risk

#: Stiffness contrast (largest / smallest Young's modulus among the parts) from which an elasticity
#: solve is reported as hard at planning: there smoothed aggregation with pyamg's defaults needed
#: several times its single-material iterations or stalled (docs/performance.md, solver strategy).
HARD_CONTRAST = 1e3
#: Poisson ratio from which a part counts as nearly incompressible (its bulk modulus is over 5x its
#: shear modulus; the iteration counts of docs/performance.md grow from there).
NEARLY_INCOMPRESSIBLE = 0.45


def risk(moduli: dict[str, tuple[float, ...]], poisson: dict[str, tuple[float, ...]], unknowns: int, order: int,
         method: str = "auto", memory_limit: float | None = None, where: str = "stress") -> dict | None:
    """A planning notice when the elasticity system is hard for iterative solvers, or None.

    moduli, poisson: part -> its Young's moduli [Pa] and Poisson ratios (one value, or three for an
    orthotropic material).  The record (code, where, message, data) names the contrast, the most
    nearly incompressible part and the strategy chosen for it."""
    stiff = max(moduli, key=lambda p: max(moduli[p]))
    soft = min(moduli, key=lambda p: min(moduli[p]))
    contrast = max(moduli[stiff]) / min(moduli[soft])
    squeezed = max(poisson, key=lambda p: max(poisson[p]))
    nu = float(max(poisson[squeezed]))
    hard_contrast, incompressible = contrast >= HARD_CONTRAST, nu >= NEARLY_INCOMPRESSIBLE
    if not (hard_contrast or incompressible):
        return None
    chosen = choose(unknowns, method, 3)
    reasons = []
    if hard_contrast:
        reasons.append(f"a stiffness contrast of {contrast:.1e} ('{stiff}' against '{soft}')")
    if incompressible:
        reasons.append(f"a nearly incompressible part ('{squeezed}', Poisson ratio {nu:.3g})")
    need = estimate_memory(unknowns, order, 3, "direct")
    room = memory_room(memory_limit)
    if chosen == "direct":
        strategy = "the sparse direct solver (small model), which these do not affect"
    else:
        strategy = ("CG preconditioned by " + ("a two-level P2/P1 method with " if order == 2 else "") +
                    f"nodal smoothed aggregation (strength threshold {THETA}, energy-minimising "
                    "prolongation, W-cycle)")
        if method == "auto":
            strategy += (f"; if it stalls, the direct solver (about {_size(need)}, which fits)" if need <= room else
                         f"; no direct fallback: it would need about {_size(need)} of {_size(room)}")
    return {"code": "solver.hard_system", "where": where,
            "message": f"{' and '.join(reasons)}: hard for iterative solvers (docs/performance.md, solver "
                       f"strategy); the solve uses {strategy}",
            "data": {"contrast": contrast, "stiffest": stiff, "softest": soft, "poisson": nu,
                     "poisson_part": squeezed, "method": chosen, "direct_bytes": need,
                     "direct_fits": need <= room, "strategy": strategy}}


def _size(n: float) -> str:
    return f"{n / 2**30:.2f} GiB" if n >= 2**30 else f"{n / 2**20:.1f} MiB"
