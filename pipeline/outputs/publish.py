"""Everything a run leaves for people: VTU files with a PVD collection, figures, warnings, report.html.

Reads results, never solves; used by the runner after the stages and by ``thermochain report``.
"""

from __future__ import annotations

import logging
from pathlib import Path
from xml.sax.saxutils import quoteattr

from .. import files, kinds
from ..kinds.base import OutputContext
from ..model.units import celsius
from ..notices import Notice
from . import report, verdict, vtu

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
        if options.vtu and kinds.hook(st["kind"], "outputs")(domains[name], results[name]) is not None:
            old = before.get(name, {})
            if old.get("key") == st["key"] and old.get("vtu") and (folder / old["vtu"]).is_file():
                st["vtu"] = old["vtu"]
            else:
                st["vtu"] = vtu.write(folder / f"{name}.vtu", domains[name], results[name], st["kind"]).name
            written.append(st["vtu"])
    for name, st in record["stages"].items():
        files = kinds.hook(st["kind"], "tables")(folder, name, st, results[name])
        if files:
            st["tables"] = files
    if written:
        _pvd(folder / "results.pvd", written)
        record["pvd"] = "results.pvd"
    limits = {p: float(celsius(t)) for p, t in limits_K.items()}
    context = OutputContext(limits, options.required_safety_factor, record)
    if "notices" in record:  # a rebuild draws the figures again: an earlier failure to draw is no longer news
        record["notices"] = [n for n in record["notices"] if not str(n).startswith("figures not drawn")]
    if options.figures:
        try:
            _figures(folder, record, results, domains, context)
        except Exception as exc:  # rendering depends on the machine's graphics libraries
            log.warning("figures were not drawn (%s: %s); the results are complete without them",
                        type(exc).__name__, exc)
            record.setdefault("notices", []).append(f"figures not drawn: {type(exc).__name__}: {exc}")
    record["verdict"] = verdict.verdict(record, limits, options.required_safety_factor)
    found = warnings(record, domains, context)
    record["warnings"] = [str(n) for n in found]
    record["warning_records"] = [n.to_dict() for n in found]
    if options.report:
        record["report"] = report.build(folder, record, context).name


def _pvd(path: Path, written: list[str]) -> None:
    rows = "\n".join(f'    <DataSet timestep="{i}" group="" part="0" file={quoteattr(f)}/>'
                     for i, f in enumerate(written))
    files.write_text(path, '<?xml version="1.0"?>\n<VTKFile type="Collection" version="0.1">\n  <Collection>\n'
                    f"{rows}\n  </Collection>\n</VTKFile>\n")


def _figures(folder, record, results, domains, context: OutputContext) -> None:
    for name, st in record["stages"].items():
        drawn = kinds.hook(st["kind"], "figures")(folder, name, st, results[name], domains[name], context)
        if drawn:
            st["figures"] = drawn


def warnings(record, domains, context: OutputContext) -> list[Notice]:
    """What a reader must not miss (open boundaries, limits exceeded, singular peaks, over-constraint),
    from each stage kind's ``notices``."""
    out = []
    for name, st in record["stages"].items():
        out += kinds.hook(st["kind"], "notices")(name, st, domains[name], context)
    return out
