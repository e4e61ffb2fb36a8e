"""The verification suite: published benchmarks and closed-form cases run through the user's code paths.

Each case is an ordinary workflow from the ``cases`` folder shipped with the package, run by
``flow.runner.run`` in a folder of its own (its meshes are written there by numpy, or copied from the
shipped Gmsh meshes); the verified quantities are read at full precision from the run's stored stage
results.  Manufactured-solution order checks need source terms that a workflow cannot express, so they
call the public stage functions (``stages.heat.solve``, ``stages.stress.solve``) and say so.

``run(level)`` returns a ``Report``; ``Report.markdown()`` is the table of docs/verification.md.
Levels: "quick" (seconds, the tests), "default" (finer meshes where they matter, a minute or two),
"fine" (the converged figures of docs/verification.md).
"""

from __future__ import annotations

import datetime
import math
import platform
import shutil
import time
import tomllib
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path

from .. import __version__, errors

LEVELS = ("quick", "default", "fine")
#: display unit -> (factor, offset) from SI
UNITS = {"degC": (1.0, -273.15), "K": (1.0, 0.0), "W": (1.0, 0.0), "W/m": (1.0, 0.0), "MPa": (1e-6, 0.0), "mm": (1e3, 0.0),
         "1/m": (1.0, 0.0), "-": (1.0, 0.0), "N": (1.0, 0.0), "mm^2": (1e6, 0.0), "K/W": (1.0, 0.0)}


@dataclass(frozen=True)
class Check:
    """One verified quantity.  expected and computed are in SI; ``unit`` is how the table shows them.

    The error is |computed - expected| / scale (scale defaults to |expected|; a stated scale is used
    where the expected value is zero or a temperature, whose kelvin value says nothing).  For an
    order check (``order=True``) expected is the theoretical order, computed the observed one, and
    the error is their difference."""

    quantity: str
    unit: str
    expected: float
    source: str
    tolerance: float
    why: str
    computed: float = math.nan
    scale: float | None = None
    scale_text: str = ""
    order: bool = False

    @property
    def error(self) -> float:
        if self.order:
            return abs(self.computed - self.expected)
        scale = abs(self.expected) if self.scale is None else abs(self.scale)
        return abs(self.computed - self.expected) / scale if scale > 0 else abs(self.computed - self.expected)

    @property
    def passed(self) -> bool:
        return bool(math.isfinite(self.computed) and self.error <= self.tolerance)

    def shown(self, value: float) -> str:
        if self.order:
            return f"{value:.3f}"
        factor, offset = UNITS[self.unit]
        return f"{value * factor + offset:.6g} {self.unit}".replace(" -", "")


@dataclass(frozen=True)
class Case:
    """A verification case.

    levels: level -> parameter (mesh divisions, mesh file ...) given to ``prepare`` and ``checks``;
    a level not listed does not run the case (the table says so).  workflow: file in ``cases``, or
    None for a case that calls the stage functions.  prepare(folder, parameter): writes the meshes
    and field files the workflow names into its folder.  checks(run, parameter) -> [Check]: ``run``
    is a ``WorkflowRun`` (or the work folder for a stage-function case)."""

    name: str
    title: str
    levels: dict
    checks: Callable
    workflow: str | None = None
    prepare: Callable | None = None
    note: str = ""

    @property
    def path(self) -> str:
        return f"workflow `{self.workflow}`" if self.workflow else "stage functions"


@dataclass
class WorkflowRun:
    """What the checks of a workflow case read: the validated workflow (SI values), the run's summary
    and, at full precision, the result and domain of each stage (``pipeline.results.Run``)."""

    run: object

    @property
    def plan(self):
        return self.run.plan

    @property
    def record(self) -> dict:
        return self.run.summary

    @property
    def workflow(self):
        return self.plan.workflow

    def stage(self, name: str):
        return next(s for s in self.plan.stages if s.name == name)

    def result(self, name: str):
        return self.run.result(name)

    def domain(self, name: str):
        return self.run.domain(name)

    def material(self, name: str):
        from ..model.materials import from_record

        return from_record(name, self.workflow.materials[name], str(self.plan.path))


@dataclass
class Outcome:
    case: Case
    status: str  # "passed", "failed", "error", "not run"
    checks: list[Check] = field(default_factory=list)
    seconds: float = 0.0
    message: str = ""


