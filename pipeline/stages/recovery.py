"""Stress recovery: element stresses, nodal stresses projected within each part, figures per part.

sigma = C (eps(u) - alpha (T - T_ref)) at the quadrature points.  Element values are volume means.
Nodal values are the L2 projection onto the displacement's polynomial space restricted to one part,
so stresses are never averaged across a bonded interface.  Safety factor: yield strength over peak
von Mises for ductile materials (distortion-energy criterion); tensile strength over the largest
principal stress for brittle ones (maximum normal stress criterion), flagged per material.
Units: Pa, m.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse.linalg as spla
from skfem import BilinearForm, LinearForm, asm

from . import constitutive, fem


@dataclass
class PartModel:
    """What recovery needs of one part: its vector basis, C, alpha, temperatures at quadrature points."""

    basis: object
    c: np.ndarray
    alpha: np.ndarray
    temperature: object
    reference: np.ndarray | None
    material: object


@BilinearForm
def mass(u, v, w):
    return u * v


@LinearForm
def moment(v, w):
    return w.s * v


def stress_at_points(model: PartModel, u: np.ndarray) -> np.ndarray:
    """(6, n_elements_of_part, n_qp) stresses [Pa]."""
    grad = model.basis.interpolate(u).grad
    eps = constitutive.voigt(0.5 * (grad + np.transpose(grad, (1, 0, 2, 3))))
    if model.temperature is not None:
        eps = eps - np.einsum("i,...->i...", model.alpha, model.temperature - model.reference)
    return np.einsum("ij,j...->i...", model.c, eps)


def nodal_stress(model: PartModel, sigma: np.ndarray, order: int) -> tuple[np.ndarray, np.ndarray]:
    """L2 projection of the six components onto P``order`` on the part; returns dof ids and (6, n)."""
    scalar = model.basis.with_element(fem.element(order))
    M = asm(mass, scalar).tocsr()
    dofs = np.unique(scalar.element_dofs)
    M = M[dofs][:, dofs]
    diag = M.diagonal()
    out = np.empty((6, len(dofs)))
    for i in range(6):
        rhs = asm(moment, scalar, s=sigma[i])[dofs]
        x, info = spla.cg(M, rhs, rtol=1e-12, maxiter=500, M=spla.LinearOperator(M.shape, lambda r: r / diag))
        out[i] = x if info == 0 else spla.spsolve(M.tocsc(), rhs)
    return dofs, out


def recover(domain, models: dict[str, PartModel], u: np.ndarray, order: int):
    """Per-part figures, per-element arrays (stress, von_mises, tresca, principal) and nodal stresses."""
    nel = len(domain.tetrahedra)
    elements = {"stress": np.zeros((nel, 6))}
    parts, nodal_by_part = {}, {}
    for part, model in models.items():
        sigma = stress_at_points(model, u)
        dx = model.basis.dx
        ids = model.basis.tind
        elements["stress"][ids] = (np.sum(sigma * dx, axis=2) / dx.sum(axis=1)).T
        dofs, nodal = nodal_stress(model, sigma, order)
        where = model.basis.with_element(fem.element(order)).doflocs[:, dofs].T
        parts[part] = _figures(model.material, nodal, where, sigma)
        nodal_by_part[part] = (dofs, nodal.T)
    s = elements["stress"].T
    elements["von_mises"] = constitutive.von_mises(s)
    elements["principal"] = constitutive.principal(s)
    elements["tresca"] = elements["principal"][:, 0] - elements["principal"][:, 2]
    elements["safety"] = np.full(nel, np.inf)
    for part, model in models.items():
        ids, m = model.basis.tind, model.material
        if m.brittle:
            driver, strength = np.maximum(elements["principal"][ids, 0], 0.0), m.tensile_strength
        else:
            driver, strength = elements["von_mises"][ids], m.yield_strength or m.tensile_strength
        with np.errstate(divide="ignore"):
            elements["safety"][ids] = np.where(driver > 0, strength / np.maximum(driver, 1e-300), np.inf)
    return parts, elements, nodal_by_part


def _figures(material, nodal: np.ndarray, where: np.ndarray, sigma_qp: np.ndarray) -> dict:
    vm = constitutive.von_mises(nodal)
    pr = constitutive.principal(nodal)
    i_vm, i_max, i_min = int(np.argmax(vm)), int(np.argmax(pr[:, 0])), int(np.argmin(pr[:, 2]))
    out = {
        "von_mises_max_Pa": float(vm[i_vm]), "von_mises_max_at_m": where[i_vm].tolist(),
        "principal_max_Pa": float(pr[i_max, 0]), "principal_max_at_m": where[i_max].tolist(),
        "principal_min_Pa": float(pr[i_min, 2]), "principal_min_at_m": where[i_min].tolist(),
        "von_mises_max_quadrature_Pa": float(constitutive.von_mises(sigma_qp).max()),
        "nodal_stress": "L2 projection within the part",
    }
    if material.brittle:
        strength, driver = material.tensile_strength, max(float(pr[i_max, 0]), 0.0)
        out["criterion"] = "brittle: tensile strength / largest principal stress"
    else:
        strength, driver = material.yield_strength or material.tensile_strength, float(vm[i_vm])
        out["criterion"] = ("ductile: yield strength / peak von Mises" if material.yield_strength else
                            "ductile: tensile strength / peak von Mises (no yield strength given)")
    out["strength_Pa"] = strength
    out["safety_factor"] = float(strength / driver) if strength and driver > 0 else None
    return out
