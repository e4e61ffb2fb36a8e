"""Run a workflow: plan the stages in dependency order, reuse what the store holds, compute the rest.

The runner wires model, stages, store and outputs together; it holds no physics.  Every decision has
a reason a user can read before the run (``check``) and after it (``summary.json``).
"""

from __future__ import annotations

import json
import logging
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .. import __version__, errors, kinds
from ..kinds.base import Context, OutputContext, StagePlan
from ..model import materials as materials_mod
from ..model import mesh as mesh_mod
from ..notices import Notice
from ..outputs import publish, summary
from . import folders
from . import store as store_mod
from . import workflow as wf

log = logging.getLogger(__name__)

__all__ = ["Plan", "StagePlan", "plan", "check", "decisions", "run", "execute", "report", "store_root"]


@dataclass
class Plan:
    path: Path
    workflow: object
    stages: list[StagePlan]
    store: store_mod.Store
    folder: Path
    domain: mesh_mod.Domain


def store_root(path: Path | None, option: str | None) -> Path:
    """The store every command uses (``store.root``): --store, else $THERMOCHAIN_STORE, else the user's
    cache folder; the same whatever the workflow's folder (``path`` is not read)."""
    return store_mod.root(option)


def plan(path: str | Path, sets: list[str] | None = None, store: str | None = None,
         out: str | None = None) -> Plan:
    """Validate everything the run will read and compute each stage's key; every input problem at once,
    across phases: a schema error in one stage does not hide a misspelt name in another."""
    path = Path(path)
    workflow, problems, left_out = wf.load_sections(path, sets)
    domains: dict[tuple[str, str], mesh_mod.Domain] = {}

    def domain_of(section, key: str = "mesh") -> mesh_mod.Domain:
        k = (section.file, section.unit)
        if k not in domains:
            if not Path(section.file).is_file():
                raise errors.MeshError(f"{path}: {key}.file: mesh file not found: {section.file} (a path relative "
                                       "to the workflow file)")
            domains[k] = _joined(_load_mesh(Path(section.file), section.unit), workflow, path,
                                 strict=section is workflow.mesh)
        return domains[k]

    if workflow is None:  # the mesh or the parts table itself is unusable: nothing to check names against
        raise errors.InputError(problems)
    try:
        main = domain_of(workflow.mesh)
    except errors.InputError as exc:
        raise errors.InputError(problems + exc.records) from None
    library = materials_mod.library()
    broken: set[str] = set()  # inline materials with problems: reported once, not again as unknown names
    for name, record in workflow.materials.items():
        try:
            library = library.extended({name: record}, f"{path}: [materials]")
        except errors.InputError as exc:
            problems += exc.records
            broken.add(name)
    for part in main.parts:
        if part not in workflow.parts:
            problems.append(f"{path}: mesh part '{part}' has no entry in [parts]; give it a material")
    for part in workflow.parts:
        if part not in main.parts:
            problems.append(errors.unknown_name("part", part, main.parts, f"{path}: parts"))
    ctx = Context(path, workflow, main, library, store_mod.versions(), _probes(workflow, main, path, problems),
                  domain_of, broken=broken, kinds={n: s.kind for n, s in workflow.stages.items()})
    failed: set[str] = set(left_out)  # their schema problems are reported already
    stages: list[StagePlan] = []
    for name in _order(workflow):
        stage = workflow.stages[name]
        where = f"{path}: stages.{name}"
        if any(s in failed for s in kinds.base.upstream_names(stage)):
            failed.add(name)  # its source's problems are reported already
            continue
        try:
            planned = kinds.get(stage.kind).plan(ctx, name, stage, where)
        except errors.InputError as exc:
            problems += exc.records
            failed.add(name)
            continue
        stages.append(kinds.base.finish(planned, where, stage))
        ctx.planned[name] = planned
    folder = Path(out) if out else Path(workflow.output.folder)
    where = f"{path}: output.folder" if not out else "--out"
    problems += folders.results_problems(folder, where)
    chosen = store_mod.Store(store_root(path, store))
    try:
        chosen.check()
    except errors.InputError as exc:
        problems += exc.records
    if problems:
        raise errors.InputError(problems)  # once each: a part's material is read by several stages
    return Plan(path, workflow, stages, chosen, folder, main)


_MESHES: dict[tuple, mesh_mod.Domain] = {}