@dataclass
class Report:
    level: str
    outcomes: list[Outcome]
    seconds: float
    command: str

    @property
    def passed(self) -> bool:
        return all(o.status in ("passed", "not run") for o in self.outcomes)

    def rows(self) -> list[dict]:
        """One row per check, with the table's columns."""
        out = []
        for o in self.outcomes:
            if o.status == "error":
                out.append({"case": o.case.name, "quantity": "(case did not run to the end)", "expected": "",
                            "source": "", "computed": o.message, "error": "", "tolerance": "", "result": "FAIL"})
            for c in o.checks:
                out.append({
                    "case": o.case.name, "quantity": c.quantity,
                    "expected": ("theoretical " if c.order else "") + c.shown(c.expected), "source": c.source,
                    "computed": ("observed " if c.order else "") + c.shown(c.computed),
                    "error": f"{c.error:.2g}" + (" (order)" if c.order else "") + (
                        f" of {c.scale_text}" if c.scale_text else ""),
                    "tolerance": f"{c.tolerance:.2g}: {c.why}", "result": "pass" if c.passed else "FAIL"})
        return out

    def markdown(self) -> str:
        from ..outputs.summary import CAUTION

        when = datetime.date.today().isoformat()
        cols = ("case", "quantity", "expected", "source", "computed", "error", "tolerance", "result")
        heads = ("case", "quantity", "published or closed-form value", "source", "computed", "relative error",
                 "tolerance and why", "pass/fail")
        lines = [
            "# Verification", "",
            (f"Generated by `{self.command}` on {when} with thermochain {__version__} (Python "
             f"{platform.python_version()}; {_library_versions()}); {len(self.outcomes)} cases in "
             f"{self.seconds:.0f} s. Reproduce it with that command; `--quick` runs the same cases on coarse "
             "meshes in seconds (the tests do)."), "",
            f"**Result: {'every case passed' if self.passed else 'SOME CASES FAILED'}.**", "",
            ("Each case is an ordinary workflow from `pipeline/verification/cases/`, run by the same runner as "
            "`thermochain run`; the computed values are read at full precision from the run's stored stage "
            "results. Manufactured-solution order checks need source terms that a workflow cannot express: "
            "they call the public stage functions and are marked so. The relative error is against the value "
            "shown, or against the scale named beside it; for an order check it is |observed - theoretical|. "
            "Sources marked \"from memory\" were not checked against the publication; \"common practice\" has "
            "no published source."), "",
            "| " + " | ".join(heads) + " |", "|" + "---|" * len(heads)]
        for r in self.rows():
            lines.append("| " + " | ".join(str(r[c]).replace("|", "\\|") for c in cols) + " |")
        from .catalogue import SOURCES

        text = "\n".join(lines)
        lines += ["", "Sources: " + "; ".join(f"{k} {v}" for k, v in SOURCES.items() if k in text) + "."]
        lines += ["", "## Cases", ""]
        for o in self.outcomes:
            state = {"not run": f"not run at --{self.level}"}.get(o.status, o.status)
            lines.append(f"- **{o.case.name}**: {o.case.title}; {o.case.path}; {state}"
                         f"{f' in {o.seconds:.1f} s' if o.status != 'not run' else ''}."
                         f"{' ' + o.case.note if o.case.note else ''}")
        lines += ["", "## Caution", "", CAUTION, ""]
        return "\n".join(lines)

    def to_dict(self) -> dict:
        return {"thermochain": __version__, "level": self.level, "command": self.command, "passed": self.passed,
                "seconds": self.seconds, "rows": self.rows(),
                "cases": {o.case.name: {"status": o.status, "seconds": o.seconds, "message": o.message}
                          for o in self.outcomes}}


def _library_versions() -> str:
    from ..flow.store import versions

    return ", ".join(f"{k} {v}" for k, v in versions().items() if k != "thermochain")


def cases_folder() -> Path:
    """The folder of verification workflows and meshes shipped with the package."""
    return Path(str(resources.files(__package__) / "cases"))


def select(only: Iterable[str] | None = None) -> list[Case]:
    """The cases to run, in catalogue order; an unknown name is an input error with the closest name."""
    from .catalogue import CASES

    only = list(only or [])
    problems = [errors.unknown_name("verification case", n, CASES, "--only") for n in only if n not in CASES]
    if problems:
        raise errors.InputError(problems)
    return [c for name, c in CASES.items() if not only or name in only]


