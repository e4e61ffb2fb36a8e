"""Run a workflow: plan the stages in dependency order, reuse what the store holds, compute the rest.

The runner wires model, stages, store and outputs together; it holds no physics.  Every decision has
a reason a user can read before the run (``check``) and after it (``summary.json``).
"""

from __future__ import annotations

import json
import logging
import os
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .. import __version__, errors
from ..fields import StressField, TemperatureField, ThermalLoad
from ..model import materials as materials_mod
from ..model import finishes
from ..model import mesh as mesh_mod
from ..outputs import publish, summary
from ..stages import heat, mapping, stress, supports
from ..stages.supports import Support
from . import store as store_mod
from . import workflow as wf

log = logging.getLogger(__name__)

RANK = {"heat": 0, "map": 1, "stress": 2}
RESULT = {"heat": TemperatureField, "map": ThermalLoad, "stress": StressField}
#: material properties each stage reads (its cache key holds only these)
READS = {
    "heat": ("conductivity",),
    "stress": ("youngs_modulus", "poisson_ratio", "shear_modulus", "expansion", "density", "yield_strength",
               "tensile_strength", "brittle"),
}


@dataclass
class StagePlan:
    """One stage: its inputs in SI, its key, the domain it works on and what it reads from."""

    name: str
    kind: str
    domain: mesh_mod.Domain
    spec: object
    inputs: dict
    key: str
    source: str | None = None
    materials: dict[str, str] = field(default_factory=dict)
    where: str = ""


@dataclass
class Plan:
    path: Path
    workflow: wf.Workflow
    stages: list[StagePlan]
    store: store_mod.Store
    folder: Path
    domain: mesh_mod.Domain


def store_root(path: Path, option: str | None) -> Path:
    """--store, else $THERMOCHAIN_STORE, else .thermochain-store beside the workflow."""
    return Path(option or os.environ.get(store_mod.ENV) or path.parent / ".thermochain-store")


def plan(path: str | Path, sets: list[str] | None = None, store: str | None = None,
         out: str | None = None) -> Plan:
    """Validate everything the run will read and compute each stage's key; every input problem at once."""
    path = Path(path)
    workflow = wf.load(path, sets)
    problems: list[str] = []
    domains: dict[tuple[str, str], mesh_mod.Domain] = {}

    def domain_of(section, key: str = "mesh") -> mesh_mod.Domain:
        k = (section.file, section.unit)
        if k not in domains:
            if not Path(section.file).is_file():
                raise errors.MeshError(f"{path}: {key}.file: mesh file not found: {section.file} (a path relative "
                                       "to the workflow file)")
            domains[k] = mesh_mod.load(section.file, unit=section.unit)
        return domains[k]

    main = domain_of(workflow.mesh)
    library = materials_mod.library()
    broken: set[str] = set()  # inline materials with problems: reported once, not again as unknown names
    for name, record in workflow.materials.items():
        try:
            library = library.extended({name: record}, f"{path}: [materials]")
        except errors.InputError as exc:
            problems += exc.problems
            broken.add(name)
    for part in main.parts:
        if part not in workflow.parts:
            problems.append(f"{path}: mesh part '{part}' has no entry in [parts]; give it a material")
    for part in workflow.parts:
        if part not in main.parts:
            problems.append(errors.unknown_name("part", part, main.parts, f"{path}: parts"))
    probes = _probes(workflow, main, path, problems)

    stages: list[StagePlan] = []
    by_name: dict[str, StagePlan] = {}
    versions = store_mod.versions()
    order = sorted(workflow.stages.items(), key=lambda item: RANK[item[1].kind])
    failed: set[str] = set()
    for name, stage in order:
        where = f"{path}: stages.{name}"
        if getattr(stage, "source", None) in failed:
            failed.add(name)  # its source's problems are reported already
            continue
        try:
            planned = _plan_stage(name, stage, where, workflow, main, domain_of, library, by_name, versions,
                                  probes, broken)
        except errors.InputError as exc:
            problems += exc.problems
            failed.add(name)
            continue
        planned.where = where
        planned.inputs = json.loads(store_mod.canonical(planned.inputs))  # plain data, as summary.json holds it
        stages.append(planned)
        by_name[name] = planned
    if problems:
        raise errors.InputError(list(dict.fromkeys(problems)))  # a part's material is read by several stages
    folder = Path(out) if out else Path(workflow.output.folder)
    return Plan(path, workflow, stages, store_mod.Store(store_root(path, store)), folder, main)


