"""What a study leaves for people: CSV tables, PNG plots (matplotlib, Agg) and one HTML page.

Reads study records, never solves.  The page reuses the run report's style and table helper and carries
the project's caution at its top and bottom.
"""

from __future__ import annotations

import base64
import csv
import io
import math
import re
from pathlib import Path

import numpy as np

from .. import files
from ..outputs.report import STYLE, escape, table
from ..outputs.summary import CAUTION, write_text


def _cell(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return f"{value:.6g}"
    return str(value)


def table_csv(record: dict, names: list[str]) -> str:
    """One row per variant: id, status, swept values, stage statuses, every figure, error."""
    rows = record["rows"]
    keys = [k for a in record["axes"] for k in a["keys"]]
    stages = sorted({s for r in rows for s in r.get("stages", {})})
    figures = list(dict.fromkeys(names + [n for r in rows for n in r.get("figures", {})]))
    out = io.StringIO()
    w = csv.writer(out)
    w.writerow(["id", "status"] + keys + [f"{s}_stage" for s in stages] + figures + ["error"])
    for r in rows:
        w.writerow([r["id"], r["status"]] + [_cell(r["values"].get(k)) for k in keys]
                   + [r.get("stages", {}).get(s, "") for s in stages]
                   + [_cell(r.get("figures", {}).get(n)) for n in figures] + [r.get("error", "")])
    return out.getvalue()


def _numeric(values: list) -> tuple[list[float], str] | None:
    """Numbers for the x axis: plain numbers, or strings "NUMBER UNIT" with one unit; else None."""
    if all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in values):
        return [float(v) for v in values], ""
    parsed = [re.fullmatch(r"\s*([-+0-9.eE]+)\s*(.*?)\s*", v) if isinstance(v, str) else None for v in values]
    if all(parsed) and len({m.group(2) for m in parsed}) == 1:
        try:
            return [float(m.group(1)) for m in parsed], parsed[0].group(2)
        except ValueError:
            return None
    return None


