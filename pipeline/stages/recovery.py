"""Stress recovery: one recovered stress field per part, used by every figure, probe and line.

sigma = C(T) (eps(u) - eps_th(T, T_ref)) at the quadrature points (eps_th = alpha (T - T_ref) for a
constant coefficient; ``model.curves`` for temperature-dependent properties).  The recovered field is the L2
projection of sigma onto the displacement's polynomial space restricted to one part (continuous within
the part, never averaged across a bonded interface).  Part figures, safety factors, probes and lines
read that field at its nodes (peaks) or interpolate it (points); the largest quadrature-point value is
reported beside it, labelled, never instead.  Element means are kept for compact plots only.

Criteria (per part, on the recovered field at its nodes):
  ductile: utilisation = von Mises / yield strength (distortion energy);
  brittle, isotropic: largest principal stress (tension) / tensile strength (maximum normal stress);
  brittle, orthotropic with per-axis strengths: maximum stress in the material axes,
      max(sigma_ii / X_i for tension, |tau_ij| / S_ij) (R.M. Jones, Mechanics of Composite Materials,
      2nd ed., 1999, sec. 2.9, from memory).
Safety factor = 1 / utilisation.  A peak within ``features.NEAR`` element sizes of a singular feature
(``features``) is flagged; the safety factor the verdict uses is then the one of the peak away from
flagged features, because the value at a singular feature grows without bound under refinement and
means nothing against a strength; the flagged peak is reported beside it.  Units: Pa, m.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse.linalg as spla

from . import constitutive, features as features_mod, fem, kernels


@dataclass
class PartModel:
    """What recovery needs of one part: its element ids, C [Pa], alpha [1/K] (Voigt) and material."""

    ids: np.ndarray
    c: np.ndarray
    alpha: np.ndarray
    material: object


def temperature(domain, load, ids, ref: kernels.Reference) -> np.ndarray:
    """(n, nq) T [K] at ``ref``'s points of the elements ``ids``."""
    return kernels.interpolate(fem.space(domain, load.order), fem.geometry(domain), ids, load.temperature,
                               kernels.with_order(ref, load.order))


def temperature_rise(domain, load, ids, ref: kernels.Reference) -> np.ndarray:
    """(n, nq) T - T_ref [K] at ``ref``'s points of the elements ``ids``."""
    return temperature(domain, load, ids, ref) - load.reference[ids][:, None]


def stiffness_at(domain, model: PartModel, load, ref) -> np.ndarray:
    """C [Pa] of the part: (6, 6), or (n, nq, 6, 6) at ``ref``'s points when E or nu depends on T
    (without a thermal load: the constant C of the nominal values)."""
    if load is None or not model.material.stiffness_varies:
        return model.c
    return constitutive.stiffness_at(model.material, temperature(domain, load, model.ids, ref))


def thermal_strain(domain, model: PartModel, load, ref) -> np.ndarray:
    """(n, 6, nq) thermal strain from the stress-free temperature at ``ref``'s points (alpha dT for a
    constant coefficient; the integrated or mean-convention strain of an expansion curve)."""
    if "expansion" not in model.material.curves:
        return np.einsum("s,nq->nsq", model.alpha, temperature_rise(domain, load, model.ids, ref))
    t = temperature(domain, load, model.ids, ref)
    eps = constitutive.thermal_strain(model.material, t, np.broadcast_to(load.reference[model.ids][:, None], t.shape))
    return np.moveaxis(eps, 0, 1)


def apply(c: np.ndarray, eps: np.ndarray) -> np.ndarray:
    """C eps for (n, 6, nq) strains, C (6, 6) or (n, nq, 6, 6)."""
    return np.einsum("st,ntq->nsq", c, eps) if c.ndim == 2 else np.einsum("nqst,ntq->nsq", c, eps)


def stress_at_points(domain, model: PartModel, u: np.ndarray, order: int, load, ref) -> np.ndarray:
    """(n_elements_of_part, 6, nq) stresses [Pa] at ``ref``'s points."""
    eps = kernels.strains(fem.space(domain, order), fem.geometry(domain), model.ids, u, ref)
    if load is not None:
        eps = eps - thermal_strain(domain, model, load, ref)
    return apply(stiffness_at(domain, model, load, ref), eps)


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


