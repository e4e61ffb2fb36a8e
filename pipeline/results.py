"""What ``pipeline.run`` returns: the summary of a run and, at full precision, each stage's result.

A ``Run`` is what a notebook works with after running a workflow: ``run.summary`` is summary.json as a
dict, ``run["heat"]`` (or ``run.stages["heat"]``) a ``StageResult`` with the stage's result, its domain
and its summary entry; ``to_meshio()`` / ``to_pyvista()`` give the same mesh and arrays as the VTU file.
"""

from __future__ import annotations

import html
from dataclasses import dataclass


@dataclass(frozen=True, repr=False)
class StageResult:
    """One stage of a run: name, kind, result (TemperatureField, ThermalLoad, StressField, ...), the
    domain it lives on [m] and its entry of summary.json."""

    name: str
    kind: str
    result: object
    domain: object
    entry: dict

    @property
    def status(self) -> str:
        """"computed" or "reused"."""
        return self.entry.get("status", "")

    def to_meshio(self):
        """A meshio mesh with the stage's arrays (those of its VTU file)."""
        from .outputs import vtu

        return vtu.mesh(self.domain, self.result, self.kind)

    def to_pyvista(self):
        """A pyvista UnstructuredGrid with the stage's arrays, coordinates in metres."""
        from .outputs import vtu

        return vtu.grid(self.domain, self.result, self.kind)

    def __repr__(self) -> str:
        return f"<StageResult {self.name} ({self.kind}, {self.status}): {self.result!r}>"

    def _repr_html_(self) -> str:
        return f"<p><b>{html.escape(self.name)}</b> ({html.escape(self.kind)}, {html.escape(self.status)}): " \
               f"{html.escape(repr(self.result))}</p>"


class Run:
    """A finished run: ``summary`` (summary.json), ``stages`` (name -> StageResult), ``folder``."""

    def __init__(self, summary: dict, plans: dict, results: dict, plan=None):
        self.summary = summary
        self.plan = plan
        self.stages = {name: StageResult(name, p.kind, results[name], p.domain, summary["stages"].get(name, {}))
                       for name, p in plans.items()}

    @property
    def folder(self):
        from pathlib import Path

        return Path(self.summary["folder"])

    @property
    def status(self) -> str:
        return self.summary.get("status", "")

    @property
    def warnings(self) -> list[str]:
        return list(self.summary.get("warnings", []))

    def __getitem__(self, name: str) -> StageResult:
        return self.stages[name]

    def result(self, name: str):
        """The result of stage ``name`` at full precision."""
        return self.stages[name].result

    def domain(self, name: str):
        """The domain stage ``name`` was solved on."""
        return self.stages[name].domain

    def __repr__(self) -> str:
        stages = ", ".join(f"{s.name} ({s.kind}, {s.status})" for s in self.stages.values())
        return f"<Run {self.summary.get('workflow', '')}: {self.status}; {stages}; results in {self.folder}>"

    def _repr_html_(self) -> str:
        rows = "".join(f"<li>{s._repr_html_()}</li>" for s in self.stages.values())
        warnings = "".join(f"<li>{html.escape(w)}</li>" for w in self.warnings)
        return (f"<div><p>Run of <code>{html.escape(self.summary.get('workflow', ''))}</code>: "
                f"<b>{html.escape(self.status)}</b>, results in <code>{html.escape(str(self.folder))}</code></p>"
                f"<ul>{rows}</ul>" + (f"<p>Warnings:</p><ul>{warnings}</ul>" if warnings else "") + "</div>")
