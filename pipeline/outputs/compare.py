"""Two results folders side by side: what changed in the inputs, what changed in the results.

Reads each folder's summary.json, VTU files and figures; never solves.  Writes compare.html (one
self-contained page), compare.csv (one row per compared quantity: A, B, B - A) and, where the two
runs share a mesh and a stage's fields differ, a difference figure of that stage.
"""

from __future__ import annotations

import base64
import csv
import io
import json
import math
from pathlib import Path

import numpy as np

from .. import errors
from . import figures, style
from .summary import CAUTION, write_text

#: Two field values closer than this (relative to the field's largest magnitude) are equal: round-off
#: of a repeated solve is far below it, any change of an input the stage reads is far above.
SAME = 1e-9
#: Two figures are equal when no pixel channel differs by more than this (of 255): renders of equal
#: fields repeat to the pixel on one machine; text or colour changes move whole glyphs.
SAME_PIXEL = 2


def _summary(folder: Path) -> dict:
    path = folder / "summary.json"
    if not path.is_file():
        raise errors.InputError(f"{folder}: no summary.json here; give the results folder of a run "
                                "(the folder a 'thermochain run' wrote)")
    return json.loads(path.read_text())


def flatten(value, prefix: str = "") -> dict[str, object]:
    """Nested dicts as {"a.b.c": leaf}; lists stay leaves."""
    if isinstance(value, dict):
        out = {}
        for k, v in value.items():
            out |= flatten(v, f"{prefix}{k}." if prefix or k else "")
        return out
    return {prefix.rstrip("."): value}


def changed_inputs(a: dict, b: dict) -> list[list]:
    """Rows [stage, key path, A, B] of every stage input that differs (materials, options, mesh, probes)."""
    rows = []
    for name in sorted(set(a["stages"]) | set(b["stages"])):
        sa, sb = a["stages"].get(name), b["stages"].get(name)
        if sa is None or sb is None:
            rows.append([name, "(stage)", "absent" if sa is None else "present", "absent" if sb is None else "present"])
            continue
        fa, fb = flatten(sa.get("inputs", {})), flatten(sb.get("inputs", {}))
        for key in sorted(set(fa) | set(fb)):
            if key == "upstream" or key.startswith("versions."):
                continue
            if fa.get(key) != fb.get(key):
                rows.append([name, key, _text(fa.get(key)), _text(fb.get(key))])
        if sa.get("materials") != sb.get("materials"):
            for part in sorted(set(sa.get("materials", {})) | set(sb.get("materials", {}))):
                ma, mb = sa.get("materials", {}).get(part), sb.get("materials", {}).get(part)
                if ma != mb:
                    rows.append([name, f"material of {part}", _text(ma), _text(mb)])
    return rows


def _text(v) -> str:
    if v is None:
        return "-"
    if isinstance(v, float):
        return f"{v:.6g}"
    if isinstance(v, list):
        return "[" + ", ".join(_text(x) for x in v) + "]"
    return str(v)


def _delta(a, b) -> float | None:
    return None if a is None or b is None else b - a


def quantities(a: dict, b: dict) -> list[dict]:
    """Per-part figures of both runs: peak temperature [degC], peak von Mises [MPa], safety factor."""
    rows = []
    for name in sorted(set(a["stages"]) & set(b["stages"])):
        sa, sb = a["stages"][name], b["stages"][name]
        for part in sorted(set(sa.get("parts_degC", {})) | set(sb.get("parts_degC", {}))):
            va, vb = (s.get("parts_degC", {}).get(part, {}).get("max") for s in (sa, sb))
            rows.append({"stage": name, "part": part, "quantity": "peak temperature", "unit": "degC", "a": va, "b": vb})
        for part in sorted(set(sa.get("parts", {})) | set(sb.get("parts", {}))):
            pa, pb = sa.get("parts", {}).get(part, {}), sb.get("parts", {}).get(part, {})
            for key, label, unit, scale in (("von_mises_max_Pa", "peak von Mises", "MPa", 1e-6),
                                            ("safety_factor", "safety factor", "-", 1.0)):
                va, vb = pa.get(key), pb.get(key)
                rows.append({"stage": name, "part": part, "quantity": label, "unit": unit,
                             "a": None if va is None else va * scale, "b": None if vb is None else vb * scale})
    for r in rows:
        r["delta"] = _delta(r["a"], r["b"])
    return rows


def _grid(folder: Path, file: str | None):
    import meshio

    return meshio.read(folder / file) if file and (folder / file).is_file() else None