def _load_mesh(file: Path, unit: str) -> mesh_mod.Domain:
    """A mesh read once per process while its file is unchanged (a sweep plans hundreds of variants of one
    workflow: one Domain, not one per variant); the last few files are kept."""
    info = file.stat()
    k = (str(file.resolve()), unit, info.st_size, info.st_mtime_ns)
    if k not in _MESHES:
        _MESHES[k] = mesh_mod.load(file, unit=unit)
        while len(_MESHES) > 4:
            _MESHES.pop(next(iter(_MESHES)))
    return _MESHES[k]


def _joined(domain: mesh_mod.Domain, workflow, path: Path, strict: bool) -> mesh_mod.Domain:
    """The domain with the workflow's [interfaces] applied (split contacts, ties); on a mesh other than
    the workflow's own, only the joints whose parts it has."""
    joints = {name: mesh_mod.Joint(j.kind, tuple(j.parts) if j.parts else None, j.surface)
              for name, j in workflow.interfaces.items()
              if strict or (set(j.parts or ()) <= set(domain.parts) and (j.surface is None or j.surface in domain.surfaces))}
    return mesh_mod.join(domain, joints, f"{path}: interfaces") if joints else domain


def _order(workflow) -> list[str]:
    """Stage names with every source before the stages that read it (file order otherwise)."""
    done: list[str] = []

    def visit(name: str, seen: tuple = ()) -> None:
        if name in done or name in seen:
            return
        for source in kinds.base.upstream_names(workflow.stages[name]):
            if source in workflow.stages:
                visit(source, seen + (name,))
        done.append(name)

    for name in workflow.stages:
        visit(name)
    return done


def _probes(workflow, domain, path: Path, problems: list) -> dict[str, tuple]:
    """The workflow's probes inside the mesh; each one outside is reported once, with the mesh's extent."""
    probes = {p: tuple(xyz) for p, xyz in workflow.probes.items()}
    inside = domain.contains(np.array(list(probes.values())).reshape(-1, 3))
    lo, hi = domain.bounding_box
    for (name, xyz), ok in zip(probes.items(), inside):
        if not ok:
            problems.append(f"{path}: probes.{name}: probe '{name}' at {list(xyz)} m is outside the mesh "
                            f"{workflow.mesh.file}; its bounding box is {lo.tolist()} to {hi.tolist()} m")
    return {p: xyz for (p, xyz), ok in zip(probes.items(), inside) if ok}


def decisions(p: Plan, rerun: list[str] | None = None, previous: dict | None = None) -> dict[str, tuple[bool, str]]:
    """For each stage: (reuse?, reason), as the run would decide, without computing anything."""
    out = {}
    changed: set[str] = set()
    for s in p.stages:
        hit = p.store.holds(s.kind, s.key)
        forced = s.name in (rerun or [])
        out[s.name] = (hit and not forced, _reason(s, hit, forced, previous, changed))
        if not (hit and not forced):
            changed.add(s.name)
    return out


def _reason(s: StagePlan, hit: bool, forced: bool, previous: dict | None, changed: set[str]) -> str:
    if forced:
        return f"{s.name} recomputed: --rerun {s.name}"
    old = ((previous or {}).get("stages") or {}).get(s.name, {}).get("inputs")
    if hit:
        if old is None or old == s.inputs:
            return f"{s.name} reused: nothing it reads changed"
        return f"{s.name} reused: an entry for exactly these inputs is in the store"
    if old is None:
        return f"{s.name} computed: not in the store"
    return f"{s.name} recomputed: {_what_changed(old, s.inputs, ', '.join(s.reads) or None, changed)}"


def _what_changed(old: dict, new: dict, source: str | None, changed: set[str]) -> str:
    parts = []
    om, nm = old.get("materials", {}), new.get("materials", {})
    for part in sorted(set(om) | set(nm)):
        props = sorted(k for k in set(om.get(part, {})) | set(nm.get(part, {}))
                       if om.get(part, {}).get(k) != nm.get(part, {}).get(k))
        if props:
            parts.append(f"part {part} changed material ({', '.join(props)})")
    diffs = _diff(old.get("options", {}), new.get("options", {}))
    if diffs:
        parts.append(f"options changed ({', '.join(diffs)})")
    if old.get("upstream") != new.get("upstream") or old.get("file_sha256") != new.get("file_sha256"):
        parts.append(f"its source {source} changed" if source else "its field file changed")
    for keyname, text in (("mesh", "the mesh changed"), ("probes", "the probes changed"),
                          ("versions", "library versions changed"), ("version", "the stage's code changed")):
        if old.get(keyname) != new.get(keyname):
            parts.append(text)
    return "; ".join(parts) or "its inputs changed"


