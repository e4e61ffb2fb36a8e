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


def max_node_tag(n: int) -> int:
    """Largest node tag accepted in a Gmsh file of n nodes (meshio allocates an array as long as it)."""
    return 4 * n + 1_000_000

#: A model whose largest extent [m] lies outside this range gets a notice (electronics scale, common practice).
PLAUSIBLE_SIZE_M = (1e-3, 2.0)


@dataclass(frozen=True, repr=False)
class Domain:
    """A linear tetrahedral mesh with named parts and surfaces.

    points: (n, 3) node coordinates [m].  tetrahedra: (m, 4) node ids.
    parts: part name -> element ids.  surfaces: surface name -> facet ids of ``mesh`` (scikit-fem's
    numbering).  interfaces: (part, part) in sorted order -> facet ids shared by the two parts.
    source_hash: SHA-256 of the mesh file's bytes; unit: the length unit the file was drawn in.
    notices: what was done or found on loading that the user should read (pruned nodes, warnings).
    contacts: name -> ``Contact``, interfaces split into two sides (see ``join``).
    ties: name -> ``Tie``, parts meshed apart and tied (see ``join``).
    touching: (part, part) -> ``Touching``, parts whose faces lie on each other without shared nodes and
    for which no choice (tie, contact or insulated) was made yet; a stage refuses such a domain.
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
    contacts: dict[str, "Contact"] = field(default_factory=dict)
    ties: dict[str, "Tie"] = field(default_factory=dict)
    touching: dict[tuple[str, str], "Touching"] = field(default_factory=dict)
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
            rows, cols = [np.repeat(t[:, 0], 3)], [t[:, 1:].ravel()]
            for c in self.contacts.values():  # the two sides of a contact conduct: one body
                rows.append(c.triangles[0].ravel())
                cols.append(c.triangles[1].ravel())
            for tie in self.ties.values():
                rows.append(self.mesh.facets[0, tie.facets[0]])
                cols.append(self.mesh.facets[0, tie.facets[1][:1].repeat(len(tie.facets[0]))])
            rows, cols = np.concatenate(rows), np.concatenate(cols)
            graph = coo_matrix((np.ones(len(rows)), (rows, cols)), shape=(n, n))
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
        for (a, b), t in sorted(self.touching.items()):
            lines.append(f"  parts {a} and {b} touch on {t.area:.4e} m^2 without shared nodes (meshed apart: "
                         "fragment them, or tie or insulate them in the workflow's [interfaces])")
        for name, c in sorted(self.contacts.items()):
            lines.append(f"  contact {name} ({c.parts[0]}/{c.parts[1]}): split, {len(c.facets[0])} facets")
        for name, t in sorted(self.ties.items()):
            lines.append(f"  tie {name}: {t.parts[0]} follows {t.parts[1]}")
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
    _check_gmsh_nodes(content, str(path))
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


def _check_gmsh_nodes(content: bytes, where: str) -> None:
    """Bound what meshio will allocate for a Gmsh file before it reads it: the node count must fit the file
    and the largest node tag must be near the node count (meshio allocates an array as long as that tag)."""
    if not content.startswith(b"$MeshFormat"):
        return
    header = content[:200].split(b"\n")
    try:
        version, binary, size = header[1].split()[:3]
        version, binary, size = version.decode(), int(binary), int(size)
    except (IndexError, ValueError, UnicodeDecodeError):
        return  # meshio's own message is the one to show
    start = content.find(b"$Nodes\n")
    if start < 0:
        return
    start += len(b"$Nodes\n")
    n = max_tag = None
    try:
        if version.startswith("4") and binary:
            _, n, _, max_tag = np.frombuffer(content, dtype=f"<u{size}", count=4, offset=start).tolist()
        elif version.startswith("4"):
            _, n, _, max_tag = (int(v) for v in content[start:content.find(b"\n", start)].split()[:4])
        else:
            line_end = content.find(b"\n", start)
            n = int(content[start:line_end])
            if 0 < n <= len(content):
                if binary:
                    rows = np.frombuffer(content, dtype=[("tag", "<i4"), ("xyz", "<f8", 3)], count=n, offset=line_end + 1)
                    max_tag = int(rows["tag"].max())
                else:
                    end = content.find(b"$EndNodes", line_end)
                    with warnings.catch_warnings():
                        warnings.simplefilter("ignore")
                        values = np.fromstring(content[line_end + 1:end], sep=" ")  # noqa: NPY201 - text mode
                    max_tag = int(values[::4].max()) if len(values) >= 4 else None
    except (ValueError, TypeError, IndexError):
        return  # damaged: meshio reports it
    if n is not None and n > len(content):
        raise errors.MeshError(f"{where}: the $Nodes section claims {n} nodes, more than a file of {len(content)} "
                               "bytes can hold; the file is damaged: export it again")
    if n is not None and max_tag is not None and max_tag > max_node_tag(n):
        raise errors.MeshError(f"{where}: node tags go up to {max_tag} for {n} nodes; reading them would allocate "
                               f"{8 * (max_tag + 1) / 2**30:.1f} GiB; renumber the nodes (in Gmsh: Mesh > Renumber "
                               "nodes, or Mesh.SaveAll with renumbering) and export again")


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
    if tet.size and (tet.min() < 0 or tet.max() >= len(points)):
        raise errors.MeshError(f"{where}: tetrahedra refer to nodes that are not in the file (ids outside 0.."
                               f"{len(points) - 1}); the file is damaged: export it again")
    used_ids = np.unique(tet)
    bad = used_ids[~np.isfinite(points[used_ids]).all(axis=1)]
    if len(bad):
        raise errors.MeshError(f"{where}: {len(bad)} node{'s have' if len(bad) > 1 else ' has'} coordinates that are "
                               "not finite numbers (NaN or "
                               f"infinity), node ids (from 0, in file order) {_ids(bad)}; export the mesh again")
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
    notices += _size_notice(points, unit)
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
    touching = _touching(mesh, points, part_of, ordered)
    for note in notices:
        log.warning("%s: %s", where, note)
    domain = Domain(points, tet, parts, surfaces, interfaces, source_hash, unit, source, tuple(notices),
                    touching=touching)
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


def _touching(mesh, points, part_of, ordered) -> dict[tuple[str, str], Touching]:
    """Parts whose boundary faces lie on each other without shared nodes: a face's centroid within
    ``TOUCH_TOLERANCE`` of its size from another part's face, inside it, the two faces parallel."""
    from scipy.spatial import cKDTree

    bnd = mesh.boundary_facets()
    if len(ordered) < 2 or len(bnd) == 0:
        return {}
    tri = points[mesh.facets[:, bnd].T]  # (k, 3 corners, 3)
    centres = tri.mean(axis=1)
    owner = part_of[mesh.f2t[0, bnd]]
    if len(np.unique(owner)) < 2:
        return {}
    e1, e2 = tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0]
    normal = np.cross(e1, e2)
    normal /= np.linalg.norm(normal, axis=1, keepdims=True)
    size = np.max(np.linalg.norm(tri - centres[:, None], axis=2), axis=1)  # centroid to farthest corner
    # candidates: centroids p within the size of face q (a centroid inside q is that close to q's)
    near = cKDTree(centres).query_ball_point(centres, (1 + TOUCH_TOLERANCE) * size, return_sorted=False)
    q = np.repeat(np.arange(len(near)), [len(n) for n in near])
    p = np.concatenate([np.asarray(n, dtype=np.int64) for n in near]) if len(q) else np.zeros(0, dtype=np.int64)
    other = owner[p] != owner[q]
    p, q = p[other], q[other]
    if not len(p):
        return {}
    gap = np.abs(np.einsum("nd,nd->n", centres[p] - tri[q, 0], normal[q]))
    opposed = np.abs(np.einsum("nd,nd->n", normal[p], normal[q])) > 0.99  # facets are not oriented
    # barycentric coordinates of the centroid of p in triangle q (projected on its plane)
    d = centres[p] - tri[q, 0]
    a11, a12, a22 = (np.einsum("nd,nd->n", x, y) for x, y in ((e1[q], e1[q]), (e1[q], e2[q]), (e2[q], e2[q])))
    b1, b2 = np.einsum("nd,nd->n", d, e1[q]), np.einsum("nd,nd->n", d, e2[q])
    det = a11 * a22 - a12**2
    s, t = (a22 * b1 - a12 * b2) / det, (a11 * b2 - a12 * b1) / det
    eps = 1e-9
    hit = opposed & (gap <= TOUCH_TOLERANCE * size[p]) & (s >= -eps) & (t >= -eps) & (s + t <= 1 + eps)
    p, q = p[hit], q[hit]
    area = 0.5 * np.linalg.norm(np.cross(e1, e2), axis=1)
    out = {}
    for i, j in sorted({(min(x, y), max(x, y)) for x, y in zip(owner[p].tolist(), owner[q].tolist())}):
        first = np.unique(np.concatenate([p[owner[p] == i], q[owner[q] == i]]))
        second = np.unique(np.concatenate([p[owner[p] == j], q[owner[q] == j]]))
        out[(ordered[i], ordered[j])] = Touching((bnd[first], bnd[second]),
                                                 min(float(area[first].sum()), float(area[second].sum())))
    return out


