"""Everything a run leaves for people: VTU files with a PVD collection, figures, warnings, report.html.

Reads results, never solves; used by the runner after the stages and by ``thermochain report``.
"""

from __future__ import annotations

import logging
from pathlib import Path
from xml.sax.saxutils import quoteattr

import numpy as np

from ..model.units import celsius
from . import figures, report, vtu

log = logging.getLogger(__name__)


def write(folder: Path, record: dict, results: dict, domains: dict, options, limits_K: dict[str, float],
          previous: dict | None = None) -> None:
    """Write the results folder's files for the stages in ``record`` and update ``record`` in place.

    A VTU file that the ``previous`` summary of this folder wrote for the same stage key (same result,
    same mesh) is kept as it is."""
    folder.mkdir(parents=True, exist_ok=True)
    written = []
    before = (previous or {}).get("stages", {})
    for name, st in record["stages"].items():
        if options.vtu and st["kind"] in ("heat", "stress"):
            old = before.get(name, {})
            if old.get("key") == st["key"] and old.get("vtu") and (folder / old["vtu"]).is_file():
                st["vtu"] = old["vtu"]
            else:
                st["vtu"] = vtu.write(folder / f"{name}.vtu", domains[name], results[name]).name
            written.append(st["vtu"])
    if written:
        _pvd(folder / "results.pvd", written)
        record["pvd"] = "results.pvd"
    limits = {p: float(celsius(t)) for p, t in limits_K.items()}
    if options.figures:
        try:
            _figures(folder, record, results, domains, limits, options.required_safety_factor)
        except Exception as exc:  # rendering depends on the machine's graphics libraries
            log.warning("figures were not drawn (%s: %s); the results are complete without them",
                        type(exc).__name__, exc)
            record.setdefault("notices", []).append(f"figures not drawn: {type(exc).__name__}: {exc}")
    record["warnings"] = warnings(record, results, domains, limits, options.required_safety_factor)
    if options.report:
        record["report"] = report.build(folder, record, limits, options.required_safety_factor,
                                        record["warnings"]).name


def _pvd(path: Path, files: list[str]) -> None:
    rows = "\n".join(f'    <DataSet timestep="{i}" group="" part="0" file={quoteattr(f)}/>'
                     for i, f in enumerate(files))
    path.write_text('<?xml version="1.0"?>\n<VTKFile type="Collection" version="0.1">\n  <Collection>\n'
                    f"{rows}\n  </Collection>\n</VTKFile>\n")


def _figures(folder, record, results, domains, limits, required) -> None:
    for name, st in record["stages"].items():
        result, domain = results[name], domains[name]
        if st["kind"] == "heat":
            st["figures"] = [
                figures.temperature_outside(folder / f"{name}_outside.png", domain, result),
                figures.temperature_cut(folder / f"{name}_cut.png", domain, result),
                figures.part_temperatures(folder / f"{name}_parts.png", st["parts_degC"], limits),
            ]
        elif st["kind"] == "stress":
            st["figures"] = [figures.von_mises_deformed(folder / f"{name}_von_mises.png", domain, result)]
            if any(f["safety_factor"] is not None for f in st["parts"].values()):
                st["figures"].append(figures.safety_factors(folder / f"{name}_safety.png", st["parts"], required))


def warnings(record, results, domains, limits, required) -> list[str]:
    """What a reader must not miss: open boundaries, limits exceeded, singular peaks, over-constraint."""
    out = []
    for name, st in record["stages"].items():
        if st["kind"] == "heat":
            open_ = [a for a in st["adiabatic_surfaces"] if a not in st.get("adiabatic_intended", [])]
            if open_:
                out.append(f"{name}: adiabatic (no heat leaves): {', '.join(open_)}; check that no convection or "
                           "fixed temperature was forgotten (list intended ones under 'adiabatic')")
            for part, s in st["parts_degC"].items():
                if part in limits and s["max"] > limits[part]:
                    out.append(f"{name}: part {part} reaches {s['max']:.1f} degC, above its limit {limits[part]:.1f} degC")
            out += [f"{name}: {n}" for n in st.get("notices", [])]
        elif st["kind"] == "map" and st["diagnostics"].get("outside"):
            d = st["diagnostics"]
            out.append(f"{name}: {d['outside']} structural points lay outside the temperature source (up to "
                       f"{d['max_distance_m'] * 1e3:.3g} mm) and took the nearest value")
        elif st["kind"] == "stress":
            out += _stress_warnings(name, st, domains[name], required)
    return out


def _stress_warnings(name, st, domain, required) -> list[str]:
    out = []
    edges = _singular_nodes(domain, st.get("support_surfaces", []))
    for part, f in st["parts"].items():
        where = np.asarray(f["von_mises_max_at_m"])
        node = int(np.argmin(np.linalg.norm(domain.points - where, axis=1)))
        if np.linalg.norm(domain.points[node] - where) < 1e-12 and node in edges:
            out.append(f"{name}: the peak von Mises of {part} lies on a support or on the edge of a bonded "
                       "interface, where stresses are singular and grow with refinement; do not compare this "
                       "peak with a strength without a convergence study")
        if f["safety_factor"] is not None and f["safety_factor"] < required:
            out.append(f"{name}: part {part} has a safety factor {f['safety_factor']:.2f}, below the required "
                       f"{required:g} ({f['criterion']})")
    if st.get("fixed_supports") and st.get("reads"):
        out.append(f"{name}: fixed supports ({', '.join(st['fixed_supports'])}) restrain free thermal expansion; "
                   "stresses near them are partly an artefact of the support model (consider springs or the "
                   "minimal support)")
    return out


def _singular_nodes(domain, support_surfaces: list[str]) -> set[int]:
    """Nodes on support surfaces and on the boundary edges of interfaces."""
    nodes = set()
    for s in support_surfaces:
        if s in domain.surfaces:
            nodes.update(np.unique(domain.mesh.facets[:, domain.surfaces[s]]).tolist())
    boundary = set(np.unique(domain.mesh.facets[:, domain.boundary_facets()]).tolist())
    for facets in domain.interfaces.values():
        nodes.update(set(np.unique(domain.mesh.facets[:, facets]).tolist()) & boundary)
    return nodes
