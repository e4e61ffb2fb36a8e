"""Vectorised element kernels for the pipeline's forms on affine P1 and P2 tetrahedra.

Every element of a straight-sided tetrahedral mesh has a constant Jacobian, so shape-function
gradients are reference gradients times J^-1, computed in bulk for a chunk of elements.  Element
matrices are formed with batched matrix products and scattered once per chunk into CSR with int32
indices where they fit; chunks bound the temporaries (``CHUNK_ENTRIES`` matrix entries at a time).
Quadrature degrees are the exact ones for each integrand where it is polynomial (see ``degree_*``).

scikit-fem supplies the reference shape functions, the quadrature rules and the dof numbering
(vertices, then edges, vector components interleaved), so results agree with its generic assembly
to round-off; tests/test_kernels.py checks every kernel against it.  Units follow the caller.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
import scipy.sparse as sp

#: Element-matrix entries formed at once; bounds the chunk temporaries to about 40 bytes per entry.
CHUNK_ENTRIES = 4_000_000

#: Local vertex indices of the face opposite each vertex of the reference tetrahedron.
FACES = ((1, 2, 3), (0, 2, 3), (0, 1, 3), (0, 1, 2))
REFERENCE_VERTICES = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1]], dtype=float)


def degree_mass(order: int, coefficient_order: int = 0) -> int:
    """Exact degree for c u v with P``order`` u, v and a P``coefficient_order`` coefficient."""
    return 2 * order + coefficient_order


def degree_stiffness(order: int, coefficient_order: int = 0) -> int:
    """Exact degree for c grad u . grad v (also for elasticity)."""
    return 2 * (order - 1) + coefficient_order


def index_dtype(n: int):
    return np.int32 if n < 2**31 - 1 else np.int64


@dataclass(frozen=True)
class Reference:
    """Shape functions of P``order`` and a quadrature rule on the reference tetrahedron or triangle.

    points (3, nq) in tetrahedron reference coordinates; weights (nq,); phi (nb, nq); dphi (nb, 3, nq)."""

    points: np.ndarray
    weights: np.ndarray
    phi: np.ndarray
    dphi: np.ndarray


def _element(order: int):
    from skfem import ElementTetP1, ElementTetP2

    return {1: ElementTetP1, 2: ElementTetP2}[order]()


def _shape(order: int, points: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    e = _element(order)
    values = [e.lbasis(points, i) for i in range(e.doflocs.shape[0])]
    phi = np.array([np.broadcast_to(v[0], points.shape[1:]) for v in values], dtype=float)
    dphi = np.array([np.broadcast_to(v[1], points.shape) for v in values], dtype=float)
    return phi, dphi


def reference(order: int, degree: int) -> Reference:
    """Tetrahedron rule exact to ``degree`` with the shape data of P``order`` at its points."""
    from skfem.quadrature import get_quadrature_tet

    points, weights = get_quadrature_tet(max(degree, 1))
    return Reference(points, weights, *_shape(order, points))


def with_order(ref: Reference, order: int) -> Reference:
    """The same points and weights with the shape data of P``order`` (a field of another order)."""
    return Reference(ref.points, ref.weights, *_shape(order, ref.points))


def face_reference(order: int, degree: int, face: int) -> Reference:
    """Triangle rule exact to ``degree`` on the reference face opposite vertex ``face``; weights sum to 1/2."""
    from skfem.quadrature import get_quadrature_tri

    tri, weights = get_quadrature_tri(max(degree, 1))
    v = REFERENCE_VERTICES[list(FACES[face])]
    lam = np.vstack([1 - tri.sum(axis=0), tri])  # barycentric coordinates on the face
    points = v.T @ lam
    return Reference(points, weights, *_shape(order, points))


class Space:
    """Scalar Lagrange P``order`` space on a tetrahedral skfem mesh: dof numbering and locations.

    element_dofs (nb, nel); N unknowns; vector spaces number the component c of scalar dof s as 3 s + c."""

    def __init__(self, mesh, order: int):
        from skfem.assembly import Dofs

        self.mesh, self.order = mesh, order
        self.dofs = Dofs(mesh, _element(order))
        self.element_dofs = self.dofs.element_dofs
        self.N = int(self.dofs.N)
        self.nb = self.element_dofs.shape[0]

    @cached_property
    def doflocs(self) -> np.ndarray:
        """(3, N) coordinates of the dofs: vertices, then edge midpoints."""
        p = self.mesh.p
        if self.order == 1:
            return p
        e = self.mesh.edges
        return np.hstack([p, 0.5 * (p[:, e[0]] + p[:, e[1]])])

    def facet_dofs(self, facets: np.ndarray) -> np.ndarray:
        """Sorted unique scalar dofs on the given facets."""
        if self.order == 1:  # the facets' vertices: no edge topology needed
            return np.unique(self.mesh.facets[:, facets])
        return np.unique(np.asarray(self.dofs.get_facet_dofs(facets).all()))


class Geometry:
    """Affine maps of all elements: J (nel, 3, 3) with columns p1-p0, p2-p0, p3-p0; |det J|; J^-1."""

    def __init__(self, mesh):
        p, t = mesh.p, mesh.t
        origin = p[:, t[0]]
        self.origin = origin.T  # (nel, 3)
        a, b, c = ((p[:, t[i]] - origin).T for i in (1, 2, 3))  # the columns of J, (nel, 3) each
        self.J = np.stack([a, b, c], axis=2)
        rows = np.stack([np.cross(b, c), np.cross(c, a), np.cross(a, b)], axis=1)  # adjugate rows
        signed = np.einsum("ni,ni->n", a, rows[:, 0])
        self.det = np.abs(signed)
        self.inv = rows / signed[:, None, None]

    def points(self, ref: Reference, ids) -> np.ndarray:
        """(3, n_ids, nq) physical coordinates of the quadrature points."""
        return np.moveaxis(self.origin[ids][:, :, None] + np.einsum("eij,jq->eiq", self.J[ids], ref.points), 1, 0)


def chunks(ids: np.ndarray, entries_per_element: int):
    step = max(1, CHUNK_ENTRIES // max(entries_per_element, 1))
    for start in range(0, len(ids), step):
        yield slice(start, start + step)


def gradients(geom: Geometry, ref: Reference, ids) -> np.ndarray:
    """(n, nq, nb, 3) physical shape-function gradients: dphi_ref . J^-1 (batched matrix products)."""
    return np.matmul(np.transpose(ref.dphi, (2, 0, 1))[None], geom.inv[ids][:, None])


class Assembler:
    """Scatters element matrices into one CSR matrix chunk by chunk (duplicates summed).

    Chunk matrices are summed like a binary counter (a partial sum is merged only with one of the
    same level), so the merge work grows as nnz log(chunks), not nnz * chunks."""

    def __init__(self, n: int):
        self.n = n
        self.parts: list[tuple[int, sp.csr_matrix]] = []  # (level, partial sum)

    def add(self, dofs: np.ndarray, blocks: np.ndarray) -> None:
        """dofs (n_el, m) global indices; blocks (n_el, m, m) element matrices."""
        m = dofs.shape[1]
        dtype = index_dtype(self.n)
        rows = np.repeat(dofs.astype(dtype, copy=False), m, axis=1).ravel()
        cols = np.tile(dofs.astype(dtype, copy=False), (1, m)).ravel()
        part = sp.coo_matrix((blocks.ravel(), (rows, cols)), shape=(self.n, self.n)).tocsr()
        part.sum_duplicates()
        level = 0
        while self.parts and self.parts[-1][0] == level:
            part = self.parts.pop()[1] + part
            level += 1
        self.parts.append((level, part))

    def matrix(self) -> sp.csr_matrix:
        if not self.parts:
            return sp.csr_matrix((self.n, self.n))
        total = self.parts.pop()[1]
        while self.parts:
            total = self.parts.pop()[1] + total
        self.parts = [(64, total)]
        return total.tocsr()


def vector_dofs(dofs: np.ndarray) -> np.ndarray:
    """(n_el, nb) scalar dofs -> (n_el, 3 nb) vector dofs, ordered (node, component)."""
    return (3 * dofs[:, :, None] + np.arange(3)).reshape(len(dofs), -1)


def at_points(values, n: int, nq: int, shape=()) -> np.ndarray:
    """Broadcast a number, per-element (n, *shape) or per-point (n, *shape, nq) array to (n, nq, *shape)."""
    a = np.asarray(values, dtype=float)
    if a.ndim == 0 or a.shape == tuple(shape):
        return np.broadcast_to(a, (n, nq) + tuple(shape))
    if a.shape == (n,) + tuple(shape):
        return np.broadcast_to(a[:, None], (n, nq) + tuple(shape))
    if a.shape == (n,) + tuple(shape) + (nq,):
        return np.moveaxis(a, -1, 1)
    raise ValueError(f"coefficient of shape {a.shape} does not fit {n} elements x {nq} points x {shape}")


# ----------------------------------------------------------------------------------------------- cells

def _cells(space: Space, geom: Geometry, ids, degree: int, out: Assembler | None, local) -> Assembler:
    """Assemble ``local(e, s, ref, w) -> (n, nb, nb)`` element matrices chunk by chunk; ``e`` are the
    chunk's element ids, ``s`` its slice of ``ids``, ``w`` (n, nq) the quadrature weights times |det J|."""
    ref = reference(space.order, degree)
    out = out or Assembler(space.N)
    ids = np.asarray(ids)
    for s in chunks(ids, space.nb**2 * 4):
        e = ids[s]
        out.add(space.element_dofs[:, e].T, local(e, s, ref, geom.det[e][:, None] * ref.weights[None, :]))
    return out


