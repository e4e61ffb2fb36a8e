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

    def release(self, dofs: np.ndarray) -> "Continuity":
        """The map with ``dofs`` no longer tied (each its own unknown again): for dofs that a boundary
        condition prescribes, which then prevails over the tie (the usual treatment of tied nodes on a
        Dirichlet boundary)."""
        dofs = np.intersect1d(dofs, self.tied)
        if not len(dofs):
            return self
        mask = np.zeros(self.P.shape[0])
        mask[dofs] = 1.0
        P = sp.diags(1.0 - mask) @ self.P + sp.diags(mask)
        return Continuity(P.tocsr(), np.setdiff1d(self.tied, dofs))

    def reduce(self, K: sp.spmatrix) -> sp.csr_matrix:
        """P^T K P (K itself without ties)."""
        return K.tocsr() if self.empty else (self.P.T @ K @ self.P).tocsr()

    def load(self, f: np.ndarray) -> np.ndarray:
        """P^T f: loads on tied dofs passed on to the dofs they follow."""
        return f if self.empty else self.P.T @ f

    def expand(self, w: np.ndarray) -> np.ndarray:
        """All values from the reduced ones (tied dofs recomputed)."""
        return w if self.empty else self.P @ w


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
        r, c, v = _mortar(domain, space, tie, f"{where}.{name}")
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


def _mortar(domain, space: kernels.Space, tie, where: str):
    """(tied dof, reference dof, weight) triplets of the mortar tie u_s = D^-1 M u_m, where
    D_ij = int N_i N_j and M_ij = int N_i N^m_j over the tied side's faces (the reference side's
    shape functions N^m on its faces, projected).  The overlap of each pair of faces is clipped
    (Sutherland-Hodgman) and integrated exactly for the polynomial product (degree 2p)."""
    from scipy.sparse.linalg import splu
    from scipy.spatial import cKDTree

    mesh, order = domain.mesh, space.order
    geom = fem.geometry(domain)
    slave = tie.facets[0]
    # every outer face of the reference part may overlap (not only those whose centroid lies on the tied side)
    bnd = mesh.boundary_facets()
    master = bnd[np.isin(mesh.f2t[0, bnd], domain.parts[tie.parts[1]])]
    slave_dofs = space.facet_dofs(slave)
    ts, tm = (domain.points[mesh.facets[:, f].T] for f in (slave, master))  # (k, 3, 3)
    cs, cm = ts.mean(axis=1), tm.mean(axis=1)
    rs = np.max(np.linalg.norm(ts - cs[:, None], axis=2), axis=1)
    rm = np.max(np.linalg.norm(tm - cm[:, None], axis=2), axis=1)
    normal_m = np.cross(tm[:, 1] - tm[:, 0], tm[:, 2] - tm[:, 0])
    normal_m /= np.linalg.norm(normal_m, axis=1, keepdims=True)
    from skfem.quadrature import get_quadrature_tri

    qp, qw = get_quadrature_tri(2 * order)  # on the unit triangle, weights sum to 1/2
    points, weights, s_cells, m_cells, m_facet, s_facet = [], [], [], [], [], []
    tree = cKDTree(cm)
    for i, near in enumerate(tree.query_ball_point(cs, rs + rm.max())):
        o, e1 = ts[i, 0], ts[i, 1] - ts[i, 0]
        e1 = e1 / np.linalg.norm(e1)
        n = np.cross(ts[i, 1] - ts[i, 0], ts[i, 2] - ts[i, 0])
        n /= np.linalg.norm(n)
        e2 = np.cross(n, e1)
        frame = np.stack([e1, e2])  # (2, 3): plane coordinates of the slave face
        clip = (ts[i] - o) @ frame.T
        for j in near:
            if abs(normal_m[j] @ n) < 0.99 or np.abs((tm[j] - o) @ n).max() > 1e-3 * rs[i]:
                continue  # not on the tied face's plane
            poly = _clip((tm[j] - o) @ frame.T, clip)
            for a, b, c in ((poly[0], poly[k], poly[k + 1]) for k in range(1, len(poly) - 1)):
                area = 0.5 * abs((b[0] - a[0]) * (c[1] - a[1]) - (b[1] - a[1]) * (c[0] - a[0]))
                if area <= 1e-14 * rs[i] ** 2:
                    continue
                xy = a[:, None] + np.outer(b - a, qp[0]) + np.outer(c - a, qp[1])  # (2, nq)
                points.append(o[:, None] + frame.T @ xy)
                weights.append(2 * area * qw)
                s_cells.append(np.full(len(qw), mesh.f2t[0, slave[i]]))
                m_cells.append(np.full(len(qw), mesh.f2t[0, master[j]]))
                m_facet.append(np.full(len(qw), j))
                s_facet.append(np.full(len(qw), i))
    if not points:
        raise errors.InputError(f"{where}: the faces of parts '{tie.parts[0]}' and '{tie.parts[1]}' do not overlap")
    x, w = np.hstack(points), np.concatenate(weights)
    covered = np.bincount(np.concatenate(s_facet), w, minlength=len(slave))  # overlap area per tied face
    area = 0.5 * np.linalg.norm(np.cross(ts[:, 1] - ts[:, 0], ts[:, 2] - ts[:, 0]), axis=1)
    short = np.flatnonzero(covered < (1 - 1e-6) * area)
    if len(short):
        raise errors.InputError(f"{where}: {len(short)} faces of part '{tie.parts[0]}' reach past the faces of part "
                                f"'{tie.parts[1]}' (covered down to {covered[short].min() / area[short].max():.1%}); "
                                "the tied (first) part must be the one whose touching faces lie within the other's: "
                                "tie them the other way round")
    j = np.concatenate(m_facet)
    xm = x - np.einsum("nd,dn->n", normal_m[j], x - tm[j, 0].T) * normal_m[j].T  # onto the reference face
    ds, ps = fem.probe_weights(domain, order, x, np.concatenate(s_cells))
    dm, pm = fem.probe_weights(domain, order, xm, np.concatenate(m_cells))
    ps[np.abs(ps) < 1e-12], pm[np.abs(pm) < 1e-12] = 0.0, 0.0  # shape functions off the face vanish there
    nb = ds.shape[0]
    rows = np.repeat(ds[:, None, :], nb, axis=1).ravel()
    cols = np.repeat(dm[None, :, :], nb, axis=0).ravel()
    vals = (ps[:, None, :] * pm[None, :, :] * w).ravel()
    keep = vals != 0
    local = np.full(space.N, -1)
    local[slave_dofs] = np.arange(len(slave_dofs))
    masters, cols_local = np.unique(cols[keep], return_inverse=True)
    M = sp.coo_matrix((vals[keep], (local[rows[keep]], cols_local)), shape=(len(slave_dofs), len(masters))).tocsc()
    mass = kernels.Facets(space, geom, slave, kernels.degree_mass(order)).mass(1.0).matrix()
    D = mass[slave_dofs][:, slave_dofs].tocsc()
    if len(slave_dofs) * len(masters) > 5e7:
        raise errors.InputError(f"{where}: the tie has {len(slave_dofs)} x {len(masters)} interface unknowns, too many for "
                                "this tie (its map is dense); fragment the volumes in the mesher instead")
    X = splu(D).solve(M.toarray())
    X[np.abs(X) < 1e-12 * np.abs(X).max()] = 0.0
    r, c = np.nonzero(X)
    return slave_dofs[r], masters[c], X[r, c]


