"""Plumbing shared by the stages: spaces and geometry cached on the domain, probes, per-part values."""

from __future__ import annotations

import numpy as np

from .. import errors
from . import kernels

ORDERS = (1, 2)


def space(domain, order: int) -> kernels.Space:
    """The scalar P``order`` space of ``domain`` (built once per domain)."""
    key = f"space{order}"
    if key not in domain._cache:
        domain._cache[key] = kernels.Space(domain.mesh, order)
    return domain._cache[key]


def unknowns(domain, order: int) -> int:
    """Scalar unknowns of P``order`` on ``domain``, without building the space: vertices, plus for P2
    the edges, exact if the mesh's edges are already known, else from Euler's relation for a
    tetrahedral body (E = V + F - T - 1 with F close to 2T): within a few percent, for memory estimates."""
    if f"space{order}" in domain._cache:
        return domain._cache[f"space{order}"].N
    v, t = len(domain.points), len(domain.tetrahedra)
    return v if order == 1 else v + v + t - 1


def geometry(domain) -> kernels.Geometry:
    """Affine maps of the domain's tetrahedra (built once per domain)."""
    if "geometry" not in domain._cache:
        domain._cache["geometry"] = kernels.Geometry(domain.mesh)
    return domain._cache["geometry"]


def part_values(domain, per_part: dict[str, float], default: float = 0.0) -> np.ndarray:
    """One value per element from a part -> value mapping."""
    out = np.full(len(domain.tetrahedra), default, dtype=float)
    for name, value in per_part.items():
        out[domain.parts[name]] = value
    return out


def probe_points(domain, probes, where: str) -> tuple[list[str], np.ndarray, np.ndarray]:
    """Names, (3, n) coordinates [m] and containing elements of probes; a probe outside the mesh is an
    ``InputError``.  Located once per domain and set of probes (planning checks them, the solve reuses it)."""
    key = ("probes", tuple((n, tuple(map(float, xyz))) for n, xyz in probes.items()))
    if key not in domain._cache:
        domain._cache[key] = _locate_probes(domain, probes, where)
    names, points, cells = domain._cache[key]
    return list(names), points.copy(), cells.copy()


def _locate_probes(domain, probes, where: str) -> tuple[list[str], np.ndarray, np.ndarray]:
    names = list(probes)
    points = np.array([probes[n] for n in names], dtype=float).reshape(-1, 3).T
    finder = domain.mesh.element_finder()
    outside, cells = [], np.zeros(len(names), dtype=np.int64)
    for i, name in enumerate(names):
        try:
            cells[i] = finder(*points[:, i : i + 1])[0]
        except ValueError:
            outside.append(f"{where}: probe '{name}' at {points[:, i].tolist()} m is outside the mesh")
    if outside:
        raise errors.InputError(outside)
    return names, points, cells


def probe_weights(domain, order: int, points: np.ndarray, cells: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Dofs (nb, n) and shape-function values (nb, n) of P``order`` at points (3, n) in ``cells``."""
    geom = geometry(domain)
    local = np.einsum("nij,jn->in", geom.inv[cells], points - geom.origin[cells].T)  # reference coords
    phi, _ = kernels._shape(order, local)
    return space(domain, order).element_dofs[:, cells], phi


def check_probes(domain, probes, where: str, problems: list[str]) -> None:
    """Append the message of every probe outside the mesh to ``problems``."""
    try:
        probe_points(domain, probes, where)
    except errors.InputError as exc:
        problems += exc.problems