def recover(domain, models: dict[str, PartModel], u: np.ndarray, order: int, load=None, features=None):
    """Per-part figures, per-element means (stress, von_mises, tresca, principal, safety), the
    recovered nodal stresses per part and the safety factor at those nodes; ``features``
    (``features.Features``) flags singular peaks."""
    nel = len(domain.tetrahedra)
    ref = kernels.reference(order, kernels.degree_mass(order))
    elements = {"stress": np.zeros((nel, 6)), "safety": np.full(nel, np.inf)}
    parts, nodal_by_part, safety = {}, {}, {}
    xyz = fem.space(domain, order).doflocs.T
    for part, model in models.items():
        sigma = stress_at_points(domain, model, u, order, load, ref)
        elements["stress"][model.ids] = np.einsum("nsq,q->ns", sigma, ref.weights) / ref.weights.sum()
        dofs, nodal = nodal_stress(domain, model, sigma, order, ref)
        sizes = features_mod.point_sizes(domain, order, model.ids, dofs)
        parts[part] = figures(model.material, nodal, xyz[dofs], sizes, np.moveaxis(sigma, 1, 0).reshape(6, -1),
                              features, part)
        nodal_by_part[part] = (dofs, nodal.T)
        use_nodes = utilisation(model.material, nodal)
        safety[part] = np.full(len(dofs), np.nan) if use_nodes is None else \
            np.divide(1.0, use_nodes, out=np.full(len(dofs), np.inf), where=use_nodes > 0)
        use = utilisation(model.material, elements["stress"][model.ids].T)
        if use is None:
            elements["safety"][model.ids] = np.nan
        else:
            loaded = use > 0
            elements["safety"][model.ids[loaded]] = 1.0 / use[loaded]
    s = elements["stress"].T
    elements["von_mises"] = constitutive.von_mises(s)
    elements["principal"] = constitutive.principal(s)
    elements["tresca"] = elements["principal"][:, 0] - elements["principal"][:, 2]
    return parts, elements, nodal_by_part, safety


def criterion(material) -> str | None:
    """The criterion a part is judged by (see the module docstring), or None without a strength."""
    if material.brittle and material.kind == "orthotropic" and material.tensile_strength_axes:
        return "brittle laminate: maximum stress in the material axes / per-axis strengths"
    if material.brittle:
        return "brittle: largest principal stress / tensile strength" if material.tensile_strength else None
    if material.yield_strength:
        return "ductile: peak von Mises / yield strength"
    return "ductile: peak von Mises / tensile strength (no yield strength given)" if material.tensile_strength else None


def utilisation(material, s: np.ndarray) -> np.ndarray | None:
    """Stress over strength (n,) by the part's criterion for Voigt stresses (6, n) [Pa]; None without a
    strength.  Compression alone never fails a brittle criterion here (no compressive strengths)."""
    if material.brittle and material.kind == "orthotropic" and material.tensile_strength_axes:
        local = in_axes(s, np.asarray(material.axes, float))
        x = np.broadcast_to(np.asarray(material.tensile_strength_axes, float), (3,))
        use = np.max(np.maximum(local[:3], 0.0) / x[:, None], axis=0)
        if material.shear_strength_axes:  # (S_xy, S_xz, S_yz); Voigt shears are yz, xz, xy
            shear = np.broadcast_to(np.asarray(material.shear_strength_axes, float), (3,))
            use = np.maximum(use, np.max(np.abs(local[3:]) / shear[[2, 1, 0], None], axis=0))
        return use
    if material.brittle:
        return np.maximum(constitutive.principal(s)[:, 0], 0.0) / material.tensile_strength \
            if material.tensile_strength else None
    strength = material.yield_strength or material.tensile_strength
    return constitutive.von_mises(s) / strength if strength else None


def in_axes(s: np.ndarray, r: np.ndarray) -> np.ndarray:
    """Voigt stresses (6, n) in model coordinates -> in the material axes (rows of ``r``)."""
    xx, yy, zz, yz, xz, xy = s
    t = np.array([[xx, xy, xz], [xy, yy, yz], [xz, yz, zz]])
    local = np.einsum("ai,ijn,bj->abn", r, t, r)
    return np.stack([local[0, 0], local[1, 1], local[2, 2], local[1, 2], local[0, 2], local[0, 1]])


