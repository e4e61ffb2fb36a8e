"""Interfaces between parts, shared by the stages: contact conductance across a split interface and
continuity constraints (ties) that keep two sides together.

Contact conductance (the heat stage), on an interface split into sides a and b with matching nodes:
    int_G h_c (T_a - T_b)(v_a - v_b) dA,   q'' = h_c (T_a - T_b) = (T_a - T_b) / R''
[Incropera et al., Fundamentals of Heat and Mass Transfer, 6th ed., sec. 3.1.4, thermal contact
resistance].  The facet integral uses side a's facets with side b's copy of each dof.

Ties: a linear map u = P w from reduced unknowns w to all unknowns.  Rows of P at a tied dof hold the
weights of the dofs it follows, columns of tied dofs are zero, every other dof maps to itself.
- a split interface's side b follows side a node for node (same displacement on both sides);
- parts meshed apart ("tie" joints): each dof of the tied side's faces follows the reference side's
  field interpolated at its location (projected on the reference face): a node-to-surface
  collocation constraint (multipoint constraint; Zienkiewicz, Taylor & Zhu, The Finite Element Method:
  Its Basis and Fundamentals, 7th ed., sec. on tied interfaces / multipoint constraints, from memory).
  It reproduces a field that is linear (P1) or quadratic (P2) on the reference side at the tied nodes;
  between them the tied side is not conforming, so fluxes through the tie are exact only to the order
  of the mesh (a mortar method would pass the patch test exactly; not implemented).
The reduced system is P^T K P w = P^T f; the tied dofs are then eliminated like fixed ones.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from .. import errors
from . import fem, kernels


def partner(space: kernels.Space, contact) -> np.ndarray:
    """Dof map over all dofs: each side-a dof of the contact's facets -> its side-b copy; identity elsewhere."""
    out = np.arange(space.N)
    ta, tb = contact.triangles
    out[ta.ravel()] = tb.ravel()
    if space.order == 2:  # edge dofs: the edge (a_i, a_j) <-> the edge (b_i, b_j)
        ea, eb = _edge_ids(space, ta), _edge_ids(space, tb)
        out[space.mesh.nvertices + ea] = space.mesh.nvertices + eb
    return out


def _edge_ids(space: kernels.Space, tri: np.ndarray) -> np.ndarray:
    """Edge ids (k, 3) of the edges (0,1), (1,2), (0,2) of triangles given by node ids."""
    edges = np.sort(space.mesh.edges, axis=0)
    n = space.mesh.nvertices
    keys = edges[0].astype(np.int64) * n + edges[1]
    order = np.argsort(keys)
    out = []
    for i, j in ((0, 1), (1, 2), (0, 2)):
        a, b = np.minimum(tri[:, i], tri[:, j]), np.maximum(tri[:, i], tri[:, j])
        out.append(order[np.searchsorted(keys, a.astype(np.int64) * n + b, sorter=order)])
    return np.stack(out, axis=1)


@dataclass
class ContactTerm:
    """The conductance term of one contact: side a's facets, the dof map and the matrix [W/K]."""

    facets: kernels.Facets
    partner: np.ndarray
    conductance: float
    matrix: sp.csr_matrix

    def jump(self, T: np.ndarray) -> np.ndarray:
        """T_a - T_b (n, nq) at side a's facet quadrature points [K]."""
        return self.facets.values(T) - self.facets.values(T[self.partner])

    def heat(self, T: np.ndarray) -> float:
        """Heat from side a to side b [W]."""
        return self.facets.integral(self.conductance * self.jump(T))

    def record(self, name: str, contact, T: np.ndarray) -> dict:
        """Heat through the interface and its temperature drop (area mean and largest at its nodes)."""
        area = float(self.facets.area.sum())
        jump = self.facets.integral(self.jump(T)) / area
        pairs = contact.node_pairs
        nodal = T[pairs[:, 0]] - T[pairs[:, 1]]
        return {"name": name, "parts": list(contact.parts), "conductance_W_per_m2K": self.conductance,
                "area_m2": area, "heat_W": self.heat(T), "mean_drop_K": float(jump),
                "max_drop_K": float(nodal[np.argmax(np.abs(nodal))])}


def contact_term(space: kernels.Space, geom: kernels.Geometry, contact, conductance: float) -> ContactTerm:
    """Matrix of int h_c (u_a - u_b)(v_a - v_b) dA on the contact's side-a facets (exact quadrature)."""
    facets = kernels.Facets(space, geom, contact.facets[0], kernels.degree_mass(space.order))
    pmap = partner(space, contact)
    cq = facets.weights * conductance
    m = np.matmul(facets.phi * cq[:, None, :], facets.phi.transpose(0, 2, 1))  # (n, nb, nb)
    dofs = np.concatenate([facets.dofs, pmap[facets.dofs]], axis=1)
    blocks = np.block([[m, -m], [-m, m]])
    out = kernels.Assembler(space.N)
    out.add(dofs, blocks)
    return ContactTerm(facets, pmap, conductance, out.matrix())


# ----------------------------------------------------------------------------------------------- ties

