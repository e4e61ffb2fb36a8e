"""summary.json of a run: each stage's status and key figures; written atomically, read by people and tools."""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path

from ..model.units import celsius

CAUTION = (
    "Temperatures and stresses from thermochain are numerical estimates whose accuracy depends on the inputs "
    "(powers, film coefficients, material data), on the mesh and on the simplifying assumptions (steady state, "
    "perfect contact between parts that share nodes). Check them against tests and have them reviewed by a "
    "qualified engineer, a licensed professional engineer where required, before any design release or safety "
    "decision; applicable codes, standards and component datasheets take precedence."
)


def heat_figures(field) -> dict:
    """The figures of a TemperatureField that a summary shows, in degC and W."""
    return {
        "order": field.order,
        "parts_degC": {p: {k: round(celsius(v), 4) for k, v in s.items()} for p, s in field.parts.items()},
        "probes_degC": {p: round(celsius(v), 4) for p, v in field.probes.items()},
        "heat_balance_W": [dict(r) for r in field.balance],
        "heat_in_W": field.heat_in,
        "relative_imbalance": field.imbalance,
        "loads": [dict(r) for r in field.loads],
        "adiabatic_surfaces": list(field.adiabatic),
        "solver": field.solver.to_dict() | {"history": []},
        "notices": list(field.notices),
    }


def write_json(path: Path, data: dict) -> None:
    """Write JSON atomically: a temporary file beside the target, fsync, rename."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            json.dump(data, f, indent=2, allow_nan=False)
            f.write("\n")
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
