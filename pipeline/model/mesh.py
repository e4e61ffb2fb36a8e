"""meshio -> ``Domain``: parts (volume groups), surfaces (surface groups), interfaces, length unit.

This is the only module that knows how Gmsh physical groups appear in meshio (``gmsh:physical`` cell
data and ``field_data`` names).  Coordinates are scaled to metres once, here.
"""

from __future__ import annotations

import contextlib
import hashlib
import io
import logging
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .. import errors
from .units import length_factor

log = logging.getLogger(__name__)

#: Edges of a VTK/meshio ``tetra10`` cell: mid-edge node 4 + i lies on the edge EDGES_TET10[i].
EDGES_TET10 = ((0, 1), (1, 2), (0, 2), (0, 3), (1, 3), (2, 3))

#: A tetrahedron whose volume is below this fraction of its longest edge cubed is degenerate.
DEGENERATE_RATIO = 1e-10


@dataclass(frozen=True, repr=False)
class Domain:
    """A linear tetrahedral mesh with named parts and surfaces.

    points: (n, 3) node coordinates [m].  tetrahedra: (m, 4) node ids.
    parts: part name -> element ids.  surfaces: surface name -> facet ids of ``mesh`` (scikit-fem's
    numbering).  interfaces: (part, part) in sorted order -> facet ids shared by the two parts.
    source_hash: SHA-256 of the mesh file's bytes; unit: the length unit the file was drawn in.
    notices: what was done or found on loading that the user should read (pruned nodes, warnings).
    """

    points: np.ndarray
    tetrahedra: np.ndarray
    parts: dict[str, np.ndarray]
    surfaces: dict[str, np.ndarray]
    interfaces: dict[tuple[str, str], np.ndarray]
    source_hash: str = ""
    unit: str = "m"
    source: str = ""
    notices: tuple[str, ...] = ()
    _cache: dict = field(default_factory=dict, compare=False)

    @property
    def mesh(self):
        """The scikit-fem ``MeshTet`` of this domain (built once)."""
        if "mesh" not in self._cache:
            from skfem import MeshTet

            self._cache["mesh"] = MeshTet(self.points.T.copy(), self.tetrahedra.T.copy())
        return self._cache["mesh"]

    @property
    def element_volumes(self) -> np.ndarray:
        """Volume of each tetrahedron [m^3]."""
        if "volumes" not in self._cache:
            self._cache["volumes"] = np.abs(signed_volumes(self.points, self.tetrahedra))
        return self._cache["volumes"]

    def part_volume(self, name: str) -> float:
        """Meshed volume of a part [m^3]."""
        return float(self.element_volumes[self.part(name)].sum())

    def part(self, name: str, where: str = "mesh") -> np.ndarray:
        """Element ids of a part; an unknown name raises ``InputError`` with the closest name."""
        if name not in self.parts:
            raise errors.MeshError(errors.unknown_name("part", name, self.parts, where or self.source))
        return self.parts[name]

    def surface(self, name: str, where: str = "mesh") -> np.ndarray:
        """Facet ids of a surface; an unknown name raises ``InputError`` with the closest name."""
        if name not in self.surfaces:
            raise errors.MeshError(errors.unknown_name("surface", name, self.surfaces, where or self.source))
        return self.surfaces[name]

    @property
    def bodies(self) -> tuple[int, np.ndarray]:
        """Connected bodies (parts joined through shared nodes): their count and each node's body."""
        if "bodies" not in self._cache:
            from scipy.sparse import coo_matrix
            from scipy.sparse.csgraph import connected_components

            t, n = self.tetrahedra, len(self.points)
            graph = coo_matrix((np.ones(3 * len(t)), (np.repeat(t[:, 0], 3), t[:, 1:].ravel())), shape=(n, n))
            self._cache["bodies"] = connected_components(graph, directed=False)
        return self._cache["bodies"]

    def body_parts(self, body: int) -> list[str]:
        """Names of the parts that make up one body."""
        label = self.bodies[1]
        return sorted(p for p, ids in self.parts.items() if np.any(label[self.tetrahedra[ids, 0]] == body))

    def part_ids(self) -> np.ndarray:
        """Index of each element's part in ``sorted(parts)`` order (for output and per-part data)."""
        ids = np.full(len(self.tetrahedra), -1, dtype=np.int32)
        for i, name in enumerate(sorted(self.parts)):
            ids[self.parts[name]] = i
        return ids

    def facet_areas(self, facets: np.ndarray) -> np.ndarray:
        """Area of each facet [m^2]."""
        tri = self.points[self.mesh.facets[:, facets].T]
        return 0.5 * np.linalg.norm(np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0]), axis=1)

    def contains(self, points: np.ndarray) -> np.ndarray:
        """Whether each point (n, 3) [m] lies in some tetrahedron."""
        finder = self.mesh.element_finder()
        out = np.zeros(len(points), dtype=bool)
        for i, xyz in enumerate(np.asarray(points, dtype=float).reshape(-1, 3)):
            try:
                finder(*xyz.reshape(3, 1))
                out[i] = True
            except ValueError:
                pass
        return out

    def boundary_facets(self) -> np.ndarray:
        """Facet ids on the outer boundary of the whole mesh."""
        return self.mesh.boundary_facets()

    @property
    def bounding_box(self) -> tuple[np.ndarray, np.ndarray]:
        """Lower and upper corners [m]."""
        return self.points.min(axis=0), self.points.max(axis=0)

    def __repr__(self) -> str:
        lo, hi = self.bounding_box
        box = " x ".join(f"{d * 1e3:.4g}" for d in hi - lo)
        return (
            f"<Domain {len(self.points)} nodes, {len(self.tetrahedra)} tetrahedra; "
            f"box {box} mm from {np.round(lo, 6).tolist()} m; parts {sorted(self.parts)}; "
            f"surfaces {sorted(self.surfaces)}; {len(self.interfaces)} interfaces>"
        )

    def to_dict(self) -> dict:
        """What ``describe`` says, as plain data (SI units): ``thermochain mesh --json``."""
        lo, hi = self.bounding_box
        return {"file": self.source, "unit": self.unit, "nodes": len(self.points), "tetrahedra": len(self.tetrahedra),
                "bounding_box_m": [lo.tolist(), hi.tolist()],
                "parts": {n: {"elements": len(self.parts[n]), "volume_m3": self.part_volume(n)} for n in sorted(self.parts)},
                "surfaces": {n: {"facets": len(self.surfaces[n]),
                                 "area_m2": float(self.facet_areas(self.surfaces[n]).sum())} for n in sorted(self.surfaces)},
                "interfaces": [{"parts": [a, b], "facets": len(f)} for (a, b), f in sorted(self.interfaces.items())],
                "notices": [str(n) for n in self.notices]}

    def describe(self) -> str:
        """Multi-line summary: bounding box in metres, parts with volumes, surfaces with areas."""
        lo, hi = self.bounding_box
        lines = [
            f"mesh {self.source or '(in memory)'} drawn in {self.unit}: {len(self.points)} nodes, "
            f"{len(self.tetrahedra)} tetrahedra",
            f"bounding box [m]: {np.array2string(lo, precision=5)} to {np.array2string(hi, precision=5)}"
            f" (size {np.array2string(hi - lo, precision=5)})",
        ]
        for name in sorted(self.parts):
            lines.append(f"  part {name}: {len(self.parts[name])} elements, {self.part_volume(name):.4e} m^3")
        for name in sorted(self.surfaces):
            area = self.facet_areas(self.surfaces[name]).sum()
            lines.append(f"  surface {name}: {len(self.surfaces[name])} facets, {area:.4e} m^2")
        for (a, b), facets in sorted(self.interfaces.items()):
            lines.append(f"  interface {a}/{b}: {len(facets)} facets")
        lines += [f"  note: {n}" for n in self.notices]
        return "\n".join(lines)