def touching_problems(domain: Domain, where: str) -> list[str]:
    """One bad-input line per pair of parts that touch without shared nodes and have no joint chosen."""
    return [f"{where}: parts '{a}' and '{b}' touch on {t.area:.4g} m^2 ({len(t.facets[0])} and {len(t.facets[1])} "
            f"facets) but share no nodes there; choose in the workflow's [interfaces] table: kind = 'tie' (heat and "
            "displacement continuous), or 'insulated' (nothing crosses), or fragment the volumes in the mesher "
            "(docs/meshing.md)" for (a, b), t in sorted(domain.touching.items())]


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


def _size_notice(points: np.ndarray, unit: str) -> list[str]:
    """A notice when the model's size is far from electronics scale: the usual sign of a wrong mesh.unit."""
    extent = float((points.max(axis=0) - points.min(axis=0)).max())
    low, high = PLAUSIBLE_SIZE_M
    if low <= extent <= high:
        return []
    hint = ("a mesh drawn in mm but declared in m is 1000 times too large" if extent > high
            else "a mesh drawn in m but declared in mm is 1000 times too small")
    return [f"the model is {extent:.4g} m across (its largest extent, with the mesh drawn in {unit}); electronics "
            f"models are usually {low * 1e3:g} mm to {high:g} m: check mesh.unit ({hint})"]


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


