"""Units at the edge: the package works in SI inside (m, K, W, Pa)."""

from __future__ import annotations

import re
import tokenize

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


_REGISTRY = None
_NUMBER_AND_UNIT = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$")


def to_si(value, unit: str):
    """A number (already SI) or a string "number unit" converted to ``unit`` (an SI unit) with pint.

    Raises ValueError with a readable message for an unknown unit or a unit of the wrong dimension.
    """
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise ValueError(f"expected a number or a string with a unit of {unit}, got {value!r}")
    if not isinstance(value, str):
        return float(value)
    match = _NUMBER_AND_UNIT.match(value)
    if not match:
        raise ValueError(f"expected 'number unit' (for example '35 degC'), got {value!r}")
    magnitude, text = float(match.group(1)), match.group(2) or unit
    import pint

    global _REGISTRY
    if _REGISTRY is None:
        _REGISTRY = pint.UnitRegistry(cache_folder=":auto:")  # parsed definitions cached by pint
    try:
        return float(_REGISTRY.Quantity(magnitude, text).to(unit).magnitude)
    except pint.errors.DimensionalityError:
        raise ValueError(f"'{text}' is not a unit of {unit} (wrong dimension)") from None
    except (pint.errors.UndefinedUnitError, AttributeError, TypeError, ValueError, AssertionError,
            ZeroDivisionError, tokenize.TokenError):  # pint parses the text with Python's tokenizer
        raise ValueError(f"'{text}' is not a known unit") from None
