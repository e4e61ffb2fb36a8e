"""PNG figures: fields rendered off-screen with pyvista, per-part charts with matplotlib (Agg).

No display is needed and no global state of either library is touched (each figure has its own
plotter or figure object).  Colour maps are perceptually uniform: temperature "inferno", stress
"cividis"; every colour bar title carries its unit.  Each function returns a record of what it drew
(the data range shown), so tests and the report can check a figure against its field.
"""

from __future__ import annotations

import os
import threading
from pathlib import Path

import numpy as np

from ..model.units import celsius

TEMPERATURE_MAP = "inferno"
STRESS_MAP = "cividis"
SIZE = (1000, 750)


def _headless() -> None:
    """Without a display, ask VTK for its EGL window before it tries (and warns about) X."""
    if not os.environ.get("DISPLAY"):
        os.environ.setdefault("VTK_DEFAULT_OPENGL_WINDOW", "vtkEGLRenderWindow")


def _grid(domain, point_data: dict | None = None, cell_data: dict | None = None):
    _headless()
    import pyvista as pv

    cells = np.hstack([np.full((len(domain.tetrahedra), 1), 4), domain.tetrahedra]).ravel()
    grid = pv.UnstructuredGrid(cells, np.full(len(domain.tetrahedra), pv.CellType.TETRA, dtype=np.uint8),
                               domain.points * 1e3)  # drawn in mm
    for k, v in (point_data or {}).items():
        grid.point_data[k] = v
    for k, v in (cell_data or {}).items():
        grid.cell_data[k] = v
    return grid


#: VTK's off-screen rendering is not thread-safe: two runs in one process (threads, a sweep's
#: threaded workers) render one at a time, or both can hang inside the render call (seen in CI).
_RENDER_LOCK = threading.Lock()


def _render(path: Path, mesh, scalars: str, title: str, cmap: str, clim, caption: str,
            context=None, view=(1.0, -1.4, 1.1)) -> Path:
    with _RENDER_LOCK:
        return _render_alone(path, mesh, scalars, title, cmap, clim, caption, context, view)


def _render_alone(path, mesh, scalars, title, cmap, clim, caption, context, view) -> Path:
    import pyvista as pv

    plotter = pv.Plotter(off_screen=True, window_size=SIZE)
    try:
        plotter.set_background("white")
        if context is not None:
            plotter.add_mesh(context, color="lightgrey", opacity=0.25, show_scalar_bar=False)
        plotter.add_mesh(mesh, scalars=scalars, cmap=cmap, clim=clim, show_edges=False,
                         scalar_bar_args={"title": title, "vertical": True, "position_x": 0.86,
                                          "position_y": 0.15, "height": 0.7, "color": "black",
                                          "fmt": "%.4g"})
        plotter.add_text(caption, position="upper_left", font_size=10, color="black")
        plotter.view_vector(view)
        plotter.screenshot(str(path))
    finally:
        plotter.close()
    return path


def temperature_outside(path: Path, domain, field) -> dict:
    """Temperature [degC] on the outer surface."""
    t = celsius(field.at_vertices)
    surface = _grid(domain, {"T": t}).extract_surface(algorithm="dataset_surface")
    shown = surface.point_data["T"]
    clim = (float(shown.min()), float(shown.max()))
    _render(path, surface, "T", "temperature [degC]", TEMPERATURE_MAP, clim,
            f"temperature on the outside, {clim[0]:.1f} to {clim[1]:.1f} degC")
    return {"file": path.name, "range": clim, "unit": "degC"}