def run(level: str = "default", only: Iterable[str] | None = None, folder: str | Path = "results/verification",
        progress: Callable[[str], None] | None = None, command: str = "") -> Report:
    """Run the cases at ``level`` in ``folder`` (one subfolder per case, a fresh store) and report."""
    if level not in LEVELS:
        raise errors.InputError(f"verification level must be one of {', '.join(LEVELS)}, got {level!r}")
    say = progress or (lambda line: None)
    cases = select(only)
    folder = Path(folder)
    foreign = [f"{folder / c.name}: exists and was not made by thermochain verify; choose another --out"
               for c in cases if (folder / c.name).exists() and not (folder / c.name / MARK).is_file()]
    if foreign:
        raise errors.InputError(foreign)
    started = time.perf_counter()
    outcomes = []
    for case in cases:
        if level not in case.levels:
            outcomes.append(Outcome(case, "not run"))
            continue
        t0 = time.perf_counter()
        work = _fresh(folder / case.name)
        try:
            checks = run_case(case, case.levels[level], work)
            status = "passed" if all(c.passed for c in checks) else "failed"
            outcome = Outcome(case, status, checks)
        except errors.ThermochainError as exc:
            outcome = Outcome(case, "error", message="; ".join(exc.problems))
        except Exception as exc:  # noqa: BLE001  (a defect in the code under test: a failed case; go on)
            outcome = Outcome(case, "error", message=f"{type(exc).__name__}: {exc}")
        outcome.seconds = time.perf_counter() - t0
        outcomes.append(outcome)
        say(f"{case.name}: {outcome.status} in {outcome.seconds:.1f} s")
    return Report(level, outcomes, time.perf_counter() - started,
                  command or f"thermochain verify{'' if level == 'default' else ' --' + level}")


MARK = ".thermochain-verify"


def _fresh(work: Path) -> Path:
    """An empty case folder (``run`` has checked that a previous one carries this command's mark)."""
    if work.exists():
        shutil.rmtree(work)  # the case's own previous run: always computed afresh, with a fresh store
    work.mkdir(parents=True)
    (work / MARK).touch()
    return work


def run_case(case: Case, parameter, work: Path) -> list[Check]:
    """Prepare and run one case in ``work``; returns its checks with the computed values filled in."""
    if case.workflow is None:
        return case.checks(work, parameter)
    from ..flow import runner

    path = _copy_workflow(cases_folder() / case.workflow, work)
    if case.prepare:
        case.prepare(work, parameter)
    store, out = work / "store", work / "results"
    return case.checks(WorkflowRun(runner.execute(path, store=str(store), out=str(out))), parameter)


def _copy_workflow(source: Path, work: Path) -> Path:
    """Copy a workflow file and the files it ``extends`` into ``work``; returns the copy's path."""
    target = work / source.name
    current = source
    while current is not None:
        shutil.copyfile(current, work / current.name)
        parent = tomllib.loads(current.read_text(encoding="utf-8")).get("extends")
        current = source.parent / parent if parent else None
    return target


def shipped_mesh(name: str) -> Path:
    """A Gmsh mesh shipped in ``cases/meshes``."""
    return cases_folder() / "meshes" / name


def show(report: Report) -> None:
    """Print the table (rich wraps the long columns to the terminal), the verdict and the caution."""
    import sys

    from rich.console import Console
    from rich.table import Table

    from ..outputs.summary import CAUTION

    console = Console(width=None if sys.stdout.isatty() else 200)
    table = Table(title=f"thermochain verify --{report.level}: {len(report.outcomes)} cases", show_lines=False)
    cols = (("case", "case"), ("quantity", "quantity"), ("expected", "published / closed form"), ("source", "source"),
            ("computed", "computed"), ("error", "rel. error"), ("tolerance", "tolerance and why"), ("result", "result"))
    for _, head in cols:
        table.add_column(head, overflow="fold")
    for r in report.rows():
        table.add_row(*(str(r[c]) for c, _ in cols), style=None if r["result"] == "pass" else "bold red")
    console.print(table)
    skipped = [o.case.name for o in report.outcomes if o.status == "not run"]
    if skipped:
        console.print(f"not run at --{report.level}: {', '.join(skipped)}")
    verdict = "every case passed" if report.passed else "SOME CASES FAILED"
    console.print(f"{verdict} ({report.seconds:.1f} s)")
    console.print("Caution: " + CAUTION)


def write(report: Report, table: Path, folder: Path) -> None:
    """The Markdown table at ``table``, and verification.json (all rows and case timings) in ``folder``."""
    from ..outputs.summary import write_json, write_text

    write_text(Path(table), report.markdown())
    write_json(Path(folder) / "verification.json", report.to_dict())
