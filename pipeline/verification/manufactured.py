"""Cases run through the public stage functions: what a workflow cannot express.

- Manufactured solutions (P.J. Roache, J. Fluids Eng. 124(1), 4-10, 2002; K. Salari, P. Knupp,
  SAND2000-1444): smooth non-polynomial fields, their source terms derived by hand, solved on unit cubes
  refined by 2; the observed orders of the L2 and H1 errors must approach p + 1 and p (P.G. Ciarlet,
  The Finite Element Method for Elliptic Problems, 1978, ch. 3).  Errors use a quadrature of degree
  2p + 2 against the exact field at its points.  The fields are those of tests/test_heat.py and
  tests/test_stress.py.
- NAFEMS LE11 through the heat stage: the source -k/r that makes T = r + z needs a function.
- A two-layer strip lifting off a contact foundation (the contact support is not yet a workflow key).
"""

from __future__ import annotations

import numpy as np

from . import Case, Check, shipped_mesh
from . import meshes as mk

ORDER_SOURCE = "[MMS] (method); [CIA] (orders)"
ORDER_WHY = "|observed - theoretical| <= 0.2 on the finest pair is common practice"


def _element(order: int, vector: bool = False):
    from skfem import ElementTetP1, ElementTetP2, ElementVector

    e = ElementTetP2() if order == 2 else ElementTetP1()
    return ElementVector(e) if vector else e


def _cube(work, n):
    from ..model import mesh as mesh_mod

    path = mk.box(work / f"cube_{n}.msh", *[mk.planes(0, 1, n)] * 3)
    return mesh_mod.load(path, unit="m")


def _material(conductivity=1.0, e=1e6, nu=0.3, alpha=1e-5, kind="isotropic"):
    from ..model.materials import from_record

    return from_record("mms", {"kind": kind, "conductivity": conductivity, "youngs_modulus": e, "poisson_ratio": nu,
                               "expansion": alpha, "density": 1.0, "yield_strength": 1e9}, "manufactured solution")


def _orders(label, order, sizes, errors_of) -> list[Check]:
    errs = np.array([errors_of(n) for n in sizes])  # rows: sizes; columns: L2, H1
    rates = np.log2(errs[-2] / errs[-1])
    mesh = f"unit cube, {sizes[-2]}^3 -> {sizes[-1]}^3 hexahedra of 6 tets"
    return [Check(f"{label} P{order}, {norm} error order ({mesh})", "-", float(order + shift), ORDER_SOURCE, 0.2,
                  ORDER_WHY, float(rate), order=True)
            for norm, shift, rate in (("L2", 1, rates[0]), ("H1", 0, rates[1]))]


# ---------------------------------------------------------------------------------------------
# Heat: anisotropic conductivity, T = 300 + 20 sin(a x + 0.3) cos(b y) exp(c z / 2)

A, B, C = 1.3, 0.9, 1.7
K = np.array([[3.0, 0.5, 0.2], [0.5, 2.0, 0.3], [0.2, 0.3, 1.5]])


def _t_parts(x):
    return (np.sin(A * x[0] + 0.3), np.cos(B * x[1]), np.exp(C * x[2] / 2), np.cos(A * x[0] + 0.3),
            -np.sin(B * x[1]))


def t_exact(x):
    s, c, e, _, _ = _t_parts(x)
    return 300.0 + 20.0 * s * c * e


def t_grad(x):
    s, c, e, sa, sb = _t_parts(x)
    return 20.0 * np.array([A * sa * c * e, s * B * sb * e, s * c * C / 2 * e])


def t_source(x):
    """-div(K grad T) for the manufactured T."""
    s, c, e, sa, sb = _t_parts(x)
    hess = 20.0 * np.array([
        [-A * A * s * c * e, A * sa * B * sb * e, A * sa * c * C / 2 * e],
        [A * sa * B * sb * e, -s * B * B * c * e, s * B * sb * C / 2 * e],
        [A * sa * c * C / 2 * e, s * B * sb * C / 2 * e, s * c * C * C / 4 * e]])
    return -np.einsum("ij,ij...->...", K, hess)