def signed_volumes(points: np.ndarray, tetrahedra: np.ndarray) -> np.ndarray:
    """Signed volume of each tetrahedron [m^3]; positive for the usual (Gmsh, VTK) node order."""
    p = points[tetrahedra]
    return np.einsum("ij,ij->i", p[:, 1] - p[:, 0], np.cross(p[:, 2] - p[:, 0], p[:, 3] - p[:, 0])) / 6.0


def load(path: str | Path, unit: str) -> Domain:
    """Read a tetrahedral mesh that meshio reads and return a validated ``Domain`` in metres.

    unit: the length unit the mesh was drawn in (m, cm, mm, um, in); there is no default because a
    wrong guess is off by a factor of 1000.
    """
    path = Path(path)
    factor = length_factor(unit, where=f"{path}: length unit")
    if not path.is_file():
        raise errors.MeshError(f"{path}: mesh file not found")
    content = path.read_bytes()
    _check_gmsh_names(content, str(path))
    m = read_meshio(path)
    digest = hashlib.sha256(content).hexdigest()
    return from_meshio(m, unit=unit, factor=factor, source=str(path), source_hash=digest)


def read_meshio(path: Path):
    """meshio.read with its console chatter captured and every failure turned into ``MeshError``."""
    import meshio

    chatter = io.StringIO()
    try:
        with warnings.catch_warnings(), contextlib.redirect_stdout(chatter), contextlib.redirect_stderr(chatter):
            warnings.simplefilter("ignore")  # meshio prints and warns on harmless header details
            return meshio.read(path)
    except (Exception, SystemExit) as exc:  # meshio raises many types, and exits, on unreadable files
        detail = " ".join(chatter.getvalue().split()) or f"{type(exc).__name__}: {exc}"
        raise errors.MeshError(f"{path}: meshio cannot read this file ({detail}); give a whole mesh file in a format "
                               "meshio reads (Gmsh MSH 2.2 or 4.1, VTU, ...) with tetrahedra") from None


