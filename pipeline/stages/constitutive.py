"""Constitutive matrices in model coordinates, shared by the stiffness, the thermal load and recovery.

Voigt order xx, yy, zz, yz, xz, xy; strains with engineering shear (gamma = 2 eps).  Units: Pa, 1/K.
Orthotropic engineering constants follow the library's convention: poisson_ratio = (nu_xy, nu_xz,
nu_yz) with nu_ij = -eps_j / eps_i under stress along i; shear_modulus = (G_xy, G_xz, G_yz).
"""

from __future__ import annotations

import numpy as np

from .. import errors

PAIRS = ((0, 0), (1, 1), (2, 2), (1, 2), (0, 2), (0, 1))


def stiffness_matrix(material) -> np.ndarray:
    """(6, 6) elasticity matrix [Pa] in model coordinates."""
    E, nu = material.youngs_modulus, material.poisson_ratio
    if material.kind == "isotropic" or (len(E) == 1 and len(nu) == 1 and not material.shear_modulus):
        e, n = float(E[0]), float(nu[0])
        lam, mu = e * n / ((1 + n) * (1 - 2 * n)), e / (2 * (1 + n))
        c = np.zeros((6, 6))
        c[:3, :3] = lam
        c[np.arange(3), np.arange(3)] += 2 * mu
        c[np.arange(3, 6), np.arange(3, 6)] = mu
        return c
    e1, e2, e3 = np.broadcast_to(np.asarray(E, float), (3,))
    n12, n13, n23 = np.broadcast_to(np.asarray(nu, float), (3,))
    if len(material.shear_modulus) != 3:
        raise errors.InputError(f"material '{material.name}': an orthotropic material needs shear_modulus "
                                "= [G_xy, G_xz, G_yz] [Pa]")
    g12, g13, g23 = material.shear_modulus
    s = np.zeros((6, 6))
    s[0, 0], s[1, 1], s[2, 2] = 1 / e1, 1 / e2, 1 / e3
    s[0, 1] = s[1, 0] = -n12 / e1
    s[0, 2] = s[2, 0] = -n13 / e1
    s[1, 2] = s[2, 1] = -n23 / e2
    s[3, 3], s[4, 4], s[5, 5] = 1 / g23, 1 / g13, 1 / g12
    if np.linalg.eigvalsh(s).min() <= 0:
        raise errors.InputError(f"material '{material.name}': the engineering constants give a compliance that "
                                "is not positive definite (check the Poisson ratios against the moduli)")
    return rotate(np.linalg.inv(s), np.asarray(material.axes, float))


def rotate(c_material: np.ndarray, r: np.ndarray) -> np.ndarray:
    """C in model coordinates from C in material axes; rows of ``r`` are the material axes."""
    tensor = np.zeros((3, 3, 3, 3))
    for i, (a, b) in enumerate(PAIRS):
        for j, (c, d) in enumerate(PAIRS):
            for p, q in {(a, b), (b, a)}:
                for s_, t in {(c, d), (d, c)}:
                    tensor[p, q, s_, t] = c_material[i, j]
    turned = np.einsum("ai,bj,ck,dl,abcd->ijkl", r, r, r, r, tensor)
    return np.array([[turned[a, b, c, d] for c, d in PAIRS] for a, b in PAIRS])


def expansion_vector(material) -> np.ndarray:
    """Thermal strain per kelvin as a Voigt vector with engineering shear [1/K]."""
    a = np.broadcast_to(np.asarray(material.expansion, float), (3,))
    r = np.asarray(material.axes, float)
    t = r.T @ np.diag(a) @ r
    return np.array([t[0, 0], t[1, 1], t[2, 2], 2 * t[1, 2], 2 * t[0, 2], 2 * t[0, 1]])


# --------------------------------------------------------------- temperature-dependent properties

def isotropic(e: np.ndarray, nu: np.ndarray) -> np.ndarray:
    """(*e.shape, 6, 6) isotropic elasticity matrices [Pa] from E [Pa] and nu arrays of one shape."""
    lam, mu = e * nu / ((1 + nu) * (1 - 2 * nu)), e / (2 * (1 + nu))
    c = np.zeros((*np.shape(e), 6, 6))
    c[..., :3, :3] = lam[..., None, None]
    for i in range(3):
        c[..., i, i] += 2 * mu
        c[..., 3 + i, 3 + i] = mu
    return c


def stiffness_at(material, t: np.ndarray) -> np.ndarray:
    """C [Pa] at temperatures t [K]: (6, 6) when E and nu are constant, else (*t.shape, 6, 6) from
    E(T) and nu(T) (``model.curves``) evaluated at each point."""
    if not material.stiffness_varies:
        return stiffness_matrix(material)
    t = np.asarray(t, dtype=float)

    def at(prop):
        curve = material.curves.get(prop)
        return curve.values(t)[0] if curve else np.full(t.shape, getattr(material, prop)[0])

    return isotropic(at("youngs_modulus"), at("poisson_ratio"))


def thermal_strain(material, t: np.ndarray, t_ref: np.ndarray) -> np.ndarray:
    """(6, *t.shape) engineering Voigt thermal strain in model coordinates from the stress-free
    temperature t_ref to t [K], by the material's expansion curve and convention (``model.curves``)."""
    e = material.expansion_strain(t, t_ref)  # principal, in the material axes
    r = np.asarray(material.axes, float)
    tensor = np.einsum("ai,aj,a...->ij...", r, r, e)
    return voigt(tensor)


def voigt(eps):
    """(3, 3, ...) symmetric strain tensor -> (6, ...) engineering Voigt vector."""
    return np.stack([eps[0, 0], eps[1, 1], eps[2, 2], 2 * eps[1, 2], 2 * eps[0, 2], 2 * eps[0, 1]])


def von_mises(s: np.ndarray) -> np.ndarray:
    """von Mises equivalent stress from Voigt stresses (6, ...) [Pa]."""
    xx, yy, zz, yz, xz, xy = s
    return np.sqrt(0.5 * ((xx - yy) ** 2 + (yy - zz) ** 2 + (zz - xx) ** 2) + 3 * (xy**2 + yz**2 + xz**2))


def equivalent_strain(e: np.ndarray) -> np.ndarray:
    """von Mises equivalent strain sqrt(2/3 e':e') from engineering Voigt strains (6, ...) [-]
    (equal to the axial strain of a uniaxial, volume-preserving strain)."""
    xx, yy, zz, yz, xz, xy = e
    mean = (xx + yy + zz) / 3
    dev = (xx - mean) ** 2 + (yy - mean) ** 2 + (zz - mean) ** 2 + 0.5 * (yz**2 + xz**2 + xy**2)
    return np.sqrt(2.0 / 3.0 * dev)


def principal(s: np.ndarray) -> np.ndarray:
    """Principal stresses (n, 3), largest first, from Voigt stresses (6, n) [Pa]."""
    xx, yy, zz, yz, xz, xy = s
    t = np.array([[xx, xy, xz], [xy, yy, yz], [xz, yz, zz]])  # (3, 3, n)
    return np.linalg.eigvalsh(np.moveaxis(t, -1, 0))[:, ::-1]
