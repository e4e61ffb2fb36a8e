"""Named figures of a run's summary record, the columns of study tables.

Names are ``STAGE.ITEM.QUANTITY_UNIT`` in display units (degC, MPa, mm, N):
heat: ``heat.cpu.max_degC`` (also min, mean), ``heat.probes.cpu_top_degC``, ``heat.heat_in_W``;
stress: ``stress.shell.von_mises_max_MPa`` (also principal_max, principal_min), ``stress.shell.safety_factor``,
``stress.safety_factor_min``, ``stress.displacement_max_mm``, ``stress.probes.cpu_top.von_mises_MPa``,
``stress.probes.cpu_top.displacement_mm`` (magnitude), ``stress.reactions.bolt_1.z_N``.
"""

from __future__ import annotations

import math

from .. import errors


def flatten(record: dict) -> dict[str, float | None]:
    """Every figure of a summary record by name (None where a figure does not exist, e.g. no safety factor)."""
    out: dict[str, float | None] = {}
    for name, st in record.get("stages", {}).items():
        if st.get("kind") == "heat" and "parts_degC" in st:
            for part, s in st["parts_degC"].items():
                out |= {f"{name}.{part}.{k}_degC": s[k] for k in ("max", "mean", "min")}
            out |= {f"{name}.probes.{p}_degC": t for p, t in st.get("probes_degC", {}).items()}
            out[f"{name}.heat_in_W"] = st.get("heat_in_W")
        elif st.get("kind") == "stress" and "parts" in st:
            factors = []
            for part, f in st["parts"].items():
                for k in ("von_mises_max", "principal_max", "principal_min"):
                    out[f"{name}.{part}.{k}_MPa"] = f[f"{k}_Pa"] / 1e6
                out[f"{name}.{part}.safety_factor"] = f["safety_factor"]
                if f["safety_factor"] is not None:
                    factors.append(f["safety_factor"])
            out[f"{name}.safety_factor_min"] = min(factors) if factors else None
            out[f"{name}.displacement_max_mm"] = st["displacement_max_m"] * 1e3
            for p, v in st.get("probes", {}).items():
                out[f"{name}.probes.{p}.von_mises_MPa"] = v["von_mises_Pa"] / 1e6
                out[f"{name}.probes.{p}.displacement_mm"] = math.hypot(*v["displacement_m"]) * 1e3
            for support, r in st.get("reactions_N", {}).items():
                out |= {f"{name}.reactions.{support}.{a}_N": v for a, v in zip("xyz", r)}
    return out


def check_names(names: list[str], available: dict, where: str) -> None:
    """``InputError`` for every name that is not a figure of the run, with the closest valid name."""
    bad = [errors.unknown_name("figure", n, available, where) for n in names if n not in available]
    if bad:
        raise errors.InputError(bad)
