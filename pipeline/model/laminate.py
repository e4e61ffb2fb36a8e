"""The ``laminate`` material kind: a board's effective orthotropic properties from its stack-up.

A laminate is a stack of layers normal to its material z axis; each layer is a library material of
thickness t_i, or a patterned layer: a fraction f of ``material`` (a copper plane or its traces) side by
side with (1 - f) of ``fill`` (the resin that fills the gaps).  Layers are isotropic or orthotropic in
the laminate's axes.  The rules (each exact for its idealisation; R.M. Jones, Mechanics of Composite
Materials, 2nd ed., 1999, ch. 4 for the in-plane laminate stiffness and expansion, from memory):

  conductivity in-plane       k_x = sum t_i k_x,i / t              (parallel)
  conductivity through        k_z = t / sum (t_i / k_z,i)          (series)
  in-plane stiffness          A = sum t_i Q_i, Q the plane-stress reduced stiffness of each layer;
                              E_x = 1 / (t (A^-1)_11), E_y = 1 / (t (A^-1)_22), nu_xy = -(A^-1)_12 / (A^-1)_11,
                              G_xy = sum t_i G_xy,i / t
  in-plane expansion          alpha = A^-1 sum t_i Q_i alpha_i     (stiffness-weighted; for isotropic
                              layers sum t E/(1-nu) alpha / sum t E/(1-nu))
  through-thickness           E_z = t / sum(t_i / E_z,i); G_xz, G_yz in series;
                              alpha_z = sum t_i eps_z,i / t with eps_z,i = alpha_z,i - (nu_xz/E_x) s_x,i
                              - (nu_yz/E_y) s_y,i, s_i = Q_i (alpha - alpha_i) the layer's in-plane
                              stress per kelvin (free in z, held to the common in-plane strain);
                              nu_xz, nu_yz thickness-weighted (common practice)
  density                     thickness-weighted; specific heat mass-weighted (when every layer gives it).
  patterned layer             metal and fill side by side: every property of the layer by the rule of
                              mixtures in f (in-plane as two sub-layers f t and (1 - f) t; through the
                              layer parallel, the metal spanning its thickness: common practice).
The laminate is symmetric-equivalent: in-plane loading does not bend it (an unsymmetric stack would
warp; that coupling is not modelled).  SI units: m, W/(m*K), Pa, 1/K, kg/m^3.
"""

from __future__ import annotations

import numpy as np

from .. import errors

LAYER_KEYS = {"material", "thickness", "fraction", "fill"}
#: keys of a laminate record besides its layers (passed through to the orthotropic result)
PASSED = ("title", "brittle", "note", "specific_heat", "yield_strength", "tensile_strength", "tensile_strength_axes",
          "shear_strength_axes", "valid_from", "valid_to", "sources")


def _constants(m):
    """(k, E, nu_xy, nu_xz, nu_yz, G_xy, G_xz, G_yz, alpha, rho) of a layer material in the laminate axes."""
    k = np.broadcast_to(np.asarray(m.conductivity, float), (3,)).copy()
    e = np.broadcast_to(np.asarray(m.youngs_modulus, float), (3,)).copy()
    nu = np.broadcast_to(np.asarray(m.poisson_ratio, float), (3,)).copy()
    g = np.asarray(m.shear_modulus, float) if len(m.shear_modulus) == 3 else np.full(3, e[0] / (2 * (1 + nu[0])))
    a = np.broadcast_to(np.asarray(m.expansion, float), (3,)).copy()
    c = getattr(m, "specific_heat", None)
    return {"k": k, "E": e, "nu": nu, "G": g, "alpha": a, "rho": float(m.density),
            "rho_c": float(m.density) * c if c else np.nan}


def _q(c) -> np.ndarray:
    """Plane-stress reduced stiffness (3 x 3: xx, yy, xy) of a layer [Pa]."""
    e1, e2 = c["E"][0], c["E"][1]
    n12 = c["nu"][0]
    n21 = n12 * e2 / e1
    d = 1 - n12 * n21
    return np.array([[e1 / d, n12 * e2 / d, 0.0], [n12 * e2 / d, e2 / d, 0.0], [0.0, 0.0, c["G"][0]]])


