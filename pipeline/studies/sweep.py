"""``thermochain sweep``: one workflow run per combination of values, sharing one stage store.

The definition is the workflow's ``[sweep]`` table, or a TOML file given with ``--sweep`` (its ``[sweep]``
table, or its top level)::

    [sweep]
    grid = { "stages.stress.materials.shell" = ["aluminium_a380", "magnesium_az91d"] }   # every combination
    paired = { "stages.heat.power.cpu" = ["4 W", "8 W"], "stages.heat.power.regulator" = ["1 W", "2 W"] }
    figures = ["heat.cpu.max_degC", "stress.safety_factor_min"]    # plotted against the swept values

``grid`` keys are combined as a full grid; each ``paired`` group (a table, or an array of tables) is one
more axis whose lists change together.  Each variant is the workflow with ``--set KEY=VALUE`` for its
values, so variants that differ only in what a later stage reads reuse the earlier stages' results.
Results: ``sweep.json``, ``sweep.csv``, a PNG per plotted figure and ``sweep.html`` in the sweep folder,
and each variant's summary under ``variants/<id>/``.  See docs/studies.md.
"""

from __future__ import annotations

import hashlib
import itertools
import json
import time
import tomllib
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ConfigDict, Field, ValidationError

from .. import __version__, errors
from ..flow import runner
from ..flow import workflow as wf
from ..outputs.summary import CAUTION, write_json, write_text
from . import execute, linear, page, quantities

Value = str | int | float | bool | list | dict


class Definition(BaseModel):
    """The ``[sweep]`` table."""

    model_config = ConfigDict(extra="forbid", frozen=True)
    grid: dict[str, list[Value]] = Field(default_factory=dict, description="key path -> values; all combinations")
    paired: dict[str, list[Value]] | list[dict[str, list[Value]]] = Field(
        default_factory=dict, description="key path -> values changed together (lists of equal length)")
    figures: list[str] = Field(default_factory=list, description="figures to plot (names as in sweep.csv)")
    against: str | None = Field(default=None, description="key path on the x axis of the plots")
    folder: str | None = Field(default=None, description="sweep folder, relative to the file")
    variant_outputs: bool = Field(default=False, description="also write VTU, figures and report per variant")


def definition(path: Path, sweep_file: str | None) -> tuple[Definition, Path]:
    """The sweep definition and the file it came from."""
    source = Path(sweep_file) if sweep_file else path
    if sweep_file:
        try:
            raw = tomllib.loads(source.read_text(encoding="utf-8"))
        except FileNotFoundError:
            raise errors.InputError(f"{source}: sweep file not found") from None
        except tomllib.TOMLDecodeError as exc:
            raise errors.InputError(f"{source}: TOML syntax error: {exc}") from None
        table = raw.get("sweep", raw)
    else:
        table = wf.read_raw(path).get("sweep")
        if table is None:
            raise errors.InputError(f"{path}: no [sweep] table; add one (docs/studies.md) or give --sweep FILE")
    try:
        d = Definition.model_validate(table)
    except ValidationError as exc:
        raise errors.InputError([f"{source}: sweep.{'.'.join(str(p) for p in e['loc'])}: "
                                 f"{e['msg']} (got {e.get('input')!r})" for e in exc.errors()]) from None
    return d, source


def axes(d: Definition, where: str) -> list[tuple[tuple[str, ...], list[tuple]]]:
    """(key paths, list of value tuples) per axis: one per grid key, one per paired group."""
    out, problems, seen = [], [], set()
    groups = [d.paired] if isinstance(d.paired, dict) else list(d.paired)
    for key, values in d.grid.items():
        out.append(((key,), [(v,) for v in values]))
    for i, group in enumerate(groups):
        if not group:
            continue
        lengths = {k: len(v) for k, v in group.items()}
        if len(set(lengths.values())) > 1:
            problems.append(f"{where}: sweep.paired{'' if isinstance(d.paired, dict) else f'[{i}]'}: the lists "
                            f"must have equal lengths, got {', '.join(f'{k}: {n}' for k, n in lengths.items())}")
            continue
        out.append((tuple(group), list(zip(*group.values()))))
    for keys, values in out:
        for k in keys:
            if k in seen:
                problems.append(f"{where}: sweep: key path '{k}' is swept twice")
            seen.add(k)
        if not values:
            problems.append(f"{where}: sweep: '{keys[0]}' has no values")
    if not out and not problems:
        problems.append(f"{where}: sweep: give 'grid' and/or 'paired' value lists")
    if problems:
        raise errors.InputError(problems)
    return out


