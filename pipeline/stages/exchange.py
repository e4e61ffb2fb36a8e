"""Grey diffuse radiation exchange among patches by the net-radiation (radiosity) method.

With view factors F (patch to patch) and F_s (patch to surroundings, black at T_s) from the view
stage, emissive powers E_i = sigma <T^4>_i (the patch's area mean), radiosity J and irradiation G
(Incropera et al., Fundamentals of Heat and Mass Transfer, 6th ed., sec. 13.2-13.3):

    J = eps E + (1 - eps) G,   G = F J + F_s E_s,   q = J - G = eps (E - G)   [W/m^2, leaving]

so that (I - diag(1 - eps) F) J = eps E + (1 - eps) F_s E_s and q = Q E + c E_s with a dense Q
(n_patch, n_patch) computed once.  q is applied uniformly over each patch; the heat residual gains
R_ex(T) = U q(T) (U: the load of a unit flux on each patch) and the Newton tangent U Q dE/dT, a
low-rank dense block that is never formed: the Newton step is solved by GMRES on the exact tangent,
preconditioned by the sparse tangent with each patch's self-exchange as a film (solved by the
stage's own direct or AMG preparation).  The net flow from patch i to patch j is
A_i F_ij (J_i - J_j), to the surroundings A_i F_i,s (J_i - E_s): the paths of the balance.
Units: T [K], E, J, G, q [W/m^2], areas [m^2].
"""

from __future__ import annotations

import time
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import scipy.linalg as la
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from .. import errors
from . import kernels, solvers

SIGMA = 5.670374419e-8  # W/(m^2*K^4), CODATA 2018 exact value
#: relative residual of the GMRES solve of a Newton step
RTOL = 1e-10


@dataclass(frozen=True)
class ExchangeGroup:
    """Radiative properties of one view-factor group: emissivity by surface or part name (0..1; a
    part's value wins over its surface's), surroundings [K] for an open group (None: enclosure)."""

    emissivity: Mapping[str, float]
    surroundings: float | None = None


def problems(domain, view, groups: Mapping[str, ExchangeGroup], where: str) -> list[str]:
    """What is wrong with ``groups`` against ``view``: the view stage's ViewSpec (while planning) or
    its ViewFactors."""
    from . import view as view_mod

    out = []
    for name, g in groups.items():
        key = f"{where}.radiation_exchange.{name}"
        if name not in view.groups:
            out.append(errors.unknown_name("view-factor group", name, view.groups, f"{where}.radiation_exchange"))
            continue
        v = view.groups[name]
        pairs = v.labels if hasattr(v, "labels") else view_mod.labels(domain, [s for s in v.surfaces
                                                                              if s in domain.surfaces])
        names = {s for s, _ in pairs} | {p for _, p in pairs}
        for k, e in g.emissivity.items():
            if k not in names:
                out.append(errors.unknown_name("surface or part of the group", k, sorted(names), f"{key}.emissivity"))
            elif not 0 <= e <= 1:
                out.append(f"{key}.emissivity.{k}: must lie in 0..1, got {e}")
        missing = sorted({f"{s}/{p}" for s, p in pairs if p not in g.emissivity and s not in g.emissivity})
        if missing:
            out.append(f"{key}.emissivity: no emissivity for {', '.join(missing)}; give one per surface or part")
        if not v.enclosure and g.surroundings is None:
            out.append(f"{key}.surroundings: group '{name}' is open (it sees its surroundings); give their temperature")
        if v.enclosure and g.surroundings is not None:
            out.append(f"{key}.surroundings: group '{name}' is an enclosure and sees no surroundings; remove it")
        if g.surroundings is not None and not g.surroundings >= 0:
            out.append(f"{key}.surroundings: must be >= 0 K, got {g.surroundings}")
    return out