def effective(layers: list[tuple[float, float, object, object | None]]) -> dict:
    """Effective constants of layers (thickness [m], fraction f, material, fill or None) as the keys of an
    orthotropic material record (conductivity, youngs_modulus, poisson_ratio, shear_modulus, expansion,
    density)."""
    subs = []  # in-plane sub-layers (thickness, constants) and the through-thickness layer constants
    through = []
    for t, f, metal, fill in layers:
        cm = _constants(metal)
        if fill is None or f >= 1.0:
            subs.append((t, cm))
            through.append((t, cm))
            continue
        cf = _constants(fill)
        subs += [(f * t, cm), ((1 - f) * t, cf)]
        through.append((t, {key: f * cm[key] + (1 - f) * cf[key] for key in cm}))
    total = sum(t for t, _ in through)
    A = sum(t * _q(c) for t, c in subs)
    Ainv = np.linalg.inv(A)
    theta = sum(t * _q(c) @ np.array([c["alpha"][0], c["alpha"][1], 0.0]) for t, c in subs)
    alpha_in = Ainv @ theta  # (alpha_x, alpha_y, 0)
    ex, ey = 1 / (total * Ainv[0, 0]), 1 / (total * Ainv[1, 1])
    nu_xy = -Ainv[0, 1] / Ainv[0, 0]
    eps_z = 0.0
    for t, c in subs:
        s = _q(c) @ (alpha_in - np.array([c["alpha"][0], c["alpha"][1], 0.0]))  # in-plane stress per K
        eps_z += t * (c["alpha"][2] - c["nu"][1] / c["E"][0] * s[0] - c["nu"][2] / c["E"][1] * s[1])
    k_in = [sum(t * c["k"][i] for t, c in subs) / total for i in (0, 1)]
    k_z = total / sum(t / c["k"][2] for t, c in through)
    return {
        "conductivity": (k_in[0], k_in[1], k_z),
        "youngs_modulus": (ex, ey, total / sum(t / c["E"][2] for t, c in through)),
        "poisson_ratio": (nu_xy, sum(t * c["nu"][1] for t, c in subs) / total,
                          sum(t * c["nu"][2] for t, c in subs) / total),
        "shear_modulus": (sum(t * c["G"][0] for t, c in subs) / total,
                          total / sum(t / c["G"][1] for t, c in through), total / sum(t / c["G"][2] for t, c in through)),
        "expansion": (float(alpha_in[0]), float(alpha_in[1]), eps_z / total),
        "density": sum(t * c["rho"] for t, c in subs) / total,
    } | _specific_heat(subs)


def _specific_heat(subs) -> dict:
    """Mass-weighted specific heat sum t rho c / sum t rho [J/(kg*K)], when every layer gives one."""
    heat = sum(t * c["rho_c"] for t, c in subs)
    return {} if not np.isfinite(heat) else {"specific_heat": heat / sum(t * c["rho"] for t, c in subs)}


def build(name: str, record: dict, library, where: str):
    """An orthotropic ``Material`` from a laminate record (``layers`` and the keys in PASSED)."""
    from . import materials

    at = f"{where}: material '{name}'"
    problems = []
    unknown = set(record) - set(PASSED) - {"kind", "layers"}
    problems += [f"{at}: unknown key '{k}' for a laminate (layers and {', '.join(PASSED)})" for k in sorted(unknown)]
    layers = record.get("layers")
    if not isinstance(layers, list) or not layers:
        problems.append(f"{at}: a laminate needs layers = [{{material = NAME, thickness = t [m]}}, ...]")
        layers = []
    built = []
    for i, layer in enumerate(layers):
        here = f"{at}.layers[{i}]"
        if not isinstance(layer, dict):
            problems.append(f"{here}: a table {{material, thickness[, fraction, fill]}}")
            continue
        problems += [f"{here}: unknown key '{k}'{errors.closest(k, LAYER_KEYS)}" for k in sorted(set(layer) - LAYER_KEYS)]
        t, f = layer.get("thickness"), layer.get("fraction", 1.0)
        if not isinstance(t, (int, float)) or isinstance(t, bool) or not t > 0:
            problems.append(f"{here}.thickness: a positive length [m], got {t!r}")
        if not isinstance(f, (int, float)) or isinstance(f, bool) or not 0 < f <= 1:
            problems.append(f"{here}.fraction: the share of the layer that is `material`, in (0, 1], got {f!r}")
        if isinstance(f, (int, float)) and f < 1 and "fill" not in layer:
            problems.append(f"{here}: a fraction below 1 needs fill = NAME (the material in the gaps)")
        mats = []
        for key in ("material", "fill"):
            if key not in layer:
                if key == "material":
                    problems.append(f"{here}: missing material")
                mats.append(None)
                continue
            ref = layer[key]
            if ref not in library:
                problems.append(errors.unknown_name("material", str(ref), library.materials, f"{here}.{key}"))
                mats.append(None)
                continue
            m = library[ref]
            if not np.allclose(np.asarray(m.axes), np.eye(3)) or m.curves or m.conductivity_varies:
                problems.append(f"{here}.{key}: '{ref}' must have constant properties in the laminate's axes")
            mats.append(m)
        if not problems:
            built.append((float(t), float(f), mats[0], mats[1]))
    if problems:
        raise errors.InputError(problems)
    values = effective(built)
    stack = "; ".join(f"{layer['thickness'] * 1e6:g} um {layer['material']}"
                      + (f" ({layer.get('fraction', 1.0):g}, fill {layer['fill']})" if "fill" in layer else "")
                      for layer in layers)
    rule = f"computed from the stack-up ({stack}) by the laminate rules of pipeline/model/laminate.py"
    out = {"kind": "orthotropic", "title": record.get("title", name), **{k: list(v) if isinstance(v, tuple) else v
                                                                          for k, v in values.items()}}
    out |= {k: record[k] for k in PASSED if k in record and k != "sources"}
    out["sources"] = {k: rule for k in values} | dict(record.get("sources", {}))
    out["note"] = (record.get("note", "") + " " if record.get("note") else "") + f"Laminate: {stack}."
    return materials.from_record(name, out, where)