def heat_errors(work, order, n):
    from skfem import Basis

    from ..stages import heat

    d = _cube(work, n)
    lam, vec = np.linalg.eigh(K)
    rows = vec.T if np.linalg.det(vec) > 0 else -vec.T  # material axes: right-handed eigenvectors of K
    mat = _material(lam.tolist(), kind="orthotropic").oriented(rows)
    spec = heat.HeatSpec({"body": mat}, generation={"body": t_source},
                         fixed_temperature={s: t_exact for s in mk.FACES}, order=order)
    f = heat.solve(d, spec)
    basis = Basis(d.mesh, _element(order), intorder=2 * order + 2)
    th, x = basis.interpolate(f.temperature), basis.mapping.F(basis.X)
    return (np.sqrt(np.sum((th - t_exact(x)) ** 2 * basis.dx)),
            np.sqrt(np.sum(np.sum((th.grad - t_grad(x)) ** 2, axis=0) * basis.dx)))


def heat_case(order, sizes):
    def checks(work, level_sizes):
        return _orders("heat", order, level_sizes, lambda n: heat_errors(work, order, n))
    return Case(f"mms_heat_p{order}", f"manufactured solution, heat with anisotropic k, P{order} orders",
                sizes, checks, note="Source and boundary data are functions: run through stages.heat.solve.")


# ---------------------------------------------------------------------------------------------
# Thermoelasticity: u = s sin(a x + .2) sin(b y + .4) sin(c z + .1), exact T = 300 + 40 x^2 - 25 y z + 30 z

A_, B_, C_ = 1.1, 0.7, 1.3
S_VEC = np.array([1.0, -0.6, 0.8]) * 1e-3


def _u_parts(x):
    return (np.sin(A_ * x[0] + 0.2), np.sin(B_ * x[1] + 0.4), np.sin(C_ * x[2] + 0.1),
            np.cos(A_ * x[0] + 0.2), np.cos(B_ * x[1] + 0.4), np.cos(C_ * x[2] + 0.1))


def u_exact(x):
    sa, sb, sc, *_ = _u_parts(x)
    return np.einsum("i,...->i...", S_VEC, sa * sb * sc)


def u_grad(x):
    sa, sb, sc, ca, cb, cc = _u_parts(x)
    return np.einsum("i,j...->ij...", S_VEC, np.array([A_ * ca * sb * sc, B_ * sa * cb * sc, C_ * sa * sb * cc]))


def temperature(x):
    return 300.0 + 40.0 * x[0] ** 2 - 25.0 * x[1] * x[2] + 30.0 * x[2]


def body_force(mat):
    """b = -div sigma (isotropic): -(lam + mu) H(phi) s - mu lap(phi) s + (3 lam + 2 mu) alpha grad T."""
    e, nu, alpha = mat.youngs_modulus[0], mat.poisson_ratio[0], mat.expansion[0]
    lam, mu = e * nu / ((1 + nu) * (1 - 2 * nu)), e / (2 * (1 + nu))

    def b(x):
        sa, sb, sc, ca, cb, cc = _u_parts(x)
        hess = np.array([[-A_ * A_ * sa * sb * sc, A_ * B_ * ca * cb * sc, A_ * C_ * ca * sb * cc],
                         [A_ * B_ * ca * cb * sc, -B_ * B_ * sa * sb * sc, B_ * C_ * sa * cb * cc],
                         [A_ * C_ * ca * sb * cc, B_ * C_ * sa * cb * cc, -C_ * C_ * sa * sb * sc]])
        lap = -(A_**2 + B_**2 + C_**2) * sa * sb * sc
        grad_t = np.array([80.0 * x[0], -25.0 * x[2], -25.0 * x[1] + 30.0])
        return (-(lam + mu) * np.einsum("ij...,j->i...", hess, S_VEC) - mu * np.einsum("i,...->i...", S_VEC, lap)
                + (3 * lam + 2 * mu) * alpha * grad_t)
    return b


def _component(field, i):
    """Component i of a vector field, as a function of x."""
    return lambda x: field(x)[i]