def conduction(space: Space, geom: Geometry, ids, k, degree: int, out: Assembler | None = None) -> Assembler:
    """Matrix of int k grad u . grad v: k [W/(m*K)] is a number, (3, 3), per element (n, 3, 3) or
    at the quadrature points (n, 3, 3, nq)."""
    ids = np.asarray(ids)

    def local(e, s, ref, w):
        G = gradients(geom, ref, e)  # (n, q, i, d)
        if np.ndim(k) == 0:
            KG = float(k) * G
        else:
            KG = np.matmul(G, np.swapaxes(_tensor_at(k, ids, s, len(e), len(ref.weights)), 2, 3))
        n, q, nb, _ = G.shape
        Gw = (G * w[:, :, None, None]).transpose(0, 2, 1, 3).reshape(n, nb, q * 3)
        return np.matmul(Gw, KG.transpose(0, 1, 3, 2).reshape(n, q * 3, nb))

    return _cells(space, geom, ids, degree, out, local)


def _tensor_at(k, ids, s, n, nq):
    a = np.asarray(k, dtype=float)
    if a.ndim == 0:
        return np.broadcast_to(a * np.eye(3), (n, nq, 3, 3))
    if a.shape == (3, 3):
        return np.broadcast_to(a, (n, nq, 3, 3))
    return at_points(a[s] if a.shape[0] == len(ids) else a, n, nq, (3, 3))