def _probes(workflow, domain, path: Path, problems: list[str]) -> dict[str, tuple]:
    """The workflow's probes inside the mesh; each one outside is reported once, with the mesh's extent."""
    probes = {p: tuple(xyz) for p, xyz in workflow.probes.items()}
    inside = domain.contains(np.array(list(probes.values())).reshape(-1, 3))
    lo, hi = domain.bounding_box
    for (name, xyz), ok in zip(probes.items(), inside):
        if not ok:
            problems.append(f"{path}: probes.{name}: probe '{name}' at {list(xyz)} m is outside the mesh "
                            f"{workflow.mesh.file}; its bounding box is {lo.tolist()} to {hi.tolist()} m")
    return {p: xyz for (p, xyz), ok in zip(probes.items(), inside) if ok}


def _materials(workflow, stage, domain, library, where, broken=()) -> tuple[dict, dict[str, str], list[str]]:
    problems, chosen, names = [], {}, {}
    for part in domain.parts:
        entry = workflow.parts.get(part)
        name = stage.materials.get(part, entry.material if entry else None)
        if name is None or name in broken:
            continue  # reported once for the workflow
        if name not in library:
            key = f"{where}.materials.{part}" if part in stage.materials else f"{workflow_file(where)}: parts.{part}.material"
            problems.append(errors.unknown_name("material", name, library.materials, key))
            continue
        material = library[name]
        if entry and entry.axes is not None:
            try:
                material = material.oriented(entry.axes)
            except errors.InputError as exc:
                problems += [f"{where}: parts.{part}.axes: {p}" for p in exc.problems]
        chosen[part], names[part] = material, name
    for part in stage.materials:
        if part not in domain.parts:
            problems.append(errors.unknown_name("part", part, domain.parts, f"{where}.materials"))
    return chosen, names, problems


def workflow_file(where: str) -> str:
    """The file part of a "file: key" location."""
    return where.rsplit(": ", 1)[0]


def _checked(check, domain, spec, where, problems, mats):
    """Run a stage's own check too, so that every problem is reported at once."""
    try:
        check(domain, spec, where)
    except errors.InputError as exc:
        unresolved = [f"part '{p}' has no material" for p in domain.parts if p not in mats]
        problems += [p for p in exc.problems if not any(p.endswith(u) for u in unresolved)]
    if problems:
        raise errors.InputError(problems)


def _before_solving(check, *args) -> None:
    """A stage's physics checks that need no solution, run at planning: their problems are bad input."""
    try:
        check(*args)
    except errors.PhysicsError as exc:
        raise errors.InputError(exc.problems) from None