@dataclass(frozen=True)
class Continuity:
    """u = P w on a scalar space: ``tied`` dofs follow others (their columns in P are zero)."""

    P: sp.csr_matrix
    tied: np.ndarray

    @property
    def empty(self) -> bool:
        return len(self.tied) == 0

    def vector(self) -> "Continuity":
        """The same map on a 3-component vector space (dof 3 s + c)."""
        tied = (3 * self.tied[:, None] + np.arange(3)).ravel()
        return Continuity(sp.kron(self.P, sp.identity(3), format="csr"), tied)

    def reduce(self, K: sp.spmatrix) -> sp.csr_matrix:
        """P^T K P."""
        return (self.P.T @ K @ self.P).tocsr()

    def expand(self, w: np.ndarray) -> np.ndarray:
        """All values from the reduced ones (tied dofs recomputed)."""
        return self.P @ w


def continuity(domain, space: kernels.Space, contacts=(), where: str = "interfaces") -> Continuity:
    """The tie map of ``domain``: side b of each named contact follows side a dof for dof; the tied side
    of each ``domain.ties`` entry follows its reference side's faces.  contacts: names of the contacts
    to tie (all of them for the stress stage)."""
    rows, cols, vals = [], [], []
    for name in contacts:
        pmap = partner(space, domain.contacts[name])
        b = np.flatnonzero(pmap != np.arange(space.N))
        rows.append(pmap[b])
        cols.append(b)
        vals.append(np.ones(len(b)))
    for name, tie in domain.ties.items():
        r, c, v = _node_to_surface(domain, space, tie, f"{where}.{name}")
        rows.append(r)
        cols.append(c)
        vals.append(v)
    if not rows:
        return Continuity(sp.identity(space.N, format="csr"), np.zeros(0, dtype=np.int64))
    rows, cols, vals = np.concatenate(rows), np.concatenate(cols), np.concatenate(vals)
    tied = np.unique(rows)
    if np.intersect1d(tied, cols).size:
        raise errors.InputError(f"{where}: a tied node also carries another tie (ties in a chain, or an interface "
                                "tied from both sides); tie each pair once, from one side")
    keep = np.setdiff1d(np.arange(space.N), tied)
    P = sp.coo_matrix((np.r_[np.ones(len(keep)), vals], (np.r_[keep, rows], np.r_[keep, cols])),
                      shape=(space.N, space.N)).tocsr()
    return Continuity(P, tied)


def _node_to_surface(domain, space: kernels.Space, tie, where: str):
    """(tied dof, reference dof, weight) triplets: each dof on the tied faces follows the reference
    element's field at its projection on the nearest reference face."""
    from scipy.spatial import cKDTree

    mesh = domain.mesh
    slaves = space.facet_dofs(tie.facets[0])
    x = space.doflocs[:, slaves].T
    ref = tie.facets[1]
    tri = domain.points[mesh.facets[:, ref].T]
    centres = tri.mean(axis=1)
    size = np.max(np.linalg.norm(tri - centres[:, None], axis=2), axis=1)
    tree = cKDTree(centres)
    best = np.full(len(x), -1)
    outside = np.full(len(x), np.inf)
    proj = np.zeros_like(x)
    e1, e2 = tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0]
    normal = np.cross(e1, e2)
    normal /= np.linalg.norm(normal, axis=1, keepdims=True)
    for i, near in enumerate(tree.query_ball_point(x, 1.01 * size.max())):
        near = np.asarray(near, dtype=np.int64)
        if not len(near):
            continue
        d = x[i] - tri[near, 0]
        onplane = x[i] - np.einsum("n,nd->nd", np.einsum("nd,nd->n", d, normal[near]), normal[near])
        lam = _barycentric(onplane - tri[near, 0], e1[near], e2[near])
        worst = -np.min(lam, axis=1)  # how far outside the triangle (0 inside)
        k = int(np.argmin(worst))
        if worst[k] < outside[i]:
            best[i], outside[i], proj[i] = near[k], worst[k], onplane[k]
    lost = np.flatnonzero(outside > 1e-6)
    if len(lost):
        raise errors.InputError(f"{where}: {len(lost)} nodes of part '{tie.parts[0]}' on the tie lie on no face of "
                                f"part '{tie.parts[1]}' (first at {x[lost[0]].tolist()} m); tie the parts the other "
                                "way round (the side with the smaller faces first) or check the touching area")
    cells = mesh.f2t[0, ref[best]]
    dofs, phi = fem.probe_weights(domain, space.order, proj.T, cells)
    phi[np.abs(phi) < 1e-12] = 0.0  # basis functions off the face vanish there
    rows = np.repeat(slaves[None, :], dofs.shape[0], axis=0)
    keep = phi != 0
    return rows[keep], dofs[keep], phi[keep]


def _barycentric(d: np.ndarray, e1: np.ndarray, e2: np.ndarray) -> np.ndarray:
    """(n, 3) barycentric coordinates of points d (relative to corner 0) in triangles (e1, e2)."""
    a11, a12, a22 = (np.einsum("nd,nd->n", x, y) for x, y in ((e1, e1), (e1, e2), (e2, e2)))
    b1, b2 = np.einsum("nd,nd->n", d, e1), np.einsum("nd,nd->n", d, e2)
    det = a11 * a22 - a12**2
    s, t = (a22 * b1 - a12 * b2) / det, (a11 * b2 - a12 * b1) / det
    return np.stack([1 - s - t, s, t], axis=1)
