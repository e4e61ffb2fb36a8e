"""Temperature onto the structural model (the ``map`` stage): same mesh, cross mesh, or an external field.

Same mesh: the heat stage's degrees of freedom are kept as they are, so the stress stage evaluates the
temperature exactly at its own quadrature points.  Cross mesh: the structural nodes are located in the
thermal mesh and the thermal field is interpolated there (linear interpolation within the containing
tetrahedron keeps the values within the source's range).  External: a point cloud (VTU point data
from another solver, or a CSV of x, y, z, T) interpolated linearly over its Delaunay tetrahedra.
Points outside the source within ``tolerance`` take the value of the nearest source point inside and
are counted; beyond it the stage stops naming the part and the distance.

Parts keep their jumps: where the source knows its parts (a thermal mesh with the same part names, or
a point cloud with a part label per point, or one file per part), each structural part reads only
the source's same part, so a jump at an interface (a contact resistance, or two blocks at different
temperatures) stays a jump instead of being smeared across the elements beside it.  A structural node
shared by two parts can hold one value only: such nodes whose parts read different values are counted
and given the mean (split the interface with a contact to keep the jump).
"""

from __future__ import annotations

import csv
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy.spatial import cKDTree

from .. import errors
from ..fields import TemperatureField, ThermalLoad
from ..model.units import ZERO_CELSIUS
from . import fem

STAGE_VERSION = 2
CANDIDATES = 12  # nearest source tetrahedra tried per point (by centroid)


@dataclass(frozen=True)
class MapSpec:
    """reference: stress-free temperature [K], required: the temperature at which the assembly carries no
    thermal stress (there is no neutral default: 20 degC and a bonding temperature give different
    stresses).  reference_by_part: part -> K (overrides the global value); a part stress-free at its
    own temperature is not bonded at it (see docs/theory.md, "Stress-free temperature and bonding").
    tolerance: largest distance [m] outside the source that takes the nearest value; None = half the
    source's median edge length.  order: order of the mapped field for cross-mesh and external sources
    (1: at the structural vertices)."""

    reference: float | None
    reference_by_part: Mapping[str, float] = field(default_factory=dict)
    tolerance: float | None = None
    order: int = 1


def check(domain, spec: MapSpec, where: str = "map") -> None:
    """Raise one ``InputError`` listing every problem of ``spec`` on ``domain`` (the stress-free
    temperatures: given, >= 0 K, for parts that exist)."""
    _reference(domain, spec, where)


def _reference(domain, spec: MapSpec, where: str) -> np.ndarray:
    problems = [errors.unknown_name("part", p, domain.parts, f"{where}.reference_by_part")
                for p in spec.reference_by_part if p not in domain.parts]
    if spec.reference is None:
        problems.append(f"{where}.reference: give the stress-free temperature (the temperature at which the "
                        "parts carry no thermal stress, e.g. the assembly temperature, \"25 degC\"); there is no "
                        "default because every stress depends on it")
    values = [v for v in (spec.reference, *spec.reference_by_part.values()) if v is not None]
    problems += [f"{where}: stress-free temperature must be >= 0 K, got {v}" for v in values if not v >= 0]
    if problems:
        raise errors.InputError(problems)
    return fem.part_values(domain, dict(spec.reference_by_part), default=spec.reference)


def _load(domain, values: np.ndarray, order: int, spec: MapSpec, diagnostics: dict, where: str) -> ThermalLoad:
    diagnostics = diagnostics | {"mapped_min_K": float(values.min()), "mapped_max_K": float(values.max())}
    return ThermalLoad(values, order, _reference(domain, spec, where), diagnostics)


