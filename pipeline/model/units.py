"""Units at the edge: the package works in SI inside (m, K, W, Pa)."""

from __future__ import annotations

from .. import errors

#: Length units a mesh may be drawn in, as metres per unit.
LENGTH_UNITS: dict[str, float] = {"m": 1.0, "cm": 1e-2, "mm": 1e-3, "um": 1e-6, "in": 0.0254}

#: Kelvin at 0 degC.
ZERO_CELSIUS = 273.15


def length_factor(unit: str, where: str = "mesh") -> float:
    """Metres per ``unit``; raises ``InputError`` naming the valid units."""
    try:
        return LENGTH_UNITS[unit]
    except (KeyError, TypeError):
        valid = ", ".join(LENGTH_UNITS)
        raise errors.InputError(
            f"{where}: length unit {unit!r} is not known{errors.closest(str(unit), LENGTH_UNITS)}; "
            f"valid units are {valid}"
        ) from None


def celsius(t_kelvin):
    """Temperature in degC from K (numbers or arrays)."""
    return t_kelvin - ZERO_CELSIUS


def kelvin(t_celsius):
    """Temperature in K from degC (numbers or arrays)."""
    return t_celsius + ZERO_CELSIUS
