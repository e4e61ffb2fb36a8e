"""Every vectorised kernel against scikit-fem's generic assembly of the same form (the reference).

Meshes are small, jittered (so no entry vanishes by symmetry) and have elements of both orientations;
both sides integrate exactly, so they must agree to round-off: relative difference below 1e-12.
"""

from __future__ import annotations

import numpy as np
import pytest
from skfem import (
    Basis,
    BilinearForm,
    ElementVector,
    FacetBasis,
    LinearForm,
    MeshTet,
    asm,
)
from skfem.helpers import ddot, dot, grad, mul, sym_grad

from pipeline.stages import constitutive, kernels

ROUND_OFF = 1e-12


@pytest.fixture(scope="module")
def mesh():
    m = MeshTet.init_tensor(np.linspace(0, 1, 4), np.linspace(0, 0.7, 3), np.linspace(0, 0.5, 3))
    rng = np.random.default_rng(3)
    p = m.p.copy()
    inner = (p > 1e-9).all(axis=0) & (p < np.array([[1], [0.7], [0.5]]) - 1e-9).all(axis=0)
    p[:, inner] += rng.uniform(-0.05, 0.05, (3, inner.sum()))
    return MeshTet(p, m.t)


def element(order):
    return kernels._element(order)


def close(a, b):
    a = a.toarray() if hasattr(a, "toarray") else a
    b = b.toarray() if hasattr(b, "toarray") else b
    return np.abs(a - b).max() <= ROUND_OFF * np.abs(b).max()


@pytest.mark.parametrize("order", [1, 2])
def test_conduction_with_a_tensor_per_element_and_per_point(mesh, order):
    space, geom = kernels.Space(mesh, order), kernels.Geometry(mesh)
    basis = Basis(mesh, element(order), intorder=2 * order + 1)
    rng = np.random.default_rng(0)
    a = rng.uniform(0.5, 1.0, (mesh.nelements, 3, 3))
    k = np.einsum("nij,nkj->nik", a, a) + np.eye(3)  # SPD per element
    kq = np.repeat(np.moveaxis(k, 0, -1)[..., None], basis.X.shape[1], axis=-1)  # (3, 3, nel, nq)
    kq = kq * (1 + basis.mapping.F(basis.X)[0])  # varies within elements: degree 1

    @BilinearForm
    def form(u, v, w):
        return dot(mul(w.k, grad(u)), grad(v))

    ids = np.arange(mesh.nelements)
    mine = kernels.conduction(space, geom, ids, k, kernels.degree_stiffness(order)).matrix()
    assert close(mine, asm(form, basis, k=np.repeat(np.moveaxis(k, 0, -1)[..., None], basis.X.shape[1], -1)))
    ref = kernels.reference(order, 2 * order + 1)
    assert np.allclose(ref.weights, basis.quadrature[1])
    per_point = np.moveaxis(kq, (0, 1), (1, 2))  # (nel, 3, 3, nq)
    assert close(kernels.conduction(space, geom, ids, per_point, 2 * order + 1).matrix(), asm(form, basis, k=kq))


@pytest.mark.parametrize("order", [1, 2])
def test_mass_load_flux_load_and_interpolation(mesh, order):
    space, geom = kernels.Space(mesh, order), kernels.Geometry(mesh)
    basis = Basis(mesh, element(order), intorder=2 * order + 1)
    ref = kernels.reference(order, 2 * order + 1)
    x = basis.mapping.F(basis.X)
    c = 2 + x[0] * x[1]

    @BilinearForm
    def m(u, v, w):
        return w.c * u * v

    @LinearForm
    def f(v, w):
        return w.c * v

    @LinearForm
    def g(v, w):
        return dot(w.q, grad(v))

    ids = np.arange(mesh.nelements)
    assert close(kernels.mass(space, geom, ids, c, 2 * order + 1).matrix(), asm(m, basis, c=c))
    assert close(kernels.load(space, geom, ids, c, ref), asm(f, basis, c=c))
    q = np.stack([x[0], x[1] * x[2], np.ones_like(x[0])])
    assert close(kernels.flux_load(space, geom, ids, np.moveaxis(q, 0, 1), ref), asm(g, basis, q=q))
    u = np.sin(basis.doflocs[0]) + basis.doflocs[1] ** 2
    values, gradient = kernels.interpolate(space, geom, ids, u, ref, grad=True)
    field = basis.interpolate(u)
    assert close(values, np.asarray(field)) and close(gradient, np.moveaxis(field.grad, 0, 1))
    assert np.allclose(space.doflocs, basis.doflocs)
    b = np.stack([x[1], -x[0], x[2] ** 2])

    @LinearForm
    def h(v, w):
        return v * w.b

    vector = kernels.vector_load(space, geom, ids, np.moveaxis(b, 0, 1), ref).reshape(-1, 3)
    for comp in range(3):
        assert close(vector[:, comp], asm(h, basis, b=b[comp]))
    # the Newton term of a temperature-dependent conductivity
    @BilinearForm
    def adv(u, v, w):
        return u * dot(w.b, grad(v))

    assert close(kernels.advection(space, geom, ids, np.moveaxis(q, 0, 1), 2 * order + 1).matrix(),
                 asm(adv, basis, b=q))