def fields(a_dir: Path, b_dir: Path, a: dict, b: dict) -> dict[str, dict]:
    """Per stage with a VTU in both folders: whether the meshes match, and each field's largest |B - A|."""
    out = {}
    for name in sorted(set(a["stages"]) & set(b["stages"])):
        ga, gb = _grid(a_dir, a["stages"][name].get("vtu")), _grid(b_dir, b["stages"][name].get("vtu"))
        if ga is None or gb is None:
            continue
        same_mesh = (ga.points.shape == gb.points.shape and np.array_equal(ga.cells_dict["tetra"], gb.cells_dict["tetra"])
                     and np.allclose(ga.points, gb.points, rtol=0, atol=SAME * np.abs(ga.points).max()))
        rec = {"same_mesh": bool(same_mesh), "same_key": a["stages"][name]["key"] == b["stages"][name]["key"],
               "fields": {}}
        if same_mesh:
            for where, da, db in (("point", ga.point_data, gb.point_data), ("cell", ga.cell_data, gb.cell_data)):
                for k in sorted(set(da) & set(db)):
                    va, vb = (np.asarray(d[k][0] if where == "cell" else d[k], dtype=float) for d in (da, db))
                    scale = max(float(np.abs(va).max()), float(np.abs(vb).max()), 1e-300)
                    diff = float(np.abs(vb - va).max())
                    rec["fields"][k] = {"where": where, "max_abs_difference": diff, "equal": diff <= SAME * scale}
        rec["differs"] = (not same_mesh) or any(not f["equal"] for f in rec["fields"].values())
        rec["grids"] = (ga, gb)
        out[name] = rec
    return out


def compare_figures(a_dir: Path, b_dir: Path, a: dict, b: dict) -> list[list]:
    """Rows [stage, figure, equal?, largest pixel difference] for figures both runs drew."""
    from matplotlib.image import imread

    rows = []
    for name in sorted(set(a["stages"]) & set(b["stages"])):
        fa = {f["file"] for f in a["stages"][name].get("figures", [])}
        fb = {f["file"] for f in b["stages"][name].get("figures", [])}
        rows += [[name, file, False, "only in A" if file in fa else "only in B"] for file in sorted(fa ^ fb)]
        for file in sorted(fa & fb):
            ia, ib = imread(a_dir / file), imread(b_dir / file)
            if ia.shape != ib.shape:
                rows.append([name, file, False, "sizes differ"])
                continue
            worst = int(np.abs(ia.astype(float) - ib.astype(float)).max() * 255 + 0.5)
            rows.append([name, file, worst <= SAME_PIXEL, worst])
    return rows


def _domain(grid):
    """A minimal domain (points [m], tetrahedra) of a VTU grid, enough to draw its surface."""
    from ..model.mesh import Domain

    cells = grid.cells_dict.get("tetra")
    if cells is None:  # a P2 stress file: its quadratic cells' first four nodes are the corners
        cells = grid.cells_dict["tetra10"][:, :4]
    return Domain(points=np.asarray(grid.points, dtype=float), tetrahedra=np.asarray(cells), parts={}, surfaces={},
                  interfaces={})


DIFFERENCE = (("temperature_degC", "point", "temperature", "K", 1.0),
              ("von_mises_Pa", "point", "von Mises stress", "MPa", 1e-6))  # the recovered field, per part


def difference_figures(out: Path, compared: dict) -> list[dict]:
    """A B - A figure per stage whose meshes match and whose fields differ."""
    made = []
    for name, rec in compared.items():
        if not rec["same_mesh"] or not rec["differs"]:
            continue
        ga, gb = rec["grids"]
        for key, where, label, unit, scale in DIFFERENCE:
            if key in rec["fields"]:
                get = (lambda g: g.point_data[key]) if where == "point" else (lambda g: g.cell_data[key][0])
                delta = (np.asarray(get(gb), dtype=float) - np.asarray(get(ga), dtype=float)) * scale
                made.append(figures.difference(out / f"difference_{name}.png", _domain(ga), delta,
                                               f"Difference in {label}, stage {name}", unit, cells=where == "cell")
                            | {"stage": name})
                break
    return made


def run(a_dir: str | Path, b_dir: str | Path, out: str | Path) -> dict:
    """Compare results folders A and B; write compare.html, compare.csv and difference figures into
    ``out``; return the comparison record."""
    a_dir, b_dir, out = Path(a_dir), Path(b_dir), Path(out)
    a, b = _summary(a_dir), _summary(b_dir)
    out.mkdir(parents=True, exist_ok=True)
    compared = fields(a_dir, b_dir, a, b)
    record = {"a": str(a_dir), "b": str(b_dir), "a_title": a.get("title"), "b_title": b.get("title"),
              "inputs": changed_inputs(a, b), "quantities": quantities(a, b),
              "figures": compare_figures(a_dir, b_dir, a, b),
              "stages": {n: {k: v for k, v in r.items() if k != "grids"} for n, r in compared.items()}}
    record["differences"] = difference_figures(out, compared)
    record["statements"] = statements(record)
    write_text(out / "compare.csv", table_csv(record))
    write_text(out / "compare.html", page(out, record))
    return record