def _check_gmsh_names(content: bytes, where: str) -> None:
    """Names in a Gmsh file's $PhysicalNames section must be unique: meshio keeps one group per name, so a
    repeated name would silently merge or drop a group.  The section is text in ASCII and binary files."""
    start = content.find(b"$PhysicalNames")
    end = content.find(b"$EndPhysicalNames", start)
    if start < 0 or end < 0:
        return
    kinds = {2: "surface", 3: "volume"}
    seen: dict[str, tuple[int, int]] = {}
    problems = []
    for line in content[start:end].decode("utf-8", "replace").splitlines()[2:]:
        fields = line.split(maxsplit=2)
        if len(fields) < 3 or not fields[0].isdigit() or not fields[1].isdigit():
            continue
        dim, tag, name = int(fields[0]), int(fields[1]), fields[2].strip().strip('"')
        if dim not in kinds:
            continue
        if name in seen:
            odim, otag = seen[name]
            if odim == dim:
                problems.append(f"{where}: two {kinds[dim]} groups share the name '{name}' (tags {otag} and {tag}); "
                                "names must be unique: rename one in the mesher")
            else:
                problems.append(f"{where}: the name '{name}' is both a volume group and a surface group; names must "
                                "be unique: rename one in the mesher")
        else:
            seen[name] = (dim, tag)
    if problems:
        raise errors.MeshError(problems)


def from_meshio(m, unit: str = "m", factor: float | None = None, source: str = "", source_hash: str = "") -> Domain:
    """Build a ``Domain`` from a ``meshio.Mesh`` whose coordinates are in ``unit``."""
    factor = length_factor(unit) if factor is None else factor
    where = source or "mesh"
    notices: list[str] = []
    names = _group_names(m)

    tets, tet_tags, mid_nodes = [], [], []
    tris, tri_tags = [], []
    for block, tags in zip(m.cells, _block_tags(m)):
        if block.type in ("tetra", "tetra10"):
            tets.append(block.data[:, :4])
            tet_tags.append(tags)
            if block.type == "tetra10":
                mid_nodes.append(block.data)
        elif block.type in ("triangle", "triangle6"):
            tris.append(block.data[:, :3])
            tri_tags.append(tags)
    if not tets:
        types = sorted({b.type for b in m.cells}) or ["none"]
        raise errors.MeshError(
            f"{where}: the mesh has no tetrahedra (cell types found: {', '.join(types)}); "
            "thermochain needs a 3-D tetrahedral mesh (in Gmsh: Mesh > 3D, element order 1)"
        )
    points = np.asarray(m.points, dtype=float)
    if points.shape[1] == 2:
        raise errors.MeshError(f"{where}: the mesh is 2-D; thermochain needs 3-D tetrahedra")
    points = points[:, :3] * factor
    tet = np.concatenate(tets).astype(np.int64)
    for data in mid_nodes:
        notices += _check_tet10(points, data, where)

    # prune nodes no tetrahedron uses (construction points, dropped groups)
    used = np.zeros(len(points), dtype=bool)
    used[tet.ravel()] = True
    renumber = np.cumsum(used) - 1
    if not used.all():
        notices.append(f"{int((~used).sum())} nodes used by no tetrahedron were removed")
    points = points[used]
    tet = renumber[tet]
    tri = renumber[np.concatenate(tris)] if tris else np.zeros((0, 3), dtype=np.int64)
    if tris:
        keep = used[np.concatenate(tris)].all(axis=1)
        tri, tri_tag = tri[keep], np.concatenate(tri_tags)[keep]
    else:
        tri_tag = np.zeros(0, dtype=np.int64)

    _check_volumes(points, tet, where)
    tet_tag = np.concatenate(tet_tags)
    parts = _parts(tet_tag, names.get(3, {}), where, notices)

    from skfem import MeshTet

    mesh = MeshTet(points.T.copy(), tet.T.copy())
    surfaces = _surfaces(mesh, tri, tri_tag, names.get(2, {}), set(parts), where, notices)
    part_of = np.empty(len(tet), dtype=np.int64)
    ordered = sorted(parts)
    for i, name in enumerate(ordered):
        part_of[parts[name]] = i
    interfaces = _interfaces(mesh, part_of, ordered)
    notices += _touching_without_nodes(mesh, points, part_of, ordered)
    for note in notices:
        log.warning("%s: %s", where, note)
    domain = Domain(points, tet, parts, surfaces, interfaces, source_hash, unit, source, tuple(notices))
    domain._cache["mesh"] = mesh
    return domain


