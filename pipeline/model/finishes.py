"""Emissivities of common surface finishes (total hemispherical, near room temperature), with sources.

An emissivity belongs to a surface finish, not to a material: it is set per surface in the workflow,
as a number in 0..1 or as one of these names.  Values vary with oxide thickness, roughness and
temperature by tens of percent; measure the real part where it matters.
"""

from __future__ import annotations

from .. import errors

FINISHES: dict[str, tuple[float, str]] = {
    "anodised_aluminium": (0.84, "LBNL, Spectral emissivity of anodized aluminum and the thermal transmittance of "
                                 "aluminum window frames: 0.834-0.856 normal total; Incropera et al. 6th ed. "
                                 "Table A.11 gives 0.82 (from memory)"),
    "black_anodised_aluminium": (0.85, "practitioner forum answer, 'typically 0.85' (weak source)"),
    "oxidised_aluminium": (0.3, "infrared-thermometer emissivity table, 0.2-0.4 in the 8-14 um band (typical value "
                                "in the range)"),
    "polished_aluminium": (0.05, "infrared-thermometer emissivity table, 0.02-0.1 (typical value in the range)"),
    "paint": (0.9, "paints and powder coatings 0.85-0.95, common practice (from memory)"),
    "solder_mask": (0.9, "solder mask on boards 0.85-0.95, common practice (from memory)"),
}


def emissivity(value, where: str) -> tuple[float, str]:
    """(emissivity, source) from a number or a finish name."""
    if isinstance(value, str):
        if value not in FINISHES:
            raise errors.InputError(errors.unknown_name("finish", value, FINISHES, where))
        return FINISHES[value]
    return float(value), "given in the workflow"