def _diff(a, b, prefix="") -> list[str]:
    if isinstance(a, dict) and isinstance(b, dict):
        out = []
        for k in sorted(set(a) | set(b)):
            out += _diff(a.get(k), b.get(k), f"{prefix}{k}.")
        return out
    return [prefix.rstrip(".")] if a != b else []


def check(path, sets=None, store=None, out=None, rerun=None) -> tuple[Plan, dict]:
    """Validate without solving; returns the plan and each stage's (reuse?, reason)."""
    p = plan(path, sets, store, out)
    return p, decisions(p, rerun, _previous(p.folder))


def _previous(folder: Path) -> dict | None:
    try:
        return json.loads((folder / "summary.json").read_text())
    except (OSError, ValueError):
        return None


def run(path, sets=None, store=None, out=None, rerun=None, progress=None) -> dict:
    """Run the workflow and write its results folder; returns the summary (see ``execute``)."""
    return execute(path, sets, store, out, rerun, progress).summary


def execute(path, sets=None, store=None, out=None, rerun=None, progress=None):
    """Run the workflow and write its results folder; returns a ``pipeline.results.Run`` holding the
    summary and each stage's result and domain.

    progress: optional callable receiving one line per stage event (start, end with solver figures)."""
    from ..results import Run

    started = time.perf_counter()
    say = progress or (lambda line: None)
    p = plan(path, sets, store, out)
    with folders.results_lock(p.folder, say):
        return _execute(p, sets, rerun, say, started)


def _execute(p: Plan, sets, rerun, say, started):
    """The run of ``execute`` on a planned workflow, its results folder locked."""
    from ..results import Run

    previous = _previous(p.folder)
    plan_decisions = decisions(p, rerun, previous)
    record = _header(p) | {"sets": list(sets or []), "folder": str(p.folder)}
    results, domains = {}, {}
    for s in p.stages:
        t0 = time.perf_counter()
        reuse, reason = plan_decisions[s.name]
        kind = kinds.get(s.kind)
        entry = {"kind": s.kind, "key": s.key, "reads": s.source if not s.sources else list(s.sources),
                 "materials": s.materials}
        try:
            with p.store.lock(s.kind, s.key):  # a second run waits here, then finds the entry
                got = None if s.name in (rerun or []) else p.store.get(s.kind, s.key)
                if isinstance(got, tuple):
                    result, status = kind.RESULT.from_arrays(*got), "reused"
                    if not reuse:
                        reason = f"{s.name} reused: another run computed it meanwhile"
                else:
                    if isinstance(got, str) and reuse:
                        reason = f"{s.name} computed: {got}"
                    say(f"{s.name}: computing ({s.kind}, {len(s.domain.tetrahedra)} tetrahedra)")
                    for note in s.notices:
                        say(f"{s.name}: note: {note.message}")
                    log.info("%s: computing (%s)", s.name, s.kind)
                    upstream = [(results[n], domains[n]) for n in s.sources] if s.sources else \
                        (results[s.source], domains[s.source]) if s.source else None
                    result, status = kind.compute(s, upstream), "computed"
                    arrays, meta = result.to_arrays()
                    p.store.put(s.kind, s.key, arrays, meta, {"inputs": s.inputs, "stage": s.name,
                                                            "seconds": time.perf_counter() - t0})
        except errors.ThermochainError as exc:
            # every line names the file and the stage (a solver or the store does not know them)
            located = type(exc)([r if str(r).startswith(str(p.path)) else r.at(s.where) for r in exc.records])
            record["stages"][s.name] = entry | {"status": "failed", "reason": str(located)}
            record["status"] = "failed"
            try:
                summary.write_json(p.folder / "summary.json", record)
            except OSError as write_error:  # e.g. the same full disk: the stage's own error is the one to report
                log.warning("%s: summary.json not written (%s)", p.folder, write_error.strerror or write_error)
            raise located from None
        results[s.name], domains[s.name] = result, s.domain
        for line in _progress_lines(s.name, result, status):
            say(line)
        say(f"{s.name}: {status} in {time.perf_counter() - t0:.2f} s{_solver_detail(result, status)}")
        entry |= {"status": status, "reason": reason, "seconds": time.perf_counter() - t0, "inputs": s.inputs}
        entry |= kind.summary(s, result)
        record["stages"][s.name] = entry
    record["status"] = "ok"
    _publish(p, record, results, domains, previous)
    record["seconds"] = time.perf_counter() - started
    summary.write_json(p.folder / "summary.json", record)
    summary.write_csv(p.folder / "summary.csv", record)
    say(f"results in {p.folder}" + (f"; report {p.folder / record['report']}" if "report" in record else ""))
    return Run(record, {s.name: s for s in p.stages}, results, p)