def _group_names(m) -> dict[int, dict[int, str]]:
    """Gmsh physical names by dimension: {dim: {tag: name}} (tags are per dimension in Gmsh)."""
    out: dict[int, dict[int, str]] = {}
    for name, value in (m.field_data or {}).items():
        value = np.asarray(value).ravel()
        if len(value) >= 2:
            out.setdefault(int(value[1]), {})[int(value[0])] = str(name)
    return out


def _block_tags(m) -> list[np.ndarray]:
    """Integer group tag of each cell, per cell block (0 where the file carries none)."""
    for key in ("gmsh:physical", "medit:ref", "cell_tags", "part_id"):
        if key in (m.cell_data or {}):
            return [np.asarray(a, dtype=np.int64).ravel() for a in m.cell_data[key]]
    return [np.zeros(len(b.data), dtype=np.int64) for b in m.cells]


def _parts(tags: np.ndarray, names: dict[int, str], where: str, notices: list[str]) -> dict[str, np.ndarray]:
    parts: dict[str, np.ndarray] = {}
    unique = np.unique(tags)
    if len(unique) == 1 and unique[0] == 0 and not names:
        notices.append("the mesh has no volume groups: all elements form one part named 'body'")
        return {"body": np.arange(len(tags))}
    for tag in unique:
        name = names.get(int(tag))
        if name is None:
            name = f"unnamed_volume_{int(tag)}"
            notices.append(f"volume group {int(tag)} has no name; it is called '{name}' (unnamed group)")
        if name in parts:
            raise errors.MeshError(f"{where}: two volume groups share the name '{name}'; names must be unique")
        parts[name] = np.flatnonzero(tags == tag)
    for tag, name in names.items():
        if name not in parts:
            raise errors.MeshError(
                f"{where}: part '{name}' (volume group {tag}) has no elements; was it meshed and are its "
                "volumes in the physical group?"
            )
    return parts


def _facet_keys(triangles: np.ndarray, n: int) -> np.ndarray:
    """One sortable key per facet, independent of node order: an integer while n^3 fits in 62 bits,
    else a record of the three sorted node ids (compared field by field)."""
    s = np.sort(triangles, axis=1).astype(np.int64)
    if n**3 < 2**62:
        return (s[:, 0] * n + s[:, 1]) * n + s[:, 2]
    return np.ascontiguousarray(s).view([("a", "<i8"), ("b", "<i8"), ("c", "<i8")]).ravel()


def _surfaces(mesh, tri, tri_tag, names, part_names, where, notices) -> dict[str, np.ndarray]:
    surfaces: dict[str, np.ndarray] = {}
    if len(tri) == 0:
        return surfaces
    n = mesh.p.shape[1]
    facet_keys = _facet_keys(mesh.facets.T, n)  # skfem keeps facets sorted by construction
    order = np.argsort(facet_keys)
    keys = _facet_keys(tri, n)
    pos = np.clip(np.searchsorted(facet_keys, keys, sorter=order), 0, len(order) - 1)
    found = order[pos]
    matched = facet_keys[found] == keys
    for tag in np.unique(tri_tag):
        name = names.get(int(tag))
        if tag == 0 and name is None:
            continue  # triangles outside any surface group
        if name is None:
            name = f"unnamed_surface_{int(tag)}"
            notices.append(f"surface group {int(tag)} has no name; it is called '{name}' (unnamed group)")
        if name in surfaces:
            raise errors.MeshError(f"{where}: two surface groups share the name '{name}'; names must be unique")
        if name in part_names:
            raise errors.MeshError(
                f"{where}: the name '{name}' is both a volume group and a surface group; names must be unique"
            )
        sel = tri_tag == tag
        if not matched[sel].all():
            raise errors.MeshError(
                f"{where}: surface '{name}' has {int((~matched[sel]).sum())} triangles that are not faces of "
                "any tetrahedron; the surface and volume meshes do not match"
            )
        surfaces[name] = np.unique(found[sel])
    for tag, name in names.items():
        if name not in surfaces:
            notices.append(f"surface group '{name}' ({tag}) has no triangles in the file")
    return surfaces


