"""Run a workflow: load the model once, run its stages in order, write the results folder.

The runner wires model, stages and outputs together; it holds no physics.  (The stage store that
reuses unchanged stages arrives with the store; until then every run computes every stage, and
summary.json says so.)
"""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .. import __version__, errors
from ..model import materials as materials_mod
from ..model import mesh as mesh_mod
from ..outputs import summary, vtu
from ..stages import heat
from . import workflow as wf

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class Model:
    """What a workflow describes, loaded and checked: the domain and each part's material."""

    workflow: wf.Workflow
    base: Path
    domain: mesh_mod.Domain
    materials: dict[str, materials_mod.Material]


def load_model(path: str | Path) -> Model:
    """Parse the workflow, read the mesh and resolve materials; every input problem at once."""
    model, problems = _load(path)
    if problems:
        raise errors.InputError(problems)
    return model


def _load(path: str | Path) -> tuple[Model, list[str]]:
    workflow, base = wf.load(path)
    domain = mesh_mod.load(base / workflow.mesh.file, unit=workflow.mesh.unit)
    library = materials_mod.library()
    problems: list[str] = []
    if workflow.materials:
        try:
            library = library.extended(workflow.materials, f"{path}: [materials]")
        except errors.InputError as exc:
            problems += exc.problems
    chosen = {}
    for part, entry in workflow.parts.items():
        where = f"{path}: parts.{part}"
        if part not in domain.parts:
            problems.append(errors.unknown_name("part", part, domain.parts, where))
        if entry.material not in library:
            problems.append(errors.unknown_name("material", entry.material, library.materials, f"{where}.material"))
            continue
        material = library[entry.material]
        if entry.axes is not None:
            try:
                material = material.oriented(entry.axes)
            except errors.InputError as exc:
                problems += [f"{where}.axes: {p}" for p in exc.problems]
        chosen[part] = material
    for part in domain.parts:
        if part not in workflow.parts:
            problems.append(f"{path}: mesh part '{part}' has no entry in [parts]; give it a material")
    return Model(workflow, base, domain, chosen), problems


def heat_spec(model: Model, name: str) -> heat.HeatSpec:
    """The heat stage's inputs in SI from its workflow section."""
    stage = model.workflow.stages[name]
    factor = wf.unit_factor(model.workflow)
    return heat.HeatSpec(
        materials=model.materials,
        power=stage.power,
        generation=stage.generation,
        flux={s: heat.HeatFlux(f.per_area, f.total) for s, f in stage.flux.items()},
        convection={s: heat.Convection(c.film_coefficient, c.ambient) for s, c in stage.convection.items()},
        fixed_temperature=stage.fixed_temperature,
        probes={p: tuple(np.asarray(xyz) * factor) for p, xyz in model.workflow.probes.items()},
        order=stage.order,
        solver=stage.solver,
    )


def check(path: str | Path) -> Model:
    """Validate the workflow, the mesh and every stage's inputs without solving."""
    model, problems = _load(path)
    unresolved = [f"part '{p}' has no material" for p in model.domain.parts if p not in model.materials]
    for name in model.workflow.stages:
        try:
            heat.check(model.domain, heat_spec(model, name), where=f"{path}: stages.{name}")
        except errors.InputError as exc:  # parts whose material failed are reported above already
            problems += [p for p in exc.problems if not any(p.endswith(u) for u in unresolved)]
    if problems:
        raise errors.InputError(problems)
    return model


def run(path: str | Path, output: str | Path | None = None) -> dict:
    """Run every stage of the workflow and write the results folder; returns the summary."""
    started = time.perf_counter()
    model = check(path)
    folder = Path(output) if output else model.base / model.workflow.output.folder
    record = {
        "thermochain": __version__,
        "workflow": str(path),
        "title": model.workflow.title,
        "mesh": {"file": model.workflow.mesh.file, "unit": model.workflow.mesh.unit,
                 "nodes": len(model.domain.points), "tetrahedra": len(model.domain.tetrahedra),
                 "bounding_box_m": [b.tolist() for b in model.domain.bounding_box],
                 "part_ids": vtu.part_legend(model.domain), "notices": list(model.domain.notices)},
        "materials": {p: {"name": m.name, "source": m.sources.get("conductivity", "")}
                      for p, m in sorted(model.materials.items())},
        "stages": {},
        "caution": summary.CAUTION,
    }
    status = "ok"
    for name in model.workflow.stages:
        where = f"{path}: stages.{name}"
        entry = {"kind": "heat", "status": "computed", "reason": "no stage store yet: every run computes every stage"}
        try:
            field = heat.solve(model.domain, heat_spec(model, name), where=where)
        except errors.ThermochainError as exc:
            entry.update(status="failed", reason=str(exc))
            record["stages"][name] = entry
            status = "failed"
            summary.write_json(folder / "summary.json", record | {"status": status})
            raise
        entry |= summary.heat_figures(field)
        if model.workflow.output.vtu:
            entry["vtu"] = vtu.write_temperature(folder / f"{name}.vtu", model.domain, field).name
        record["stages"][name] = entry
    record["status"] = status
    record["seconds"] = time.perf_counter() - started
    summary.write_json(folder / "summary.json", record)
    return record
