"""thermochain: steady heat -> thermal strain -> stress finite elements for electronics housings.

Public API (loaded on first use so that ``import pipeline`` stays light)::

    from pipeline import load_mesh, material_library, heat
    domain = load_mesh("board.msh", unit="mm")
"""

from __future__ import annotations

import importlib

__version__ = "0.1.0"
__all__ = ["__version__", "load_mesh", "material_library", "heat"]

_LAZY = {
    "load_mesh": ("pipeline.model.mesh", "load"),
    "material_library": ("pipeline.model.materials", "library"),
    "heat": ("pipeline.stages.heat", None),
}


def __getattr__(name):
    if name not in _LAZY:
        raise AttributeError(f"module 'pipeline' has no attribute {name!r}")
    module, attr = _LAZY[name]
    value = importlib.import_module(module)
    return getattr(value, attr) if attr else value