def advection(space: Space, geom: Geometry, ids, b, degree: int, out: Assembler | None = None) -> Assembler:
    """Matrix of int u (b . grad v): b (n, 3, nq) at the quadrature points (Newton term of k(T))."""

    def local(e, s, ref, w):
        bq = at_points(b[s], len(e), len(ref.weights), (3,))
        gb = np.matmul(gradients(geom, ref, e), bq[..., None])[..., 0] * w[:, :, None]  # (b . grad v_i) dV
        return np.matmul(gb.transpose(0, 2, 1), ref.phi.T)

    return _cells(space, geom, ids, degree, out, local)


def mass(space: Space, geom: Geometry, ids, c, degree: int, out: Assembler | None = None) -> Assembler:
    """Matrix of int c u v: c a number, per element (n,) or at the quadrature points (n, nq)."""
    ids = np.asarray(ids)

    def local(e, s, ref, w):
        cq = at_points(_rows(c, ids, s), len(e), len(ref.weights))
        return np.matmul(ref.phi[None] * (w * cq)[:, None, :], ref.phi.T)

    return _cells(space, geom, ids, degree, out, local)


def _rows(a, ids, s):
    a = np.asarray(a, dtype=float)
    return a[s] if a.ndim and a.shape[0] == len(ids) else a


def load(space: Space, geom: Geometry, ids, f, ref: Reference) -> np.ndarray:
    """Vector of int f v: f a number, per element (n,) or at ``ref``'s points (n, nq)."""
    ids = np.asarray(ids)
    out = np.zeros(space.N)
    for s in chunks(ids, space.nb * len(ref.weights) * 4):
        e = ids[s]
        fq = at_points(_rows(f, ids, s), len(e), len(ref.weights))
        local = np.einsum("nq,iq->ni", geom.det[e][:, None] * ref.weights * fq, ref.phi, optimize=True)
        out += np.bincount(space.element_dofs[:, e].T.ravel(), local.ravel(), minlength=space.N)
    return out