@pytest.mark.parametrize("order", [1, 2])
def test_facet_mass_load_and_traction(mesh, order):
    space, geom = kernels.Space(mesh, order), kernels.Geometry(mesh)
    facets = mesh.boundary_facets()
    fb = FacetBasis(mesh, element(order), facets=facets, intorder=2 * order + 1)
    mine = kernels.Facets(space, geom, facets, 2 * order + 1)
    x = fb.global_coordinates().value
    x_mine = mine.points()
    # the two sides order their facet points differently: compare through integrals of point functions
    h = 1 + x[0] + x[1] * x[2]
    h_mine = 1 + x_mine[0] + x_mine[1] * x_mine[2]

    @BilinearForm
    def film(u, v, w):
        return w.h * u * v

    @LinearForm
    def source(v, w):
        return w.h * v

    @LinearForm
    def traction(v, w):
        return dot(w.n, v) * w.h

    assert close(mine.mass(h_mine).matrix(), asm(film, fb, h=h))
    assert close(mine.load(h_mine), asm(source, fb, h=h))
    assert np.isclose(mine.integral(1.0), 2 * (1 * 0.7 + 1 * 0.5 + 0.7 * 0.5))  # the box's surface [m^2]
    vfb = FacetBasis(mesh, ElementVector(element(order)), facets=facets, intorder=2 * order + 1)
    xv = vfb.global_coordinates().value
    t = mine.normal[:, :, None] * h_mine[:, None, :]  # (n, 3, nq)
    assert close(mine.vector_load(t), asm(traction, vfb, h=1 + xv[0] + xv[1] * xv[2]))
    u = np.cos(space.doflocs[2]) * space.doflocs[0]
    assert np.isclose(mine.integral(mine.values(u)), asm(source, fb, h=1.0) @ u)


@pytest.mark.parametrize("order", [1, 2])
@pytest.mark.parametrize("kind", ["isotropic", "orthotropic"])
def test_elasticity_stiffness_thermal_load_and_strains(mesh, order, kind):
    space, geom = kernels.Space(mesh, order), kernels.Geometry(mesh)
    vbasis = Basis(mesh, ElementVector(element(order)), intorder=2 * order)
    if kind == "isotropic":
        c = constitutive.stiffness_matrix(type("M", (), {"youngs_modulus": (70e9,), "poisson_ratio": (0.33,),
                                                         "kind": "isotropic", "shear_modulus": ()})())
    else:
        rng = np.random.default_rng(1)
        a = rng.normal(size=(6, 6))
        c = 1e9 * (a @ a.T + 6 * np.eye(6))

    def C(strain):
        s = np.einsum("ij,j...->i...", c, strain)
        return np.array([[s[0], s[5], s[4]], [s[5], s[1], s[3]], [s[4], s[3], s[2]]])

    @BilinearForm
    def stiff(u, v, w):
        return ddot(C(constitutive.voigt(sym_grad(u))), sym_grad(v))

    @LinearForm
    def thermal(v, w):
        return ddot(C(np.einsum("i,...->i...", alpha, w.dt)), sym_grad(v))

    alpha = np.array([23e-6, 20e-6, 17e-6, 1e-6, 0, 2e-6])
    ids = np.arange(mesh.nelements)
    assert close(kernels.stiffness(space, geom, ids, c, kernels.degree_stiffness(order)).matrix(), asm(stiff, vbasis))
    x = vbasis.mapping.F(vbasis.X)
    dt = 50 * x[0] + 10 * x[1]
    ref = kernels.reference(order, 2 * order)
    stress = np.einsum("st,t,nq->nsq", c, alpha, dt)
    assert close(kernels.strain_load(space, geom, ids, stress, ref), asm(thermal, vbasis, dt=dt))
    u = np.sin(vbasis.doflocs[0]) * vbasis.doflocs[1] + vbasis.doflocs[2] ** 2
    mine = kernels.strains(space, geom, ids, u, ref)
    theirs = constitutive.voigt(sym_grad(vbasis.interpolate(u)))
    assert close(mine, np.moveaxis(theirs, 0, 1))


def test_chunked_assembly_equals_one_chunk(mesh, monkeypatch):
    space, geom = kernels.Space(mesh, 2), kernels.Geometry(mesh)
    ids = np.arange(mesh.nelements)
    whole = kernels.stiffness(space, geom, ids, np.eye(6), 2).matrix()
    monkeypatch.setattr(kernels, "CHUNK_ENTRIES", 1000)  # about one element per chunk
    assert close(kernels.stiffness(space, geom, ids, np.eye(6), 2).matrix(), whole)