def _plan_stage(name, stage, where, workflow, main, domain_of, library, by_name, versions, probes,
                broken) -> StagePlan:
    base = {"kind": stage.kind, "versions": versions}
    kinds = {n: s.kind for n, s in workflow.stages.items()}
    if stage.kind == "heat":
        mats, names, problems = _materials(workflow, stage, main, library, where, broken)
        spec = heat.HeatSpec(
            materials=mats, power=stage.power, generation=stage.generation,
            flux={s: heat.HeatFlux(f.per_area, f.total) for s, f in stage.flux.items()},
            convection={s: heat.Convection(c.film_coefficient, c.ambient, c.exponent, c.reference_difference)
                        for s, c in stage.convection.items()},
            radiation=_radiation(stage, where, problems),
            fixed_temperature=stage.fixed_temperature, probes=probes, order=stage.order, solver=stage.solver, memory_limit=stage.memory_limit,
            max_iterations=stage.max_iterations)
        problems += [errors.unknown_name("surface", a, main.surfaces, f"{where}.adiabatic")
                     for a in stage.adiabatic if a not in main.surfaces]
        _checked(heat.check, main, spec, where, problems, mats)
        _before_solving(heat.check_steady_state, main, spec, where)
        inputs = base | {"version": heat.STAGE_VERSION, "options": stage.model_dump(exclude={"materials", "memory_limit"}),
                         "materials": {p: m.reads(*READS["heat"]) for p, m in sorted(mats.items())},
                         "mesh": [main.source_hash, main.unit], "probes": probes}
        return StagePlan(name, "heat", main, spec, inputs, store_mod.key(inputs), None, names)
    if stage.kind == "map":
        target = domain_of(stage.mesh, f"stages.{name}.mesh") if stage.mesh else main
        spec = mapping.MapSpec(stage.reference, stage.reference_by_part, stage.tolerance, stage.order)
        options = stage.model_dump(exclude={"source", "file", "mesh"})
        if stage.source is not None:
            upstream = _upstream(stage.source, "heat", by_name, where, kinds)
            read = {"upstream": upstream.key}
        else:
            file = Path(stage.file)
            if not file.is_file():
                raise errors.InputError(f"{where}.file: temperature field file not found: {file}")
            read = {"file_sha256": store_mod._sha(file)}
        inputs = base | {"version": mapping.STAGE_VERSION, "options": options,
                         "mesh": [target.source_hash, target.unit]} | read
        return StagePlan(name, "map", target, spec, inputs, store_mod.key(inputs), stage.source)
    # stress
    upstream = _upstream(stage.source, "map", by_name, where, kinds) if stage.source else None
    domain = upstream.domain if upstream else main
    mats, names, problems = _materials(workflow, stage, domain, library, where, broken)
    sups = {s: Support(v.kind, {a: getattr(v, a) for a in "xyz" if getattr(v, a) is not None} or None,
                       v.stiffness) for s, v in stage.supports.items()}
    spec = stress.StressSpec(mats, sups, pressure=stage.pressure,
                             force={s: tuple(f) for s, f in stage.force.items()},
                             gravity=tuple(stage.gravity) if stage.gravity else None, probes=probes,
                             order=stage.order, solver=stage.solver, memory_limit=stage.memory_limit)
    _checked(stress.check, domain, spec, where, problems, mats)
    _before_solving(supports.check, domain, spec.supports, where)
    inputs = base | {"version": stress.STAGE_VERSION, "options": stage.model_dump(exclude={"materials", "source", "memory_limit"}),
                     "materials": {p: m.reads(*READS["stress"]) for p, m in sorted(mats.items())},
                     "mesh": [domain.source_hash, domain.unit], "probes": probes,
                     "upstream": upstream.key if upstream else None}
    return StagePlan(name, "stress", domain, spec, inputs, store_mod.key(inputs), stage.source, names)


def _radiation(stage, where: str, problems: list[str]) -> dict:
    out = {}
    for surface, r in stage.radiation.items():
        try:
            eps, _ = finishes.emissivity(r.emissivity, f"{where}.radiation.{surface}.emissivity")
        except errors.InputError as exc:
            problems += exc.problems
            continue
        out[surface] = heat.Radiation(eps, r.surroundings)
    return out


def _upstream(source: str, kind: str, by_name: dict, where: str, kinds: dict[str, str]) -> StagePlan:
    if kinds.get(source, kind) != kind:
        raise errors.InputError(f"{where}.source: stage '{source}' is a {kinds[source]} stage; "
                                f"this stage reads a {kind} stage")
    if source not in by_name:
        raise errors.InputError(errors.unknown_name(f"{kind} stage", source, [n for n, p in by_name.items()
                                                                             if p.kind == kind], f"{where}.source"))
    if by_name[source].kind != kind:
        raise errors.InputError(f"{where}.source: stage '{source}' is a {by_name[source].kind} stage; "
                                f"this stage reads a {kind} stage")
    return by_name[source]


