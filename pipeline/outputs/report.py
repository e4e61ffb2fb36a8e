"""report.html: one self-contained file (inline CSS, images embedded) built from a run's summary.

It reads results and figures; it never solves.  Sections: inputs and assumptions, materials with
sources, mesh, per stage the tables (temperatures against limits, heat balance, stresses and safety
factors against the required value, reactions and equilibrium), warnings, versions and keys, cautions.
"""

from __future__ import annotations

import base64
import html
from pathlib import Path

from .summary import CAUTION, write_text

STYLE = """
body{font-family:system-ui,sans-serif;margin:2em auto;max-width:70em;color:#222;line-height:1.4}
h1{font-size:1.6em;border-bottom:2px solid #2166ac}h2{font-size:1.25em;margin-top:1.6em;color:#2166ac}
table{border-collapse:collapse;margin:.6em 0}td,th{border:1px solid #bbb;padding:.25em .6em;text-align:right}
th{background:#eef2f7}td:first-child,th:first-child{text-align:left}.fail{color:#b2182b;font-weight:bold}
.pass{color:#1b7837}.warn{background:#fff4e5;border-left:4px solid #e08214;padding:.5em 1em}
.caution{background:#f2f2f2;border-left:4px solid #555;padding:.8em 1em}img{max-width:100%;border:1px solid #ddd}
figure{margin:1em 0}figcaption{font-size:.9em;color:#555}
"""


def _e(value) -> str:
    return html.escape(str(value))


def _table(header: list[str], rows: list[list]) -> str:
    head = "".join(f"<th>{_e(h)}</th>" for h in header)
    body = "".join("<tr>" + "".join(c if isinstance(c, _Raw) else f"<td>{_e(c)}</td>" for c in row) + "</tr>"
                   for row in rows)
    return f"<table><tr>{head}</tr>{body}</table>"


class _Raw(str):
    """A table cell that is already HTML."""


def _verdict(ok: bool | None) -> _Raw:
    if ok is None:
        return _Raw("<td>no limit</td>")
    return _Raw(f'<td class="{"pass" if ok else "fail"}">{"pass" if ok else "FAIL"}</td>')


def _image(folder: Path, figure: dict) -> str:
    data = base64.b64encode((folder / figure["file"]).read_bytes()).decode()
    caption = f"{figure['file']}: shown range {figure['range'][0]:.4g} to {figure['range'][1]:.4g} {figure['unit']}"
    return f'<figure><img alt="{_e(figure["file"])}" src="data:image/png;base64,{data}"><figcaption>{_e(caption)}</figcaption></figure>'


def build(folder: Path, record: dict, limits_degC: dict[str, float], required: float, warnings: list[str]) -> Path:
    """Write folder/report.html from the summary record and the figures listed in it."""
    out = [f"<!doctype html><html><head><meta charset='utf-8'><title>{_e(record.get('title') or 'thermochain report')}"
           f"</title><style>{STYLE}</style></head><body>",
           f"<h1>{_e(record.get('title') or record['workflow'])}</h1>",
           f"<p>Workflow <code>{_e(record['workflow'])}</code>, thermochain {_e(record['thermochain'])}, "
           f"status <b>{_e(record['status'])}</b>.</p>",
           f'<div class="caution"><b>Caution.</b> {_e(CAUTION)}</div>']
    mesh = record["mesh"]
    lo, hi = mesh["bounding_box_m"]
    out.append("<h2>Mesh</h2>" + _table(["file", "unit", "nodes", "tetrahedra", "bounding box [mm]"], [[
        mesh["file"], mesh["unit"], mesh["nodes"], mesh["tetrahedra"],
        " x ".join(f"{(b - a) * 1e3:.4g}" for a, b in zip(lo, hi))]]))
    out.append(_table(["part", "part_id in VTU"], [[p, i] for p, i in mesh["part_ids"].items()]))
    out.append("<h2>Assumptions</h2><ul><li>Steady state; one-way coupling (temperatures drive stresses, not the "
               "reverse).</li><li>Parts that share nodes are bonded: perfect thermal contact, no sliding or gaps."
               "</li><li>Linear elasticity, small strains; no plasticity, creep, contact, bolt preload or fatigue."
               "</li><li>Film coefficients and powers are inputs; no fluid flow is solved.</li>"
               "<li>Material data are typical values, not design minima (sources below).</li></ul>")
    out.append("<h2>Materials</h2>" + _table(["stage", "part", "material", "source of the data"], [
        [name, part, mat, record.get("material_sources", {}).get(mat, "")]
        for name, st in record["stages"].items() for part, mat in st.get("materials", {}).items()]))
    for name, st in record["stages"].items():
        out.append(f"<h2>Stage {_e(name)} ({_e(st['kind'])}): {_e(st['status'])}</h2><p>{_e(st.get('reason', ''))}</p>")
        out += _stage(folder, st, limits_degC, required)
    out.append("<h2>Warnings</h2>" + ("".join(f'<p class="warn">{_e(w)}</p>' for w in warnings) or "<p>none</p>"))
    out.append("<h2>Versions and inputs</h2>" + _table(["stage", "key (SHA-256 of its inputs)"], [
        [name, st.get("key", "")] for name, st in record["stages"].items()]))
    versions = next((st["inputs"]["versions"] for st in record["stages"].values() if "inputs" in st), {})
    out.append(_table(["library", "version"], [[k, v] for k, v in versions.items()]))
    out.append(f'<div class="caution"><b>Caution.</b> {_e(CAUTION)}</div></body></html>')
    path = folder / "report.html"
    write_text(path, "\n".join(out))
    return path


