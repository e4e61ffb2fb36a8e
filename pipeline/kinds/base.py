"""What every stage kind shares: the plan of one stage, the planning context and its helpers."""

from __future__ import annotations

import json
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

from .. import errors
from ..model import mesh as mesh_mod
from ..notices import Problem


@dataclass
class StagePlan:
    """One stage: its inputs in SI, its key, the domain it works on and what it reads from.

    inputs: the plain data its store key is the hash of (summary.json shows them; the next run's
    reasons are their differences).  prepared: what planning computed that the solve reuses.
    notices: records a reader should see before the stage runs (``check`` and ``run`` show them;
    they are not part of the key)."""

    name: str
    kind: str
    domain: mesh_mod.Domain
    spec: object
    inputs: dict
    key: str = ""
    source: str | None = None
    materials: dict[str, str] = field(default_factory=dict)
    where: str = ""
    stage: object = None
    prepared: dict = field(default_factory=dict)
    notices: list = field(default_factory=list)
    sources: tuple[str, ...] = ()  # a stage that reads several (e.g. a cycle's states); then source is None

    @property
    def reads(self) -> tuple[str, ...]:
        """The names of the stages whose results ``compute`` receives."""
        return self.sources or ((self.source,) if self.source else ())


@dataclass
class Context:
    """What planning a stage may read: the validated workflow, its main domain, the material library,
    the planned stages so far (by name), the probes inside the mesh and the library versions."""

    path: Path
    workflow: object
    domain: mesh_mod.Domain
    library: object
    versions: dict
    probes: dict
    domain_of: Callable
    planned: dict[str, StagePlan] = field(default_factory=dict)
    broken: set[str] = field(default_factory=set)
    kinds: dict[str, str] = field(default_factory=dict)

    def base_inputs(self, kind: str, version: int) -> dict:
        """The key inputs every stage has: kind, stage version and library versions."""
        return {"kind": kind, "version": version, "versions": self.versions}


@dataclass
class OutputContext:
    """What a kind's figures, notices and report read besides its own entry: limits [degC] by part,
    the required safety factor and the whole summary record."""

    limits_degC: dict[str, float]
    required_safety_factor: float
    record: dict


def upstream_names(stage) -> list[str]:
    """The stages a workflow section reads: its ``upstream_names()`` (several, e.g. a cycle's states) or
    its ``source``."""
    if hasattr(stage, "upstream_names"):
        return stage.upstream_names()
    source = getattr(stage, "source", None)
    return [source] if source else []


def workflow_file(where: str) -> str:
    """The file part of a "file: key" location."""
    return where.rsplit(": ", 1)[0]


def materials(ctx: Context, stage, domain, where: str) -> tuple[dict, dict[str, str], list]:
    """Each part's material for this stage (oriented by the part's axes): (materials, names, problems)."""
    problems, chosen, names = [], {}, {}
    for part in domain.parts:
        entry = ctx.workflow.parts.get(part)
        name = stage.materials.get(part, entry.material if entry else None)
        if name is None or name in ctx.broken:
            continue  # reported once for the workflow
        if name not in ctx.library:
            key = f"{where}.materials.{part}" if part in stage.materials else \
                f"{workflow_file(where)}: parts.{part}.material"
            problems.append(errors.unknown_name("material", name, ctx.library.materials, key))
            continue
        material = ctx.library[name]
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


def checked(check, domain, spec, where: str, problems: list) -> None:
    """Run a stage's own check as well, so that every problem is reported at once; a part without a
    material is reported once for the workflow, not again by each stage."""
    try:
        check(domain, spec, where)
    except errors.InputError as exc:
        problems += [p for p in exc.records if p.code != errors.NO_MATERIAL]
    if problems:
        raise errors.InputError(problems)


def before_solving(check, *args) -> None:
    """A stage's physics checks that need no solution, run at planning: their problems are bad input."""
    try:
        check(*args)
    except errors.PhysicsError as exc:
        raise errors.InputError(exc.records) from None


def upstream(ctx: Context, source: str, result_type, where: str) -> StagePlan:
    """The planned stage named by ``source``, which must give a ``result_type`` result."""
    from . import get

    def gives(kind: str) -> bool:
        return get(kind).RESULT is result_type

    wanted = " or ".join(k for k in ctx.kinds.values() if gives(k)) or result_type.__name__
    kind = ctx.kinds.get(source)
    if kind is not None and not gives(kind):
        raise errors.InputError(Problem("stage.source_kind", f"stage '{source}' is a {kind} stage; this stage "
                                        f"reads a {wanted} stage", f"{where}.source",
                                        {"source": source, "kind": kind}))
    if source not in ctx.planned:
        valid = [n for n, p in ctx.planned.items() if gives(p.kind)]
        raise errors.InputError(errors.unknown_name(f"{wanted} stage", source, valid, f"{where}.source"))
    return ctx.planned[source]


def interface_inputs(ctx: Context, domain) -> dict:
    """The workflow's [interfaces] as key inputs of a stage on ``domain`` (they change its mesh: split
    contacts, ties, conductances); nothing when the workflow has none, so other keys stay as they were."""
    used = {n: j.model_dump() for n, j in sorted(ctx.workflow.interfaces.items())
            if n in domain.contacts or n in domain.ties or set(j.parts or ()) <= set(domain.parts)}
    return {"interfaces": used} if used else {}


def finish(plan: StagePlan, where: str, stage, ctx: Context | None = None) -> StagePlan:
    """Plain key inputs (as summary.json holds them) and the key.  With ``ctx``, the workflow's
    interfaces that change the stage's mesh (split contacts, ties) are in the key of every kind, so a
    result computed on the mesh before it was split is never reused on the split one."""
    from ..flow import store

    plan.where, plan.stage = where, stage
    if ctx is not None:
        plan.inputs = plan.inputs | interface_inputs(ctx, plan.domain)
    plan.inputs = json.loads(store.canonical(plan.inputs))
    plan.key = store.key(plan.inputs)
    return plan


# defaults of the optional hooks
def no_outputs(domain, result):
    return None


def no_tables(folder, name, entry, result) -> list[str]:
    return []


def no_figures(folder, name, entry, result, domain, context) -> list[dict]:
    return []


def no_notices(name, entry, domain, context) -> list:
    return []


def no_report(entry, context) -> list[str]:
    return []


def no_console(entry) -> list[str]:
    return []


def no_quantities(name, entry) -> dict:
    return {}


def no_loads(name, entry) -> list:
    return []