# ------------------------------------------------------------------------------------------ interfaces

@dataclass(frozen=True)
class Contact:
    """An interface split into two sides with their own nodes (a contact conductance acts across it).

    parts: (a, b).  facets: (facet ids on side a, facet ids on side b) of the split mesh, row i of each
    the same triangle.  triangles: ((k, 3) node ids on side a, (k, 3) on side b), row- and column-matched,
    so ``triangles[1][i, j]`` is the copy of ``triangles[0][i, j]``."""

    parts: tuple[str, str]
    facets: tuple[np.ndarray, np.ndarray]
    triangles: tuple[np.ndarray, np.ndarray]

    @property
    def node_pairs(self) -> np.ndarray:
        """(m, 2) unique (side a node, side b node) pairs."""
        pairs = np.stack([self.triangles[0].ravel(), self.triangles[1].ravel()], axis=1)
        return np.unique(pairs, axis=0)


@dataclass(frozen=True)
class Tie:
    """Parts meshed apart whose touching faces are tied: the nodes of side ``parts[0]`` (the tied side)
    follow the field of side ``parts[1]`` (the reference side) interpolated on its faces.

    facets: (facet ids of the tied side, facet ids of the reference side) on the touching area."""

    parts: tuple[str, str]
    facets: tuple[np.ndarray, np.ndarray]


