"""Problems and notices as records: a code to compare, a place, a message for people, and data.

Only the command line, the report and the summary turn them into text (``str(record)``); code that
reacts to a problem or a notice compares its ``code``, never its wording.

Codes are dotted words owned by the module that makes the record (``mesh.unnamed_group``,
``stress.singular_peak``, ``heat.adiabatic``); ``input`` and ``note`` are the codes of records made
from plain text.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any


@dataclass(frozen=True)
class Notice:
    """Something a reader must see beside a result.

    code: dotted identifier compared by code.  message: the sentence for people.  where: the file and
    key path or mesh group it is about ("" when it is about the whole run).  data: plain values
    (numbers, names, lists) that tools read instead of the message.
    """

    code: str
    message: str
    where: str = ""
    data: Mapping[str, Any] = field(default_factory=dict)

    def __str__(self) -> str:
        return f"{self.where}: {self.message}" if self.where else self.message

    def to_dict(self) -> dict:
        return {"code": self.code, "message": self.message, "where": self.where, "data": dict(self.data)}

    @classmethod
    def of(cls, item: "Notice | Mapping | str", code: str = "note") -> "Notice":
        """A record from a record, its dict (as summary.json holds it) or a plain line of text."""
        if isinstance(item, Notice):
            return item if type(item) is cls else cls(item.code, item.message, item.where, item.data)
        if isinstance(item, Mapping):
            return cls(str(item.get("code", code)), str(item.get("message", "")), str(item.get("where", "")),
                       dict(item.get("data") or {}))
        return cls(code, str(item))

    def at(self, where: str) -> "Notice":
        """The same record placed at ``where`` (kept when it names a place already)."""
        return self if self.where else type(self)(self.code, self.message, where, self.data)


@dataclass(frozen=True)
class Problem(Notice):
    """A reason why the input cannot be used or the run cannot succeed (carried by ``ThermochainError``)."""

    @classmethod
    def of(cls, item, code: str = "input") -> "Problem":  # noqa: D102 - same as Notice.of
        return super().of.__func__(cls, item, code)


def records(items: Iterable, kind: type[Notice] = Notice) -> tuple:
    """Records from records, dicts or plain lines."""
    return tuple(kind.of(i) for i in items)


def with_code(items: Iterable[Notice], code: str) -> list[Notice]:
    """The records whose code is ``code`` or below it (``stress`` matches ``stress.singular_peak``)."""
    return [n for n in items if n.code == code or n.code.startswith(code + ".")]