def _interfaces(mesh, part_of: np.ndarray, ordered: list[str]) -> dict[tuple[str, str], np.ndarray]:
    f2t = mesh.f2t
    inner = np.flatnonzero(f2t[1] >= 0)
    a, b = part_of[f2t[0, inner]], part_of[f2t[1, inner]]
    cross = a != b
    inner, lo, hi = inner[cross], np.minimum(a, b)[cross], np.maximum(a, b)[cross]
    out = {}
    for i, j in sorted(set(zip(lo.tolist(), hi.tolist()))):
        out[(ordered[i], ordered[j])] = inner[(lo == i) & (hi == j)]
    return out


def _touching_without_nodes(mesh, points, part_of, ordered) -> list[str]:
    """Warn about parts whose boundary faces lie on each other without shared nodes (no transfer)."""
    from scipy.spatial import cKDTree

    bnd = mesh.boundary_facets()
    if len(ordered) < 2 or len(bnd) == 0:
        return []
    centres = points[mesh.facets[:, bnd].T].mean(axis=1)
    owner = part_of[mesh.f2t[0, bnd]]
    edge = np.linalg.norm(points[mesh.facets[0, bnd]] - points[mesh.facets[1, bnd]], axis=1)
    tol = 1e-3 * float(np.median(edge))
    pairs = cKDTree(centres).query_pairs(tol, output_type="ndarray")
    if len(pairs) == 0:
        return []
    a, b = owner[pairs[:, 0]], owner[pairs[:, 1]]
    out = []
    for i, j in sorted({(min(x, y), max(x, y)) for x, y in zip(a.tolist(), b.tolist()) if x != y}):
        count = int(((np.minimum(a, b) == i) & (np.maximum(a, b) == j)).sum())
        out.append(
            f"parts '{ordered[i]}' and '{ordered[j]}' touch on {count} facets but share no nodes there: no heat "
            "or load crosses; make the interface conforming (in Gmsh: fragment the volumes) if they are joined"
        )
    return out


def _check_volumes(points: np.ndarray, tet: np.ndarray, where: str) -> None:
    vol = signed_volumes(points, tet)
    p = points[tet]
    longest = np.max(
        [np.linalg.norm(p[:, i] - p[:, j], axis=1) for i, j in EDGES_TET10], axis=0
    )
    degenerate = np.flatnonzero(np.abs(vol) <= DEGENERATE_RATIO * longest**3)
    inverted = np.flatnonzero(vol < 0)
    inverted = np.setdiff1d(inverted, degenerate)
    problems = []
    if len(degenerate):
        problems.append(f"{where}: {len(degenerate)} degenerate (zero-volume) tetrahedra, ids {_ids(degenerate)}; "
                        "every tetrahedron needs four corners not in one plane: re-mesh (in Gmsh: optimise the mesh)")
    if len(inverted):
        problems.append(f"{where}: {len(inverted)} inverted tetrahedra (negative volume), ids {_ids(inverted)}; "
                        "corners must be ordered as Gmsh and VTK write them (positive volume): re-export the mesh")
    if problems:
        raise errors.MeshError(problems)


def _check_tet10(points: np.ndarray, cells: np.ndarray, where: str) -> list[str]:
    """Check that each mid-edge node of a tetra10 cell sits on its edge in meshio's (VTK) order."""
    corners = points[cells[:, :4]]
    worst = np.zeros(len(cells))
    for i, (a, b) in enumerate(EDGES_TET10):
        mid = 0.5 * (corners[:, a] + corners[:, b])
        length = np.linalg.norm(corners[:, a] - corners[:, b], axis=1)
        worst = np.maximum(worst, np.linalg.norm(points[cells[:, 4 + i]] - mid, axis=1) / length)
    if worst.max() > 0.25:
        bad = np.flatnonzero(worst > 0.25)
        raise errors.MeshError(
            f"{where}: {len(bad)} tetra10 cells have mid-edge nodes away from their edges (ids {_ids(bad)}): the "
            "node order is not meshio's tetra10 order; export linear tetrahedra instead"
        )
    note = "quadratic tetrahedra (tetra10) were read as linear ones; quadratic fields come from P2 elements"
    if worst.max() > 1e-6:
        note += f"; curved edges (mid-node offset up to {worst.max():.2%} of the edge) were straightened"
    return [note]


def _ids(ids: np.ndarray, shown: int = 10) -> str:
    text = ", ".join(str(i) for i in ids[:shown])
    return text + (", ..." if len(ids) > shown else "")