def temperature_cut(path: Path, domain, field, part: str | None = None) -> dict:
    """Temperature on a horizontal cut through the middle of ``part``; by default the part bonded to the
    most others (the board of an assembly carries the components)."""
    t = celsius(field.at_vertices)
    if part is None:
        count = {p: sum(p in pair for pair in domain.interfaces) for p in domain.parts}
        part = max(sorted(count), key=lambda p: count[p])
    nodes = np.unique(domain.tetrahedra[domain.parts[part]])
    z = float(np.median(domain.points[nodes, 2])) * 1e3
    grid = _grid(domain, {"T": t})
    cut = grid.slice(normal="z", origin=(0.0, 0.0, z))
    shown = cut.point_data["T"]
    clim = (float(shown.min()), float(shown.max()))
    _render(path, cut, "T", "temperature [degC]", TEMPERATURE_MAP, clim,
            f"cut at z = {z:.2f} mm through {part}, {clim[0]:.1f} to {clim[1]:.1f} degC",
            context=grid.outline(), view=(0.0, -0.6, 1.0))
    return {"file": path.name, "range": clim, "unit": "degC", "z_mm": z, "part": part}


def von_mises_deformed(path: Path, domain, sfield) -> dict:
    """Von Mises stress [MPa] of the recovered field (per part, at its nodes: the stress VTU's) on the
    deformed shape, displacement exaggerated and said so."""
    from . import vtu

    _headless()
    grid = vtu.grid(domain, sfield, "stress", scale=1e3)
    u = np.asarray(grid.point_data["displacement_m"])
    size = np.linalg.norm(np.ptp(domain.points, axis=0))
    umax = float(np.linalg.norm(u, axis=1).max())
    factor = 0.05 * size / umax if umax > 0 else 1.0
    grid.point_data["u"] = u * 1e3
    grid.point_data["vm"] = np.asarray(grid.point_data["von_mises_Pa"]) / 1e6
    deformed = grid.warp_by_vector("u", factor=factor).extract_surface(algorithm="dataset_surface")
    shown = deformed.point_data["vm"]
    clim = (float(shown.min()), float(shown.max()))
    _render(path, deformed, "vm", "von Mises [MPa]", STRESS_MAP, clim,
            f"von Mises on the deformed shape, displacement x {factor:.3g} (max {umax * 1e3:.3g} mm)",
            context=grid.outline())
    return {"file": path.name, "range": clim, "unit": "MPa", "exaggeration": factor}


def part_temperatures(path: Path, parts_degC: dict, limits: dict) -> dict:
    """Bar chart: per-part peak temperature [degC] against its limit."""
    from matplotlib.figure import Figure

    names = list(parts_degC)
    peaks = [parts_degC[n]["max"] for n in names]
    fig = Figure(figsize=(7, 3.5), dpi=110)
    ax = fig.subplots()
    colours = ["#b2182b" if n in limits and p > limits[n] else "#4d4d4d" for n, p in zip(names, peaks)]
    ax.bar(names, peaks, color=colours)
    for i, n in enumerate(names):
        if n in limits:
            ax.hlines(limits[n], i - 0.4, i + 0.4, colors="#2166ac", linestyles="--")
    ax.set_ylabel("peak temperature [degC]")
    ax.set_title("peak temperature per part (dashed: limit)")
    fig.tight_layout()
    fig.savefig(path)
    return {"file": path.name, "range": (min(peaks), max(peaks)), "unit": "degC"}


def safety_factors(path: Path, parts: dict, required: float) -> dict:
    """Bar chart: per-part minimum safety factor with the required value."""
    from matplotlib.figure import Figure

    names = [n for n in parts if parts[n]["safety_factor"] is not None]
    values = [parts[n]["safety_factor"] for n in names]
    fig = Figure(figsize=(7, 3.5), dpi=110)
    ax = fig.subplots()
    ax.bar(names, values, color=["#b2182b" if v < required else "#4d4d4d" for v in values])
    ax.axhline(required, color="#2166ac", linestyle="--")
    ax.set_yscale("log")
    ax.set_ylabel("minimum safety factor [-]")
    ax.set_title(f"safety factor per part (dashed: required {required:g})")
    fig.tight_layout()
    fig.savefig(path)
    return {"file": path.name, "range": (min(values, default=0.0), max(values, default=0.0)), "unit": "-"}
