"""VTU files (zlib-compressed XML) that open in ParaView: fields on the volume cells and vertices."""

from __future__ import annotations

from pathlib import Path

import meshio

from ..model.units import celsius


def write_temperature(path: Path, domain, field) -> Path:
    """Temperature at the vertices [K and degC] and ``part_id`` per cell (index in sorted part names).

    P2 fields are written at the vertices only (the linear cells the mesh was read with).
    """
    path.parent.mkdir(parents=True, exist_ok=True)
    t = field.at_vertices
    mesh = meshio.Mesh(
        domain.points,
        [("tetra", domain.tetrahedra)],
        point_data={"temperature_K": t, "temperature_degC": celsius(t)},
        cell_data={"part_id": [domain.part_ids()]},
    )
    tmp = path.with_name(f".{path.name}.tmp")
    meshio.write(tmp, mesh, file_format="vtu", compression="zlib")
    tmp.replace(path)
    return path


def part_legend(domain) -> dict[str, int]:
    """part name -> the ``part_id`` written in VTU files."""
    return {name: i for i, name in enumerate(sorted(domain.parts))}



