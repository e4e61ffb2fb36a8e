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

from . import constitutive, fem, kernels


@dataclass
class PartModel:
    """What recovery needs of one part: its element ids, C [Pa], alpha [1/K] (Voigt) and material."""

    ids: np.ndarray
    c: np.ndarray
    alpha: np.ndarray
    material: object


def temperature_rise(domain, load, ids, ref: kernels.Reference) -> np.ndarray:
    """(n, nq) T - T_ref [K] at ``ref``'s points of the elements ``ids``."""
    t = kernels.interpolate(fem.space(domain, load.order), fem.geometry(domain), ids, load.temperature,
                            kernels.with_order(ref, load.order))
    return t - load.reference[ids][:, None]


def stress_at_points(domain, model: PartModel, u: np.ndarray, order: int, load, ref) -> np.ndarray:
    """(n_elements_of_part, 6, nq) stresses [Pa] at ``ref``'s points."""
    eps = kernels.strains(fem.space(domain, order), fem.geometry(domain), model.ids, u, ref)
    if load is not None:
        eps = eps - np.einsum("s,nq->nsq", model.alpha, temperature_rise(domain, load, model.ids, ref))
    return np.einsum("st,ntq->nsq", model.c, eps)


def nodal_stress(domain, model: PartModel, sigma: np.ndarray, order: int, ref) -> tuple[np.ndarray, np.ndarray]:
    """L2 projection of the six components onto P``order`` on the part; returns dof ids and (6, n)."""
    space, geom = fem.space(domain, order), fem.geometry(domain)
    M = kernels.mass(space, geom, model.ids, 1.0, kernels.degree_mass(order)).matrix()
    dofs = np.unique(space.element_dofs[:, model.ids])
    M = M[dofs][:, dofs]
    diag = M.diagonal()
    out = np.empty((6, len(dofs)))
    for i in range(6):
        rhs = kernels.load(space, geom, model.ids, sigma[:, i], ref)[dofs]
        x, info = spla.cg(M, rhs, rtol=1e-12, maxiter=500, M=spla.LinearOperator(M.shape, lambda r: r / diag))
        out[i] = x if info == 0 else spla.spsolve(M.tocsc(), rhs)
    return dofs, out


def recover(domain, models: dict[str, PartModel], u: np.ndarray, order: int, load=None):
    """Per-part figures, per-element arrays (stress, von_mises, tresca, principal) and nodal stresses."""
    nel = len(domain.tetrahedra)
    ref = kernels.reference(order, kernels.degree_mass(order))
    elements = {"stress": np.zeros((nel, 6))}
    parts, nodal_by_part = {}, {}
    for part, model in models.items():
        sigma = stress_at_points(domain, model, u, order, load, ref)
        elements["stress"][model.ids] = np.einsum("nsq,q->ns", sigma, ref.weights) / ref.weights.sum()
        dofs, nodal = nodal_stress(domain, model, sigma, order, ref)
        where = fem.space(domain, order).doflocs[:, dofs].T
        parts[part] = _figures(model.material, nodal, where, np.moveaxis(sigma, 1, 0))
        nodal_by_part[part] = (dofs, nodal.T)
    s = elements["stress"].T
    elements["von_mises"] = constitutive.von_mises(s)
    elements["principal"] = constitutive.principal(s)
    elements["tresca"] = elements["principal"][:, 0] - elements["principal"][:, 2]
    elements["safety"] = np.full(nel, np.inf)
    for part, model in models.items():
        ids, m = model.ids, model.material
        if m.brittle:
            driver, strength = np.maximum(elements["principal"][ids, 0], 0.0), m.tensile_strength
        else:
            driver, strength = elements["von_mises"][ids], m.yield_strength or m.tensile_strength
        if not strength:  # no strength given: no safety factor (NaN), the part's figures say so
            elements["safety"][ids] = np.nan
            continue
        loaded = driver > 0
        elements["safety"][ids[loaded]] = strength / driver[loaded]
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
