"""``thermochain converge``: the workflow on successively refined meshes, and how its figures converge.

Meshes: uniform refinement of the workflow's mesh (every tetrahedron into eight, refinement ratio 2;
the geometry stays the coarse mesh's facets), or a given series of mesh files.  For each quantity, with
grids 1 (finest), 2, 3 and representative sizes h = (V/N)^(1/3), the procedure of Celik et al. (2008),
"Procedure for estimation and reporting of uncertainty due to discretization in CFD applications",
J. Fluids Eng. 130(7) 078001, which follows Roache (1994, 1998):

    eps21 = phi2 - phi1, eps32 = phi3 - phi2, R = eps21 / eps32 (monotone when 0 < R < 1)
    p = |ln|eps32 / eps21| + q(p)| / ln r21,  q(p) = ln((r21^p - s) / (r32^p - s)),  s = sign(eps32 / eps21)
    phi_ext = (r21^p phi1 - phi2) / (r21^p - 1)
    GCI_fine = Fs |(phi1 - phi2) / phi1| / (r21^p - 1),  Fs = 1.25 for three or more grids
      (Roache 1994, J. Fluids Eng. 116, 405-413; Roache 1998, Verification and Validation in Computational
      Science and Engineering, Hermosa), the value Celik et al. (2008) use
    asymptotic ratio GCI_32 / (r21^p GCI_21), near 1 in the asymptotic range (Roache 1998)

A quantity whose differences do not shrink (R >= 1), that oscillates (R < 0), whose observed order is
below 0.5, or a stress peak that lies on a support or on the edge of a bonded interface (where the
elastic stress is singular) is flagged as not converged and gets no GCI.
"""

from __future__ import annotations

import math
import time
from pathlib import Path

import numpy as np

from .. import __version__, errors, files
from ..flow import runner
from ..flow import workflow as wf
from ..kinds.stress import SINGULAR_PEAK
from ..model import mesh as mesh_mod
from ..model.units import length_factor
from ..outputs.summary import CAUTION, write_json, write_text
from . import page, quantities
from .sweep import toml_value

SAFETY_FACTOR = 1.25  # three or more grids with an observed order: Roache 1994, 1998; Celik et al. 2008
LOWEST_ORDER = 0.5    # below this an observed order is not trusted (the lower bound Oberkampf & Roy 2010 use
                      # when they limit p, from memory)


def gci(h: list[float], phi: list[float], safety_factor: float = SAFETY_FACTOR) -> dict:
    """Observed order, Richardson estimate and GCI from the three finest of ``h`` [any length unit] and
    ``phi`` (same order, any units); see the module docstring.  GCI values are fractions of |phi1|."""
    (h1, f1), (h2, f2), (h3, f3) = sorted(zip(h, phi))[:3]
    r21, r32 = h2 / h1, h3 / h2
    e21, e32 = f2 - f1, f3 - f2
    out = {"r21": r21, "r32": r32, "order": None, "extrapolated": None, "gci_fine": None, "gci_coarse": None,
           "asymptotic_ratio": None, "relative_change": abs(e21 / f1) if f1 else None}
    roundoff = 1e-12 * max(abs(f1), abs(f2), abs(f3), 1e-300)
    if abs(e21) <= roundoff and abs(e32) <= roundoff:
        return out | {"verdict": "unchanged", "gci_fine": 0.0, "extrapolated": f1,
                      "note": "the same value on every mesh (to round-off)"}
    if abs(e32) <= roundoff or e21 / e32 >= 1:
        return out | {"verdict": "diverging", "note": "the change does not shrink with refinement "
                                                      f"({f3:.6g}, {f2:.6g}, {f1:.6g}): not converged"}
    ratio = e21 / e32
    if ratio < 0:
        return out | {"verdict": "oscillating", "note": f"the change alternates in sign ({f3:.6g}, {f2:.6g}, "
                                                        f"{f1:.6g}): no order or GCI can be given"}
    s = 1.0  # sign(eps32 / eps21) for monotone convergence
    p = abs(math.log(abs(e32 / e21))) / math.log(r21)
    for _ in range(200):  # fixed-point iteration of Celik et al. (2008), eq. for p with q(p)
        q = math.log((r21**p - s) / (r32**p - s))
        new = abs(math.log(abs(e32 / e21)) + q) / math.log(r21)
        if abs(new - p) < 1e-12:
            break
        p = new
    p = new
    ext = (r21**p * f1 - f2) / (r21**p - 1)
    fine = safety_factor * abs(e21 / f1) / (r21**p - 1) if f1 else None
    coarse = safety_factor * abs(e32 / f2) / (r32**p - 1) if f2 else None
    out |= {"order": p, "extrapolated": ext, "gci_fine": fine, "gci_coarse": coarse,
            "extrapolated_error": abs((ext - f1) / ext) if ext else None,
            "asymptotic_ratio": coarse / (r21**p * fine) if fine and coarse else None}
    if p < LOWEST_ORDER:
        return out | {"verdict": "not converged", "gci_fine": None,
                      "note": f"observed order {p:.2f} is below {LOWEST_ORDER}: not in the asymptotic range, or "
                              "a singular quantity; no GCI is claimed", "gci_if_trusted": fine}
    note = ""
    if p > 3:  # linear and quadratic tetrahedra give at most 2 and 3 for temperatures and displacements
        note = (f"observed order {p:.2f} is above what linear or quadratic tetrahedra give (2 or 3): the meshes are "
                "probably not yet in the asymptotic range and the GCI may understate the error")
    return out | {"verdict": "converging", "note": note}