def transfer(field_: TemperatureField, source_domain, target_domain, spec: MapSpec,
             where: str = "map") -> ThermalLoad:
    """Temperature of a heat result on ``source_domain`` as a load on ``target_domain``; part by part
    when every structural part is a part of the thermal mesh (see the module docstring)."""
    base = {"source_min_K": float(field_.temperature.min()), "source_max_K": float(field_.temperature.max())}
    if _same_mesh(source_domain, target_domain):
        return _load(target_domain, field_.temperature.copy(), field_.order, spec,
                     base | {"method": "same mesh", "outside": 0, "max_distance_m": 0.0}, where)
    space = fem.space(target_domain, spec.order)
    points = space.doflocs.T
    by_part = set(target_domain.parts) <= set(source_domain.parts)
    groups = {p: source_domain.parts[p] for p in target_domain.parts} if by_part else \
        {p: np.arange(len(source_domain.tetrahedra)) for p in target_domain.parts}
    sspace = fem.space(source_domain, field_.order)

    def evaluate(part, dofs):
        cells, bary, distance = _locate(source_domain.points, source_domain.tetrahedra[groups[part]], points[dofs])
        cells = groups[part][cells]
        phi = lagrange(field_.order, bary)
        return np.einsum("nl,ln->n", phi, field_.temperature[sspace.element_dofs[:, cells]]), distance

    tolerance = spec.tolerance if spec.tolerance is not None else _default_tolerance(source_domain)
    values, distance, shared = _by_part(target_domain, space, evaluate)
    _refuse_far(distance, tolerance, points, target_domain, where)
    return _load(target_domain, values, spec.order, spec,
                 base | {"method": "cross mesh", "by_part": by_part, "outside": int((distance > 0).sum()),
                         "max_distance_m": float(distance.max(initial=0.0))} | shared, where)


def _by_part(domain, space, evaluate):
    """Values at every dof of ``space``, each part's dofs from ``evaluate(part, dofs) -> (values,
    distance)``; dofs shared by parts take the mean, and those where the parts disagree are counted."""
    total, count = np.zeros(space.N), np.zeros(space.N)
    lo, hi = np.full(space.N, np.inf), np.full(space.N, -np.inf)
    distance = np.zeros(space.N)
    for part in sorted(domain.parts):
        dofs = np.unique(space.element_dofs[:, domain.parts[part]])
        v, d = evaluate(part, dofs)
        total[dofs] += v
        count[dofs] += 1
        lo[dofs], hi[dofs] = np.minimum(lo[dofs], v), np.maximum(hi[dofs], v)
        distance[dofs] = np.maximum(distance[dofs], d)
    values = total / np.maximum(count, 1)
    spread = np.where(count > 1, hi - lo, 0.0)
    scale = max(float(np.ptp(values)), 1.0)
    jumps = spread > 1e-9 * scale
    return values, distance, {"shared_nodes_with_jump": int(jumps.sum()), "largest_shared_jump_K": float(spread.max())}


def from_function(domain, temperature: Callable, spec: MapSpec, order: int = 2,
                  where: str = "map") -> ThermalLoad:
    """A load from a temperature given as a function of x (shape (3, n), m) -> K, e.g. a benchmark field."""
    values = np.asarray(temperature(fem.space(domain, order).doflocs), dtype=float)
    return _load(domain, values, order, spec, {"method": "function", "outside": 0, "max_distance_m": 0.0}, where)