def decisions(p: Plan, rerun: list[str] | None = None, previous: dict | None = None) -> dict[str, tuple[bool, str]]:
    """For each stage: (reuse?, reason), as the run would decide, without computing anything."""
    out = {}
    changed: set[str] = set()
    for s in p.stages:
        hit = (p.store._place(s.kind, s.key) / "manifest.json").is_file()
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
    return f"{s.name} recomputed: {_what_changed(old, s.inputs, s.source, changed)}"


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
    """Run the workflow and write its results folder; returns the summary.

    progress: optional callable receiving one line per stage event (start, end with solver figures)."""
    started = time.perf_counter()
    say = progress or (lambda line: None)
    p = plan(path, sets, store, out)
    previous = _previous(p.folder)
    plan_decisions = decisions(p, rerun, previous)
    record = _header(p) | {"sets": list(sets or []), "folder": str(p.folder)}
    results, domains = {}, {}
    for s in p.stages:
        t0 = time.perf_counter()
        reuse, reason = plan_decisions[s.name]
        entry = {"kind": s.kind, "key": s.key, "reads": s.source, "materials": s.materials}
        try:
            with p.store.lock(s.kind, s.key):  # a second run waits here, then finds the entry
                got = None if s.name in (rerun or []) else p.store.get(s.kind, s.key)
                if isinstance(got, tuple):
                    result, status = RESULT[s.kind].from_arrays(*got), "reused"
                    if not reuse:
                        reason = f"{s.name} reused: another run computed it meanwhile"
                else:
                    if isinstance(got, str) and reuse:
                        reason = f"{s.name} computed: {got}"
                    say(f"{s.name}: computing ({s.kind}, {len(s.domain.tetrahedra)} tetrahedra)")
                    result, status = _compute(p, s, results, domains), "computed"
                    arrays, meta = result.to_arrays()
                    p.store.put(s.kind, s.key, arrays, meta, {"inputs": s.inputs, "stage": s.name,
                                                            "seconds": time.perf_counter() - t0})
        except errors.ThermochainError as exc:
            # every line names the file and the stage (a solver or the store does not know them)
            located = type(exc)([line if line.startswith(str(p.path)) else f"{s.where}: {line}" for line in exc.problems])
            record["stages"][s.name] = entry | {"status": "failed", "reason": str(located)}
            record["status"] = "failed"
            try:
                summary.write_json(p.folder / "summary.json", record)
            except OSError as write_error:  # e.g. the same full disk: the stage's own error is the one to report
                log.warning("%s: summary.json not written (%s)", p.folder, write_error.strerror or write_error)
            raise located from None
        results[s.name], domains[s.name] = result, s.domain
        solver = getattr(result, "solver", None)
        backend = f" ({solver.backend})" if getattr(solver, "backend", "") else ""
        detail = (f"; {solver.method}{backend} solve of {solver.unknowns} unknowns, {solver.iterations} iterations, "
                  f"residual {solver.residual:.1e}") if solver and status == "computed" else ""
        newton = getattr(result, "meta", {}).get("newton", []) if status == "computed" else []
        if len(newton) > 1:  # a nonlinear solve: show every iteration
            for h in newton:
                rate = "" if h["rate"] is None else f", rate {h['rate']:.2f}"
                say(f"{s.name}: Newton {h['iteration']}: residual {h['residual']:.2e}, update {h['update_K']:.2e} K, "
                    f"step {h['step']:g}{rate}")
        say(f"{s.name}: {status} in {time.perf_counter() - t0:.2f} s{detail}")
        entry |= {"status": status, "reason": reason, "seconds": time.perf_counter() - t0, "inputs": s.inputs}
        entry |= summary.figures(s.kind, result) | _support_lists(s)
        record["stages"][s.name] = entry
    record["status"] = "ok"
    _publish(p, record, results, domains, previous)
    record["seconds"] = time.perf_counter() - started
    summary.write_json(p.folder / "summary.json", record)
    summary.write_csv(p.folder / "summary.csv", record)
    say(f"results in {p.folder}" + (f"; report {p.folder / record['report']}" if "report" in record else ""))
    return record