#: smallest ratio of element sizes between successive meshes (common practice; Celik et al. 2008 ask 1.3)
MIN_RATIO = 1.1
#: bytes per tetrahedron of a refined mesh while it is built and written (skfem connectivity, facets, edges;
#: measured order of magnitude, common practice)
MESH_BYTES_PER_TET = 400.0


def _distinct_files(files: list[Path]) -> None:
    """The same mesh given twice gives no error estimate (a 0 % change is no convergence)."""
    from ..flow.store import file_hash

    seen: dict[str, Path] = {}
    for f in files:
        digest = file_hash(f)
        if digest in seen:
            raise errors.InputError(f"--meshes: {f} is the same mesh as {seen[digest]} (identical content); give "
                                    "meshes of different sizes, coarse to fine")
        seen[digest] = f


def _room_for(domain: mesh_mod.Domain, levels: int, workflow) -> None:
    """Refuse, before refining, a number of levels whose finest mesh cannot fit in memory: each level has
    8 times the tetrahedra (and about 8 times the nodes) of the one before."""
    from ..stages import solvers

    def need(n: int) -> int:
        factor = 8 ** (n - 1)
        nodes, tets = len(domain.points) * factor, len(domain.tetrahedra) * factor
        solves = [0]
        for stage in workflow.stages.values():
            order, comps = getattr(stage, "order", 1), {"stress": 3}.get(stage.kind, 1)
            unknowns = comps * nodes * (7 if order == 2 else 1)  # P2: vertices and about 6 edges per vertex
            solves.append(solvers.estimate_memory(unknowns, order, comps, "amg"))
        return int(max(solves) + MESH_BYTES_PER_TET * tets)

    room = solvers.available_memory()
    if need(levels) <= room:
        return
    fits = max((n for n in range(1, levels) if need(n) <= room), default=1)
    raise errors.InputError(
        f"--levels {levels}: the finest mesh would have about {len(domain.tetrahedra) * 8 ** (levels - 1):,} "
        f"tetrahedra ({8 ** (levels - 1):,} times the workflow's mesh) and needs about {solvers._size(need(levels))}, "
        f"but {solvers._size(room)} is available; give --levels {fits} or fewer" + (
            "" if fits >= 3 else " (at least 3 are needed: start from a coarser mesh)"))


def refine(domain: mesh_mod.Domain, times: int, folder: Path) -> list[Path]:
    """Write the domain refined uniformly 1..``times`` times as MSH 2.2 files (named groups kept, in the
    domain's length unit); returns their paths."""
    import meshio

    folder.mkdir(parents=True, exist_ok=True)
    factor = length_factor(domain.unit)
    mesh = domain.mesh.with_subdomains({p: np.asarray(ids) for p, ids in domain.parts.items()})
    surfaces = {s: mesh.facets[:, ids].T for s, ids in domain.surfaces.items()}
    out = []
    for level in range(1, times + 1):
        coarse = mesh
        mesh = coarse.refined()
        surfaces = _child_facets(coarse, mesh, surfaces)
        t = mesh.t.T.copy()
        p = mesh.p.T
        vol = mesh_mod.signed_volumes(p, t)
        t[vol < 0, 2], t[vol < 0, 3] = t[vol < 0, 3].copy(), t[vol < 0, 2].copy()
        cells, tags, names = [], [], {}
        for tag, (name, tri) in enumerate(surfaces.items(), start=1):
            cells.append(("triangle", tri))
            tags.append(np.full(len(tri), tag))
            names[name] = np.array([tag, 2])
        for tag, name in enumerate(sorted(mesh.subdomains), start=1):
            ids = mesh.subdomains[name]
            cells.append(("tetra", t[ids]))
            tags.append(np.full(len(ids), tag))
            names[name] = np.array([tag, 3])
        file = folder / f"level_{level + 1}.msh"
        with files.replacing_path(file) as tmp:
            meshio.write(tmp, meshio.Mesh(p / factor, cells, cell_data={"gmsh:physical": tags,
                                                                        "gmsh:geometrical": tags}, field_data=names),
                         file_format="gmsh22", binary=True)
        out.append(file)
    return out


