"""The ``thermochain`` command: subcommands, logging and exit codes; no logic beyond wiring.

Exit status: 0 success, 2 bad input (workflow, mesh, names, values), 1 a run that failed; with
``run --check-verdict``, 3 when the run succeeded but a stress verdict is 'fail' (VERDICT_FAILED).
"""

from __future__ import annotations

import argparse
import logging
import sys
import traceback
from pathlib import Path

from . import __version__, errors


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="thermochain", description=(
        "Heat (steady or transient) -> thermal strain -> stress finite elements for electronics housings."))
    p.add_argument("--version", action="version", version=f"thermochain {__version__}")
    p.add_argument("--debug", action="store_true", help="show tracebacks")
    p.add_argument("-q", "--quiet", action="store_true", help="only errors")
    p.add_argument("-v", "--verbose", action="store_true", help="progress of every stage on stderr")
    sub = p.add_subparsers(dest="command", required=True)
    for name, text in (("run", "run a workflow (reusing unchanged stages) and write its results folder"),
                       ("check", "validate a workflow and its mesh without solving; print the plan")):
        cmd = sub.add_parser(name, help=text, description=text, epilog=EXAMPLES[name],
                             formatter_class=argparse.RawDescriptionHelpFormatter)
        cmd.add_argument("workflow")
        cmd.add_argument("--set", action="append", default=[], metavar="KEY=VALUE",
                         help="override a value by its key path, e.g. stages.heat.power.chip=3.0")
        cmd.add_argument("--rerun", action="append", default=[], metavar="STAGE", help="compute STAGE even if stored")
        cmd.add_argument("--out", help="results folder (default: the workflow's output.folder)")
        cmd.add_argument("--store", help="stage store folder (default: $THERMOCHAIN_STORE, else the user's cache "
                                         "folder; `thermochain store` shows it)")
        if name == "run":
            cmd.add_argument("--check-verdict", action="store_true",
                             help=f"exit with status {VERDICT_FAILED} when a stress stage's verdict is 'fail' "
                                  "(a part below the required safety factor); the run itself is kept")
    check = sub.choices["check"]
    check.add_argument("--json", action="store_true", help="print the plan as JSON")
    _command(sub, "schema", "print the JSON Schema of workflow files")
    rep = _command(sub, "report", "rebuild the figures and report.html of a results folder, without solving")
    rep.add_argument("folder")
    rep.add_argument("--store", help="stage store folder (default: the one the run used)")
    cmp = _command(sub, "compare", "compare two results folders: inputs changed, per-part results side by side, "
                                   "which fields and figures differ; writes compare.html and compare.csv")
    cmp.add_argument("a", metavar="RESULTS_A")
    cmp.add_argument("b", metavar="RESULTS_B")
    cmp.add_argument("--out", default="results/compare", help="folder for compare.html, compare.csv and the "
                                                              "difference figures (default: results/compare)")
    st = _command(sub, "store", "list the stage store's entries, or remove old ones")
    st.add_argument("--json", action="store_true", help="print the entries as JSON")
    st.add_argument("folder", nargs="?", help="store folder (default: $THERMOCHAIN_STORE, else the user's "
                                              "cache folder, as for every command)")
    st.add_argument("--clean", type=float, metavar="DAYS", help="remove entries not used for DAYS days")
    mats = _command(sub, "materials", "list the material library with units and sources")
    mats.add_argument("--json", action="store_true", help="print every property with its unit and source as JSON")
    mats.add_argument("name", nargs="?", help="show one material in full")
    mats.add_argument("--file", help="a materials TOML file to add to the library")
    ins = _command(sub, "mesh", "read a mesh and list its parts, surfaces, interfaces and bounding box")
    ins.add_argument("--json", action="store_true", help="print it as JSON (SI units)")
    ins.add_argument("file")
    ins.add_argument("--unit", required=True, help="length unit of the mesh: m, cm, mm, um or in")
    _study_parsers(sub)
    _verify_parser(sub)
    return p


#: an example for each subcommand's --help
EXAMPLES = {
    "run": "example:\n  thermochain run workflows/housing.toml --set stages.heat.power.cpu=12 --out results/cpu12",
    "check": "example:\n  thermochain check workflows/housing_magnesium.toml   # which stages would rerun, and why",
    "schema": "example:\n  thermochain schema > workflow.schema.json   # for an editor's TOML/JSON validation",
    "report": "example:\n  thermochain report results/housing",
    "compare": "example:\n  thermochain compare results/housing results/housing_magnesium --out results/compare",
    "store": "examples:\n  thermochain store --json\n  thermochain store .thermochain-store --clean 30",
    "materials": "examples:\n  thermochain materials fr4\n  thermochain materials --file my_materials.toml --json",
    "mesh": "example:\n  thermochain mesh cases/housing/housing_coarse.msh --unit mm",
    "sweep": "example:\n  thermochain sweep workflows/housing_sweep.toml --workers 2",
    "converge": "example:\n  thermochain converge workflows/heat_spreader.toml --levels 3 --quantity heat.chip.max_degC",
    "verify": "examples:\n  thermochain verify --quick\n  thermochain verify --fine --table docs/verification.md",
}