def toml_value(value: Any) -> str:
    """``value`` written as a TOML value (the form ``--set`` reads)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    return "{" + ", ".join(f"{json.dumps(k)} = {toml_value(v)}" for k, v in value.items()) + "}"


def variants(d: Definition, where: str) -> list[dict[str, Any]]:
    """Every combination: key path -> value, in grid order (the last axis varies fastest)."""
    ax = axes(d, where)
    out = []
    for combo in itertools.product(*(values for _, values in ax)):
        out.append({k: v for (keys, _), vals in zip(ax, combo) for k, v in zip(keys, vals)})
    return out


def variant_id(values: dict) -> str:
    """Folder name of a variant: a hash of its values, stable when other variants are added."""
    return hashlib.sha256(json.dumps(values, sort_keys=True).encode()).hexdigest()[:12]


def run(path: str | Path, sweep_file: str | None = None, sets: list[str] | None = None, store: str | None = None,
        out: str | None = None, scheduler: str | None = None, workers: int | None = None, threads: int = 1,
        serial: bool = False, progress=None) -> dict:
    """Run (or resume) the sweep of ``path``; returns the sweep record written to sweep.json."""
    started = time.perf_counter()
    say = progress or (lambda line: None)
    path = Path(path).resolve()
    d, source = definition(path, sweep_file)
    combos = variants(d, str(source))
    swept = [k for keys, _ in axes(d, str(source)) for k in keys]
    if d.against is not None and d.against not in swept:
        raise errors.InputError(errors.unknown_name("swept key path", d.against, swept, f"{source}: sweep.against"))
    base = wf.load(path, sets)
    folder = Path(out) if out else source.parent / d.folder if d.folder else Path(base.output.folder + "_sweep")
    folder = folder.resolve()
    store_root = str(runner.store_root(path, store).resolve())
    quiet = [] if d.variant_outputs else ["output.vtu=false", "output.figures=false", "output.report=false"]
    tasks, problems = [], []
    for i, values in enumerate(combos):
        vsets = list(sets or []) + [f"{k}={toml_value(v)}" for k, v in values.items()] + quiet
        if i == 0:  # the definition is validated; one variant is checked here, each other one when it runs
            try:
                runner.plan(path, vsets, store_root, str(folder / "variants" / variant_id(values)))
            except errors.InputError as exc:
                problems += [f"variant {values}: {p}" for p in exc.problems]
        vid = variant_id(values)
        tasks.append({"id": vid, "values": values, "workflow": str(path), "sets": vsets, "store": store_root,
                      "folder": str(folder / "variants" / vid)})
    if problems:
        raise errors.InputError(list(dict.fromkeys(problems)))
    record = {"thermochain": __version__, "workflow": str(path), "definition": str(source), "folder": str(folder),
              "store": store_root, "axes": [{"keys": list(k), "values": [list(v) for v in vals]}
                                            for k, vals in axes(d, str(source))],
              "variants": len(tasks), "caution": CAUTION}
    rows: list[dict] = []
    with execute.Executor(scheduler, workers, threads, serial) as ex:
        record["executor"] = ex.describe()
        say(f"{len(tasks)} variants on {record['executor']}")
        record["linearity"] = ex.one(linear.prepare, tasks)
        for r in record["linearity"].values():
            say(r["reason"])

        def done(row: dict) -> None:
            rows.append(row)
            note = row.get("error") or ", ".join(f"{k} {v}" for k, v in row.get("stages", {}).items())
            say(f"[{len(rows)}/{len(tasks)}] {row['id']} {row['status']}: {note}")
            _write(folder, record | {"rows": _ordered(rows, tasks)}, d, final=False)

        ex.map(execute.run_variant, tasks, done)
    record["rows"] = _ordered(rows, tasks)
    record["counts"] = _counts(record["rows"])
    record["seconds"] = time.perf_counter() - started
    _write(folder, record, d, final=True)
    return record


def _ordered(rows: list[dict], tasks: list[dict]) -> list[dict]:
    by_id = {r["id"]: r for r in rows}
    return [by_id[t["id"]] for t in tasks if t["id"] in by_id]


def _counts(rows: list[dict]) -> dict:
    """Variants by status, and per stage how often it was computed, superposed or reused."""
    out = {"variants": {}, "stages": {}}
    for r in rows:
        out["variants"][r["status"]] = out["variants"].get(r["status"], 0) + 1
        for name, status in r.get("stages", {}).items():
            out["stages"].setdefault(name, {}).setdefault(status, 0)
            out["stages"][name][status] += 1
    return out


def _write(folder: Path, record: dict, d: Definition, final: bool) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    write_json(folder / "sweep.json", record)
    if not final:
        return
    ok = [r for r in record["rows"] if r["status"] != "failed"]
    names = d.figures or _default_figures(ok)
    record["notices"] = []
    if ok:
        try:
            quantities.check_names(names, ok[0]["figures"], f"{record['definition']}: sweep.figures")
        except errors.InputError as exc:  # the results are stored; report the names, plot the rest
            record["notices"] += exc.problems
            names = [n for n in names if n in ok[0]["figures"]]
    write_text(folder / "sweep.csv", page.table_csv(record, names))
    keys = [k for a in record["axes"] for k in a["keys"]]
    against = d.against or keys[0]
    if against not in keys:
        record["notices"].append(errors.unknown_name("swept key path", against, keys,
                                                     f"{record['definition']}: sweep.against"))
        against = keys[0]
    record["plots"] = page.sweep_plots(folder, record, names, against)
    record["figures"] = names
    write_json(folder / "sweep.json", record)
    page.sweep_html(folder / "sweep.html", record, names)


def _default_figures(rows: list[dict]) -> list[str]:
    """Peak temperatures of every part, and each stress stage's smallest safety factor."""
    if not rows:
        return []
    names = list(rows[0]["figures"])
    return [n for n in names if n.endswith(".max_degC") or n.endswith(".safety_factor_min")]


def describe(record: dict) -> str:
    """A few lines for the terminal: counts, linearity, failures and where the results are."""
    counts = record["counts"]
    lines = [f"sweep of {record['workflow']}: {record['variants']} variants "
             f"({', '.join(f'{n} {s}' for s, n in counts['variants'].items())}) in {record['seconds']:.1f} s "
             f"on {record['executor']}"]
    lines += [f"stage {s}: " + ", ".join(f"{n} {k}" for k, n in c.items()) for s, c in counts["stages"].items()]
    lines += [r["reason"] for r in record["linearity"].values()]
    lines += [f"failed {r['id']} ({', '.join(f'{k}={v}' for k, v in r['values'].items())}): {r['error']}"
              for r in record["rows"] if r["status"] == "failed"]
    lines += [f"note: {n}" for n in record.get("notices", [])]
    lines.append(f"table: {Path(record['folder']) / 'sweep.csv'}; page: {Path(record['folder']) / 'sweep.html'}")
    return "\n".join(lines)