def _child_facets(coarse, fine, surfaces: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """The fine triangles (n, 3) lying in each coarse surface's triangles.  A fine vertex is a coarse
    vertex or an edge midpoint (numbered after the vertices in edge order); a fine facet lies in a coarse
    facet exactly when the coarse vertices behind its three vertices are three."""
    n0 = coarse.nvertices
    tri = fine.facets.T
    behind = np.where(tri[:, :, None] < n0, tri[:, :, None],
                      coarse.edges[:, np.maximum(tri - n0, 0)].transpose(1, 2, 0)).reshape(-1, 6)
    behind = np.sort(behind, axis=1)
    new = np.concatenate([np.ones((len(tri), 1), bool), behind[:, 1:] != behind[:, :-1]], axis=1)
    inside = new.sum(axis=1) == 3
    parent = behind[inside][new[inside]].reshape(-1, 3)
    children: dict[tuple, list[int]] = {}
    for i, key in zip(np.flatnonzero(inside).tolist(), map(tuple, parent.tolist())):
        children.setdefault(key, []).append(i)
    out = {}
    for name, triangles in surfaces.items():
        hits = [i for key in map(tuple, np.sort(triangles, axis=1).tolist()) for i in children.get(key, [])]
        out[name] = tri[np.array(hits, dtype=np.int64)].reshape(-1, 3)
    return out


def default_quantities(figures: dict) -> list[str]:
    """Peak temperatures, probe temperatures, peak displacement, probe and peak von Mises stresses."""
    return [n for n in figures if n.endswith(".max_degC") or n.endswith("_degC") and ".probes." in n
            or n.endswith(".displacement_max_mm") or n.endswith(".von_mises_MPa") or n.endswith(".von_mises_max_MPa")]


def run(path: str | Path, levels: int = 3, meshes: list[str] | None = None, names: list[str] | None = None,
        sets: list[str] | None = None, store: str | None = None, out: str | None = None, progress=None) -> dict:
    """Run the workflow on each mesh and write convergence.json/.csv/.html; returns the record."""
    say = progress or (lambda line: None)
    path = Path(path).resolve()
    base = wf.load(path, sets)
    folder = (Path(out) if out else Path(base.output.folder + "_convergence")).resolve()
    if meshes:
        files = [Path(f).resolve() for f in meshes]
        missing = [f"--meshes: mesh file not found: {f}" for f in files if not f.is_file()]
        if missing:
            raise errors.InputError(missing)
        if len(files) < 3:
            raise errors.InputError(f"--meshes: give at least 3 mesh files for an observed order, got {len(files)}")
        _distinct_files(files)
        method = f"a series of {len(files)} mesh files"
    else:
        if levels < 3:
            raise errors.InputError(f"--levels: at least 3 levels are needed for an observed order, got {levels}")
        coarse = mesh_mod.load(base.mesh.file, unit=base.mesh.unit)
        _room_for(coarse, levels, base)
        say(f"refining {base.mesh.file} {levels - 1} times (x8 tetrahedra each)")
        files = [Path(base.mesh.file).resolve()] + refine(coarse, levels - 1, folder / "meshes")
        method = f"uniform refinement of {Path(base.mesh.file).name}, {levels} levels, ratio 2"
    record = {"thermochain": __version__, "workflow": str(path), "folder": str(folder), "method": method,
              "basis": f"Observed order, Richardson estimate and GCI from the three finest meshes; safety factor "
                       f"{SAFETY_FACTOR} (three or more grids: Roache 1994, 1998; Celik et al. 2008).",
              "safety_factor": SAFETY_FACTOR, "levels": [], "caution": CAUTION}
    sized = []
    for file in files:  # coarse to fine by h = (V/N)^(1/3)
        domain = mesh_mod.load(file, unit=base.mesh.unit)
        volume = float(domain.element_volumes.sum())
        sized.append(((volume / len(domain.tetrahedra)) ** (1 / 3), file, len(domain.tetrahedra), volume))
    sized.sort(key=lambda item: -item[0])
    for (h1, f1, *_), (h2, f2, *_) in zip(sized, sized[1:]):
        if h1 / h2 < MIN_RATIO:
            raise errors.InputError(f"--meshes: {f1.name} and {f2.name} have nearly the same element size (ratio "
                                    f"{h1 / h2:.3f}); each mesh must be finer than the last by at least {MIN_RATIO} "
                                    "in h (Celik et al. 2008 recommend more than 1.3), or the error estimate is "
                                    "meaningless")
    figures = []
    quiet = ["output.vtu=false", "output.figures=false", "output.report=false"]
    for i, (h, file, count, volume) in enumerate(sized):
        t0 = time.perf_counter()
        say(f"level {i + 1}: {file.name}, {count} tetrahedra")
        rec = runner.run(path, list(sets or []) + [f"mesh.file={toml_value(str(file))}"] + quiet, store,
                         str(folder / f"level_{i + 1}"), progress=say)
        record["levels"].append({"mesh": str(file), "tetrahedra": count, "volume_m3": volume, "h_m": h,
                                 "seconds": time.perf_counter() - t0, "warnings": rec.get("warnings", []),
                                 "warning_records": rec.get("warning_records", [])})
        figures.append(quantities.flatten(rec))
        if i == 0:  # a misspelt name is reported before the finer meshes are run
            names = names or default_quantities(figures[0])
            quantities.check_names(names, figures[0], "--quantity")
    h = [lv["h_m"] for lv in record["levels"]]
    record["quantities"] = [_quantity(n, h, [f.get(n) for f in figures], record) for n in names]
    _write(folder, record, names)
    return record


def _quantity(name: str, h: list[float], values: list, record: dict) -> dict:
    q = {"name": name, "values": values}
    if any(v is None for v in values):
        return q | {"verdict": "n/a", "note": "not defined on every mesh"}
    q |= gci(h, values, SAFETY_FACTOR)
    stage, _, rest = name.partition(".")
    part = rest.split(".")[0]
    quantity = rest.split(".")[-1].removesuffix("_MPa").removesuffix("_max")
    if any(w["code"] == SINGULAR_PEAK and w["where"] == stage and w["data"].get("part") == part
           and quantity in w["data"].get("quantities", ["von_mises"])
           for w in record["levels"][-1]["warning_records"]):
        q |= {"verdict": "singular", "gci_fine": None,
              "note": "the peak lies on a support or on the edge of a bonded interface, where the elastic "
                      "stress is singular and grows with refinement; not a converged value"
                      + (f" (observed order {q['order']:.2f} would suggest otherwise)" if q.get("order") else "")}
    return q


def _write(folder: Path, record: dict, names: list[str]) -> None:
    import csv
    import io

    folder.mkdir(parents=True, exist_ok=True)
    write_json(folder / "convergence.json", record)
    text = io.StringIO()
    w = csv.writer(text)
    n = len(record["levels"])
    w.writerow(["quantity"] + [f"level_{i + 1}" for i in range(n)]
               + ["order", "extrapolated", "gci_fine", "asymptotic_ratio", "verdict", "note"])
    for q in record["quantities"]:
        w.writerow([q["name"]] + q["values"] + [q.get(k) for k in ("order", "extrapolated", "gci_fine",
                                                                   "asymptotic_ratio", "verdict", "note")])
    write_text(folder / "convergence.csv", text.getvalue())
    page.convergence_html(folder / "convergence.html", record)


def describe(record: dict) -> str:
    """The table for the terminal."""
    lines = [f"convergence of {record['workflow']}: {record['method']}",
             "levels: " + ", ".join(f"{lv['tetrahedra']} tetrahedra (h {lv['h_m'] * 1e3:.3g} mm)" for lv in record["levels"])]
    for q in record["quantities"]:
        vals = ", ".join("n/a" if v is None else f"{v:.6g}" for v in q["values"])
        extra = ""
        if q.get("order") is not None:
            extra = f"; p {q['order']:.2f}, Richardson {q['extrapolated']:.6g}"
        if q.get("gci_fine") is not None:
            extra += f", GCI {100 * q['gci_fine']:.3g} %"
        lines.append(f"{q['name']}: {vals}{extra}; {q['verdict']}" + (f" ({q['note']})" if q.get("note") else ""))
    lines.append(f"table: {Path(record['folder']) / 'convergence.csv'}; page: {Path(record['folder']) / 'convergence.html'}")
    return "\n".join(lines)