def flux_load(space: Space, geom: Geometry, ids, flux, ref: Reference) -> np.ndarray:
    """Vector of int flux . grad v: flux (n, 3, nq) at ``ref``'s points (the conduction residual)."""
    ids = np.asarray(ids)
    out = np.zeros(space.N)
    for s in chunks(ids, space.nb * len(ref.weights) * 12):
        e = ids[s]
        G = gradients(geom, ref, e)
        w = geom.det[e][:, None] * ref.weights
        local = np.matmul(G * w[:, :, None, None], np.moveaxis(flux[s], 1, 2)[..., None])[..., 0].sum(axis=1)
        out += np.bincount(space.element_dofs[:, e].T.ravel(), local.ravel(), minlength=space.N)
    return out


def interpolate(space: Space, geom: Geometry, ids, u: np.ndarray, ref: Reference, grad: bool = False):
    """Values (n, nq) of a scalar field u at ``ref``'s points, and with ``grad`` its gradient (n, 3, nq)."""
    ids = np.asarray(ids)
    local = u[space.element_dofs[:, ids]]  # (nb, n)
    values = np.einsum("in,iq->nq", local, ref.phi)
    if not grad:
        return values
    g = np.empty((len(ids), 3, len(ref.weights)))
    for s in chunks(ids, space.nb * len(ref.weights) * 6):
        G = gradients(geom, ref, ids[s])  # (n, q, i, d)
        g[s] = np.matmul(np.swapaxes(G, 2, 3), local[:, s].T[:, None, :, None])[..., 0].transpose(0, 2, 1)
    return values, g


# ----------------------------------------------------------------------------------------- elasticity

def strain_operator(G: np.ndarray) -> np.ndarray:
    """(n, q, nb, 3) gradients -> B (n, q, 6, 3 nb): engineering Voigt strain (xx, yy, zz, yz, xz, xy)
    of the vector shape functions ordered (node, component)."""
    n, q, nb, _ = G.shape
    B = np.zeros((n, q, 6, nb, 3))
    for a in range(3):
        B[:, :, a, :, a] = G[:, :, :, a]
    for row, (i, j) in zip((3, 4, 5), ((1, 2), (0, 2), (0, 1))):
        B[:, :, row, :, i] = G[:, :, :, j]
        B[:, :, row, :, j] = G[:, :, :, i]
    return B.reshape(n, q, 6, 3 * nb)


def stiffness(space: Space, geom: Geometry, ids, c: np.ndarray, degree: int,
              out: Assembler | None = None) -> Assembler:
    """Matrix of int eps(v) : C eps(u) with C (6, 6) [Pa] in engineering Voigt form, on vector P``order``;
    C may also be (len(ids), nq, 6, 6), one per quadrature point of ``reference(order, degree)``."""
    ref = reference(space.order, degree)
    out = out or Assembler(3 * space.N)
    ids = np.asarray(ids)
    for s in chunks(ids, (3 * space.nb) ** 2 * 3):
        e = ids[s]
        B = strain_operator(gradients(geom, ref, e))  # (n, q, 6, m)
        w = geom.det[e][:, None] * ref.weights
        CB = np.matmul(c if c.ndim == 2 else c[s], B) * w[:, :, None, None]
        n, q, _, m = B.shape
        blocks = np.matmul(B.reshape(n, q * 6, m).transpose(0, 2, 1), CB.reshape(n, q * 6, m))
        out.add(vector_dofs(space.element_dofs[:, e].T), blocks)
    return out


def strain_load(space: Space, geom: Geometry, ids, stress, ref: Reference) -> np.ndarray:
    """Vector of int eps(v) : sigma for Voigt stresses (n, 6, nq) at ``ref``'s points (thermal load)."""
    ids = np.asarray(ids)
    out = np.zeros(3 * space.N)
    for s in chunks(ids, 3 * space.nb * len(ref.weights) * 6):
        e = ids[s]
        B = strain_operator(gradients(geom, ref, e))
        w = geom.det[e][:, None] * ref.weights
        sw = np.moveaxis(stress[s], 1, 2) * w[:, :, None]  # (n, q, 6)
        local = np.matmul(sw[:, :, None, :], B)[:, :, 0, :].sum(axis=1)
        out += np.bincount(vector_dofs(space.element_dofs[:, e].T).ravel(), local.ravel(), minlength=3 * space.N)
    return out


def vector_load(space: Space, geom: Geometry, ids, b, ref: Reference) -> np.ndarray:
    """Vector of int b . v for a body force b (n, 3, nq) [N/m^3] at ``ref``'s points."""
    out = np.zeros((space.N, 3))
    for c in range(3):
        out[:, c] = load(space, geom, ids, b[:, c], ref)
    return out.ravel()


