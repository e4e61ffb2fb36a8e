"""Solder-joint fatigue life: screening estimates from a cycle's temperatures and strains.

SCREENING ESTIMATES WITH WIDE SCATTER (a factor of two or more on life is usual), never a qualification:
confirm by accelerated tests under the applicable standard (e.g. IPC-9701 for surface-mount solder
joints, JESD22-A104 temperature cycling, JESD22-A122 power cycling) and by a qualified engineer.

Engelmaier's strain-range model for surface-mount solder joints (W. Engelmaier, Fatigue life of
leadless chip carrier solder joints during power cycling, IEEE Trans. CHMT 6(3), 232-237, 1983; as
adopted in IPC-SM-785 (1992) and IPC-D-279 (1996); all from memory, no copy consulted):
  N_f(50 %) = 1/2 (d_gamma / (2 eps_f))^(1/c),   eps_f = 0.325 (eutectic SnPb fatigue ductility),
  c = -0.442 - 6e-4 T_sj + 1.74e-2 ln(1 + f),    T_sj mean cyclic joint temperature [degC], f cycles/day;
  leadless:  d_gamma = F (L_D / h) d(alpha dT);
  leaded:    d_gamma = F K_D (L_D d(alpha dT))^2 / (200 psi A h)   (K_D lead diagonal stiffness [N/m],
             A effective solder attach area [m^2], 200 psi = 1.379e6 Pa);
  d(alpha dT) = |alpha_s dT_s - alpha_c dT_c|, here the difference of the board's and the component's
  free thermal strains between the two states (their own curves, so alpha(T) is integrated);
  L_D distance from the neutral point [m], h joint height [m], F empirical factor (about 1 for
  leadless parts, 0.7-1.2 quoted).  Limits of use (IPC-D-279, from memory): eutectic or near-eutectic
  SnPb; 1 <= f <= 1000 cycles/day; d_gamma small enough that the joint stays in the low-cycle regime
  it was fitted on (we flag d_gamma > 0.1); no creep-fatigue interaction beyond what c absorbs; local
  (CTE mismatch within the joint) and global expansion only, no vibration.
Coffin-Manson (L.F. Coffin, Trans. ASME 76, 931-950, 1954; S.S. Manson, NACA TN 2933, 1953):
  d_eps / 2 = eps_f (2 N_f)^c  ->  N_f = 1/2 (d_eps / (2 eps_f))^(1/c), with eps_f and c given by the
  user with their source; d_eps is the meshed solder part's equivalent mechanical strain range from an
  ELASTIC analysis, volume-averaged over the part (the peak at a bimaterial free edge is singular and
  mesh-dependent, reported beside).  An elastic strain range is not the inelastic range the constants
  were fitted to: treat the number as an index for comparing designs, not as a life.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .. import errors

MODELS = ("leadless", "leaded")
EPS_F_SNPB = 0.325  # Engelmaier 1983 / IPC-D-279, eutectic SnPb (from memory)
PSI_200 = 200 * 6894.757  # Pa: the 200 psi of the leaded form (IPC-D-279, from memory)
FREQUENCY = (1.0, 1000.0)  # cycles per day, limits of use (IPC-D-279, from memory)
STRAIN_LIMIT = 0.1  # d_gamma above which we flag the estimate (a choice of ours, common practice)
CAUTION = ("screening estimate with wide scatter (a factor of two or more on life); confirm by qualification "
           "tests under the applicable standard (e.g. IPC-9701, JESD22-A104 or -A122) and by a qualified engineer")


@dataclass(frozen=True)
class Joint:
    """One named joint.  part: the meshed solder part (its temperatures give T_sj; its strain range the
    Coffin-Manson estimate).  component, board: the parts whose free expansion mismatch loads the joint.
    model: "leadless" or "leaded".  distance: L_D [m] (None: the largest distance of the solder part's
    points from ``neutral_point`` in the plane normal to z).  height: h [m] (None: the part's extent along
    z).  factor: F.  cycles_per_day: f.  lead_stiffness: K_D [N/m] and area: A [m^2] (leaded only).
    ductility, exponent, source: Coffin-Manson constants and where they come from (None: no estimate)."""

    part: str
    component: str
    board: str
    model: str = "leadless"
    distance: float | None = None
    neutral_point: tuple[float, float, float] = (0.0, 0.0, 0.0)
    height: float | None = None
    factor: float = 1.0
    cycles_per_day: float = 24.0
    lead_stiffness: float | None = None
    area: float | None = None
    ductility: float | None = None
    exponent: float | None = None
    source: str = ""


def check(domain, joints, materials, where: str) -> list[str]:
    problems = []
    for name, j in joints.items():
        at = f"{where}.joints.{name}"
        for key in ("part", "component", "board"):
            if getattr(j, key) not in domain.parts:
                problems.append(errors.unknown_name("part", getattr(j, key), domain.parts, f"{at}.{key}"))
        if j.model not in MODELS:
            problems.append(f"{at}.model: one of {', '.join(MODELS)}, got {j.model!r}{errors.closest(j.model, MODELS)}")
        if j.model == "leaded" and not (j.lead_stiffness and j.area):
            problems.append(f"{at}: the leaded model needs lead_stiffness (K_D, N/m) and area (A, m^2)")
        if (j.ductility is None) != (j.exponent is None) or (j.ductility is not None and not j.source):
            problems.append(f"{at}: a Coffin-Manson estimate needs ductility, exponent and their source together")
        if j.exponent is not None and j.exponent >= 0:
            problems.append(f"{at}.exponent: the fatigue ductility exponent c is negative (about -0.4 to -0.7)")
        if j.cycles_per_day <= 0 or j.factor <= 0:
            problems.append(f"{at}: cycles_per_day and factor must be positive")
    return problems


def cycles(strain_range: float, eps_f: float, c: float) -> float | None:
    """N_f = 1/2 (d_eps / (2 eps_f))^(1/c) [cycles] (Coffin-Manson form; Engelmaier with its eps_f, c);
    None without a strain range (no fatigue from this cycle)."""
    return 0.5 * (strain_range / (2 * eps_f)) ** (1 / c) if strain_range > 0 else None


def engelmaier_exponent(t_sj_degc: float, per_day: float) -> float:
    """c = -0.442 - 6e-4 T_sj + 1.74e-2 ln(1 + f) (Engelmaier 1983, from memory)."""
    return -0.442 - 6e-4 * t_sj_degc + 1.74e-2 * np.log1p(per_day)


def shear_range(joint: Joint, mismatch: float, distance: float, height: float) -> float:
    """d_gamma of the leadless or leaded form (module docstring) for d(alpha dT) = mismatch [-]."""
    if joint.model == "leadless":
        return joint.factor * distance / height * mismatch
    return joint.factor * joint.lead_stiffness * (distance * mismatch) ** 2 / (PSI_200 * joint.area * height)


def _part_points(domain, part):
    return np.unique(domain.tetrahedra[domain.parts[part]])


def _mean_temperature(domain, f, part) -> float:
    return float(f.temperature[_part_points(domain, part)].mean())


def estimate(domain, joints, materials, states, names, parts, strain_range) -> dict[str, dict]:
    """Per joint: Engelmaier and (if its constants are given) Coffin-Manson estimates between the two
    states of the largest temperature swing of the joint, with their inputs, limits and cautions."""
    out = {}
    for name, j in joints.items():
        temps = [_mean_temperature(domain, f, j.part) for f in states]
        a, b = int(np.argmin(temps)), int(np.argmax(temps))
        comp, board = materials[j.component], materials[j.board]
        t = {p: (_mean_temperature(domain, states[a], p), _mean_temperature(domain, states[b], p))
             for p in (j.component, j.board)}
        free = {p: float(m.expansion_strain(np.array(t[p][1]), t[p][0])[0])
                for p, m in ((j.component, comp), (j.board, board))}
        mismatch = abs(free[j.board] - free[j.component])
        pts = domain.points[_part_points(domain, j.part)]
        distance = j.distance if j.distance is not None else float(
            np.linalg.norm(pts[:, :2] - np.asarray(j.neutral_point)[:2], axis=1).max())
        height = j.height if j.height is not None else float(np.ptp(pts[:, 2]))
        t_sj = 0.5 * (temps[a] + temps[b]) - 273.15
        c = engelmaier_exponent(t_sj, j.cycles_per_day)
        gamma = shear_range(j, mismatch, distance, height)
        limits = []
        if not FREQUENCY[0] <= j.cycles_per_day <= FREQUENCY[1]:
            limits.append(f"{j.cycles_per_day:g} cycles/day is outside the model's 1-1000")
        if gamma > STRAIN_LIMIT:
            limits.append(f"shear strain range {gamma:.3g} is above {STRAIN_LIMIT:g}: beyond the fitted regime")
        solder = materials[j.part]
        if "snpb" not in (solder.name + solder.title).lower().replace("-", "").replace("/", ""):
            limits.append(f"the joint's solder ({solder.name}) is not SnPb: Engelmaier's constants were fitted to "
                          "eutectic SnPb, so for lead-free solder this is an extrapolation (compare designs only)")
        record = {
            "between": [names[a], names[b]], "model": j.model,
            "joint_temperature_mean_degC": t_sj, "joint_temperature_range_K": temps[b] - temps[a],
            "component_temperature_range_K": t[j.component][1] - t[j.component][0],
            "board_temperature_range_K": t[j.board][1] - t[j.board][0],
            "free_strain_component": free[j.component], "free_strain_board": free[j.board],
            "mismatch": mismatch, "distance_m": distance, "height_m": height, "factor": j.factor,
            "cycles_per_day": j.cycles_per_day,
            "engelmaier": {"shear_strain_range": gamma, "exponent_c": c, "ductility": EPS_F_SNPB,
                           "cycles_50pct": cycles(gamma, EPS_F_SNPB, c),
                           "source": "W. Engelmaier, IEEE Trans. CHMT 6(3), 1983; IPC-D-279 (1996), from memory"},
            "limits": limits, "caution": CAUTION,
        }
        if j.ductility is not None:
            ids = domain.parts[j.part]
            vol = domain.element_volumes[ids]
            averaged = float(np.sum(strain_range[ids] * vol) / np.sum(vol))
            record["coffin_manson"] = {
                "strain_range_volume_mean": averaged, "strain_range_peak": float(strain_range[ids].max()),
                "ductility": j.ductility, "exponent": j.exponent, "source": j.source,
                "cycles": cycles(averaged, j.ductility, j.exponent),
                "basis": "elastic equivalent strain range, volume mean over the part (an index, not a life)"}
        out[name] = record
    return out