def figures(material, nodal: np.ndarray, where: np.ndarray, sizes: np.ndarray, sigma_qp: np.ndarray,
            features=None, part: str = "") -> dict:
    """Figures of one part from its recovered nodal stresses (6, n) at points ``where`` (n, 3) [m] with
    local element sizes (n,) [m]; ``sigma_qp`` (6, m) are the quadrature-point stresses (reported beside)."""
    vm = constitutive.von_mises(nodal)
    pr = constitutive.principal(nodal)
    found = features if features is not None else features_mod.Features(np.zeros((0, 2, 3)), np.zeros(0, int), (), ())
    i_vm, i_max, i_min = int(np.argmax(vm)), int(np.argmax(pr[:, 0])), int(np.argmin(pr[:, 2]))
    qp_pr = constitutive.principal(sigma_qp)
    out = {
        "von_mises_max_Pa": float(vm[i_vm]), "von_mises_max_at_m": where[i_vm].tolist(),
        "principal_max_Pa": float(pr[i_max, 0]), "principal_max_at_m": where[i_max].tolist(),
        "principal_min_Pa": float(pr[i_min, 2]), "principal_min_at_m": where[i_min].tolist(),
        "von_mises_max_quadrature_Pa": float(constitutive.von_mises(sigma_qp).max()),
        "principal_max_quadrature_Pa": float(qp_pr[:, 0].max()),
        "nodal_stress": "L2 projection within the part",
        "von_mises": features_mod.flag(vm, where, sizes, found, part),
        "principal_max": features_mod.flag(pr[:, 0], where, sizes, found, part),
    }
    name = criterion(material)
    out["criterion"] = name
    out["strength_Pa"] = material.yield_strength or material.tensile_strength if not material.brittle else \
        material.tensile_strength
    use = utilisation(material, nodal)
    if use is None:
        return out | {"safety_factor": None, "safety_factor_peak": None, "verdict_uses": None}
    judged = features_mod.flag(use, where, sizes, found, part)
    out["utilisation"] = judged
    peak_sf = 1.0 / judged["peak"] if judged["peak"] > 0 else None
    if judged["near"] is None:
        sf, uses = peak_sf, "peak"
    else:
        sf = 1.0 / judged["away"] if judged["away"] else None
        uses = "peak away from singular features"
    return out | {"safety_factor": sf, "safety_factor_peak": peak_sf, "verdict_uses": uses}


def at_points(domain, order: int, load) -> np.ndarray:
    """The load's temperature at the displacement points of P``order`` [K]."""
    t = np.asarray(load.temperature, float)
    nv = domain.mesh.nvertices
    if load.order == order:
        return t.copy()
    if order == 1:
        return t[:nv].copy()
    e = domain.mesh.edges
    return np.concatenate([t[:nv], 0.5 * (t[e[0]] + t[e[1]])])


def sample(domain, order: int, nodal: dict, load, u: np.ndarray, points: np.ndarray, cells: np.ndarray,
           part_names: np.ndarray) -> list[dict]:
    """Values of the recovered field at points (3, n) [m] in ``cells``: part, displacement [m],
    temperature [K] (None without a load), stress (xx, yy, zz, xy, yz, xz) [Pa], principal stresses
    (largest first), von Mises [Pa].  ``part_names`` gives each element's part name."""
    dofs, phi = fem.probe_weights(domain, order, points, cells)
    disp = np.einsum("ip,ipc->cp", phi, u.reshape(-1, 3)[dofs])
    temp = None
    if load is not None:
        tdofs, tphi = fem.probe_weights(domain, load.order, points, cells)
        temp = np.einsum("ip,ip->p", tphi, load.temperature[tdofs])
    out = []
    for i, cell in enumerate(cells):
        part = str(part_names[cell])
        ids, values = nodal[part]
        local = np.searchsorted(ids, dofs[:, i])
        s = phi[:, i] @ values[local]  # (6,) Voigt xx, yy, zz, yz, xz, xy
        out.append({"part": part, "displacement_m": disp[:, i].tolist(),
                    "temperature_K": None if temp is None else float(temp[i]),
                    "stress_Pa": [float(v) for v in s[[0, 1, 2, 5, 3, 4]]],
                    "principal_Pa": constitutive.principal(s[:, None])[0].tolist(),
                    "von_mises_Pa": float(constitutive.von_mises(s[:, None])[0])})
    return out
