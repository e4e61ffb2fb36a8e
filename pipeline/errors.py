"""One exception family per kind of failure; the command line turns them into messages and exit codes.

``InputError`` and ``MeshError`` (bad input) give exit status 2; ``PhysicsError``, ``SolverError`` and
``StoreError`` (a run that cannot succeed) give exit status 1.  Each carries a list of problems so that every input
error is reported at once, not only the first: ``records`` holds them as ``Problem`` records (code,
where, message, data) for code to compare; ``problems`` holds the same as lines of text for people.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable

from .notices import Problem


class ThermochainError(Exception):
    """Base class; ``records`` holds one ``Problem`` per problem found, ``problems`` their text."""

    exit_status = 1

    def __init__(self, problems: "str | Problem | Iterable[str | Problem]"):
        items = [problems] if isinstance(problems, (str, Problem)) else list(problems)
        self.records: list[Problem] = list({str(r): r for r in map(Problem.of, items)}.values())  # once each
        super().__init__("\n".join(self.problems))

    @property
    def problems(self) -> list[str]:
        """One line of text per problem, as the command line prints them."""
        return [str(p) for p in self.records]


class InputError(ThermochainError):
    """A value, name or file given by the user is invalid."""

    exit_status = 2


class MeshError(InputError):
    """The mesh file cannot be used as given."""


class PhysicsError(ThermochainError):
    """The model is well formed but has no meaningful solution (e.g. no path for heat to leave)."""


class SolverError(ThermochainError):
    """A linear or nonlinear solve failed."""


class StoreError(ThermochainError):
    """The stage store cannot be written or locked (a failed run; earlier entries stay intact)."""


def closest_name(name: str, valid: Iterable[str]) -> str | None:
    """The valid choice closest to ``name``, or None when nothing is close."""
    lowered = {str(v).lower(): str(v) for v in valid}
    match = difflib.get_close_matches(str(name).lower(), list(lowered), n=1, cutoff=0.5)
    return lowered[match[0]] if match else None


def closest(name: str, valid: Iterable[str]) -> str:
    """A hint naming the valid choice closest to ``name`` (empty when nothing is close)."""
    match = closest_name(name, valid)
    return f" (did you mean '{match}'?)" if match else ""


def unknown_name(kind: str, name: str, valid: Iterable[str], where: str) -> str:
    """Message for a name that does not exist, listing what does and the closest match."""
    valid = sorted(valid)
    listed = ", ".join(valid) if valid else "none"
    return f"{where}: {kind} '{name}' does not exist{closest(name, valid)}; {kind}s there are: {listed}"


#: code of the problem "a part has no material" (reported once by the runner, not by every stage)
NO_MATERIAL = "stage.no_material"


def no_material(part: str, where: str) -> Problem:
    """The problem of a part that a stage finds without a material."""
    return Problem(NO_MATERIAL, f"part '{part}' has no material", where, {"part": part})