@dataclass(frozen=True)
class Touching:
    """Boundary faces of two parts that lie on each other without shared nodes.

    facets: (facet ids of the first part, facet ids of the second) whose centroids lie on the other
    part's faces.  area: touching area [m^2] (the smaller of the two sides' areas: the faces of the
    side whose faces reach past the touching area's edge are counted whole)."""

    facets: tuple[np.ndarray, np.ndarray]
    area: float


@dataclass(frozen=True)
class Joint:
    """How two parts are joined across an interface, as the user chose it.

    kind: "contact" (split the interface; a conductance per area acts across it in the heat stage and
    the two sides keep the same displacement), "tie" (heat and displacement continuous; for parts
    meshed apart) or "insulated" (no heat crosses; for a shared interface the sides stay tied
    mechanically, for parts meshed apart nothing crosses) or "section" (a bolt's pretension section: a
    planar shared interface across the shank, split; heat and displacement continuous but for the
    shortening that a preload imposes in the stress stage).  parts: the two parts; or surface: a surface
    group on the interface (inner facets), whose two sides name the parts."""

    kind: str
    parts: tuple[str, str] | None = None
    surface: str | None = None


JOINT_KINDS = ("contact", "tie", "insulated", "section")

#: Faces of two parts lie on each other when a centroid is within this fraction of the local edge length.
TOUCH_TOLERANCE = 1e-3


def join(domain: Domain, joints: dict[str, Joint], where: str = "interfaces") -> Domain:
    """Apply the user's joints: split "contact" (and "insulated" shared) interfaces into two sides,
    record "tie"s of parts meshed apart, and mark chosen touching pairs as resolved.

    Every problem is reported at once (``InputError``): unknown parts or surfaces, a pair that shares
    no interface and does not touch, a tie between parts that already share nodes."""
    problems: list[str] = []
    split: dict[str, tuple[tuple[str, str], np.ndarray]] = {}
    ties: dict[str, Tie] = dict(domain.ties)
    touching = dict(domain.touching)
    for name, joint in joints.items():
        key = f"{where}.{name}"
        if joint.kind not in JOINT_KINDS:
            problems.append(f"{key}: kind {joint.kind!r} is not one of {', '.join(JOINT_KINDS)}"
                            f"{errors.closest(str(joint.kind), JOINT_KINDS)}")
            continue
        pair, facets = _joint_facets(domain, joint, key, problems)
        if pair is None:
            continue
        if facets is not None:  # a shared (conforming) interface
            if joint.kind == "section" and not _planar(domain, facets):
                problems.append(f"{key}: a pretension section must be planar (a cut across the bolt's shank)")
                continue
            if joint.kind == "tie":
                problems.append(f"{key}: parts '{pair[0]}' and '{pair[1]}' already share nodes on their interface "
                                "(bonded); a tie is for parts meshed apart; use kind = 'contact' for a conductance")
                continue
            split[name] = (tuple(joint.parts) if joint.parts else pair, facets)  # side a: the first part named
            continue
        found = touching.pop(pair, None)
        if found is None:
            problems.append(f"{key}: parts '{pair[0]}' and '{pair[1]}' neither share an interface nor touch")
            continue
        if joint.kind in ("contact", "section"):
            problems.append(f"{key}: parts '{pair[0]}' and '{pair[1]}' are meshed apart (no shared nodes); a contact "
                            "conductance needs a conforming interface (fragment the volumes in the mesher) or "
                            "choose kind = 'tie' or 'insulated'")
        elif joint.kind == "tie":  # the first part named follows the second
            first = tuple(joint.parts) == pair
            ties[name] = Tie(tuple(joint.parts), found.facets if first else found.facets[::-1])
    if problems:
        raise errors.InputError(problems)
    out = split_interfaces(domain, split) if split else domain
    return _replace(out, ties=ties, touching=touching)