def strains(space: Space, geom: Geometry, ids, u: np.ndarray, ref: Reference) -> np.ndarray:
    """(n, 6, nq) engineering Voigt strains of the vector field u (3 N,) at ``ref``'s points."""
    ids = np.asarray(ids)
    out = np.empty((len(ids), 6, len(ref.weights)))
    for s in chunks(ids, 3 * space.nb * len(ref.weights) * 6):
        e = ids[s]
        B = strain_operator(gradients(geom, ref, e))
        local = u[vector_dofs(space.element_dofs[:, e].T)]  # (n, m)
        out[s] = np.matmul(B, local[:, None, :, None])[..., 0].transpose(0, 2, 1)
    return out


# --------------------------------------------------------------------------------------------- facets

class Facets:
    """Boundary facets seen from their tetrahedron: area, outward normal, face type and quadrature.

    Shape functions are the tetrahedron's own evaluated on the face, so a facet integral uses the
    element's dofs (those off the face vanish there)."""

    def __init__(self, space: Space, geom: Geometry, facets: np.ndarray, degree: int):
        mesh = space.mesh
        self.space, self.geom = space, geom
        self.facets = np.asarray(facets)
        self.elements = mesh.f2t[0, self.facets]
        tets = mesh.t[:, self.elements]  # (4, n)
        on_face = (tets[:, None, :] == mesh.facets[:, self.facets][None, :, :]).any(axis=1)  # (4, n)
        self.face = np.argmin(on_face, axis=0)  # the local vertex not on the facet
        tri = mesh.p[:, mesh.facets[:, self.facets]]  # (3, 3 vertices, n)
        normal = np.cross((tri[:, 1] - tri[:, 0]).T, (tri[:, 2] - tri[:, 0]).T)
        self.area = 0.5 * np.linalg.norm(normal, axis=1)
        normal /= 2 * self.area[:, None]
        away = tri[:, 0].T - mesh.p[:, tets[self.face, np.arange(len(self.facets))]].T
        self.normal = normal * np.sign(np.einsum("nd,nd->n", normal, away))[:, None]  # (n, 3)
        self.refs = [face_reference(space.order, degree, f) for f in range(4)]
        self.nq = len(self.refs[0].weights)
        self.phi = np.stack([self.refs[f].phi for f in range(4)])[self.face]  # (n, nb, nq)
        self.weights = 2 * self.area[:, None] * self.refs[0].weights  # (n, nq)  [m^2]
        self.dofs = space.element_dofs[:, self.elements].T  # (n, nb)

    def points(self) -> np.ndarray:
        """(3, n, nq) physical coordinates of the facet quadrature points [m]."""
        ref_points = np.stack([r.points for r in self.refs])[self.face]  # (n, 3, nq)
        return np.moveaxis(self.geom.origin[self.elements][:, :, None]
                           + np.einsum("nij,njq->niq", self.geom.J[self.elements], ref_points), 1, 0)

    def values(self, u: np.ndarray) -> np.ndarray:
        """(n, nq) values of a scalar field at the facet quadrature points."""
        return np.einsum("ni,niq->nq", u[self.dofs], self.phi)

    def load(self, f) -> np.ndarray:
        """Vector of int f v dA: f a number or (n, nq)."""
        fq = at_points(f, len(self.facets), self.nq)
        local = np.einsum("nq,niq->ni", self.weights * fq, self.phi)
        return np.bincount(self.dofs.ravel(), local.ravel(), minlength=self.space.N)

    def integral(self, f) -> float:
        """int f dA for f a number or (n, nq)."""
        return float(np.sum(self.weights * at_points(f, len(self.facets), self.nq)))

    def mass(self, c, out: Assembler | None = None) -> Assembler:
        """Matrix of int c u v dA: c a number or (n, nq)."""
        out = out or Assembler(self.space.N)
        cq = self.weights * at_points(c, len(self.facets), self.nq)
        out.add(self.dofs, np.matmul(self.phi * cq[:, None, :], self.phi.transpose(0, 2, 1)))
        return out

    def vector_load(self, t) -> np.ndarray:
        """Vector of int t . v dA for a traction t (3,) or (n, 3, nq) [Pa]."""
        t = np.asarray(t, dtype=float)
        out = np.zeros((self.space.N, 3))
        for c in range(3):
            out[:, c] = self.load(t[c] if t.ndim == 1 else t[:, c])
        return out.ravel()

    def vector_mass(self, c) -> sp.csr_matrix:
        """Matrix of int c u . v dA on the vector space (springs)."""
        scalar = self.mass(c).matrix()
        return sp.kron(scalar, sp.identity(3), format="csr")