def from_file(path: str | Path | Mapping[str, str | Path], domain, spec: MapSpec, array: str | None = None,
              unit: str = "m", temperature_unit: str = "K", part_array: str | None = None,
              where: str = "map") -> ThermalLoad:
    """A load from an external field file: VTU point data (``array`` names it) or a CSV with columns
    x, y, z, T and optionally a fifth column naming each point's part (a header row is skipped).
    unit: length unit of the file's coordinates; temperature_unit: "K" or "degC".
    Part labels: ``path`` may map part -> file (one file per part); a VTU's ``part_array`` holds each
    point's part as its index in the sorted part names (the numbering of thermochain's VTU files).
    With labels each structural part reads only its own points (jumps are kept)."""
    from ..model.units import length_factor

    files = dict(path) if isinstance(path, Mapping) else {None: path}
    clouds = []
    for part, file in files.items():
        file = Path(file)
        factor = length_factor(unit, where=f"{file}: length unit")
        if temperature_unit not in ("K", "degC"):
            raise errors.InputError(f"{where}: temperature_unit must be 'K' or 'degC', got {temperature_unit!r}")
        points, values, labels = _read_point_field(file, array, part_array, domain)
        if part is not None:
            if part not in domain.parts:
                raise errors.InputError(errors.unknown_name("part", part, domain.parts, f"{where}.file"))
            labels = np.full(len(values), part, dtype=object)
        clouds.append((points * factor, values + (ZERO_CELSIUS if temperature_unit == "degC" else 0.0), labels))
    points = np.vstack([c[0] for c in clouds])
    values = np.concatenate([c[1] for c in clouds])
    labels = None if any(c[2] is None for c in clouds) else np.concatenate([c[2] for c in clouds])
    name = ", ".join(str(f) for f in files.values())
    mapped, diagnostics = _interpolate_cloud(points, values, labels, spec, domain, where, name)
    return _load(domain, mapped, spec.order, spec,
                 {"method": "external file", "file": name, "source_min_K": float(values.min()),
                  "source_max_K": float(values.max())} | diagnostics, where)


def _same_mesh(a, b) -> bool:
    return a is b or (a.points.shape == b.points.shape and a.tetrahedra.shape == b.tetrahedra.shape
                      and np.array_equal(a.tetrahedra, b.tetrahedra) and np.allclose(a.points, b.points, atol=0))


def lagrange(order: int, bary: np.ndarray) -> np.ndarray:
    """Lagrange shape functions of a tetrahedron at barycentric coordinates (n, 4), in scikit-fem's
    local order (vertices, then edges 01, 12, 02, 03, 13, 23)."""
    if order == 1:
        return bary
    edges = ((0, 1), (1, 2), (0, 2), (0, 3), (1, 3), (2, 3))
    return np.column_stack([bary * (2 * bary - 1)] + [4 * bary[:, a] * bary[:, b] for a, b in edges])


def _locate(points_src, tets, x):
    """Containing tetrahedron and barycentric coordinates of each point; points outside get the
    nearest point of a nearby tetrahedron (clamped coordinates) and their distance to it [m].
    Candidates are the tetrahedra with the nearest centroids, widened until each point is found."""
    corners = points_src[tets]  # (m, 4, 3)
    tree = cKDTree(corners.mean(axis=1))
    cell = np.full(len(x), -1)
    bary = np.zeros((len(x), 4))
    dist = np.full(len(x), np.inf)
    todo = np.arange(len(x))
    k = CANDIDATES
    while len(todo):
        k = min(k, len(tets))
        _, cand = tree.query(x[todo], k=k)
        cand = cand.reshape(len(todo), k)
        for j in range(k):
            c = cand[:, j]
            lam = _barycentric(corners[c], x[todo])
            clamped = np.clip(lam, 0.0, None)
            clamped /= clamped.sum(axis=1, keepdims=True)
            d = np.linalg.norm(np.einsum("ni,nij->nj", clamped, corners[c]) - x[todo], axis=1)
            d[lam.min(axis=1) >= -1e-10] = 0.0
            better = d < dist[todo]
            cell[todo[better]], bary[todo[better]], dist[todo[better]] = c[better], clamped[better], d[better]
        if k == len(tets) or k >= 8 * CANDIDATES:
            break
        todo = todo[dist[todo] > 0]  # not found inside yet: look further
        k *= 2
    return cell, bary, dist


def _barycentric(corners, x):
    """Barycentric coordinates of x (n, 3) in tetrahedra with corners (n, 4, 3)."""
    t = np.transpose(corners[:, 1:] - corners[:, :1], (0, 2, 1))  # (n, 3, 3)
    rest = np.linalg.solve(t, (x - corners[:, 0])[:, :, None])[:, :, 0]
    return np.column_stack([1.0 - rest.sum(axis=1), rest])