def _joint_facets(domain: Domain, joint: Joint, key: str, problems: list[str]):
    """The pair (sorted) and, for a shared interface, its facet ids; (None, None) after a problem."""
    if (joint.parts is None) == (joint.surface is None):
        problems.append(f"{key}: give either parts = [a, b] or surface = NAME")
        return None, None
    if joint.surface is not None:
        if joint.surface not in domain.surfaces:
            problems.append(errors.unknown_name("surface", joint.surface, domain.surfaces, key))
            return None, None
        facets = domain.surfaces[joint.surface]
        f2t = domain.mesh.f2t[:, facets]
        if (f2t[1] < 0).any():
            problems.append(f"{key}: surface '{joint.surface}' has {int((f2t[1] < 0).sum())} facets on the outer "
                            "boundary; an interface surface lies between two parts")
            return None, None
        owner = domain.part_ids()
        names = sorted(domain.parts)
        pairs = {tuple(sorted((names[owner[a]], names[owner[b]]))) for a, b in f2t.T}
        if len(pairs) != 1 or len(next(iter(pairs))) != 2 or next(iter(pairs))[0] == next(iter(pairs))[1]:
            problems.append(f"{key}: surface '{joint.surface}' must lie between exactly two parts; it lies between "
                            + ", ".join("/".join(p) for p in sorted(pairs)))
            return None, None
        return next(iter(pairs)), facets
    bad = [p for p in joint.parts if p not in domain.parts]
    for p in bad:
        problems.append(errors.unknown_name("part", p, domain.parts, key))
    if bad or len(joint.parts) != 2 or joint.parts[0] == joint.parts[1]:
        if not bad:
            problems.append(f"{key}: parts must name two different parts, got {list(joint.parts)}")
        return None, None
    pair = tuple(sorted(joint.parts))
    return pair, domain.interfaces.get(pair)


def _planar(domain: Domain, facets: np.ndarray) -> bool:
    tri = domain.points[domain.mesh.facets[:, facets].T]
    n = np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0])
    n /= np.linalg.norm(n, axis=1, keepdims=True)
    return bool(np.abs(np.abs(n @ n[0]) - 1).max() < 1e-6 and np.abs((tri[:, 0] - tri[0, 0]) @ n[0]).max()
                < 1e-9 * np.linalg.norm(np.ptp(domain.points, axis=0)))


def _replace(domain: Domain, **changes) -> Domain:
    """A copy of ``domain`` with some fields changed; the geometry caches are kept if the mesh is the same."""
    import dataclasses

    out = dataclasses.replace(domain, **changes, _cache={})
    if "points" not in changes and "tetrahedra" not in changes:
        out._cache.update({k: v for k, v in domain._cache.items() if k != "bodies"})
    return out