def _solver_detail(result, status: str) -> str:
    solver = getattr(result, "solver", None)
    if not solver or status != "computed":
        return ""
    backend = f" ({solver.backend})" if getattr(solver, "backend", "") else ""
    return (f"; {solver.method}{backend} solve of {solver.unknowns} unknowns, {solver.iterations} iterations, "
            f"residual {solver.residual:.1e}")


def _progress_lines(name: str, result, status: str) -> list[str]:
    """A nonlinear solve's iterations, one line each."""
    newton = getattr(result, "meta", {}).get("newton", []) if status == "computed" else []
    if len(newton) < 2:
        return []
    return [f"{name}: Newton {h['iteration']}: residual {h['residual']:.2e}, update {h['update_K']:.2e} K, "
            f"step {h['step']:g}" + ("" if h["rate"] is None else f", rate {h['rate']:.2f}") for h in newton]


def _publish(p: Plan, record: dict, results: dict, domains: dict, previous: dict | None = None) -> None:
    limits = {part: e.temperature_limit for part, e in p.workflow.parts.items() if e.temperature_limit is not None}
    publish.write(p.folder, record, results, domains, p.workflow.output, limits, previous)


def report(folder: str | Path, store: str | None = None) -> dict:
    """Rebuild figures and report.html of a results folder from its stored results, without solving."""
    folder = Path(folder)
    previous = folders.own_summary(folder)
    p = plan(previous["workflow_path"], previous.get("sets") or [], store or previous["store"], str(folder))
    results, domains = {}, {}
    for s in p.stages:
        got = p.store.get(s.kind, s.key)
        if not isinstance(got, tuple) or previous["stages"].get(s.name, {}).get("key") != s.key:
            raise errors.InputError(f"{folder}: the stored result of stage {s.name} no longer matches the workflow "
                                    f"({got if isinstance(got, str) else 'inputs changed'}); run it again")
        results[s.name], domains[s.name] = kinds.get(s.kind).RESULT.from_arrays(*got), s.domain
    with folders.results_lock(folder, lambda line: None):
        _publish(p, previous, results, domains)
        summary.write_json(folder / "summary.json", previous)
    return previous


def _material_sources(p: Plan) -> dict[str, str]:
    out = {}
    for s in p.stages:
        for part, material in getattr(s.spec, "materials", {}).items():
            out[s.materials[part]] = "; ".join(dict.fromkeys(material.sources.values())) or "inline"
    return out


def _value_sources(p: Plan) -> dict[str, dict[str, str]]:
    """material -> property -> its source (the report footnotes each value with it)."""
    out: dict[str, dict[str, str]] = {}
    for s in p.stages:
        for part, material in getattr(s.spec, "materials", {}).items():
            out.setdefault(s.materials[part], {}).update(material.sources)
    return out


def _header(p: Plan) -> dict:
    d = p.domain
    return {
        "thermochain": __version__, "workflow": str(p.path), "workflow_path": str(p.path.resolve()),
        "title": p.workflow.title, "store": str(p.store.root.resolve()),
        "material_sources": _material_sources(p), "material_value_sources": _value_sources(p),
        "mesh": {"file": p.workflow.mesh.file, "unit": p.workflow.mesh.unit, "nodes": len(d.points),
                 "tetrahedra": len(d.tetrahedra), "bounding_box_m": [b.tolist() for b in d.bounding_box],
                 "part_ids": publish.vtu.part_legend(d), "notices": list(d.notices)},
        "hints": wf.hints(p.workflow),  # e.g. bare temperatures below 150 K (read as K)
        "stages": {}, "caution": summary.CAUTION,
    }

