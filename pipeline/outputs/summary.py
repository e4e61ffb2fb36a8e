"""summary.json of a run: each stage's status and key figures; written atomically, read by people and tools."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

from .. import files

CAUTION = (
    "Temperatures and stresses from thermochain are numerical estimates whose accuracy depends on the inputs "
    "(powers, film coefficients, contact conductances, material data), on the mesh and on the simplifying "
    "assumptions (linear elasticity, bonded or tied parts, no fluid flow, life estimates that are screening values "
    "with wide scatter). Check them against tests and have them reviewed by a "
    "qualified engineer, a licensed professional engineer where required, before any design release or safety "
    "decision; applicable codes, standards and component datasheets take precedence."
)


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


def write_json(path: Path, data: dict) -> None:
    """Write JSON atomically (see ``write_text``)."""
    write_text(path, json.dumps(data, indent=2, allow_nan=False, default=float) + "\n")


def write_text(path: Path, text: str) -> None:
    """Write a text file atomically, creating its folder (``pipeline.files``: fresh temporary name, no
    links followed, fsync, replace, the user's file mode)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    files.write_text(path, text)