def _support_lists(s: StagePlan) -> dict:
    if s.kind == "heat":
        return {"adiabatic_intended": list(s.inputs["options"].get("adiabatic", []))}
    if s.kind != "stress":
        return {}
    sups = s.spec.supports
    return {"support_surfaces": [n for n, v in sups.items() if v.kind != "minimal"],
            "fixed_supports": [n for n, v in sups.items() if v.kind == "fixed"]}


def _publish(p: Plan, record: dict, results: dict, domains: dict, previous: dict | None = None) -> None:
    limits = {part: e.temperature_limit for part, e in p.workflow.parts.items() if e.temperature_limit is not None}
    publish.write(p.folder, record, results, domains, p.workflow.output, limits, previous)


def report(folder: str | Path, store: str | None = None) -> dict:
    """Rebuild figures and report.html of a results folder from its stored results, without solving."""
    folder = Path(folder)
    previous = _previous(folder)
    if previous is None:
        raise errors.InputError(f"{folder}: no summary.json here; give the results folder of a run")
    p = plan(previous["workflow_path"], previous.get("sets"), store or previous["store"], str(folder))
    results, domains = {}, {}
    for s in p.stages:
        got = p.store.get(s.kind, s.key)
        if not isinstance(got, tuple) or previous["stages"].get(s.name, {}).get("key") != s.key:
            raise errors.InputError(f"{folder}: the stored result of stage {s.name} no longer matches the workflow "
                                    f"({got if isinstance(got, str) else 'inputs changed'}); run it again")
        results[s.name], domains[s.name] = RESULT[s.kind].from_arrays(*got), s.domain
    _publish(p, previous, results, domains)
    summary.write_json(folder / "summary.json", previous)
    return previous


def _compute(p: Plan, s: StagePlan, results: dict, domains: dict):
    """Run one stage on its inputs (upstream results already in ``results``)."""
    log.info("%s: computing (%s)", s.name, s.kind)
    if s.kind == "heat":
        return heat.solve(s.domain, s.spec, where=s.where)
    if s.kind == "map":
        if s.source is not None:
            return mapping.transfer(results[s.source], domains[s.source], s.domain, s.spec, where=s.where)
        stage = p.workflow.stages[s.name]
        return mapping.from_file(stage.file, s.domain, s.spec, array=stage.array, unit=stage.file_unit,
                                 temperature_unit=stage.temperature_unit, where=s.where)
    return stress.solve(s.domain, results[s.source] if s.source else None, s.spec, where=s.where)


def _material_sources(p: Plan) -> dict[str, str]:
    out = {}
    for s in p.stages:
        for part, material in getattr(s.spec, "materials", {}).items():
            out[s.materials[part]] = "; ".join(dict.fromkeys(material.sources.values())) or "inline"
    return out


def _header(p: Plan) -> dict:
    d = p.domain
    return {
        "thermochain": __version__, "workflow": str(p.path), "workflow_path": str(p.path.resolve()),
        "title": p.workflow.title, "store": str(p.store.root.resolve()),
        "material_sources": _material_sources(p),
        "mesh": {"file": p.workflow.mesh.file, "unit": p.workflow.mesh.unit, "nodes": len(d.points),
                 "tetrahedra": len(d.tetrahedra), "bounding_box_m": [b.tolist() for b in d.bounding_box],
                 "part_ids": publish.vtu.part_legend(d), "notices": list(d.notices)},
        "stages": {}, "caution": summary.CAUTION,
    }