def _clip(subject: np.ndarray, triangle: np.ndarray) -> np.ndarray:
    """The part of a convex polygon (n, 2) inside a triangle (3, 2) (Sutherland-Hodgman clipping)."""
    u, v = triangle[1] - triangle[0], triangle[2] - triangle[0]
    if u[0] * v[1] - u[1] * v[0] < 0:
        triangle = triangle[::-1]
    out = subject
    for k in range(3):
        a, b = triangle[k], triangle[(k + 1) % 3]
        if not len(out):
            break
        side = (b[0] - a[0]) * (out[:, 1] - a[1]) - (b[1] - a[1]) * (out[:, 0] - a[0])
        inside = side >= -1e-12 * np.abs(side).max(initial=1.0)
        kept = []
        for i in range(len(out)):
            j = (i + 1) % len(out)
            if inside[i]:
                kept.append(out[i])
            if inside[i] != inside[j]:
                t = side[i] / (side[i] - side[j])
                kept.append(out[i] + t * (out[j] - out[i]))
        out = np.array(kept).reshape(-1, 2)
    return out


def _barycentric(d: np.ndarray, e1: np.ndarray, e2: np.ndarray) -> np.ndarray:
    """(n, 3) barycentric coordinates of points d (relative to corner 0) in triangles (e1, e2)."""
    a11, a12, a22 = (np.einsum("nd,nd->n", x, y) for x, y in ((e1, e1), (e1, e2), (e2, e2)))
    b1, b2 = np.einsum("nd,nd->n", d, e1), np.einsum("nd,nd->n", d, e2)
    det = a11 * a22 - a12**2
    s, t = (a22 * b1 - a12 * b2) / det, (a11 * b2 - a12 * b1) / det
    return np.stack([1 - s - t, s, t], axis=1)


def move_rows(cont: Continuity, rows: list, approximate: set[str], where: str):
    """Support rows (points, directions, values, name) on tied points, and the vector tie map to use.

    A point that follows one other point (a split interface) moves there exactly.  On a point that
    follows a face's interpolation (a mortar tie), a support along a coordinate axis takes that
    component out of the tie (the support prevails); the minimal support (which only removes rigid
    motion) moves to the heaviest point it follows; any other support there is refused."""
    vector = cont.vector()
    if cont.empty:
        return rows, vector
    tied = np.zeros(cont.P.shape[0], dtype=bool)
    tied[cont.tied] = True
    out, refused, released = [], set(), []
    for points, directions, values, name in rows:
        points = np.asarray(points).copy()
        for i in np.flatnonzero(tied[points]):
            row = cont.P.getrow(points[i])
            k = int(np.argmax(row.data))
            axis = np.flatnonzero(np.abs(directions[i]) > 1 - 1e-12)
            if row.data[k] > 1 - 1e-12 or name in approximate:
                points[i] = row.indices[k]
            elif len(axis):
                released.append(3 * points[i] + axis[0])
            else:
                refused.add(name)
        out.append((points, directions, values, name))
    if refused:
        raise errors.InputError([f"{where}.supports.{n}: the support is oblique on the tied side of a tie between "
                                 "parts meshed apart; tie the parts the other way round (list the supported part "
                                 "second)" for n in sorted(refused)])
    return out, vector.release(np.array(released, dtype=np.int64))