def sweep_plots(folder: Path, record: dict, names: list[str], against: str) -> list[dict]:
    """One PNG per figure: the figure against the swept value ``against``, one line per other combination."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    rows = [r for r in record["rows"] if r["status"] != "failed"]
    axis = next(a for a in record["axes"] if against in a["keys"])
    xs_raw = [v[axis["keys"].index(against)] for v in axis["values"]]
    numeric = _numeric(xs_raw)
    xs = numeric[0] if numeric else list(range(len(xs_raw)))
    others = [k for a in record["axes"] if a is not axis for k in a["keys"][:1]]
    out = []
    for name in names:
        fig, ax = plt.subplots(figsize=(6.4, 4.0), dpi=110)
        groups: dict[tuple, dict] = {}
        for r in rows:
            label = tuple(_cell(r["values"][k]) for k in others)
            groups.setdefault(label, {})[_cell(r["values"][against])] = r["figures"].get(name)
        for label, by_x in groups.items():
            pts = [(x, by_x.get(_cell(raw))) for x, raw in zip(xs, xs_raw)]
            pts = [(x, y) for x, y in pts if y is not None and math.isfinite(y)]
            if pts:
                ax.plot(*zip(*pts), marker="o", label=", ".join(label) or None)
        if not numeric:
            ax.set_xticks(xs, [_cell(v) for v in xs_raw])
        ax.set_xlabel(against + (f" [{numeric[1]}]" if numeric and numeric[1] else ""))
        ax.set_ylabel(name)
        ax.grid(True, alpha=0.3)
        if any(label for label in groups):
            ax.legend(fontsize=8, title=", ".join(others), title_fontsize=8)
        fig.tight_layout()
        file = re.sub(r"[^A-Za-z0-9_.-]+", "_", name) + ".png"
        with files.replacing_path(folder / file) as tmp:
            fig.savefig(tmp, format="png")
        plt.close(fig)
        out.append({"figure": name, "file": file, "against": against})
    sensitivity = tornado(folder, record, names) if len(record["axes"]) > 1 else None
    return out + ([sensitivity] if sensitivity else [])


def tornado(folder: Path, record: dict, names: list[str], file: str = "tornado.png") -> dict | None:
    """Sensitivity of each figure to each swept axis, from the sweep's own runs: the other axes held at
    their middle values, the bar spans the figure's change from that baseline over the axis's values
    (ends labelled with the values reached).  One panel per figure, axes sorted by span; None when
    the baseline run is missing or failed."""
    from matplotlib.figure import Figure
    import matplotlib as mpl

    from ..outputs import style

    axes = record["axes"]
    index = {}
    for r in record["rows"]:
        if r["status"] == "failed":
            continue
        try:
            at = tuple([list(v) for v in a["values"]].index([r["values"][k] for k in a["keys"]]) for a in axes)
        except ValueError:
            continue
        index[at] = r["figures"]
    middle = tuple(len(a["values"]) // 2 for a in axes)
    if middle not in index:
        return None
    panels = []
    for name in names:
        base = index[middle].get(name)
        if base is None or not math.isfinite(base):
            continue
        bars = []
        for i, a in enumerate(axes):
            got = [(index[at][name], j) for j in range(len(a["values"]))
                   if (at := middle[:i] + (j,) + middle[i + 1:]) in index and index[at].get(name) is not None]
            if len(got) > 1:
                (lo, jl), (hi, jh) = min(got), max(got)
                label = lambda j: ", ".join(_cell(x) for x in a["values"][j][:1])
                bars.append((a["keys"][0] + (f" (+{len(a['keys']) - 1})" if len(a["keys"]) > 1 else ""),
                             lo - base, hi - base, label(jl), label(jh)))
        if bars:
            panels.append((name, base, sorted(bars, key=lambda b: b[2] - b[1])))
    if not panels:
        return None
    with mpl.rc_context(style.rc()):
        fig = Figure(figsize=(8.0, 1.2 + sum(0.5 * len(p[2]) + 0.9 for p in panels)), dpi=style.DPI)
        grid = fig.subplots(len(panels), 1, squeeze=False,
                            gridspec_kw={"height_ratios": [len(p[2]) + 1 for p in panels]})[:, 0]
        for ax, (name, base, bars) in zip(grid, panels):
            y = np.arange(len(bars))
            ax.barh(y, [b[2] - b[1] for b in bars], left=[b[1] for b in bars], color=style.PASS,
                    edgecolor=style.INK, linewidth=0.6)
            for k, (_, lo, hi, vlo, vhi) in enumerate(bars):
                if hi - lo <= 1e-12 * max(abs(base), 1e-300):
                    ax.annotate("no change", (0, k), xytext=(6, 0), textcoords="offset points", va="center", fontsize=8)
                    continue
                ax.annotate(vlo, (lo, k), xytext=(-4, 0), textcoords="offset points", ha="right", va="center", fontsize=8)
                ax.annotate(vhi, (hi, k), xytext=(4, 0), textcoords="offset points", ha="left", va="center", fontsize=8)
            ax.axvline(0, color=style.INK, linewidth=1.0)
            ax.set_yticks(y, [b[0] for b in bars], fontsize=8)
            ax.set_title(f"{name} (baseline run: {base:.4g})", fontsize=10)
            span = max(max(abs(b[1]), abs(b[2])) for b in bars) or 1.0
            ax.set_xlim(-1.6 * span, 1.6 * span)
        grid[-1].set_xlabel("change from the baseline run (other axes at their middle values), in the figure's unit")
        fig.tight_layout()
        fig.savefig(folder / file)
    return {"figure": ", ".join(p[0] for p in panels), "file": file, "against": "each swept axis (tornado chart)",
            "baseline": {k: _cell(v) for a, j in zip(axes, middle) for k, v in zip(a["keys"], a["values"][j])},
            "bars": {p[0]: [list(b) for b in p[2]] for p in panels}}


def _img(folder: Path, file: str, caption: str) -> str:
    data = base64.b64encode((folder / file).read_bytes()).decode()
    return (f'<figure><img alt="{escape(file)}" src="data:image/png;base64,{data}">'
            f"<figcaption>{escape(caption)}</figcaption></figure>")


def _page(title: str, body: list[str]) -> str:
    caution = f'<div class="caution"><b>Caution.</b> {escape(CAUTION)}</div>'
    return "\n".join([f"<!doctype html><html><head><meta charset='utf-8'><title>{escape(title)}</title>"
                      f"<style>{STYLE}</style></head><body><h1>{escape(title)}</h1>", caution] + body
                     + [caution, "</body></html>"])


def sweep_html(path: Path, record: dict, names: list[str]) -> None:
    """sweep.html: the sweep section (axes, linearity, executor, counts), the table, failures, plots."""
    keys = [k for a in record["axes"] for k in a["keys"]]
    body = [f"<p>Workflow <code>{escape(record['workflow'])}</code>, sweep definition <code>{escape(record['definition'])}"
            f"</code>, thermochain {escape(record['thermochain'])}; {record['variants']} variants on "
            f"{escape(record.get('executor', ''))}, {record.get('seconds', 0):.1f} s.</p>", "<h2>Sweep</h2>",
            table(["axis", "key paths", "values"], [[i + 1, ", ".join(a["keys"]), "; ".join(
                ", ".join(_cell(x) for x in v) for v in a["values"])] for i, a in enumerate(record["axes"])]),
            "<p>Axes are combined as a full grid; key paths listed together on one axis change together.</p>",
            "<h2>Linearity</h2>" + "".join(f"<p>{escape(r['reason'])}</p>" for r in record.get("linearity", {}).values()),
            "<h2>Stage results</h2>" + table(["stage", "computed", "superposed", "reused"], [
                [s, c.get("computed", 0), c.get("superposed", 0), c.get("reused", 0)]
                for s, c in record.get("counts", {}).get("stages", {}).items()]),
            "<h2>Variants</h2>" + table(["id", "status"] + keys + names, [
                [r["id"], r["status"]] + [_cell(r["values"].get(k)) for k in keys]
                + [_cell(r.get("figures", {}).get(n)) for n in names] for r in record["rows"]])]
    failed = [r for r in record["rows"] if r["status"] == "failed"]
    if failed:
        body.append("<h2>Failed variants</h2>" + table(["id", "values", "error"], [
            [r["id"], ", ".join(f"{k} = {_cell(v)}" for k, v in r["values"].items()), r.get("error", "")]
            for r in failed]))
    seen: dict[str, int] = {}
    for r in record["rows"]:
        for w in r.get("warnings", []):
            seen[w] = seen.get(w, 0) + 1
    if seen:
        body.append("<h2>Warnings of the variants</h2>" + table(["warning", "variants"], [[w, n] for w, n in seen.items()]))
    for note in record.get("notices", []):
        body.append(f'<p class="warn">{escape(note)}</p>')
    for p in record.get("plots", []):
        body.append(_img(path.parent, p["file"], f"{p['figure']} against {p['against']}"))
    write_text(path, _page(f"Sweep of {Path(record['workflow']).name}", body))


def convergence_html(path: Path, record: dict) -> None:
    """convergence.html: the levels, and per quantity its values, observed order, Richardson estimate, GCI."""
    levels = record["levels"]
    body = [f"<p>Workflow <code>{escape(record['workflow'])}</code>, thermochain {escape(record['thermochain'])}, "
            f"{escape(record['method'])}.</p>", "<h2>Meshes</h2>",
            table(["level", "mesh", "tetrahedra", "h = (V/N)^(1/3) [mm]", "seconds"], [
                [i + 1, Path(lv["mesh"]).name, lv["tetrahedra"], f"{lv['h_m'] * 1e3:.4g}", f"{lv['seconds']:.1f}"]
                for i, lv in enumerate(levels)]),
            f"<p>{escape(record['basis'])}</p>", "<h2>Quantities</h2>",
            table(["quantity"] + [f"level {i + 1}" for i in range(len(levels))]
                   + ["observed order p", "Richardson estimate", "GCI fine [%]", "asymptotic ratio", "verdict"], [
                [q["name"]] + [_cell(v) for v in q["values"]]
                + [_cell(q.get("order")), _cell(q.get("extrapolated")),
                   "" if q.get("gci_fine") is None else f"{100 * q['gci_fine']:.3g}",
                   _cell(q.get("asymptotic_ratio")), q["verdict"]] for q in record["quantities"]])]
    body += [f"<p>{escape(q['name'])}: {escape(q['note'])}</p>" for q in record["quantities"] if q.get("note")]
    write_text(path, _page(f"Mesh convergence of {Path(record['workflow']).name}", body))
