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


def escape(value) -> str:
    """Text as HTML (every name and value from input files goes through here)."""
    return html.escape(str(value))



def table(header: list[str], rows: list[list]) -> str:
    """An HTML table; cells are escaped unless they are ``Cell`` (already HTML)."""
    head = "".join(f"<th>{escape(h)}</th>" for h in header)
    body = "".join("<tr>" + "".join(c if isinstance(c, Cell) else f"<td>{escape(c)}</td>" for c in row) + "</tr>"
                   for row in rows)
    return f"<table><tr>{head}</tr>{body}</table>"



class Cell(str):
    """A table cell that is already HTML."""


def verdict(ok: bool | None) -> Cell:
    """The pass/FAIL cell of a table row (None: no limit to judge by)."""
    if ok is None:
        return Cell("<td>no limit</td>")
    return Cell(f'<td class="{"pass" if ok else "fail"}">{"pass" if ok else "FAIL"}</td>')


def _image(folder: Path, figure: dict) -> str:
    data = base64.b64encode((folder / figure["file"]).read_bytes()).decode()
    caption = f"{figure['file']}: shown range {figure['range'][0]:.4g} to {figure['range'][1]:.4g} {figure['unit']}"
    return f'<figure><img alt="{escape(figure["file"])}" src="data:image/png;base64,{data}"><figcaption>{escape(caption)}</figcaption></figure>'


def build(folder: Path, record: dict, context) -> Path:
    """Write folder/report.html from the summary record and the figures listed in it; ``context`` is
    the run's ``kinds.base.OutputContext`` (limits, required safety factor)."""
    from .. import kinds

    warnings = record.get("warnings", [])
    out = [f"<!doctype html><html><head><meta charset='utf-8'><title>{escape(record.get('title') or 'thermochain report')}"
           f"</title><style>{STYLE}</style></head><body>",
           f"<h1>{escape(record.get('title') or record['workflow'])}</h1>",
           f"<p>Workflow <code>{escape(record['workflow'])}</code>, thermochain {escape(record['thermochain'])}, "
           f"status <b>{escape(record['status'])}</b>.</p>",
           f'<div class="caution"><b>Caution.</b> {escape(CAUTION)}</div>']
    mesh = record["mesh"]
    lo, hi = mesh["bounding_box_m"]
    out.append("<h2>Mesh</h2>" + table(["file", "unit", "nodes", "tetrahedra", "bounding box [mm]"], [[
        mesh["file"], mesh["unit"], mesh["nodes"], mesh["tetrahedra"],
        " x ".join(f"{(b - a) * 1e3:.4g}" for a, b in zip(lo, hi))]]))
    out.append(table(["part", "part_id in VTU"], [[p, i] for p, i in mesh["part_ids"].items()]))
    out.append("<h2>Assumptions</h2><ul><li>Steady state; one-way coupling (temperatures drive stresses, not the "
               "reverse).</li><li>Parts that share nodes are bonded: perfect thermal contact, no sliding or gaps."
               "</li><li>Linear elasticity, small strains; no plasticity, creep, contact, bolt preload or fatigue."
               "</li><li>Film coefficients and powers are inputs; no fluid flow is solved.</li>"
               "<li>Material data are typical values, not design minima (sources below).</li></ul>")
    out.append("<h2>Materials</h2>" + table(["stage", "part", "material", "source of the data"], [
        [name, part, mat, record.get("material_sources", {}).get(mat, "")]
        for name, st in record["stages"].items() for part, mat in st.get("materials", {}).items()]))
    for name, st in record["stages"].items():
        out.append(f"<h2>Stage {escape(name)} ({escape(st['kind'])}): {escape(st['status'])}</h2><p>{escape(st.get('reason', ''))}</p>")
        out += kinds.hook(st["kind"], "report")(st, context)
        out += [_image(folder, figure) for figure in st.get("figures", [])]
    out.append("<h2>Warnings</h2>" + ("".join(f'<p class="warn">{escape(w)}</p>' for w in warnings) or "<p>none</p>"))
    out.append("<h2>Versions and inputs</h2>" + table(["stage", "key (SHA-256 of its inputs)"], [
        [name, st.get("key", "")] for name, st in record["stages"].items()]))
    versions = next((st["inputs"]["versions"] for st in record["stages"].values() if "inputs" in st), {})
    out.append(table(["library", "version"], [[k, v] for k, v in versions.items()]))
    out.append(f'<div class="caution"><b>Caution.</b> {escape(CAUTION)}</div></body></html>')
    path = folder / "report.html"
    write_text(path, "\n".join(out))
    return path
