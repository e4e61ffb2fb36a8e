"""summary.json of a run: each stage's status and key figures; written atomically, read by people and tools."""

from __future__ import annotations

import csv
import io
import json
import os
import tempfile
from pathlib import Path

import numpy as np

from ..model.units import celsius

CAUTION = (
    "Temperatures and stresses from thermochain are numerical estimates whose accuracy depends on the inputs "
    "(powers, film coefficients, material data), on the mesh and on the simplifying assumptions (steady state, "
    "perfect contact between parts that share nodes). Check them against tests and have them reviewed by a "
    "qualified engineer, a licensed professional engineer where required, before any design release or safety "
    "decision; applicable codes, standards and component datasheets take precedence."
)


def figures(kind: str, result) -> dict:
    """The figures of a stage result that a summary shows, with the unit in each key's name."""
    return {"heat": heat_figures, "map": map_figures, "stress": stress_figures}[kind](result)


def map_figures(load) -> dict:
    return {"order": load.order, "diagnostics": dict(load.diagnostics),
            "reference_degC": {"min": round(celsius(float(load.reference.min())), 4),
                               "max": round(celsius(float(load.reference.max())), 4)}}


def stress_figures(field) -> dict:
    return {
        "order": field.order,
        "parts": {p: dict(f) for p, f in field.parts.items()},
        "reactions_N": {k: list(v) for k, v in field.reactions.items()},
        "equilibrium": dict(field.equilibrium),
        "probes": dict(field.probes),
        "displacement_max_m": float(np.linalg.norm(field.displacement, axis=1).max()),
        "solver": field.solver.to_dict() | {"history": []},
        "notices": list(field.notices),
    }


def write_csv(path: Path, record: dict) -> None:
    """The per-part tables of every stage as rows: stage, kind, item, quantity, value."""
    rows = [["stage", "kind", "item", "quantity", "value"]]
    for name, st in record["stages"].items():
        for part, s in st.get("parts_degC", {}).items():
            rows += [[name, st["kind"], part, f"temperature_{k}_degC", v] for k, v in s.items()]
        for probe, v in st.get("probes_degC", {}).items():
            rows.append([name, st["kind"], probe, "probe_temperature_degC", v])
        for r in st.get("heat_balance_W", []):
            rows.append([name, st["kind"], r["name"], f"{r['kind']}_heat_in_W", r["heat_in_W"]])
        for part, f in st.get("parts", {}).items():
            rows += [[name, st["kind"], part, k, v] for k, v in f.items() if isinstance(v, (int, float))]
        for support, r in st.get("reactions_N", {}).items():
            rows += [[name, st["kind"], support, f"reaction_{a}_N", v] for a, v in zip("xyz", r)]
    text = io.StringIO()
    csv.writer(text).writerows(rows)
    write_text(path, text.getvalue())


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
    """Write JSON atomically (see ``write_text``)."""
    write_text(path, json.dumps(data, indent=2, allow_nan=False, default=float) + "\n")


def write_text(path: Path, text: str) -> None:
    """Write a file atomically: a temporary file beside the target, fsync, rename."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            f.write(text)
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