def _default_tolerance(domain) -> float:
    e = domain.points[domain.tetrahedra[:, 1]] - domain.points[domain.tetrahedra[:, 0]]
    return 0.5 * float(np.median(np.linalg.norm(e, axis=1)))


def _refuse_far(distance, tolerance, points, target, where, source_name="the thermal mesh"):
    far = distance > tolerance
    if not far.any():
        return
    tree = cKDTree(target.points)
    _, node = tree.query(points[far])
    part_of = target.part_ids()
    names = sorted(target.parts)
    node_part = {}
    for i, name in enumerate(names):
        node_part.update({int(n): name for n in np.unique(target.tetrahedra[part_of == i])})
    parts = sorted({node_part.get(int(n), "?") for n in node}) or ["?"]
    raise errors.InputError(
        f"{where}: {int(far.sum())} structural points lie outside {source_name} by up to "
        f"{distance.max() * 1e3:.4g} mm (tolerance {tolerance * 1e3:.4g} mm), in parts {', '.join(parts)}; "
        "check that both meshes use the same length unit and position, or raise the tolerance"
    )


def _read_point_field(path: Path, array: str | None, part_array: str | None, domain):
    """Points (n, 3), values (n,) and part names (n,) or None."""
    if not path.is_file():
        raise errors.InputError(f"{path}: temperature field file not found")
    if path.suffix.lower() == ".csv":
        points, values, labels = _read_csv(path)
        if labels is not None:
            bad = sorted(set(labels) - set(domain.parts))
            if bad:
                raise errors.InputError([errors.unknown_name("part", b, domain.parts, f"{path}: part column")
                                         for b in bad])
        return points, values, labels
    from ..model.mesh import read_meshio

    m = read_meshio(path)
    if not m.point_data:
        raise errors.InputError(f"{path}: the file has no point data to read temperatures from")
    if array is None:
        if len(m.point_data) != 1:
            raise errors.InputError(f"{path}: name the temperature array; arrays there are: "
                                    f"{', '.join(sorted(m.point_data))}")
        array = next(iter(m.point_data))
    if array not in m.point_data:
        raise errors.InputError(errors.unknown_name("point array", array, m.point_data, str(path)))
    values = np.asarray(m.point_data[array], dtype=float)
    if values.ndim != 1:
        raise errors.InputError(f"{path}: array '{array}' has {values.shape[1]} components; a temperature has 1")
    labels = None
    if part_array is not None:
        if part_array not in m.point_data:
            raise errors.InputError(errors.unknown_name("point array", part_array, m.point_data, str(path)))
        ids = np.asarray(m.point_data[part_array]).ravel().astype(np.int64)
        names = np.array(sorted(domain.parts), dtype=object)
        if ids.min() < 0 or ids.max() >= len(names):
            raise errors.InputError(f"{path}: array '{part_array}' holds part numbers {ids.min()}..{ids.max()}; the "
                                    f"model's parts are numbered 0..{len(names) - 1} in sorted order "
                                    f"({', '.join(names)})")
        labels = names[ids]
    return np.asarray(m.points, dtype=float)[:, :3], values, labels


def _read_csv(path: Path):
    """x, y, z, T and an optional fifth column with the point's part name."""
    rows, labels = [], []
    with path.open(newline="", encoding="utf-8") as f:
        for n, row in enumerate(csv.reader(f), start=1):
            if not row or row[0].lstrip().startswith("#"):
                continue
            try:
                rows.append([float(v) for v in row[:4]])
            except ValueError:
                if rows:
                    raise errors.InputError(f"{path}:{n}: expected four numbers x, y, z, T, got {row}") from None
                continue  # header
            if len(rows[-1]) != 4 or len(row) > 5:
                raise errors.InputError(f"{path}:{n}: expected columns x, y, z, T and optionally part, got {len(row)}")
            labels.append(row[4].strip() if len(row) == 5 else None)
    if len(rows) < 4:
        raise errors.InputError(f"{path}: needs at least 4 points with x, y, z, T")
    if any(v is None for v in labels) and not all(v is None for v in labels):
        raise errors.InputError(f"{path}: give the part column on every row or on none")
    data = np.array(rows)
    return data[:, :3], data[:, 3], (None if labels[0] is None else np.array(labels, dtype=object))