def split_interfaces(domain: Domain, interfaces: dict[str, tuple[tuple[str, str], np.ndarray]]) -> Domain:
    """Duplicate the nodes on the given inner facets so that each side has its own (a crack-like split).

    interfaces: name -> ((part a, part b), facet ids).  Around each node on a split facet, the elements
    that stay connected through faces that are not split keep one copy; so a node where the interface
    ends on a third part stays shared.  Element ids and order are unchanged; surfaces follow their facets."""
    mesh, t = domain.mesh, domain.tetrahedra
    n = len(domain.points)
    cut = np.unique(np.concatenate([f for _, f in interfaces.values()]))
    is_cut = np.zeros(mesh.facets.shape[1], dtype=bool)
    is_cut[cut] = True
    on = np.zeros(n, dtype=bool)
    on[mesh.facets[:, cut].ravel()] = True
    # incidences (element, corner) of the nodes on the cut, numbered by key element * 4 + corner
    elem, corner = np.nonzero(on[t])
    inc_key = elem * 4 + corner
    # connect the incidences of a node in two elements that share a face not cut
    f2t = mesh.f2t
    inner = np.flatnonzero((f2t[1] >= 0) & ~is_cut)
    rows, cols = [], []
    for j in range(3):
        v = mesh.facets[j, inner]
        keep = on[v]
        a, b, v = f2t[0, inner[keep]], f2t[1, inner[keep]], v[keep]
        rows.append(_corner_key(t, a, v))
        cols.append(_corner_key(t, b, v))
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    pos = lambda keys: np.searchsorted(inc_key, keys)  # inc_key is sorted (np.nonzero is row-major)
    r, c = pos(np.concatenate(rows)), pos(np.concatenate(cols))
    m = len(inc_key)
    _, comp = connected_components(coo_matrix((np.ones(len(r)), (r, c)), shape=(m, m)), directed=False)
    node = t[elem, corner]
    # one id per (node, component): the first component of a node keeps its id, others get new ones
    pairs, first = np.unique(np.stack([node, comp], axis=1), axis=0, return_index=True)
    new_id = pairs[:, 0].copy()
    repeat = np.r_[False, pairs[1:, 0] == pairs[:-1, 0]]
    new_id[repeat] = n + np.arange(int(repeat.sum()))
    which = np.searchsorted(pairs[:, 0] * m + pairs[:, 1], node * m + comp)
    tet = t.copy()
    tet[elem, corner] = new_id[which]
    points = np.vstack([domain.points, domain.points[pairs[repeat, 0]]])

    from skfem import MeshTet

    new_mesh = MeshTet(points.T.copy(), tet.T.copy())
    keys = _facet_keys(new_mesh.facets.T, len(points))
    order = np.argsort(keys)

    def facet_of(element, old_facets):
        tri = mesh.facets[:, old_facets].T
        nodes = np.stack([tet[element, np.argmax(t[element] == tri[:, j, None], axis=1)] for j in range(3)], axis=1)
        found = order[np.searchsorted(keys, _facet_keys(nodes, len(points)), sorter=order)]
        return found, nodes

    surfaces = {name: np.unique(facet_of(f2t[0, f], f)[0]) for name, f in domain.surfaces.items()}
    part_of = domain.part_ids()
    ordered = sorted(domain.parts)
    contacts = dict(domain.contacts)
    notices = list(domain.notices)
    for name, ((pa, pb), facets) in interfaces.items():
        e0, e1 = f2t[0, facets], f2t[1, facets]
        side_a = np.where(np.array(ordered)[part_of[e0]] == pa, e0, e1)
        side_b = np.where(side_a == e0, e1, e0)
        fa, ta = facet_of(side_a, facets)
        fb, tb = facet_of(side_b, facets)
        shared = int((ta == tb).all(axis=1).sum())
        kept = int((ta == tb).sum())
        if kept:
            notices.append(f"interface '{name}': {kept} node(s) where it meets a third part stay shared "
                           f"({shared} facets fully)")
        contacts[name] = Contact((pa, pb), (fa, fb), (ta, tb))
    out = Domain(points, tet, domain.parts, surfaces, _interfaces(new_mesh, part_of, ordered), domain.source_hash,
                 domain.unit, domain.source, tuple(notices), contacts, domain.ties, domain.touching)
    out._cache["mesh"] = new_mesh
    return out


def _corner_key(t: np.ndarray, elements: np.ndarray, nodes: np.ndarray) -> np.ndarray:
    """element * 4 + the corner of ``elements`` that holds ``nodes``."""
    return elements * 4 + np.argmax(t[elements] == nodes[:, None], axis=1)
