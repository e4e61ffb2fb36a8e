"""Named figures of a run's summary record, the columns of study tables.

Names are ``STAGE.ITEM.QUANTITY_UNIT`` in display units (degC, MPa, mm, N):
heat: ``heat.cpu.max_degC`` (also min, mean), ``heat.probes.cpu_top_degC``, ``heat.heat_in_W``;
stress: ``stress.shell.von_mises_max_MPa`` (also principal_max, principal_min), ``stress.shell.safety_factor``,
``stress.safety_factor_min``, ``stress.displacement_max_mm``, ``stress.probes.cpu_top.von_mises_MPa``,
``stress.probes.cpu_top.displacement_mm`` (magnitude), ``stress.reactions.bolt_1.z_N``.
"""

from __future__ import annotations

from .. import errors


def flatten(record: dict) -> dict[str, float | None]:
    """Every figure of a summary record by name (None where a figure does not exist, e.g. no safety factor),
    from each stage kind's ``quantities`` hook."""
    from .. import kinds

    out: dict[str, float | None] = {}
    for name, st in record.get("stages", {}).items():
        if st.get("kind") in kinds.names() and st.get("status") != "failed":
            out |= kinds.hook(st["kind"], "quantities")(name, st)
    return out


def check_names(names: list[str], available: dict, where: str) -> None:
    """``InputError`` for every name that is not a figure of the run, with the closest valid name."""
    bad = [errors.unknown_name("figure", n, available, where) for n in names if n not in available]
    if bad:
        raise errors.InputError(bad)