def stress_errors(work, order, n):
    from skfem import Basis

    from ..stages import mapping, stress
    from ..stages.supports import Support

    d = _cube(work, n)
    mat = _material()
    load = mapping.from_function(d, temperature, mapping.MapSpec(reference=300.0), order=2)
    held = Support("displacement", {ax: _component(u_exact, i) for i, ax in enumerate("xyz")})
    f = stress.solve(d, load, stress.StressSpec({"body": mat}, {s: held for s in mk.FACES},
                                                body_force={"body": body_force(mat)}, order=order))
    basis = Basis(d.mesh, _element(order, vector=True), intorder=2 * order + 2)
    # component c of displacement point s is dof 3 s + c, scikit-fem's numbering of a vector element
    uh, x = basis.interpolate(f.displacement.ravel()), basis.mapping.F(basis.X)
    return (np.sqrt(np.sum(np.sum((uh - u_exact(x)) ** 2, axis=0) * basis.dx)),
            np.sqrt(np.sum(np.sum((uh.grad - u_grad(x)) ** 2, axis=(0, 1)) * basis.dx)))


def stress_case(order, sizes):
    def checks(work, level_sizes):
        return _orders("thermoelastic", order, level_sizes, lambda n: stress_errors(work, order, n))
    return Case(f"mms_stress_p{order}", f"manufactured solution, thermoelastic with exact T, P{order} orders",
                sizes, checks, note="Body force and boundary displacements are functions: run through "
                                    "stages.stress.solve.")


# ---------------------------------------------------------------------------------------------
# LE11 through all stages

def le11_chain(work, mesh_file):
    """NAFEMS LE11 with T from the heat stage: -div(k grad T) = -k/r gives T = r + z (laplacian(r + z) = 1/r
    in 3-D, derived here), T = r + z on the curved and end faces, symmetry planes insulated."""
    from dataclasses import replace

    from ..model import materials
    from ..model import mesh as mesh_mod
    from ..stages import heat, mapping, stress
    from ..stages.supports import Support

    d = mesh_mod.load(shipped_mesh(mesh_file), unit="m")
    steel = materials.library()["steel_304"]
    k = steel.conductivity[0]
    r = lambda x: np.hypot(x[0], x[1])
    exact = lambda x: 273.15 + r(x) + x[2]
    t = heat.solve(d, heat.HeatSpec({"body": steel}, generation={"body": lambda x: -k / r(x)},
                                    fixed_temperature={s: exact for s in ("inner", "outer", "bottom", "top")},
                                    order=2))
    le11 = replace(steel, youngs_modulus=(210e9,), poisson_ratio=(0.3,), expansion=(2.3e-4,))
    load = mapping.transfer(t, d, d, mapping.MapSpec(reference=273.15))
    sup = {s: Support("symmetry") for s in ("symmetry_xz", "symmetry_yz", "bottom", "top")}
    s = stress.solve(d, load, stress.StressSpec({"body": le11}, sup, order=2))
    node = int(np.argmin(np.linalg.norm(d.points - [1.0, 0.0, 0.0], axis=1)))
    vertices = d.points.T
    h = mesh_file.removeprefix("le11_h").removesuffix(".msh")
    from .catalogue import NAFEMS

    return [
        Check(f"largest |T - (r + z)| at the vertices, h = {h} m", "K", 0.0, "T = r + z solves the heat problem "
              "(derived here)", 2e-3, "P2 with straight-sided facets on the curved faces; the bound of tests/test_chain.py "
              "at h = 0.1 m, on a 2.79 K range", float(np.abs(t.temperature[: d.mesh.nvertices] - exact(vertices)).max()),
              scale=1.0, scale_text="1 K"),
        Check(f"sigma_zz at A (1, 0, 0), T from the heat stage, h = {h} m", "MPa", -105e6, f"{NAFEMS}, test LE11",
              3e-2, "3 % is common practice for P2 tetrahedra at h <= 0.1 m (as for the prescribed-T case)",
              float(s.nodal_stress("body", node)[2])),
    ]


# ---------------------------------------------------------------------------------------------
# Lift-off: a two-layer strip on a rigid frictionless foundation under uniform heating