def statements(record: dict) -> list[str]:
    """One sentence per stage: identical, or what differs (fields, figures)."""
    out = []
    for stage in sorted({r["stage"] for r in record["quantities"] if r["quantity"] == "safety factor"}):
        rows = [r for r in record["quantities"] if r["stage"] == stage and r["quantity"] == "safety factor"]
        low = [min(((r[k], r["part"]) for r in rows if r[k] is not None), default=None) for k in ("a", "b")]
        if all(low):
            out.append(f"{stage}: lowest safety factor A {low[0][1]} {low[0][0]:.3g}, B {low[1][1]} {low[1][0]:.3g}.")
    for name, st in record["stages"].items():
        figs = [r for r in record["figures"] if r[0] == name]
        same_figs = all(r[2] for r in figs)
        if not st["differs"]:
            why = "same stage key: nothing it reads changed" if st["same_key"] else "inputs differ, fields equal"
            out.append(f"{name}: results identical ({why}); figures {'equal' if same_figs else 'differ'}.")
        elif not st["same_mesh"]:
            out.append(f"{name}: results differ on different meshes (no difference figure).")
        else:
            moved = [k for k, f in st["fields"].items() if not f["equal"]]
            out.append(f"{name}: results differ ({', '.join(moved)}); figures "
                       f"{'equal' if same_figs else 'differ: ' + ', '.join(r[1] for r in figs if not r[2])}.")
    return out


def table_csv(record: dict) -> str:
    text = io.StringIO()
    w = csv.writer(text)
    w.writerow(["stage", "part", "quantity", "unit", "A", "B", "B_minus_A"])
    for r in record["quantities"]:
        w.writerow([r["stage"], r["part"], r["quantity"], r["unit"]] + ["" if r[k] is None else r[k]
                                                                       for k in ("a", "b", "delta")])
    for stage, key, va, vb in record["inputs"]:
        w.writerow([stage, "", f"input {key}", "", va, vb, ""])
    return text.getvalue()


def _e(v) -> str:
    import html

    return html.escape(str(v))


def _rows(header: list[str], rows: list[list]) -> str:
    head = "".join(f"<th>{_e(h)}</th>" for h in header)
    body = "".join("<tr>" + "".join(c if str(c).startswith("<td") else f"<td>{_e(c)}</td>" for c in row) + "</tr>"
                   for row in rows)
    return f"<table><tr>{head}</tr>{body}</table>"


def _num(v, digits: int = 4) -> str:
    return "-" if v is None or (isinstance(v, float) and not math.isfinite(v)) else f"{v:.{digits}g}"


def page(out: Path, record: dict) -> str:
    """compare.html: what differs first, then inputs changed, quantities side by side, figures."""
    body = [f"<h1>Comparison of two runs</h1><p>A: <code>{_e(record['a'])}</code> ({_e(record['a_title'])})<br>"
            f"B: <code>{_e(record['b'])}</code> ({_e(record['b_title'])})</p>",
            '<section class="verdict"><h2>What differs</h2><ul>'
            + "".join(f"<li>{_e(s)}</li>" for s in record["statements"]) + "</ul></section>",
            "<h2>Inputs changed</h2>"
            + (f'<div class="text">{_rows(["stage", "key path", "A", "B"], record["inputs"])}</div>'
               if record["inputs"] else "<p>None.</p>")]
    rows = []
    for r in record["quantities"]:
        d = r["delta"]
        cls = "" if d is None or abs(d) <= 1e-12 * max(abs(r["a"] or 0), 1) else ' class="changed"'
        rows.append([r["stage"], r["part"], f"{r['quantity']} [{r['unit']}]", _num(r["a"]), _num(r["b"]),
                     f"<td{cls}>{'-' if d is None else f'{d:+.4g}'}</td>"])
    body.append("<h2>Per part, side by side</h2>" + _rows(["stage", "part", "quantity", "A", "B", "B - A"], rows))
    body.append("<h2>Figures</h2>" + _rows(["stage", "figure", "A and B", "largest pixel difference [of 255]"], [
        [s, f, "equal" if same else "differ", "-" if worst is None else worst] for s, f, same, worst in record["figures"]])
        + '<p class="notes">A stress figure is drawn for each part that carries the verdict, so a part can have a '
          "figure in one run only.</p>")
    for fig in record["differences"]:
        data = base64.b64encode((out / fig["file"]).read_bytes()).decode()
        body.append(f'<figure><img alt="{_e(fig["file"])}" src="data:image/png;base64,{data}"><figcaption>'
                    f"{_e(fig['file'])}: B - A from {fig['range'][0]:.4g} to {fig['range'][1]:.4g} {_e(fig['unit'])}"
                    "</figcaption></figure>")
    caution = f'<div class="caution"><b>Caution.</b> {_e(CAUTION)}</div>'
    return ("<!doctype html><html><head><meta charset='utf-8'><title>Comparison of two runs</title>"
            f"<style>{style.CSS}</style></head><body><main>" + "\n".join(body) + caution + "</main></body></html>")