class _Group:
    """One group on the heat stage's space: patch operators and the dense exchange matrix."""

    def __init__(self, name, space, geom, view, g: ExchangeGroup, degree):
        self.name, self.view = name, view
        self.facets = kernels.Facets(space, geom, view.facets, degree)
        self.patch, self.area, self.n = view.patch, view.area, len(view.area)
        lab = view.labels
        self.eps = np.array([g.emissivity.get(lab[k][1], g.emissivity.get(lab[k][0], np.nan)) for k in view.label])
        self.Es = SIGMA * (g.surroundings or 0.0) ** 4
        F, Fs, eps = view.F, view.surroundings, self.eps
        self.lu = la.lu_factor(np.eye(self.n) - (1 - eps)[:, None] * F)
        self.Q = eps[:, None] * (np.eye(self.n) - F @ la.lu_solve(self.lu, np.diag(eps)))
        self.c = -eps * (F @ la.lu_solve(self.lu, (1 - eps) * Fs) + Fs)
        # U: the load of a unit flux on each patch, (N, n_patch)
        f = self.facets
        local = np.einsum("nq,niq->ni", f.weights, f.phi)
        self.U = sp.csr_matrix((local.ravel(), (f.dofs.ravel(), np.repeat(self.patch, f.dofs.shape[1]))),
                               shape=(space.N, self.n))
        self.V = None

    def emissive(self, T):
        """Patch emissive powers E [W/m^2] and the facet temperatures at the quadrature points."""
        t = self.facets.values(T)
        return SIGMA * np.bincount(self.patch, np.sum(self.facets.weights * t**4, axis=1), self.n) / self.area, t

    def flux(self, T):
        """Net flux leaving each patch [W/m^2], the emissive powers and the radiosities."""
        E, _ = self.emissive(T)
        J = la.lu_solve(self.lu, self.eps * E + (1 - self.eps) * self.view.surroundings * self.Es)
        return self.Q @ E + self.c * self.Es, E, J

    def residual(self, T):
        q, _, _ = self.flux(T)
        return self.U @ q

    def tangent(self, T):
        """The sparse part (each patch's self-exchange as a film) and dE/dT for the rest."""
        _, t = self.emissive(T)
        f = self.facets
        slope = 4 * SIGMA * t**3
        local = np.einsum("nq,niq->ni", f.weights * slope, f.phi) / self.area[self.patch][:, None]
        self.V = sp.csr_matrix((local.ravel(), (np.repeat(self.patch, f.dofs.shape[1]), f.dofs.ravel())),
                               shape=(self.n, f.space.N))
        self.L = f.mass(slope * np.maximum(np.diag(self.Q), 0.0)[self.patch][:, None]).matrix()
        return self.L

    def paths(self, T):
        """Net heat flows [W] between the group's labels and to the surroundings, and per label the
        heat leaving by radiation."""
        q, E, J = self.flux(T)
        lab, names = self.view.label, [f"{s}/{p}" for s, p in self.view.labels]
        F, A = self.view.F, self.area
        flow = A[:, None] * F * (J[:, None] - J[None, :])
        k = len(names)
        between = np.zeros((k, k))
        np.add.at(between, (lab[:, None], lab[None, :]), flow)
        out = [{"group": self.name, "from": names[a], "to": names[b], "W": float(between[a, b])}
               for a in range(k) for b in range(a + 1, k) if between[a, b] or between[b, a]]
        if not self.view.enclosure:
            to_sur = np.bincount(lab, A * self.view.surroundings * (J - self.Es), k)
            out += [{"group": self.name, "from": names[a], "to": "surroundings", "W": float(to_sur[a])}
                    for a in range(k)]
        leaving = np.bincount(lab, A * q, k)
        return out, leaving


class Coupling:
    """Radiation exchange of every group on the heat stage's space: residual, tangent, Newton step
    and balance (see the module docstring)."""

    def __init__(self, space, geom, view, groups: Mapping[str, ExchangeGroup], degree: int):
        self.groups = [_Group(n, space, geom, view.groups[n], g, degree) for n, g in groups.items()]

    @property
    def surroundings(self) -> list[float]:
        return [g.Es for g in self.groups if not g.view.enclosure]

    def residual(self, T):
        return sum(g.residual(T) for g in self.groups)

    def tangent(self, T):
        return sum(g.tangent(T) for g in self.groups)

    def step(self, A, b, free, method: str = "auto", lift=None):
        """Solve the Newton step (A - L + U Q V) x = b on the free unknowns by GMRES, preconditioned by
        the sparse tangent A; returns x and a SolveRecord.  lift: the field's dofs from the unknowns
        (S, shape (N, n), e.g. with tied dofs and cavity air temperatures); the exchange acts through
        S^T (U Q V - L) S.  Default: the unknowns are the dofs."""
        start = time.perf_counter()
        prepared = solvers.Prepared(A, method)
        S = lift if lift is not None else sp.identity(self.groups[0].V.shape[1], format="csr")
        parts = [((S.T @ g.L @ S).tocsr()[free][:, free], (S.T @ g.U)[free], g.Q, (g.V @ S).tocsr()[:, free])
                 for g in self.groups]

        def apply(x):
            y = A @ x
            for L, U, Q, V in parts:
                y += U @ (Q @ (V @ x)) - L @ x
            return y

        n = len(b)
        op = spla.LinearOperator((n, n), matvec=apply, dtype=float)
        M = spla.LinearOperator((n, n), matvec=prepared.approximate_inverse(), dtype=float)
        iterations = []
        x, info = spla.gmres(op, b, M=M, rtol=RTOL, atol=0.0, restart=100, maxiter=10,
                             callback=lambda r: iterations.append(float(r)), callback_type="pr_norm")
        residual = float(np.linalg.norm(apply(x) - b) / (np.linalg.norm(b) or 1.0))
        if info != 0 and residual > 1e3 * RTOL:
            raise errors.SolverError(f"the Newton step with radiation exchange did not converge: GMRES relative "
                                     f"residual {residual:.1e} after {len(iterations)} iterations")
        by = "its factorisation" if prepared.method == "direct" else "an AMG V-cycle"
        return x, solvers.SolveRecord(
            f"gmres on the exchange tangent, preconditioned by {by}", n, len(iterations), residual,
            time.perf_counter() - start, tuple(iterations), prepared.setup_seconds, False, prepared.backend)

    def balance(self, T):
        """Balance rows (heat into the body by radiation exchange, per surface) and the paths."""
        rows, paths = {}, []
        for g in self.groups:
            p, leaving = g.paths(T)
            paths += p
            for (surface, _), w in zip(g.view.labels, leaving):
                rows[surface] = rows.get(surface, 0.0) - float(w)
        return [{"name": s, "kind": "radiation_exchange", "heat_in_W": w} for s, w in rows.items()], paths