def liftoff(work, n):
    """Half of a 60 mm two-layer strip (mirror plane x = 0), layers of 1 mm with expansion 10e-6 (below)
    and 16e-6 1/K (above), nu = 0, heated by 100 K, resting on a contact support under its own weight."""
    from ..model import mesh as mesh_mod
    from ..model.materials import from_record
    from ..stages import mapping, stress
    from ..stages.supports import Support

    L, t, w, dt, g = 0.03, 1e-3, 3e-3, 100.0, 9.81
    d = mesh_mod.load(mk.box(work / "liftoff.msh", mk.planes(0, L, n), mk.planes(0, w, 2), mk.planes(0, 2 * t, 4),
                             parts={"low": (2, 0, t), "high": (2, t, 2 * t)}), unit="m")
    layer = lambda a: from_record(f"a{a:g}", {"conductivity": 100.0, "youngs_modulus": 68.9e9, "poisson_ratio": 0.0,
                                              "expansion": a, "density": 2700.0}, "lift-off case")
    mats = {"low": layer(10e-6), "high": layer(16e-6)}
    load = mapping.from_function(d, lambda x: 293.15 + dt + 0 * x[0], mapping.MapSpec(293.15), order=1)
    sup = {"xmin": Support("symmetry", mirror=True), "ymin": Support("symmetry", mirror=True),
           "zmin": Support("contact")}
    s = stress.solve(d, load, stress.StressSpec(mats, sup, gravity=(0.0, 0.0, -g), order=2))
    rec = s.supports["zmin"]
    p, uz = d.points, s.displacement[: len(d.points), 2]
    mid = (np.abs(p[:, 2] - t) < 1e-9) & (np.abs(p[:, 1] - w / 2) < 1e-9) & (p[:, 0] < 0.8 * L)
    curvature = -2 * np.polyfit(p[mid, 0], uz[mid], 2)[0]
    weight = 2700.0 * L * w * 2 * t * g
    line = w * (L / n) / 6  # the share of the underside's facets at one line of vertices across the strip
    t25 = "S. Timoshenko, J. Opt. Soc. Am. 11(3), 1925: 1/rho = 3 da dT / (2h) for equal layers"
    return [
        Check("curvature of the mid-plane (free strip value)", "1/m", 3 * 6e-6 * dt / (2 * 2 * t), t25, 1e-2,
              "as stress_bimetal (P2, two elements per layer, away from the ends); the weight bends it by about "
              "0.1 % (beam estimate q L^2 / (8 E I))", float(curvature)),
        Check("contact area (one line of vertices at the ends)", "mm^2", line, "the strip arches up and rests on "
              "its ends: one line of vertices, a sixth of the facets of the last row", 1e-8,
              "geometry of the mesh: round-off only", rec["contact_area_m2"]),
        Check("contact force", "N", weight, "statics: the contact carries the weight", 1e-4,
              "the solve leaves residual forces of about 1e-10 of the thermal nodal forces (1e-8 N here)",
              float(s.reactions["zmin"][2])),
        Check("tension carried by the contact support", "N", 0.0, "compression only (Signorini conditions)",
              0.0, "none may pull", rec["tension_N"], scale=weight, scale_text="the weight"),
    ]


CASES = [
    heat_case(1, {"quick": (4, 8, 16), "default": (8, 16, 32), "fine": (8, 16, 32)}),
    heat_case(2, {"quick": (2, 4, 8), "default": (4, 8, 16), "fine": (4, 8, 16)}),
    stress_case(1, {"quick": (2, 4, 8), "default": (4, 8, 16), "fine": (4, 8, 16)}),
    stress_case(2, {"quick": (1, 2, 4), "default": (2, 4, 8), "fine": (2, 4, 8)}),
    Case("nafems_le11_chain", "NAFEMS LE11 with T computed by the heat stage (heat -> map -> stress, P2)",
         {"default": "le11_h0.1.msh", "fine": "le11_h0.07.msh"}, le11_chain,
         note="The source -k/r is a function: run through the stage functions. Not run at --quick "
              "(about 15 s on a 2-core machine: it would nearly double that level)."),
    Case("stress_liftoff", "two-layer strip on a contact foundation under uniform heating (P2, active set)",
         {"quick": 10, "default": 10, "fine": 20}, liftoff,
         note="Half strip (mirror plane x = 0), n x 2 x 4 hexahedra of six tetrahedra along, across and "
              "through; n = 10, 10, 20. Run through the stage functions (contact is not yet a workflow key)."),
]
