"""Stage kinds: one module per kind owns everything that is particular to it.

A kind module (``view``, ``heat``, ``transient``, ``instant``, ``map``, ``stress``, ``cycle`` here; more from the ``thermochain.kinds`` entry-point
group or ``register``) defines:

- ``NAME`` (the word in the workflow file, the store and the summary) and ``Schema``, its workflow
  section (a ``flow.workflow.Strict`` model whose ``kind`` field is ``Literal[NAME]``);
- ``RESULT``, the result type (``to_arrays``/``from_arrays``), and ``READS``, the material properties
  its store key holds; ``SOURCE``: the result type its ``source`` stage must give (None: no source);
- ``plan(ctx, name, stage, where) -> StagePlan``: the Spec from the validated section, every input
  checked once (raise ``InputError`` with all problems), the key inputs;
- ``compute(plan, upstream) -> result``: calls the pure stage function (``upstream`` is the
  ``(result, domain)`` of its source, or None; a kind that reads several stages, like ``cycle``, gives
  its Schema an ``upstream_names()`` method and its plan ``sources``, and receives a list in that order);
- ``summary(plan, result) -> dict``: the figures summary.json shows for it (units in the key names);
- ``outputs(domain, result) -> (point_data, cell_data) | None``: the arrays of its VTU file;
- ``tables(folder, name, entry, result) -> list[str]``: the data files (CSV) it writes, by name;
- ``figures(folder, name, entry, result, domain, context) -> list[dict]``: its PNG figures;
- ``notices(name, entry, domain, context) -> list[Notice]``: warnings a reader must not miss;
- ``report(entry, context) -> list[str]``: its HTML tables; ``console(entry) -> list[str]``: its lines
  at the end of ``thermochain run``; ``quantities(name, entry) -> dict``: its named figures for the
  tables of sweeps and convergence studies (``NAME.ITEM.QUANTITY_UNIT``).

``base`` holds the shared planning helpers and the defaults of the optional hooks.
"""

from __future__ import annotations

import importlib
from importlib.metadata import entry_points
from types import ModuleType

from . import base, cycle, heat, instant, map, stress, transient, view  # noqa: A004 - 'map' is the stage kind's name

_REGISTRY: dict[str, ModuleType] = {m.NAME: m for m in (view, heat, transient, instant, map, stress, cycle)}
_loaded_plugins = False

#: hooks a kind may leave out, with what the runner does then
OPTIONAL = {"outputs": base.no_outputs, "tables": base.no_tables, "figures": base.no_figures, "notices": base.no_notices,
            "report": base.no_report, "console": base.no_console, "quantities": base.no_quantities,
            "loads": base.no_loads}


def register(module: ModuleType) -> ModuleType:
    """Add a kind module (replacing one of the same name); returns it."""
    missing = [a for a in ("NAME", "Schema", "RESULT", "READS", "SOURCE", "plan", "compute", "summary")
               if not hasattr(module, a)]
    if missing:
        raise TypeError(f"stage kind module {module.__name__} lacks {', '.join(missing)}")
    _REGISTRY[module.NAME] = module
    from ..flow import workflow

    workflow.forget_model()
    return module


def unregister(name: str) -> None:
    """Remove a kind added by ``register`` (the shipped kinds stay)."""
    if name in ("view", "heat", "transient", "instant", "map", "stress", "cycle"):
        raise ValueError(f"the shipped stage kind {name!r} cannot be removed")
    _REGISTRY.pop(name, None)
    from ..flow import workflow

    workflow.forget_model()


def _plugins() -> None:
    global _loaded_plugins
    if _loaded_plugins:
        return
    _loaded_plugins = True
    for ep in entry_points(group="thermochain.kinds"):
        register(importlib.import_module(ep.value))


def all_kinds() -> dict[str, ModuleType]:
    """Kind name -> kind module, in registration order."""
    _plugins()
    return dict(_REGISTRY)


def names() -> tuple[str, ...]:
    """The stage kinds a workflow may name."""
    return tuple(all_kinds())


def get(name: str) -> ModuleType:
    """The kind module of ``name``."""
    return all_kinds()[name]


def hook(name: str, attribute: str):
    """A kind's hook, or the default for an optional hook it leaves out."""
    return getattr(get(name), attribute, OPTIONAL.get(attribute))
