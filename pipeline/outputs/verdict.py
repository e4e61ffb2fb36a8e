"""What a run's summary says at a glance, and what went into it: the verdict, the loads and boundary
conditions, and the materials with the values used.  Pure functions of summary.json (read, never
solve), shared by the report and the end of a run on the command line.
"""

from __future__ import annotations


#: A margin below this (10 % of a limit or of the required safety factor) is "near".
NEAR = 0.1


def _state(margin: float | None) -> str:
    return "none" if margin is None else "fail" if margin < 0 else "near" if margin < NEAR else "pass"


def verdict(record: dict, limits_degC: dict[str, float], required: float) -> list[dict]:
    """The lines of the verdict, most important first: {"state": pass|near|fail|none, "text", "note"}.

    The hottest part against its limit (and the part nearest its limit, if another), the lowest safety
    factor with whether its peak sits at a singular feature (then the factor away from singular
    features beside it, when the figures found it), and every part that fails."""
    out = []
    heat = [(n, st) for n, st in record["stages"].items() if "parts_degC" in st]
    for name, st in heat:
        parts = st["parts_degC"]
        hot = max(parts, key=lambda p: parts[p]["max"])
        t = parts[hot]["max"]
        lim = limits_degC.get(hot)
        margin = None if lim is None else (lim - t) / abs(lim)
        out.append({"state": _state(margin), "text": f"Hottest part: {hot} at {t:.1f} degC"
                    + (f" (limit {lim:.0f} degC)" if lim is not None else " (no limit given)"), "note": ""})
        limited = {p: (limits_degC[p] - s["max"]) / abs(limits_degC[p]) for p, s in parts.items() if p in limits_degC}
        closest = min(limited, key=limited.get, default=None)
        if closest is not None and closest != hot:
            out.append({"state": _state(limited[closest]), "text": f"Nearest its limit: {closest} at "
                        f"{parts[closest]['max']:.1f} degC (limit {limits_degC[closest]:.0f} degC)", "note": ""})
    for name, st in record["stages"].items():
        rated = {p: f for p, f in st.get("parts", {}).items() if f.get("safety_factor") is not None}
        if not rated:
            continue
        low = min(rated, key=lambda p: rated[p]["safety_factor"])
        f = rated[low]
        singular, calm = _singular(st, low)
        note = ""
        if singular:
            note = ("the peak sits at a singular feature (a support or the edge of a bonded interface): it grows with "
                    "refinement and is not a strength check" + (f"; away from singular features the factor is "
                                                                f"{calm:.2f}" if calm else ""))
        out.append({"state": _state(f["safety_factor"] / required - 1),
                    "text": f"Lowest safety factor: {low}, {f['safety_factor']:.2f} against the required {required:g} "
                            f"({f['criterion'].split(':')[0]}, {f['strength_Pa'] / 1e6:.0f} MPa)", "note": note})
        failing = sorted((p for p, g in rated.items() if g["safety_factor"] < required),
                         key=lambda p: rated[p]["safety_factor"])
        if failing:
            flagged = {p: _singular(st, p) for p in failing}
            away = [f"{p} {c:.2f}" for p, (s, c) in flagged.items() if s and c]
            out.append({"state": "fail", "text": "Below the required safety factor: " + ", ".join(
                f"{p} {rated[p]['safety_factor']:.2f}" + ("*" if flagged[p][0] else "") for p in failing),
                "note": ("* peak at a singular feature" + (f"; away from singular features: {', '.join(away)}"
                                                           if away else "")) if any(s for s, _ in flagged.values()) else ""})
    for name, st in heat:
        hot = [p for p, s in st["parts_degC"].items() if p in limits_degC and s["max"] > limits_degC[p]]
        if hot:
            out.append({"state": "fail", "text": "Above the temperature limit: " + ", ".join(
                f"{p} {st['parts_degC'][p]['max']:.1f} degC (limit {limits_degC[p]:.0f})" for p in hot), "note": ""})
    return out


