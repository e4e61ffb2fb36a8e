"""report.html: one self-contained file (inline CSS, images embedded) built from a run's summary.

It reads results and figures; it never solves.  Sections, in the order a reader needs them: the verdict
(hottest part against its limit, lowest safety factor and whether its peak sits at a singular feature,
parts that fail), the caution, every load and boundary condition with units, the materials with the
values used and a footnote per source, then per stage its tables and figures, warnings, mesh,
assumptions, versions and keys.
"""

from __future__ import annotations

import base64
import html
from pathlib import Path

from . import style
from . import verdict as verdict_mod
from .summary import CAUTION, write_text

#: The CSS of the report and the study pages (the house style).
STYLE = style.CSS


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
    caption = f"{figure['file']}: colour range {figure['range'][0]:.4g} to {figure['range'][1]:.4g} {figure['unit']}"
    return (f'<figure><img alt="{escape(figure["file"])}" src="data:image/png;base64,{data}">'
            f"<figcaption>{escape(caption)}</figcaption></figure>")


#: The word of each verdict state (read without colour) and its CSS class.
STATES = {"pass": "PASS", "near": "NEAR", "fail": "FAIL", "none": "NO LIMIT"}


def verdict_section(lines: list[dict]) -> str:
    """The verdict: one line per finding, its state as a word on a coloured badge, a note beside it."""
    items = "".join(f'<li><span class="badge {"nolimit" if v["state"] == "none" else v["state"]}">'
                    f'{STATES[v["state"]]}</span> {escape(v["text"])}'
                    + (f'<br><span class="flag">Note:</span> {escape(v["note"])}' if v["note"] else "") + "</li>"
                    for v in lines)
    return f'<section id="verdict" class="verdict"><h2>Verdict</h2><ul>{items or "<li>no results to judge</li>"}</ul></section>'


def build(folder: Path, record: dict, context) -> Path:
    """Write folder/report.html from the summary record and the figures listed in it; ``context`` is
    the run's ``kinds.base.OutputContext`` (limits, required safety factor)."""
    from .. import kinds

    warnings = record.get("warnings", [])
    lines = record.get("verdict") or verdict_mod.verdict(record, context.limits_degC, context.required_safety_factor)
    title = record.get("title") or record["workflow"]
    out = [f"<!doctype html><html><head><meta charset='utf-8'><title>{escape(title)}</title><style>{STYLE}</style>"
           f"</head><body><main><h1>{escape(title)}</h1>",
           f'<p class="notes">Workflow <code>{escape(record["workflow"])}</code>, thermochain '
           f'{escape(record["thermochain"])}, status <b>{escape(record["status"])}</b>; '
           f'{len(warnings)} warning{"s" if len(warnings) != 1 else ""} (<a href="#warnings">below</a>).</p>',
           verdict_section(lines), f'<div class="caution"><b>Caution.</b> {escape(CAUTION)}</div>']
    out.append('<h2 id="loads">Loads and boundary conditions</h2><div class="text">' + table(
        ["stage", "kind", "where", "value"], verdict_mod.loads(record)) + "</div>")
    header, rows, notes = verdict_mod.materials(record)
    out.append('<h2 id="materials">Materials (values used)</h2>' + table(header, rows)
               + '<ol class="notes">' + "".join(f"<li>{escape(n)}</li>" for n in notes) + "</ol>"
               + '<p class="notes">Values in SI-derived units as shown; several values of one property are '
                 "the material axes' (x / y / z). [n]: the source of the value, listed above.</p>")
    for name, st in record["stages"].items():
        out.append(f'<h2 id="stage-{escape(name)}">Stage {escape(name)} ({escape(st["kind"])}): '
                   f'{escape(st["status"])}</h2><p class="notes">{escape(st.get("reason", ""))}</p>')
        out += kinds.hook(st["kind"], "report")(st, context)
        out += [_image(folder, figure) for figure in st.get("figures", [])]
    out.append('<h2 id="warnings">Warnings</h2>'
               + ("".join(f'<p class="warn">{escape(w)}</p>' for w in warnings) or "<p>none</p>"))
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
               "<li>Material data are typical values, not design minima (sources above).</li></ul>")
    out.append("<h2>Versions and inputs</h2>" + table(["stage", "key (SHA-256 of its inputs)"], [
        [name, st.get("key", "")] for name, st in record["stages"].items()]))
    versions = next((st["inputs"]["versions"] for st in record["stages"].values() if "inputs" in st), {})
    out.append(table(["library", "version"], [[k, v] for k, v in versions.items()]))
    out.append(f'<div class="caution"><b>Caution.</b> {escape(CAUTION)}</div></main></body></html>')
    path = folder / "report.html"
    write_text(path, "\n".join(out))
    return path