def _interpolate_cloud(points, values, labels, spec, domain, where, name):
    """Map a point cloud onto the structural dofs over its Delaunay tetrahedra; part by part when the
    points carry part labels.  Diagnostics: outside count and distance, duplicate points with different
    values (a jump; smeared without labels), and with labels the structural points that the unlabelled
    cloud would have read from another part's points (across an interface or an air gap)."""
    space = fem.space(domain, spec.order)
    targets = space.doflocs.T
    whole = _cloud_mesh(points, name)
    tolerance = spec.tolerance if spec.tolerance is not None else 0.5 * float(
        np.median(np.linalg.norm(points[whole[:, 1]] - points[whole[:, 0]], axis=1)))
    diagnostics = {"by_part": labels is not None} | _duplicates(points, values, labels)
    if labels is None:
        cells, bary, distance = _locate(points, whole, targets)
        _refuse_far(distance, tolerance, targets, domain, where, source_name=name)
        mapped = np.einsum("ni,ni->n", bary, values[whole[cells]])
        return mapped, diagnostics | {"outside": int((distance > 0).sum()),
                                      "max_distance_m": float(distance.max(initial=0.0))}
    clouds = {}
    for part in domain.parts:
        own = np.flatnonzero(labels == part)
        if len(own) < 4:
            raise errors.InputError(f"{name}: part '{part}' has {len(own)} labelled points; each part of the "
                                    "structural model needs at least 4 (or map without part labels)")
        clouds[part] = (own, own[_cloud_mesh(points[own], f"{name} (part '{part}')")])
    across = np.zeros(space.N, dtype=bool)

    def evaluate(part, dofs):
        own, tets = clouds[part]
        cells, bary, distance = _locate(points, tets, targets[dofs])
        near, _, _ = _locate(points, whole, targets[dofs])
        across[dofs] |= ~np.isin(whole[near], own).all(axis=1)
        return np.einsum("ni,ni->n", bary, values[tets[cells]]), distance

    mapped, distance, shared = _by_part(domain, space, evaluate)
    _refuse_far(distance, tolerance, targets, domain, where, source_name=name)
    return mapped, diagnostics | shared | {"outside": int((distance > 0).sum()),
                                           "max_distance_m": float(distance.max(initial=0.0)),
                                           "read_across_parts_without_labels": int(across.sum())}


def _cloud_mesh(points, name):
    """Delaunay tetrahedra of a point cloud without qhull's flat slivers."""
    from scipy.spatial import Delaunay

    from ..model.mesh import signed_volumes

    try:
        tets = Delaunay(points).simplices
    except Exception as exc:  # qhull refuses flat or degenerate clouds
        raise errors.InputError(f"{name}: the points do not span a volume ({exc.__class__.__name__})") from None
    edge = np.linalg.norm(points[tets[:, 1]] - points[tets[:, 0]], axis=1)
    return tets[np.abs(signed_volumes(points, tets)) > 1e-9 * np.median(edge) ** 3]


def _duplicates(points, values, labels) -> dict:
    """Points given twice with different values: a jump between parts (kept with labels, smeared and
    counted without)."""
    _, inverse, counts = np.unique(np.round(points, 12), axis=0, return_inverse=True, return_counts=True)
    inverse = inverse.ravel()
    lo = np.full(len(counts), np.inf)
    hi = np.full(len(counts), -np.inf)
    np.minimum.at(lo, inverse, values)
    np.maximum.at(hi, inverse, values)
    jump = (counts > 1) & (hi - lo > 1e-9 * max(float(np.ptp(values)), 1.0))
    return {"duplicate_points_with_jump": int(jump.sum()),
            "largest_duplicate_jump_K": float((hi - lo)[jump].max(initial=0.0))}
