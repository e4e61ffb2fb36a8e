"""VTU files (zlib-compressed XML) that open in ParaView, and the one mesh builder behind them.

``mesh(domain, result)`` is the meshio mesh of a result (the kind's arrays on the volume cells and
vertices, with ``part_id`` per cell, or a mesh of the kind's own: the stress kind writes one copy of
each part's points); ``grid`` is the same as a pyvista grid (the figures and notebooks use it);
``write`` writes the VTU file.
"""

from __future__ import annotations

from pathlib import Path

import meshio
import numpy as np


def arrays(domain, result, kind: str | None = None) -> tuple[dict, dict] | None:
    """(point data, cell data) of a result, by its stage kind's ``outputs`` hook; None for a kind
    that writes no VTU file."""
    from .. import kinds

    kind = kind or kind_of(result)
    got = kinds.hook(kind, "outputs")(domain, result)
    if got is None or isinstance(got, meshio.Mesh):
        return got
    points, cells = got
    return dict(points), {"part_id": domain.part_ids()} | dict(cells)


def kind_of(result) -> str:
    """The stage kind whose result type ``result`` is."""
    from .. import kinds

    for name, module in kinds.all_kinds().items():
        if isinstance(result, module.RESULT):
            return name
    raise TypeError(f"no stage kind gives a {type(result).__name__}")


def mesh(domain, result=None, kind: str | None = None) -> meshio.Mesh:
    """A meshio mesh of the domain [m] carrying the result's arrays (only ``part_id`` without one)."""
    got = arrays(domain, result, kind) if result is not None else None
    if isinstance(got, meshio.Mesh):  # a kind with a mesh of its own (stress: one copy of each part's points)
        return got
    points, cells = got if got is not None else ({}, {})
    cells = {"part_id": domain.part_ids()} | cells
    return meshio.Mesh(domain.points, [("tetra", domain.tetrahedra)], point_data=points,
                       cell_data={k: [np.asarray(v)] for k, v in cells.items()})


def grid(domain, result=None, kind: str | None = None, scale: float = 1.0):
    """A pyvista UnstructuredGrid of the same mesh, coordinates times ``scale`` (1e3: in mm)."""
    import pyvista as pv

    m = mesh(domain, result, kind)
    out = pv.from_meshio(m)
    out.points = np.asarray(m.points) * scale
    return out


def write(path: Path, domain, result, kind: str | None = None) -> Path:
    """The VTU file of a result (written atomically by ``pipeline.files``)."""
    from .. import files

    path.parent.mkdir(parents=True, exist_ok=True)
    with files.replacing_path(path) as tmp:
        meshio.write(tmp, mesh(domain, result, kind), file_format="vtu", compression="zlib")
    return path


def part_legend(domain) -> dict[str, int]:
    """part name -> the ``part_id`` written in VTU files."""
    return {name: i for i, name in enumerate(sorted(domain.parts))}