def _command(sub, name: str, text: str) -> argparse.ArgumentParser:
    """A subcommand with its help text and an example in its --help."""
    return sub.add_parser(name, help=text, description=text, epilog=EXAMPLES[name],
                          formatter_class=argparse.RawDescriptionHelpFormatter)


def _study_parsers(sub) -> None:
    """The ``sweep`` and ``converge`` subcommands (pipeline/studies, docs/studies.md)."""
    sw = _command(sub, "sweep", "run a workflow for every combination of swept values (grid or paired lists)")
    cv = _command(sub, "converge", "run a workflow on refined meshes; observed order, Richardson estimate, GCI")
    for cmd in (sw, cv):
        cmd.add_argument("workflow")
        cmd.add_argument("--set", action="append", default=[], metavar="KEY=VALUE",
                         help="override a value for every run, e.g. stages.heat.power.chip=3.0")
        cmd.add_argument("--out", help="study folder (default: the workflow's output.folder + _sweep / _convergence)")
        cmd.add_argument("--store", help="stage store folder (default: $THERMOCHAIN_STORE, else the user's cache "
                                         "folder)")
    sw.add_argument("--sweep", metavar="FILE", help="sweep definition file (default: the workflow's [sweep] table)")
    sw.add_argument("--scheduler", metavar="ADDRESS", help="run on this Dask scheduler, e.g. tcp://host:8786 "
                                                            "(default: a local cluster)")
    sw.add_argument("--workers", type=int, help="worker processes of the local cluster (default: the cores)")
    sw.add_argument("--threads", type=int, default=1, help="numerical-library threads per local worker (default 1)")
    sw.add_argument("--serial", action="store_true", help="run the variants one after another in this process")
    cv.add_argument("--levels", type=int, default=3, help="number of meshes, refined uniformly (default 3)")
    cv.add_argument("--meshes", nargs="+", metavar="FILE", help="a series of mesh files instead (coarse to fine "
                                                                 "or in any order; same unit as the workflow's mesh)")
    cv.add_argument("--quantity", action="append", default=[], metavar="NAME",
                    help="a figure to study, e.g. heat.board.max_degC (default: a standard set)")