def _stage(folder: Path, st: dict, limits: dict, required: float) -> list[str]:
    out = []
    if st["kind"] == "heat":
        out.append(_table(["part", "min [degC]", "mean [degC]", "max [degC]", "limit [degC]", "verdict"], [
            [p, f"{s['min']:.2f}", f"{s['mean']:.2f}", f"{s['max']:.2f}",
             f"{limits[p]:.1f}" if p in limits else "", _verdict(s["max"] <= limits[p] if p in limits else None)]
            for p, s in st["parts_degC"].items()]))
        out.append("<p>Heat balance (positive into the body):</p>" + _table(
            ["kind", "load or surface", "heat in [W]"],
            [[r["kind"], r["name"], f"{r['heat_in_W']:+.5g}"] for r in st["heat_balance_W"]]))
        out.append(f"<p>Relative imbalance {st['relative_imbalance']:.1e}. Adiabatic surfaces: "
                   f"{_e(', '.join(st['adiabatic_surfaces']) or 'none')}.</p>")
        if st.get("probes_degC"):
            out.append(_table(["probe", "temperature [degC]"], [[p, f"{t:.2f}"] for p, t in st["probes_degC"].items()]))
    elif st["kind"] == "map":
        d = st["diagnostics"]
        out.append(_table(["method", "points outside", "largest distance [mm]", "mapped range [degC]"], [[
            d.get("method"), d.get("outside"), f"{d.get('max_distance_m', 0) * 1e3:.3g}",
            f"{d['mapped_min_K'] - 273.15:.2f} to {d['mapped_max_K'] - 273.15:.2f}"]]))
    elif st["kind"] == "stress":
        out.append(_table(["part", "peak von Mises [MPa]", "at [mm]", "max principal [MPa]", "criterion",
                           "safety factor", f"verdict (required {required:g})"], [
            [p, f"{f['von_mises_max_Pa'] / 1e6:.4g}", ", ".join(f"{c * 1e3:.2f}" for c in f["von_mises_max_at_m"]),
             f"{f['principal_max_Pa'] / 1e6:.4g}", f["criterion"],
             "n/a" if f["safety_factor"] is None else f"{f['safety_factor']:.3g}",
             _verdict(None if f["safety_factor"] is None else f["safety_factor"] >= required)]
            for p, f in st["parts"].items()]))
        eq = st["equilibrium"]
        out.append(_table(["support", "Rx [N]", "Ry [N]", "Rz [N]"], [[k] + [f"{v:.5g}" for v in r]
                                                                      for k, r in st["reactions_N"].items()]))
        out.append(f"<p>Applied loads {[round(v, 6) for v in eq['applied_N']]} N; sum of reactions and loads "
                   f"{[f'{v:.2e}' for v in eq['sum_N']]} N (relative {eq['relative']:.1e}).</p>")
    for figure in st.get("figures", []):
        out.append(_image(folder, figure))
    return out
