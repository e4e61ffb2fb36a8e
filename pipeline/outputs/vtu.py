"""VTU files (zlib-compressed XML) that open in ParaView: fields on the volume cells and vertices."""

from __future__ import annotations

from pathlib import Path

import meshio
import numpy as np

from ..model.units import celsius


def write(path: Path, domain, result) -> Path:
    """A VTU of a heat or stress result."""
    from ..fields import StressField

    return (write_stress if isinstance(result, StressField) else write_temperature)(path, domain, result)


def write_stress(path: Path, domain, field) -> Path:
    """Displacement at the vertices [m] (3-vector, for warping), per cell: stress [Pa] as 6 components
    in the order xx, yy, zz, yz, xz, xy, von Mises, Tresca and principal stresses [Pa], the element
    safety factor [-] (capped at 1e6) and ``part_id``."""
    nv = len(domain.points)
    cells = {"part_id": domain.part_ids(), "stress_xx_yy_zz_yz_xz_xy_Pa": field.stress,
             "von_mises_Pa": field.von_mises, "tresca_Pa": field.tresca, "principal_Pa": field.principal,
             "safety_factor": np.minimum(field.safety, 1e6)}  # capped: unloaded cells would be infinite
    return _write(path, domain, {"displacement_m": field.displacement[:nv]}, cells)


def _write(path: Path, domain, points: dict, cells: dict) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    mesh = meshio.Mesh(domain.points, [("tetra", domain.tetrahedra)], point_data=points,
                       cell_data={k: [v] for k, v in cells.items()})
    tmp = path.with_name(f".{path.name}.tmp")
    meshio.write(tmp, mesh, file_format="vtu", compression="zlib")
    tmp.replace(path)
    return path


def write_temperature(path: Path, domain, field) -> Path:
    """Temperature at the vertices [K and degC] and ``part_id`` per cell (index in sorted part names).

    P2 fields are written at the vertices only (the linear cells the mesh was read with).
    """
    t = field.at_vertices
    return _write(path, domain, {"temperature_K": t, "temperature_degC": celsius(t)}, {"part_id": domain.part_ids()})


def part_legend(domain) -> dict[str, int]:
    """part name -> the ``part_id`` written in VTU files."""
    return {name: i for i, name in enumerate(sorted(domain.parts))}