def with_tied(constraints, cont: Continuity):
    """Constraints with the tied dofs added as fixed at zero in the reduced system.  At a point with a
    local frame (a support whose component was taken out of the tie), the tied components are the
    frame's unconstrained axes, so those local unknowns are the ones fixed."""
    import dataclasses

    if cont.empty:
        return constraints
    rank = np.bincount(constraints.fixed // 3, minlength=cont.P.shape[0] // 3)
    points = cont.tied // 3
    plain = cont.tied[rank[points] == 0]
    framed = np.unique(points[rank[points] > 0])
    local = [3 * p + k for p in framed.tolist() for k in range(int(rank[p]), 3)]
    tied = np.r_[plain, np.array(local, dtype=np.int64)]
    return dataclasses.replace(constraints, fixed=np.r_[constraints.fixed, tied],
                               values=np.r_[constraints.values, np.zeros(len(tied))])


# ------------------------------------------------------------------------------------- bolt preload

def section_normal(domain, contact) -> np.ndarray:
    """Unit normal of a planar pretension section, pointing from side a into side b."""
    mesh = domain.mesh
    f = contact.facets[0][0]
    tri = domain.points[mesh.facets[:, f]]
    n = np.cross(tri[1] - tri[0], tri[2] - tri[0])
    n /= np.linalg.norm(n)
    inside = domain.points[domain.tetrahedra[mesh.f2t[0, f]]].mean(axis=0)  # side a's element
    return n if (tri[0] - inside) @ n > 0 else -n


def section_force(space, contact, normal: np.ndarray, residual: np.ndarray) -> float:
    """Axial force through a split section [N], tension positive: side a pulls side b back along -n
    with the constraint force r_b = (K u - f) at side b's dofs, so F = -n . sum r_b."""
    pmap = partner(space, contact)
    b = np.unique(pmap[pmap != np.arange(space.N)])
    return float(-normal @ residual.reshape(-1, 3)[b].sum(axis=0))


def preloaded(K, f, constraints, tie: Continuity, domain, space, preload: dict, solve):
    """Displacements with bolt preloads by pretension sections (the shank cut by a planar split section
    whose sides are moved together by a shortening delta along the axis; a common FE treatment of bolt
    pretension, e.g. J. Bickford, An Introduction to the Design and Behavior of Bolted Joints, 3rd ed.,
    1995, on modelling preload; from memory).  Each shortening is calibrated so that the section force
    equals the preload with no other load (assembly); the other loads are then added with the
    shortenings held (the joint's response to them), by superposition of the linear solutions.

    preload: section name -> force [N].  solve(K, f, constraints) -> (reduced u, P^T residual, record).
    Returns u, the residual P^T (K u - f), the solve record and per section {"preload_N", "force_N",
    "shortening_m"} (force_N: after the other loads)."""
    reduced, fixed = tie.reduce(K), with_tied(constraints, tie)
    w, r, record = solve(reduced, tie.load(f), fixed)
    u, names = tie.expand(w), list(preload)
    if not names:
        return u, r, record, {}
    normals = {n: section_normal(domain, domain.contacts[n]) for n in names}

    def forces(v, load):
        full = K @ v - load
        return np.array([section_force(space, domain.contacts[n], normals[n], full) for n in names])

    base = forces(u, f)
    unit_u, unit_r, stiffness = [], [], []
    for n in names:  # side b moves by -delta n relative to side a: the shank shortens by delta
        g = np.zeros(len(f))
        pmap = partner(space, domain.contacts[n])
        b = np.unique(pmap[pmap != np.arange(space.N)])
        g.reshape(-1, 3)[b] = -normals[n]
        wu, ru, _ = solve(reduced, tie.load(-(K @ g)), fixed)
        v = tie.expand(wu) + g
        unit_u.append(v)
        unit_r.append(ru)
        stiffness.append(forces(v, np.zeros(len(f))))
    k = np.array(stiffness).T  # k[i, j]: force in section i per unit shortening of section j [N/m]
    delta = np.linalg.solve(k, np.array([preload[n] for n in names]))
    for d, v, ru in zip(delta, unit_u, unit_r):
        u, r = u + d * v, r + d * ru
    after = base + k @ delta
    return u, r, record, {n: {"preload_N": float(preload[n]), "force_N": float(after[i]),
                              "shortening_m": float(delta[i]), "normal": normals[n].tolist()}
                          for i, n in enumerate(names)}