def main(argv: list[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    level = logging.ERROR if args.quiet else logging.INFO if args.verbose else logging.WARNING
    logging.basicConfig(level=level,
                        format="%(levelname)s: %(message)s", stream=sys.stderr)
    try:
        return COMMANDS[args.command](args)
    except errors.ThermochainError as exc:
        if args.debug:
            traceback.print_exc()
        kind = "input error" if exc.exit_status == 2 else "run failed"
        print(f"thermochain: {kind}:", file=sys.stderr)
        for line in exc.problems:
            print(f"  {line}", file=sys.stderr)
        return exc.exit_status
    except OSError as exc:  # a file outside the store (results folder, figures) cannot be read or written
        if args.debug:
            traceback.print_exc()
        print(f"thermochain: run failed:\n  {exc.filename or 'file system'}: {exc.strerror or exc}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("thermochain: interrupted", file=sys.stderr)
        return 130


#: exit status of ``run --check-verdict`` when the computation succeeded and a verdict failed
VERDICT_FAILED = 3


def _run(args) -> int:
    from .flow import runner

    import time

    start = time.perf_counter()

    def progress(line: str) -> None:
        if not args.quiet:
            print(f"[{time.perf_counter() - start:7.2f} s] {line}", file=sys.stderr, flush=True)

    record = runner.run(args.workflow, args.set, args.store, args.out, args.rerun, progress=progress)
    if not args.quiet:
        _print_run(record)
    failing = [name for name, st in record["stages"].items() if st.get("verdict", {}).get("verdict") == "fail"]
    if getattr(args, "check_verdict", False) and failing:
        print(f"thermochain: verdict fail in {', '.join(failing)} (--check-verdict)", file=sys.stderr)
        return VERDICT_FAILED
    return 0


def _check(args) -> int:
    from .flow import runner

    plan, decisions = runner.check(args.workflow, args.set, args.store, args.out, args.rerun)
    if args.json:
        _print_json({"workflow": str(plan.path), "store": str(plan.store.root), "folder": str(plan.folder),
                     "mesh": plan.domain.to_dict(),
                     "stages": [{"name": s.name, "kind": s.kind, "reads": s.source if not s.sources else list(s.sources), "key": s.key,
                                 "reuse": decisions[s.name][0], "reason": decisions[s.name][1]} for s in plan.stages]})
        return 0
    if not args.quiet:
        print(plan.domain.describe())
        print(f"store: {plan.store.root}")
        for s in plan.stages:
            reuse, reason = decisions[s.name]
            reads = f", reads {', '.join(s.reads)}" if s.reads else ""
            print(f"stage {s.name} ({s.kind}{reads}): {'reuse' if reuse else 'run'} - {reason}")
            for note in s.notices:
                print(f"  note: {note}")
    return 0


def _compare(args) -> int:
    from .outputs import compare

    record = compare.run(args.a, args.b, args.out)
    if not args.quiet:
        for line in record["statements"]:
            print(line)
        print(f"comparison: {Path(args.out) / 'compare.html'}")
    return 0


def _report(args) -> int:
    from .flow import runner

    record = runner.report(args.folder, args.store)
    if not args.quiet:
        print(f"report rebuilt: {args.folder}/{record.get('report', 'report.html')}")
    return 0


def _schema(args) -> int:
    import json

    from .flow import workflow

    print(json.dumps(workflow.schema(), indent=2))
    return 0


def _store(args) -> int:
    import math
    import time

    from .flow import store

    s = store.Store(store.root(args.folder))
    if args.clean is not None:
        if not math.isfinite(args.clean) or args.clean < 0:
            raise errors.InputError(f"--clean {args.clean:g}: give the age in days as a number >= 0")
        done = s.clean(args.clean)
        print(f"removed {len(done.removed)} entries and {len(done.leftovers)} leftovers of interrupted writes "
              f"from {s.root}")
        for e in done.removed:
            print(f"  removed {e.kind} {e.key[:16]}")
        for path, why in done.kept:
            print(f"  kept {path.relative_to(s.root)}: {why}")
        return 0
    if s.root.exists() and not s.is_store():
        print(f"{s.root} is not a thermochain store (no {store.MARKER}): 0 entries")
        return 0
    entries = s.entries()
    if args.json:
        _print_json({"store": str(s.root), "entries": [{"kind": e.kind, "key": e.key, "bytes": e.size,
                                                         "last_used": e.last_used, "problem": e.problem}
                                                        for e in entries]})
        return 0
    for e in entries:
        age = (time.time() - e.last_used) / 86400
        damaged = f"  ({e.problem})" if e.problem else ""
        print(f"{e.kind:<7} {e.key[:16]}  {e.size / 1e6:9.3f} MB  last used {age:6.1f} days ago{damaged}")
    print(f"{len(entries)} entries, {sum(e.size for e in entries) / 1e6:.3f} MB in {s.root}")
    return 0


def _materials(args) -> int:
    from rich.console import Console
    from rich.table import Table

    from .model import materials

    lib = materials.read_file(args.file, materials.library()) if args.file else materials.library()
    if args.json:
        chosen = [lib[args.name]] if args.name else [lib[n] for n in lib]
        _print_json({"materials": [m.to_dict() for m in chosen]})
        return 0
    # text from material files is printed literally: no rich markup, emoji codes or highlighting in it
    console = Console(width=None if sys.stdout.isatty() else 160, markup=False, emoji=False, highlight=False)
    if args.name:
        m = lib[args.name]
        table = Table(title=f"{m.name}: {m.title} ({m.kind})")
        for col in ("property", "value", "unit", "source"):
            table.add_column(col)
        for prop, unit in materials.UNITS.items():
            value = getattr(m, prop)
            if value not in (None, ()):
                table.add_row(prop, _fmt(value), unit, m.sources.get(prop, ""))
        console.print(table)
        if m.note:
            console.print(f"note: {m.note}")
        return 0
    table = Table(title="thermochain material library (typical values, not design minima)")
    for col in ("name", "title", "k W/(m*K)", "E GPa", "nu", "alpha 1e-6/K", "strength MPa"):
        table.add_column(col)
    for name in lib:
        m = lib[name]
        strength = m.yield_strength or m.tensile_strength
        table.add_row(name, m.title, _fmt(m.conductivity), _fmt(tuple(e / 1e9 for e in m.youngs_modulus)),
                      _fmt(m.poisson_ratio), _fmt(tuple(a * 1e6 for a in m.expansion)),
                      f"{strength / 1e6:.3g}{' (fracture)' if m.brittle else ''}" if strength else "")
    console.print(table)
    console.print("Sources per value: thermochain materials NAME")
    return 0


def _mesh(args) -> int:
    from .model import mesh

    domain = mesh.load(args.file, unit=args.unit)
    if args.json:
        _print_json(domain.to_dict())
    else:
        print(domain.describe())
    return 0


def _print_json(data: dict) -> None:
    import json

    print(json.dumps(data, indent=2, allow_nan=False, default=float))


def _fmt(value) -> str:
    if isinstance(value, tuple):
        return ", ".join(f"{v:.4g}" for v in value)
    return f"{value:.4g}" if isinstance(value, float) else str(value)


def _print_run(record: dict) -> None:
    from . import kinds

    from .outputs import verdict

    print(f"thermochain {record['thermochain']}: {record['workflow']} ({record['status']}, {record['seconds']:.1f} s)")
    if record.get("verdict"):
        print("verdict:\n" + verdict.text(record["verdict"]))
    for name, stage in record["stages"].items():
        print(f"stage {name} ({stage['kind']}): {stage['status']} - {stage['reason']}")
        for line in kinds.hook(stage["kind"], "console")(stage):
            print(line)
        for note in stage.get("notices", []):
            print(f"  note: {note}")
    for w in record.get("warnings", []):
        print(f"warning: {w}")
    if "report" in record:
        print(f"report: {Path(record['folder']) / record['report']}")
    print("Caution: " + record["caution"])


COMMANDS = {"run": _run, "check": _check, "materials": _materials, "mesh": _mesh, "schema": _schema,
            "store": _store, "report": _report, "compare": _compare}
COMMANDS |= {"sweep": lambda args: _study("sweep", args), "converge": lambda args: _study("converge", args)}


def _verify_parser(sub) -> None:
    """The ``verify`` subcommand (pipeline/verification, docs/verification.md)."""
    vf = _command(sub, "verify", "run the verification cases (benchmarks, closed forms, convergence orders) "
                                 "and write their table; exit 0 only when every case passes")
    level = vf.add_mutually_exclusive_group()
    level.add_argument("--quick", dest="level", action="store_const", const="quick",
                       help="coarse meshes: seconds (what the tests run)")
    level.add_argument("--fine", dest="level", action="store_const", const="fine",
                       help="the converged figures of docs/verification.md (a minute or more)")
    vf.set_defaults(level="default")
    vf.add_argument("--only", action="append", default=[], metavar="CASE", help="run this case only (repeatable)")
    vf.add_argument("--list", action="store_true", help="list the cases and the levels they run at")
    vf.add_argument("--out", default="results/verification", help="work folder: one subfolder per case with its "
                                                                  "workflow, meshes and results "
                                                                  "(default: results/verification)")
    vf.add_argument("--table", help="Markdown table to write (default: OUT/verification.md)")


def _verify(args) -> int:
    import time

    from . import verification

    if args.list:
        for case in verification.select(args.only):
            print(f"{case.name:<28} {', '.join(case.levels):<20} {case.title} ({case.path})")
        return 0
    start = time.perf_counter()

    def progress(line: str) -> None:
        if not args.quiet:
            print(f"[{time.perf_counter() - start:7.2f} s] {line}", file=sys.stderr, flush=True)

    command = " ".join(["thermochain verify"] + ([f"--{args.level}"] if args.level != "default" else [])
                       + [f"--only {name}" for name in args.only] + ([f"--table {args.table}"] if args.table else []))
    report = verification.run(args.level, args.only, args.out, progress=progress, command=command)
    table = Path(args.table) if args.table else Path(args.out) / "verification.md"
    verification.write(report, table, Path(args.out))
    if not args.quiet:
        verification.show(report)
        print(f"table: {table}")
    return 0 if report.passed else 1


COMMANDS["verify"] = _verify


def _study(study: str, args) -> int:
    """Run a sweep or a convergence study and print its summary (pipeline/studies)."""
    import time

    from .studies import convergence, sweep

    start = time.perf_counter()

    def progress(line: str) -> None:
        if not args.quiet:
            print(f"[{time.perf_counter() - start:7.2f} s] {line}", file=sys.stderr, flush=True)

    if study == "sweep":
        record = sweep.run(args.workflow, args.sweep, args.set, args.store, args.out, args.scheduler, args.workers,
                           args.threads, args.serial, progress=progress)
        text = sweep.describe(record)
    else:
        record = convergence.run(args.workflow, args.levels, args.meshes, args.quantity, args.set, args.store,
                                 args.out, progress=progress)
        text = convergence.describe(record)
    if not args.quiet:
        print(text)
        print("Caution: " + record["caution"])
    return 1 if record.get("counts", {}).get("variants", {}).get("failed") else 0  # failed variants: see the table
