"""PNG figures that answer an engineer's questions, in the house style of ``style``.

3-D views are rendered off-screen with pyvista (one at a time: VTK's off-screen rendering is not
thread-safe) and placed by matplotlib (Agg) into a figure with its title, its own colour bar and unit,
and labelled markers.  Each function takes the domain and the result (and optional peak, singular-feature
or line data) and returns the record of what it drew: the file, the colour range drawn and its unit,
and what it marked (peak values and positions [m]), so tests and the report can check it against the field.
"""

from __future__ import annotations

import os
import textwrap
import threading
from pathlib import Path

import numpy as np

from .. import files
from ..model.units import celsius
from . import style

#: Sub-faces of a tetrahedron (node positions) and the node opposite each.
_FACES = ((1, 2, 3), (0, 2, 3), (0, 1, 3), (0, 1, 2))


def _headless() -> None:
    """Without a display, ask VTK for its EGL window before it tries (and warns about) X."""
    if not os.environ.get("DISPLAY"):
        os.environ.setdefault("VTK_DEFAULT_OPENGL_WINDOW", "vtkEGLRenderWindow")


# ---------------------------------------------------------------------------------------------- geometry
def skin(points: np.ndarray, tetrahedra: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Boundary triangles (f, 3) of a set of tetrahedra and their outward unit normals (f, 3)."""
    faces = np.concatenate([tetrahedra[:, f] for f in _FACES])
    opposite = np.concatenate([tetrahedra[:, i] for i in range(4)])
    _, first, count = np.unique(np.sort(faces, axis=1), axis=0, return_index=True, return_counts=True)
    once = first[count == 1]
    tri, opp = faces[once], opposite[once]
    p = points[tri]
    n = np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0])
    flip = np.einsum("ij,ij->i", n, points[opp] - p[:, 0]) > 0
    tri[flip] = tri[flip][:, ::-1]
    n[flip] *= -1
    return tri, n / np.linalg.norm(n, axis=1, keepdims=True)


def outer_skin(domain) -> np.ndarray:
    """Triangles of the outside: the connected piece of the model's boundary that holds the point
    farthest from its centre (an enclosed cavity's walls and what sits in it are another piece)."""
    tri, _ = skin(domain.points, domain.tetrahedra)
    label = _pieces(tri, len(domain.points))
    centre = domain.points.mean(axis=0)
    nodes = np.unique(tri)
    far = nodes[np.argmax(np.linalg.norm(domain.points[nodes] - centre, axis=1))]
    return tri[label[tri[:, 0]] == label[far]]


def enclosing_parts(domain, tolerance: float = 1e-9) -> list[str]:
    """Parts whose bounding box holds another part's bounding box (a shell around a board)."""
    boxes = {}
    for p, ids in domain.parts.items():
        xyz = domain.points[np.unique(domain.tetrahedra[ids])]
        boxes[p] = (xyz.min(axis=0), xyz.max(axis=0))
    size = tolerance * np.linalg.norm(np.ptp(domain.points, axis=0))
    return sorted(p for p, (lo, hi) in boxes.items()
                  if any(q != p and np.all(lo - size <= lq) and np.all(hq <= hi + size) for q, (lq, hq) in boxes.items()))


def most_bonded(domain) -> str:
    """The part that shares interfaces with the most others (a board carries the components)."""
    count = {p: sum(p in pair for pair in domain.interfaces) for p in domain.parts}
    return max(sorted(count), key=lambda p: count[p])


def thin_axis(domain, part: str) -> tuple[int, float, float]:
    """The coordinate axis along which a part is thinnest, and its extent there [m] (low, high)."""
    xyz = domain.points[np.unique(domain.tetrahedra[domain.parts[part]])]
    lo, hi = xyz.min(axis=0), xyz.max(axis=0)
    axis = int(np.argmin(hi - lo))
    return axis, float(lo[axis]), float(hi[axis])


def plate_like(domain, part: str, ratio: float = 0.25) -> bool:
    """Whether a part is a plate: thinner along one axis than ``ratio`` of its smaller other extent."""
    xyz = domain.points[np.unique(domain.tetrahedra[domain.parts[part]])]
    extent = np.sort(np.ptp(xyz, axis=0))
    return bool(extent[0] < ratio * extent[1])


# -------------------------------------------------------------------------------------------- rendering
#: VTK's off-screen rendering is not thread-safe: two runs in one process (threads, a sweep's
#: threaded workers) render one at a time, or both can hang inside the render call (seen in CI).
_RENDER_LOCK = threading.Lock()


def _poly(points: np.ndarray, tri: np.ndarray, values: np.ndarray | None = None, cells: bool = False):
    import pyvista as pv

    mesh = pv.PolyData(points * 1e3, np.hstack([np.full((len(tri), 1), 3), tri]).ravel())  # drawn in mm
    if values is not None:
        (mesh.cell_data if cells else mesh.point_data)["v"] = values
    return mesh


def _render(layers: list[tuple], view, marks_m=(), up=None, masks: list[list[tuple]] = ()):
    """Render mesh layers (mesh, options) looking along -``view``; return the image (h, w, 3), the
    display positions (x right, y down) [px] of ``marks_m`` [m], and one image per extra layer set in
    ``masks`` drawn with the same camera (for pixel tests)."""
    with _RENDER_LOCK:
        _headless()
        import pyvista as pv
        import vtk

        plotter = pv.Plotter(off_screen=True, window_size=style.RENDER)
        try:
            plotter.set_background("white")
            actors = [plotter.add_mesh(m, **({"show_scalar_bar": False, "ambient": 0.3, "diffuse": 0.75,
                                               "specular": 0.0} | o)) for m, o in layers]
            v = np.asarray(view, dtype=float) / np.linalg.norm(view)
            up = up if up is not None else ((0, 0, 1) if abs(v[2]) < 0.9 else (0, 1, 0))
            plotter.view_vector(v, viewup=up)
            plotter.reset_camera()
            plotter.camera.zoom(1.15)
            image = plotter.screenshot(return_img=True)[..., :3]
            coord = vtk.vtkCoordinate()
            coord.SetCoordinateSystemToWorld()
            h = image.shape[0]
            pixels = []
            for p in marks_m:
                coord.SetValue(*(np.asarray(p) * 1e3))
                x, y = coord.GetComputedDoubleDisplayValue(plotter.renderer)
                pixels.append((x, h - y))
            extra = []
            for mask in masks:
                for a in actors:
                    plotter.remove_actor(a)
                actors = [plotter.add_mesh(m, **({"show_scalar_bar": False, "lighting": False} | o)) for m, o in mask]
                extra.append(plotter.screenshot(return_img=True)[..., :3])
        finally:
            plotter.close()
    return image, pixels, extra


def _figure(path: Path, image, title: str, subtitle: str, kind: str | None, clim=None, unit: str = "",
            marks: list[dict] = (), over: str | None = None, labels: list[tuple] = ()) -> None:
    """Place a render into a house-style figure: title, subtitle, colour bar (``kind``'s map, ``clim``,
    ``unit``; an over-range triangle labelled ``over``), markers {"xy", "text", "style"} and part labels."""
    import matplotlib as mpl
    from matplotlib.figure import Figure

    with mpl.rc_context(style.rc()):
        fig = Figure(figsize=style.SIZE, dpi=style.DPI)
        fig.text(0.03, 0.955, title, fontsize=13, fontweight="bold", va="top")
        fig.text(0.03, 0.905, "\n".join(textwrap.wrap(subtitle, 104)), fontsize=9.5, color=style.MUTED, va="top")
        ax = fig.add_axes((0.01, 0.03, 0.82, 0.80))
        ax.imshow(image)
        ax.set_axis_off()
        placed = []
        for xy, text in labels:  # part names, each where no earlier label sits
            if any(abs(xy[0] - a) < 90 and abs(xy[1] - b) < 28 for a, b in placed):
                continue
            placed.append(xy)
            ax.text(*xy, text, fontsize=8.5, ha="center", va="center", color=style.INK,
                    bbox={"boxstyle": "round,pad=0.2", "fc": "white", "ec": "none", "alpha": 0.75})
        for i, m in enumerate(marks):
            singular = m.get("style") == "singular"
            ax.plot(*m["xy"], marker="D" if singular else "o", ms=9, mfc="none" if singular else style.INK,
                    mec=style.OVER if singular else "white", mew=2.0)
            right = m["xy"][0] > 0.5 * image.shape[1]  # the label runs towards the image's middle
            dy = (-80 if m["xy"][1] > 0.35 * image.shape[0] else 80) * (1 if i % 2 == 0 else -1)
            ax.annotate(m["text"], m["xy"], xytext=(m["xy"][0] + (-40 if right else 40), m["xy"][1] + dy),
                        fontsize=9, ha="right" if right else "left", color=style.OVER if singular else style.INK,
                        arrowprops={"arrowstyle": "-", "color": style.OVER if singular else style.INK, "lw": 1.2},
                        bbox={"boxstyle": "round,pad=0.3", "fc": "white",
                              "ec": style.OVER if singular else style.INK, "lw": 1.0})
        ax.set_xlim(0, image.shape[1])
        ax.set_ylim(image.shape[0], 0)
        if kind is not None:
            cax = fig.add_axes((0.86, 0.16, 0.028, 0.64))
            norm = mpl.colors.Normalize(*clim) if clim[1] > clim[0] else mpl.colors.Normalize(clim[0] - 0.5, clim[0] + 0.5)
            bar = fig.colorbar(mpl.cm.ScalarMappable(norm, style.colormap(kind)), cax=cax,
                               extend="max" if over else "neither")
            bar.set_label(unit)
            bar.outline.set_edgecolor(style.MUTED)
            if over:
                cax.text(0.5, 1.07, over, transform=cax.transAxes, ha="center", va="bottom", fontsize=8,
                         color=style.OVER)
        with files.replacing_path(path) as tmp:
            fig.savefig(tmp, format="png")


def _colours(kind: str, clim) -> dict:
    """pyvista options that draw scalars with the house map over ``clim``."""
    cmap = style.colormap(kind)
    opts = {"scalars": "v", "cmap": cmap, "clim": clim}
    if kind == "stress":
        opts["above_color"] = style.OVER
    return opts


def _record(path: Path, clim, unit: str, **extra) -> dict:
    return {"file": path.name, "range": (float(clim[0]), float(clim[1])), "unit": unit} | extra


def _oblique(view_from=(1.0, -1.4, 1.1)):
    return np.asarray(view_from, dtype=float)


def _anchor(points: np.ndarray) -> np.ndarray:
    """The one of ``points`` nearest their mean: a label's place that lies on the part itself."""
    return points[np.argmin(np.linalg.norm(points - points.mean(axis=0), axis=1))]


# ------------------------------------------------------------------------------------------ temperature
def temperature_outside(path: Path, domain, field) -> dict:
    """Temperature [degC] on the outside (the outer skin only), on the outside's own range."""
    t = celsius(field.at_vertices)
    tri = outer_skin(domain)
    shown = t[np.unique(tri)]
    clim = (float(shown.min()), float(shown.max()))
    hot = int(np.unique(tri)[np.argmax(shown)])
    image, px, _ = _render([(_poly(domain.points, tri, t), _colours("temperature", clim))], _oblique(),
                           [domain.points[hot]])
    _figure(path, image, "Temperature on the outside",
            f"outer surface only, {clim[0]:.1f} to {clim[1]:.1f} degC (its own range)", "temperature", clim,
            "temperature [degC]", [{"xy": px[0], "text": f"hottest outside {clim[1]:.1f} degC"}])
    return _record(path, clim, "degC", hottest_at_m=domain.points[hot].tolist())


def temperature_inside(path: Path, domain, field, hide: list[str] | None = None) -> dict | None:
    """Temperature [degC] of what sits inside, the enclosing part(s) hidden (``hide``, by default the
    parts whose bounding box holds another's); None when nothing encloses anything."""
    hide = enclosing_parts(domain) if hide is None else list(hide)
    shown_parts = sorted(p for p in domain.parts if p not in hide)
    if not hide or not shown_parts:
        return None
    t = celsius(field.at_vertices)
    ids = np.concatenate([domain.parts[p] for p in shown_parts])
    tri, _ = skin(domain.points, domain.tetrahedra[ids])
    shown = t[np.unique(tri)]
    clim = (float(shown.min()), float(shown.max()))
    hidden_ids = np.concatenate([domain.parts[p] for p in hide])
    edges = _poly(domain.points, skin(domain.points, domain.tetrahedra[hidden_ids])[0]).extract_feature_edges(
        boundary_edges=False, manifold_edges=False, non_manifold_edges=False, feature_angle=60)
    layers = [(_poly(domain.points, tri, t), _colours("temperature", clim)),
              (edges, {"color": "#a4aab3", "line_width": 1.0})]
    centres = [_anchor(domain.points[np.unique(skin(domain.points, domain.tetrahedra[domain.parts[p]])[0])])
               for p in shown_parts]
    nodes = np.unique(tri)
    hot = int(nodes[np.argmax(shown)])
    hot_part = next(p for p in shown_parts if hot in domain.tetrahedra[domain.parts[p]])
    image, px, _ = _render(layers, _oblique((0.7, -1.2, 1.6)), centres + [domain.points[hot]])
    _figure(path, image, "Temperature inside", f"{', '.join(hide)} hidden; {clim[0]:.1f} to {clim[1]:.1f} degC "
            "on the parts shown", "temperature", clim, "temperature [degC]",
            [{"xy": px[-1], "text": f"hottest: {hot_part} {clim[1]:.1f} degC"}],
            labels=list(zip(px[:-1], shown_parts)))
    return _record(path, clim, "degC", hidden=hide, parts=shown_parts, hottest_part=hot_part,
                   hottest_at_m=domain.points[hot].tolist())


def temperature_section(path: Path, domain, field, part: str | None = None) -> dict:
    """Temperature [degC] on a plane section through the middle of ``part`` across its thinnest
    direction; by default the part bonded to the most others.  The record holds the plane and the
    fraction of the image's pixels that show ``part`` (``part_pixels``)."""
    import pyvista as pv

    part = part or most_bonded(domain)
    axis, lo, hi = thin_axis(domain, part)
    level = 0.5 * (lo + hi)
    cells = np.hstack([np.full((len(domain.tetrahedra), 1), 4), domain.tetrahedra]).ravel()
    grid = pv.UnstructuredGrid(cells, np.full(len(domain.tetrahedra), pv.CellType.TETRA, dtype=np.uint8),
                               domain.points * 1e3)
    grid.point_data["v"] = celsius(field.at_vertices)
    grid.cell_data["part"] = domain.part_ids()
    origin = np.zeros(3)
    origin[axis] = level * 1e3
    normal = np.eye(3)[axis]
    cut = grid.slice(normal=normal, origin=origin)
    shown = cut.point_data["v"]
    clim = (float(shown.min()), float(shown.max()))
    names = sorted(domain.parts)
    index = names.index(part)
    outline = grid.extract_feature_edges(boundary_edges=False, feature_edges=True, manifold_edges=False,
                                         non_manifold_edges=False, feature_angle=60)
    view = normal + 0.35 * np.roll(normal, 1) - 0.25 * np.roll(normal, 2)
    present = [p for i, p in enumerate(names) if np.any(cut.cell_data["part"] == i)]
    centres = []
    for p in present:
        centres.append(_anchor(cut.extract_cells(np.flatnonzero(cut.cell_data["part"] == names.index(p))).points) / 1e3)
    mask = cut.copy()
    mask.cell_data["m"] = (mask.cell_data["part"] == index).astype(float)
    image, px, (masked,) = _render(
        [(cut, _colours("temperature", clim)), (outline, {"color": "#9aa0a8", "line_width": 1.0})],
        view, centres, masks=[[(mask, {"scalars": "m", "cmap": ["#808080", "#000000"], "clim": (0, 1)})]])
    part_pixels = float(np.mean(np.all(masked < 20, axis=2)))
    what = "xyz"[axis]
    _figure(path, image, f"Temperature on a section through the {part}",
            f"plane {what} = {level * 1e3:.2f} mm (middle of the {part}); {clim[0]:.1f} to {clim[1]:.1f} degC "
            "on the section", "temperature", clim, "temperature [degC]", labels=list(zip(px, present)))
    return _record(path, clim, "degC", part=part, axis=what, level_m=level, parts=present, part_pixels=part_pixels)


# ----------------------------------------------------------------------------------------------- stress
#: What a part's safety factor reads: von Mises for a ductile part, the largest principal stress for a
#: brittle one (recovery's criteria); the figure of the part shows that quantity.
QUANTITIES = {"von_mises": "von Mises stress", "principal": "largest principal stress"}


def _side(view) -> str:
    """Where a camera looking along -``view`` stands, in words ("from below", "from the +x side")."""
    v = np.asarray(view, dtype=float)
    i = int(np.argmax(np.abs(v)))
    if i == 2:
        return "from above" if v[2] > 0 else "from below"
    return f"from the {'+' if v[i] > 0 else '-'}{'xy'[i]} side"


def part_stress(domain, sfield, part: str, quantity: str = "von_mises") -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The part's recovered (nodal) stress measure [Pa] ("von_mises" or "principal": the largest
    principal stress): point ids, values and positions [m] (vertices, then P2 edge points)."""
    from ..stages import constitutive, fem

    ids, values = sfield.nodal[part]
    where = fem.space(domain, sfield.order).doflocs[:, ids].T if sfield.order > 1 else domain.points[ids]
    measure = constitutive.von_mises(values.T) if quantity == "von_mises" else constitutive.principal(values.T)[:, 0]
    return ids, measure, where


def stress_part(path: Path, domain, sfield, part: str, singular: np.ndarray | None = None,
                strength: float | None = None, quantity: str = "von_mises", flags: dict | None = None) -> dict:
    """A part's stress [MPa] (``quantity``: "von_mises", or "principal" for a brittle part) on its own
    range, on the piece of the part that holds the peak, the peak marked and labelled with its value,
    seen along the outward normal at the peak with what lies in front of it clipped away.

    ``singular``: vertex ids at singular features (supports, edges of bonded interfaces).  The colour
    range then ends at the peak away from them, values above are drawn in the over-range colour, and
    that peak and the singular one get markers of their own (in two views when no one view shows both).
    ``flags``: the stress result's own judgement of this quantity's peak instead ({"peak", "at_m",
    "near": None or a record, "away", "away_at_m"} [Pa, m]): the range then ends at "away"."""
    ids, vm, where = part_stress(domain, sfield, part, quantity)
    name = QUANTITIES[quantity]
    nv = len(domain.points)
    flagged = np.isin(ids, np.asarray(singular if singular is not None else [], dtype=int))
    mid = ids >= nv
    if mid.any() and singular is not None:  # a P2 edge point is singular where an end of its edge is
        vertex = np.zeros(nv, dtype=bool)
        vertex[np.asarray(singular, dtype=int)] = True
        flagged[mid] = vertex[domain.mesh.edges[:, ids[mid] - nv]].any(axis=0)
    i_peak = int(np.argmax(vm))
    tets = domain.tetrahedra[domain.parts[part]]
    body = _pieces(np.concatenate([tets[:, :3], tets[:, 1:]]), nv)
    vertices = np.unique(tets)
    tri, normals = skin(domain.points, tets)
    home = body[_nearest(domain.points, vertices, where[i_peak])]
    pieces = len(np.unique(body[vertices]))
    keep_tri = body[tri[:, 0]] == home
    tri, normals = tri[keep_tri], normals[keep_tri]
    surface = np.unique(tri)
    values = np.zeros(nv)
    values[ids[ids < nv]] = vm[ids < nv] / 1e6
    # the peak away from singular features: on the drawn surface of the piece (the colour range ends there)
    calm = np.flatnonzero(~flagged & np.isin(ids, surface))
    if not len(calm):
        on_piece = body[_nearest_many(domain.points, vertices, where)] == home
        calm = np.flatnonzero(~flagged & on_piece)
    i_calm = int(calm[np.argmax(vm[calm])]) if len(calm) else i_peak
    drawn = values[surface]
    keep = ~np.isin(surface, ids[flagged])
    clim = (float(drawn.min()), float(drawn[keep].max() if keep.any() else drawn.max()))
    peak_singular = bool(flagged[i_peak])
    calm_at, calm_value = where[i_calm], vm[i_calm]
    if flags is not None:
        peak_singular = flags.get("near") is not None
        if peak_singular and flags.get("away") is not None:
            calm_at, calm_value = np.asarray(flags["away_at_m"]), flags["away"]
            clim = (clim[0], float(calm_value / 1e6))
        elif not peak_singular:
            calm_at, calm_value = where[i_peak], vm[i_peak]
            clim = (clim[0], float(drawn.max()))
    marks = [{"at": calm_at, "text": f"{calm_value / 1e6:.1f} MPa " + (
        "away from singular features" if peak_singular else f"peak of the {part}")}]
    if peak_singular:
        marks.append({"at": where[i_peak], "text": f"{vm[i_peak] / 1e6:.1f} MPa at a singular feature",
                      "style": "singular"})
    views = [_peak_view(domain.points, tri, normals, m["at"]) for m in marks]
    if len(views) == 2 and np.dot(views[0][1], views[1][1]) > 0.8:
        views = views[:1]  # one view shows both
    images, cut = [], False
    piece_mesh = _poly(domain.points, tri, values)
    for k, (view, n, offset) in enumerate(views):
        mine = marks if len(views) == 1 else [marks[k]]
        clipped = piece_mesh.clip(normal=n, origin=(mine[0]["at"] + offset * n) * 1e3)
        cut |= clipped.n_cells < piece_mesh.n_cells
        image, px, _ = _render([(clipped, _colours("stress", clim))], view, [m["at"] for m in mine])
        for m, xy in zip(mine, px):
            m["xy"] = (xy[0] + sum(i.shape[1] for i in images), xy[1])
        images.append(image)
    over = f"> {clim[1]:.0f}: singular" if peak_singular and drawn.max() > clim[1] else None
    sf = f"; strength {strength / 1e6:.0f} MPa" if strength else ""
    piece = f" of the piece holding the peak (1 of {pieces})" if pieces > 1 else ""
    seen = " and ".join(("left " if len(views) == 2 and k == 0 else "right " if len(views) == 2 else "")
                        + _side(v[0]) for k, v in enumerate(views))
    title = name if name.startswith("von") else name[0].upper() + name[1:]
    _figure(path, np.concatenate(images, axis=1), f"{title} of the {part}",
            f"{clim[0]:.1f} to {clim[1]:.1f} MPa on the surface{piece}{sf}; seen {seen}"
            + ("; what lies in front of a peak is clipped away" if cut else ""), "stress", clim, f"{name} [MPa]",
            marks, over)
    return _record(path, clim, "MPa", part=part, quantity=quantity, peak_MPa=float(vm[i_peak] / 1e6),
                   peak_at_m=where[i_peak].tolist(), peak_singular=peak_singular,
                   calm_peak_MPa=float(calm_value / 1e6), calm_peak_at_m=np.asarray(calm_at).tolist(),
                   views=[v[0].tolist() for v in views])


def _peak_view(points: np.ndarray, tri: np.ndarray, normals: np.ndarray, focus: np.ndarray):
    """A view of ``focus`` on a surface: the direction to the camera (the outward normal at its nearest
    vertex, tilted towards the side of the surface it lies on), that normal, and how far in front of
    ``focus`` [m] the surface may be clipped away (2 % of the surface's size)."""
    surface = np.unique(tri)
    near = _nearest(points, surface, focus)
    n = normals[np.any(tri == near, axis=1)].sum(axis=0)
    n = n / np.linalg.norm(n)
    centre = points[surface].mean(axis=0)
    side = (focus - centre) - np.dot(focus - centre, n) * n
    side = side / np.linalg.norm(side) if np.linalg.norm(side) > 0 else np.zeros(3)
    view = 2.0 * n + side + 0.4 * np.array([0.0, 0.0, np.sign(n[2]) or 1.0])
    return view, n, 0.02 * float(np.linalg.norm(np.ptp(points[surface], axis=0)))


def _pieces(tri: np.ndarray, n: int) -> np.ndarray:
    """Connected piece of each of ``n`` vertices along the triangles' edges."""
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    edges = np.concatenate([tri[:, [0, 1]], tri[:, [1, 2]]])
    return connected_components(coo_matrix((np.ones(len(edges)), (edges[:, 0], edges[:, 1])), shape=(n, n)),
                                directed=False)[1]


def _nearest(points: np.ndarray, among: np.ndarray, xyz) -> int:
    return int(among[np.argmin(np.linalg.norm(points[among] - xyz, axis=1))])


def _nearest_many(points: np.ndarray, among: np.ndarray, xyz: np.ndarray) -> np.ndarray:
    from scipy.spatial import cKDTree

    return among[cKDTree(points[among]).query(xyz)[1]]


def von_mises_deformed(path: Path, domain, sfield) -> dict:
    """Von Mises stress [MPa] of the whole assembly on the deformed shape (displacement exaggerated and
    said so), seen from below and from above side by side: the recovered field of each part (the one the
    tables, verdicts and the stress VTU use), averaged over each outer face."""
    nv = len(domain.points)
    u = sfield.displacement[:nv]
    size = np.linalg.norm(np.ptp(domain.points, axis=0))
    umax = float(np.linalg.norm(u, axis=1).max())
    factor = 0.05 * size / umax if umax > 0 else 1.0
    tri, _ = skin(domain.points, domain.tetrahedra)
    owner = _owner(domain, tri)
    vm = _recovered_faces(domain, sfield, tri, owner) / 1e6
    clim = (float(vm.min()), float(vm.max()))
    mesh = _poly(domain.points + factor * u, tri, vm, cells=True)
    above, _, _ = _render([(mesh, _colours("stress", clim))], _oblique())
    below, _, _ = _render([(mesh, _colours("stress", clim))], _oblique((1.0, -1.4, -1.1)))
    _figure(path, np.concatenate([above[:, 60:-60], below[:, 60:-60]], axis=1), "von Mises stress, whole assembly",
            f"recovered field of each part (face means) on the deformed shape, displacement x {factor:.3g} "
            f"(max {umax * 1e3:.3g} mm); "
            "left from above, right from below", "stress", clim, "von Mises [MPa]")
    return _record(path, clim, "MPa", exaggeration=factor)


def _recovered_faces(domain, sfield, tri: np.ndarray, owner: np.ndarray) -> np.ndarray:
    """Von Mises [Pa] of the part's recovered nodal stress, averaged over the three vertices of each
    boundary triangle ``tri`` (its element ``owner`` names the part)."""
    from ..stages.constitutive import von_mises

    part_of = domain.part_ids()
    names = sorted(domain.parts)
    out = np.zeros(len(tri))
    for i, part in enumerate(names):
        rows = np.flatnonzero(part_of[owner] == i)
        if not len(rows) or part not in sfield.nodal:
            continue
        ids, stress = sfield.nodal[part]
        vm = von_mises(np.asarray(stress).T)
        out[rows] = vm[np.searchsorted(ids, tri[rows])].mean(axis=1)
    return out


def _owner(domain, tri: np.ndarray) -> np.ndarray:
    """The element each boundary triangle belongs to."""
    n = np.int64(len(domain.points))

    def key(f):
        f = np.sort(f, axis=1).astype(np.int64)
        return (f[:, 0] * n + f[:, 1]) * n + f[:, 2]

    faces = key(np.concatenate([domain.tetrahedra[:, f] for f in _FACES]))
    element = np.tile(np.arange(len(domain.tetrahedra)), 4)
    order = np.argsort(faces)
    return element[order][np.searchsorted(faces[order], key(tri))]


def warpage(path: Path, domain, sfield, part: str | None = None) -> dict:
    """Out-of-plane displacement [um] of a plate-like part's upper face with its best-fit plane
    removed (least squares w = a + b x + c y), and its peak-to-valley."""
    part = part or most_bonded(domain)
    axis, lo, hi = thin_axis(domain, part)
    tri, normals = skin(domain.points, domain.tetrahedra[domain.parts[part]])
    top = tri[normals[:, axis] > 0.99]
    nodes = np.unique(top)
    plane = [a for a in range(3) if a != axis]
    xy = domain.points[nodes][:, plane]
    w = sfield.displacement[nodes, axis]
    design = np.column_stack([np.ones(len(nodes)), xy])
    coef = np.linalg.lstsq(design, w, rcond=None)[0]
    r = (w - design @ coef) * 1e6
    ptp = float(r.max() - r.min())
    import matplotlib as mpl
    from matplotlib.figure import Figure
    from matplotlib.tri import Triangulation

    local = np.searchsorted(nodes, top)
    with mpl.rc_context(style.rc()):
        fig = Figure(figsize=style.SIZE, dpi=style.DPI)
        ax = fig.add_axes((0.08, 0.1, 0.74, 0.74))
        bound = max(abs(r.min()), abs(r.max())) or 1.0
        art = ax.tripcolor(Triangulation(xy[:, 0] * 1e3, xy[:, 1] * 1e3, local), r, shading="gouraud",
                           cmap=style.colormap("difference"), vmin=-bound, vmax=bound)
        for i, label in ((int(np.argmax(r)), "highest"), (int(np.argmin(r)), "lowest")):
            ax.plot(*xy[i] * 1e3, marker="o", mfc=style.INK, mec="white", ms=8)
            right = xy[i, 0] > xy[:, 0].mean()
            ax.annotate(f"{label} {r[i]:+.1f} um", xy[i] * 1e3, xytext=(-8 if right else 8, 8), textcoords="offset points",
                        ha="right" if right else "left", fontsize=9,
                        bbox={"boxstyle": "round,pad=0.2", "fc": "white", "ec": "none", "alpha": 0.8})
        ax.set_aspect("equal")
        ax.grid(False)
        ax.set_xlabel(f"{'xyz'[plane[0]]} [mm]")
        ax.set_ylabel(f"{'xyz'[plane[1]]} [mm]")
        fig.colorbar(art, cax=fig.add_axes((0.86, 0.16, 0.028, 0.64))).set_label(f"{'xyz'[axis]} displacement "
                                                                                 "minus best-fit plane [um]")
        fig.text(0.03, 0.955, f"Warpage of the {part}: {ptp:.1f} um peak to valley", fontsize=13,
                 fontweight="bold", va="top")
        fig.text(0.03, 0.905, f"out-of-plane ({'xyz'[axis]}) displacement of its upper face, best-fit plane "
                 f"removed; tilt {np.hypot(*coef[1:]) * 1e3:.3g} mm/m", fontsize=9.5, color=style.MUTED, va="top")
        with files.replacing_path(path) as tmp:
            fig.savefig(tmp, format="png")
    return _record(path, (float(r.min()), float(r.max())), "um", part=part, peak_to_valley_um=ptp,
                   axis="xyz"[axis], plane_m=coef.tolist())


# ----------------------------------------------------------------------------------------------- charts
def _chart(path: Path, title: str, draw, size=(8.0, 4.2)) -> None:
    import matplotlib as mpl
    from matplotlib.figure import Figure

    with mpl.rc_context(style.rc()):
        fig = Figure(figsize=size, dpi=style.DPI)
        ax = fig.subplots()
        ax.set_title(title)
        draw(ax)
        fig.tight_layout()
        with files.replacing_path(path) as tmp:
            fig.savefig(tmp, format="png")


def _bars(ax, names, values, margins) -> None:
    colours = [style.verdict_colour(m) for m in margins]
    ax.bar(names, values, color=colours, edgecolor=style.INK, linewidth=0.6,
           hatch=["//" if m is not None and m < 0 else "" for m in margins])
    ax.tick_params(axis="x", rotation=20)


def part_temperatures(path: Path, parts_degC: dict, limits: dict) -> dict:
    """Bar chart: per-part peak temperature [degC]; parts with a limit coloured by their margin
    (dark and hatched: above; mid: within 10 % of the limit in degC; light: below), limits as ticks."""
    names = list(parts_degC)
    peaks = [parts_degC[n]["max"] for n in names]
    margins = [(limits[n] - p) / abs(limits[n]) if n in limits else None for n, p in zip(names, peaks)]

    def draw(ax):
        _bars(ax, names, peaks, margins)
        for i, n in enumerate(names):
            if n in limits:
                ax.hlines(limits[n], i - 0.45, i + 0.45, colors=style.INK, linewidth=2.0)
                ax.annotate(f"limit {limits[n]:.0f}", (i, limits[n]), xytext=(0, 3), textcoords="offset points",
                            ha="center", fontsize=8)
            ax.annotate(f"{peaks[i]:.1f}", (i, peaks[i]), xytext=(0, -12), textcoords="offset points",
                        ha="center", fontsize=8, color="white" if margins[i] is not None and margins[i] < 0 else style.INK)
        ax.set_ylabel("peak temperature [degC]")

    _chart(path, "Peak temperature per part (bar: limit)", draw)
    return _record(path, (min(peaks), max(peaks)), "degC")


def safety_factors(path: Path, parts: dict, required: float) -> dict:
    """Bar chart: per-part minimum safety factor [-] (log scale) against the required value."""
    names = [n for n in parts if parts[n]["safety_factor"] is not None]
    values = [parts[n]["safety_factor"] for n in names]

    def draw(ax):
        _bars(ax, names, values, [v / required - 1 for v in values])
        ax.axhline(required, color=style.INK, linewidth=1.5)
        ax.annotate(f"required {required:g}", (len(names) - 0.5, required), xytext=(0, 3),
                    textcoords="offset points", ha="right", fontsize=8)
        for i, v in enumerate(values):
            ax.annotate(f"{v:.2f}", (i, v), xytext=(0, 3), textcoords="offset points", ha="center", fontsize=8)
        ax.set_yscale("log")
        ax.set_ylabel("lowest safety factor [-]")

    _chart(path, f"Safety factor per part (dark, hatched: below the required {required:g})", draw)
    return _record(path, (min(values, default=0.0), max(values, default=0.0)), "-")


def line_plot(path: Path, name: str, distance_m, quantities: dict[str, tuple[np.ndarray, str]]) -> dict:
    """Values along a line: one panel per quantity {label: (values, unit)} against distance [mm]."""
    import matplotlib as mpl
    from matplotlib.figure import Figure

    s = np.asarray(distance_m) * 1e3
    with mpl.rc_context(style.rc()):
        fig = Figure(figsize=(8.0, 2.2 + 1.6 * len(quantities)), dpi=style.DPI)
        axes = np.atleast_1d(fig.subplots(len(quantities), 1, sharex=True))
        for ax, (label, (values, unit)) in zip(axes, quantities.items()):
            ax.plot(s, values, color=style.INK, linewidth=1.6)
            ax.set_ylabel(f"{label} [{unit}]")
        axes[0].set_title(f"Along the line {name}")
        axes[-1].set_xlabel("distance along the line [mm]")
        fig.tight_layout()
        with files.replacing_path(path) as tmp:
            fig.savefig(tmp, format="png")
    ranges = {label: (float(np.min(v)), float(np.max(v))) for label, (v, _) in quantities.items()}
    return {"file": path.name, "line": name, "ranges": ranges, "length_m": float(s[-1] - s[0]) / 1e3}


#: What a line plot shows from a stress result's line records: label, record key, unit, scale.
LINE_QUANTITIES = (("temperature", "temperature_K", "degC", None), ("von Mises", "von_mises_Pa", "MPa", 1e-6),
                   ("largest principal", "principal_Pa", "MPa", 1e-6))


def line_records(path: Path, name: str, records: list[dict]) -> dict:
    """A line plot from sampled records ({"distance_m", "outside", "temperature_K", "von_mises_Pa",
    "principal_Pa" (largest first), ...} per point); points outside the model are left out."""
    inside = [r for r in records if not r.get("outside")]
    quantities = {}
    for label, key, unit, scale in LINE_QUANTITIES:
        got = [r.get(key) for r in inside]
        if inside and all(v is not None for v in got):
            v = np.asarray([g[0] if isinstance(g, (list, tuple)) else g for g in got], dtype=float)
            quantities[label] = (celsius(v) if scale is None else v * scale, unit)
    return line_plot(path, name, [r["distance_m"] for r in inside], quantities)


def difference(path: Path, domain, values: np.ndarray, title: str, unit: str, cells: bool = False,
               outside: bool = False) -> dict:
    """A signed difference (B - A) on the model's surface (or the outside), symmetric colour range."""
    tri = outer_skin(domain) if outside else skin(domain.points, domain.tetrahedra)[0]
    shown = values[_owner(domain, tri)] if cells else values[np.unique(tri)]
    bound = float(np.abs(shown).max()) or 1.0
    mesh = _poly(domain.points, tri, shown if cells else values, cells=cells)
    opts = {"scalars": "v", "cmap": style.colormap("difference"), "clim": (-bound, bound)}
    above, _, _ = _render([(mesh, opts)], _oblique())
    below, _, _ = _render([(mesh, opts)], _oblique((1.0, -1.4, -1.1)))
    _figure(path, np.concatenate([above[:, 60:-60], below[:, 60:-60]], axis=1), title,
            f"B - A, {shown.min():.3g} to {shown.max():.3g} {unit}; left from above, right from below",
            "difference", (-bound, bound), f"B - A [{unit}]")
    return _record(path, (float(shown.min()), float(shown.max())), unit)


def cell_values(path: Path, domain, values: np.ndarray, title: str, subtitle: str, unit: str) -> dict:
    """A per-element quantity >= 0 (e.g. a stress range) on the model's surface, seen from above and
    from below, with the stress map."""
    tri = skin(domain.points, domain.tetrahedra)[0]
    shown = values[_owner(domain, tri)]
    clim = (float(shown.min()), float(shown.max()))
    if clim[1] - clim[0] <= 1e-6 * abs(clim[1]):  # uniform to round-off: one colour, not its noise
        clim = (0.0, clim[1])
    opts = _colours("stress", clim)
    mesh = _poly(domain.points, tri, shown, cells=True)
    above, _, _ = _render([(mesh, opts)], _oblique())
    below, _, _ = _render([(mesh, opts)], _oblique((1.0, -1.4, -1.1)))
    _figure(path, np.concatenate([above[:, 60:-60], below[:, 60:-60]], axis=1), title,
            f"{subtitle}; {clim[0]:.3g} to {clim[1]:.3g} {unit}; left from above, right from below", "stress", clim,
            unit)
    return _record(path, clim, unit)
