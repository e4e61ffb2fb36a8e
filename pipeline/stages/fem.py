"""scikit-fem plumbing shared by the stages: elements, bases and per-element coefficient arrays."""

from __future__ import annotations

import numpy as np

from .. import errors

ORDERS = (1, 2)


def element(order: int):
    """Lagrange tetrahedron of the given order (1 or 2) on the linear geometry."""
    from skfem import ElementTetP1, ElementTetP2

    return {1: ElementTetP1, 2: ElementTetP2}[order]()


def cell_basis(domain, order: int):
    """Volume basis; quadrature of degree 2*order integrates mass-type terms exactly."""
    from skfem import Basis

    return Basis(domain.mesh, element(order), intorder=2 * order)


def facet_basis(domain, order: int, facets: np.ndarray):
    """Basis on the given boundary facets, exact for products of two fields of ``order``."""
    from skfem import FacetBasis

    return FacetBasis(domain.mesh, element(order), facets=facets, intorder=2 * order)


def per_element(values: np.ndarray, basis) -> np.ndarray:
    """Broadcast per-element values (nel, ...) to quadrature points: (..., nel, nqp)."""
    nqp = basis.X.shape[1]
    values = np.asarray(values, dtype=float)
    moved = np.moveaxis(values, 0, -1)  # (..., nel)
    return np.repeat(moved[..., None], nqp, axis=-1)


def part_values(domain, per_part: dict[str, float], default: float = 0.0) -> np.ndarray:
    """One value per element from a part -> value mapping."""
    out = np.full(len(domain.tetrahedra), default, dtype=float)
    for name, value in per_part.items():
        out[domain.parts[name]] = value
    return out


def probe_points(domain, probes, where: str) -> tuple[list[str], np.ndarray]:
    """Names and (3, n) coordinates [m] of probes; every probe outside the mesh is an ``InputError``."""
    names = list(probes)
    points = np.array([probes[n] for n in names], dtype=float).reshape(-1, 3).T
    finder = domain.mesh.element_finder()
    outside = []
    for i, name in enumerate(names):
        try:
            finder(*points[:, i : i + 1])
        except ValueError:
            outside.append(f"{where}: probe '{name}' at {points[:, i].tolist()} m is outside the mesh")
    if outside:
        raise errors.InputError(outside)
    return names, points
