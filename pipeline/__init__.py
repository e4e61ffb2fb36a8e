"""thermochain: steady heat -> thermal strain -> stress finite elements for electronics housings.

Run a workflow file and work with its results::

    import pipeline
    run = pipeline.run("workflows/housing.toml", set=["stages.heat.power.cpu=12"])
    run["heat"].result.parts["cpu"]          # K
    run["stress"].to_pyvista()               # the stress VTU's mesh and arrays

or call the stages directly, without a workflow file::

    from pipeline import load_mesh, material_library, HeatSpec, solve_heat
    domain = load_mesh("board.msh", unit="mm")

Everything listed in ``__all__`` is loaded on first use, so ``import pipeline`` stays light.
"""

from __future__ import annotations

import importlib

__version__ = "0.1.0"

_LAZY = {
    # model
    "load_mesh": ("pipeline.model.mesh", "load"),
    "Domain": ("pipeline.model.mesh", "Domain"),
    "material_library": ("pipeline.model.materials", "library"),
    "Material": ("pipeline.model.materials", "Material"),
    "kelvin": ("pipeline.model.units", "kelvin"),
    "celsius": ("pipeline.model.units", "celsius"),
    # stages: specs and pure functions
    "HeatSpec": ("pipeline.stages.heat", "HeatSpec"),
    "Convection": ("pipeline.stages.heat", "Convection"),
    "Radiation": ("pipeline.stages.heat", "Radiation"),
    "HeatFlux": ("pipeline.stages.heat", "HeatFlux"),
    "solve_heat": ("pipeline.stages.heat", "solve"),
    "MapSpec": ("pipeline.stages.mapping", "MapSpec"),
    "transfer": ("pipeline.stages.mapping", "transfer"),
    "StressSpec": ("pipeline.stages.stress", "StressSpec"),
    "Support": ("pipeline.stages.supports", "Support"),
    "solve_stress": ("pipeline.stages.stress", "solve"),
    # results
    "TemperatureField": ("pipeline.fields", "TemperatureField"),
    "ThermalLoad": ("pipeline.fields", "ThermalLoad"),
    "StressField": ("pipeline.fields", "StressField"),
    "Run": ("pipeline.results", "Run"),
    "StageResult": ("pipeline.results", "StageResult"),
    # stage modules, as ``pipeline.heat.solve`` (kept for scripts written against 0.1)
    "heat": ("pipeline.stages.heat", None),
    "mapping": ("pipeline.stages.mapping", None),
    "stress": ("pipeline.stages.stress", None),
    # errors
    "ThermochainError": ("pipeline.errors", "ThermochainError"),
    "InputError": ("pipeline.errors", "InputError"),
}

__all__ = ["__version__", "run", *_LAZY]


def run(workflow, set: list[str] | None = None, store: str | None = None, out: str | None = None,  # noqa: A002
        rerun: list[str] | None = None, progress=None):
    """Run a workflow file, reusing unchanged stages, and write its results folder.

    Parameters
    ----------
    workflow : str or Path
        The workflow TOML file.
    set : list of str, optional
        ``KEY.PATH=VALUE`` overrides, as ``thermochain run --set``.
    store : str, optional
        Stage store folder (default: ``$THERMOCHAIN_STORE``, else the user's cache folder: ``flow.store.root``).
    out : str, optional
        Results folder (default: the workflow's ``output.folder``).
    rerun : list of str, optional
        Stages to compute even when stored.
    progress : callable, optional
        Receives one line of text per stage event.

    Returns
    -------
    Run
        ``run.summary`` (summary.json as a dict) and ``run[stage]``: each stage's result and domain.

    Raises
    ------
    InputError
        Bad input (every problem at once, in ``exc.records``); nothing is solved.
    ThermochainError
        A run that failed (solver, store).
    """
    from .flow import runner

    return runner.execute(workflow, set, store, out, rerun, progress)


def __getattr__(name):
    if name not in _LAZY:
        raise AttributeError(f"module 'pipeline' has no attribute {name!r}")
    module, attr = _LAZY[name]
    value = importlib.import_module(module)
    return getattr(value, attr) if attr else value


def __dir__():
    return sorted(__all__)