def _singular(st: dict, part: str) -> tuple[bool, float | None]:
    """Whether a part's peak sits at a singular feature, and its safety factor away from them, from the
    part's figures (issue 15 adds them to the stress result) or else from its stress figure's record."""
    f = st["parts"][part]
    if "peak_singular" in f:
        return bool(f["peak_singular"]), f.get("safety_factor_calm")
    for fig in st.get("figures", []):
        if fig.get("part") == part and "peak_singular" in fig:
            calm = f["strength_Pa"] / (fig["calm_peak_MPa"] * 1e6) if fig["peak_singular"] and fig["calm_peak_MPa"] > 0 else None
            return bool(fig["peak_singular"]), calm
    return False, None


def text(lines: list[dict]) -> str:
    """The verdict as plain text for the console (state in words: it must read without colour)."""
    word = {"pass": "ok  ", "near": "NEAR", "fail": "FAIL", "none": "info"}
    return "\n".join(f"  {word[v['state']]} {v['text']}" + (f"\n         note: {v['note']}" if v["note"] else "")
                     for v in lines)


def loads(record: dict) -> list[list[str]]:
    """Every load and boundary condition with its units: [stage, kind, where, value], from each stage
    kind's ``loads`` hook, and the element order and solver of every stage that solves."""
    from .. import kinds

    rows = []
    for name, st in record["stages"].items():
        o = st.get("inputs", {}).get("options", {})
        if st["kind"] in kinds.names():
            rows += kinds.hook(st["kind"], "loads")(name, st)
        if "order" in o:
            solver = st.get("solver", {})
            rows.append([name, "solution", "-", f"P{o['order']} elements, solver {o.get('solver', 'auto')}"
                         + (f" (used: {solver.get('method')}" + (f", {solver.get('backend')}" if solver.get("backend") else "")
                            + ")" if solver.get("method") else "")])
    return rows


#: Material properties shown, with their units, in this order.
PROPERTIES = (("conductivity", "W/(m K)", 1.0), ("youngs_modulus", "GPa", 1e-9), ("poisson_ratio", "-", 1.0),
              ("shear_modulus", "GPa", 1e-9), ("expansion", "1e-6/K", 1e6), ("yield_strength", "MPa", 1e-6),
              ("tensile_strength", "MPa", 1e-6))


def materials(record: dict) -> tuple[list[str], list[list[str]], list[str]]:
    """One table of the property values used (header, rows per part) and its footnotes: each value
    carries a footnote number pointing at its source."""
    used: dict[tuple[str, str], dict] = {}  # (part, material) -> properties read, and by which stages
    stages: dict[tuple[str, str], list[str]] = {}
    for name, st in record["stages"].items():
        for part, props in st.get("inputs", {}).get("materials", {}).items():
            key = (part, st.get("materials", {}).get(part, ""))
            used.setdefault(key, {}).update(props)
            stages.setdefault(key, []).append(name)
    shown = [p for p, _, _ in PROPERTIES if any(_present(m.get(p)) for m in used.values())]
    header = ["part", "material", "read by"] + [f"{p.replace('_', ' ')} [{u}]" for p, u, _ in PROPERTIES if p in shown]
    notes: list[str] = []
    rows = []
    for part, material in sorted(used):
        m = used[(part, material)]
        row = [part, material + (" (brittle)" if m.get("brittle") else ""), ", ".join(stages[(part, material)])]
        for prop, _, scale in PROPERTIES:
            if prop not in shown:
                continue
            v = m.get(prop)
            if not _present(v):
                row.append("-")
                continue
            values = v if isinstance(v, list) else [v]
            cell = " / ".join(f"{x * scale:.4g}" for x in values)
            source = _source(record, material, prop)
            if source not in notes:
                notes.append(source)
            row.append(f"{cell} [{notes.index(source) + 1}]")
        rows.append(row)
    return header, rows, notes


def _present(v) -> bool:
    return v is not None and v != []


def _source(record: dict, material: str, prop: str) -> str:
    """The source of one property: per property when the summary carries them, else the material's."""
    per_value = record.get("material_value_sources", {}).get(material, {})
    if prop in per_value:
        return per_value[prop]
    return record.get("material_sources", {}).get(material, "not recorded")
