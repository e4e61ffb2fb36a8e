"""Transient verification cases, run through ``stages.transient.solve`` on numpy-built bars and cubes
(their profiles and the manufactured power are functions, and each case reads the kept fields at full
precision).  The closed forms here are the ones tests/test_transient.py imports (one copy).

[INC] Incropera et al., 6th ed. (2007); [CJ] Carslaw & Jaeger, Conduction of Heat in Solids, 2nd ed.
(1959), from memory; [HW] E. Hairer, G. Wanner, Solving Ordinary Differential Equations II, 2nd ed.,
Springer 1996 (orders of backward Euler and BDF2).
"""

from __future__ import annotations

import math

import numpy as np

from . import Case, Check
from . import meshes as mk

CJ = "[CJ] sec. 3.3, from memory"
HW = "[HW] sec. III.1 and V.1 (orders); manufactured solution [MMS]"


def material(k: float, rho: float, c: float):
    from ..model.materials import from_record

    return from_record("m", {"conductivity": k, "youngs_modulus": 1e9, "poisson_ratio": 0.3, "expansion": 1e-5,
                             "density": rho, "specific_heat": c}, "verification")


def bar(work, n: int, length: float, width: float = 0.002):
    """A bar along x, n hexahedra of six tetrahedra long, faces xmin ... zmax [m]."""
    from ..model import mesh as mesh_mod

    path = mk.box(work / f"bar_{n}_{length:g}.msh", mk.planes(0, length, n), mk.planes(0, width, 1),
                  mk.planes(0, width, 1))
    return mesh_mod.load(path, unit="m")


def lumped(t, tau: float, start: float, ambient: float):
    """[INC] eq. 5.6: T = T_inf + (T_i - T_inf) exp(-t / tau) [K]."""
    return ambient + (start - ambient) * np.exp(-np.asarray(t) / tau)


def wall_theta(x_star, fourier: float, biot: float, terms: int = 8):
    """[INC] eqs. 5.39a-c: theta* = sum C_n exp(-z_n^2 Fo) cos(z_n x*), C_n = 4 sin z_n / (2 z_n +
    sin 2 z_n), z_n tan z_n = Bi (plane wall, convection at x* = 1, symmetric at x* = 0)."""
    from scipy.optimize import brentq

    out = 0.0
    for n in range(terms):
        z = brentq(lambda z: z * math.tan(z) - biot, n * math.pi + 1e-9, n * math.pi + math.pi / 2 - 1e-9)
        out = out + 4 * math.sin(z) / (2 * z + math.sin(2 * z)) * np.exp(-z * z * fourier) * np.cos(z * np.asarray(x_star))
    return out


def semi_infinite(x, t: float, alpha: float, surface: float, start: float):
    """[INC] eq. 5.57: T = T_s + (T_i - T_s) erf(x / (2 sqrt(alpha t))) [K]."""
    from scipy.special import erf

    return surface + (start - surface) * erf(np.asarray(x) / (2 * math.sqrt(alpha * t)))


def slab_zth(t, L: float, k: float, area: float, alpha: float, terms: int = 200):
    """[CJ] sec. 3.3 (slab, constant flux at x = L, zero temperature at x = 0), from memory:
    T(L, t) = (q L / k) [1 - sum 8 / ((2n+1)^2 pi^2) exp(-(2n+1)^2 pi^2 alpha t / (4 L^2))];
    Z_th = T / (q A) [K/W]."""
    m = 2 * np.arange(terms) + 1
    decay = np.exp(-(m**2 * np.pi**2 * alpha / (4 * L**2))[None, :] * np.asarray(t, float)[:, None])
    return L / (k * area) * (1 - ((8 / (m**2 * np.pi**2))[None, :] * decay).sum(axis=1))


# ---------------------------------------------------------------------------------------------- cases

def lumped_checks(work, n):
    from ..stages import heat, transient as tr

    d = bar(work, n, 0.01, 0.01)
    k, rho, c, h, side = 400.0, 8900.0, 385.0, 50.0, 0.01
    tau, tol = rho * c * side / 6 / h, 1e-3
    hs = heat.HeatSpec({"body": material(k, rho, c)}, convection={s: heat.Convection(h, 300.0) for s in d.surfaces})
    f = tr.solve(d, tr.TransientSpec(hs, initial=400.0, end=2 * tau, step=tau / 1e4, tolerance=tol))
    error = float(np.abs(f.part_history[:, 0, 2] - lumped(f.times, tau, 400.0, 300.0)).max())
    bound = 0.02 + f.record["accepted"] * tol
    return [Check(f"mean T, largest error over 0..2 tau (BDF2, {f.record['accepted']} steps), relative to the 100 K "
                  "span", "-", 0.0, "[INC] sec. 5.1-5.2, eq. 5.6", bound / 100,
                  "Bi = 2e-4: interior spread < 0.02 K; the global error of a decaying problem is at most the sum "
                  "of the local errors, each below the 1e-3 K tolerance", error / 100, scale=1.0)]


def wall_checks(work, n):
    from ..stages import fem, heat, transient as tr

    L, k, rho, c, h = 0.01, 20.0, 8000.0, 500.0, 2000.0
    biot, alpha = h * L / k, k / (rho * c)
    d = bar(work, n, L)
    hs = heat.HeatSpec({"body": material(k, rho, c)}, convection={"xmax": heat.Convection(h, 300.0)}, order=2)
    fouriers = (0.1, 0.3, 1.0)
    times = tuple(fo * L**2 / alpha for fo in fouriers)
    f = tr.solve(d, tr.TransientSpec(hs, initial=400.0, end=times[-1], step=times[0] / 1000, tolerance=1e-4,
                                     instants=times))
    x = fem.space(d, 2).doflocs[0] / L
    out = []
    for fo, t in zip(fouriers, times):
        theta = (f.snapshots[f"t={t:g}"][1] - 300.0) / 100.0
        out.append(Check(f"theta*, largest error at Fo = {fo:g} (Bi = {biot:g}, P2, {n} elements)", "-", 0.0,
                         "[INC] sec. 5.5.1, eqs. 5.39a-c (8 terms)", 1e-3,
                         "P2 mesh error at this size (BDF2 held at 1e-4 K per step)",
                         float(np.abs(theta - wall_theta(x, fo, biot)).max()), scale=1.0))
    return out


def semi_infinite_checks(work, n):
    from scipy.special import erfc

    from ..stages import fem, heat, transient as tr

    L, k, rho, c = 0.02, 50.0, 7800.0, 480.0
    alpha = k / (rho * c)
    t_end = (L / 12) ** 2 / alpha
    d = bar(work, n, L)
    hs = heat.HeatSpec({"body": material(k, rho, c)}, fixed_temperature={"xmin": 400.0}, order=2)
    times = (t_end / 4, t_end)
    f = tr.solve(d, tr.TransientSpec(hs, initial=300.0, end=t_end, step=t_end / 1e4, tolerance=1e-4, instants=times))
    x = fem.space(d, 2).doflocs[0]
    far = erfc(L / (2 * math.sqrt(alpha * t_end)))
    return [Check(f"T, largest error at t = {t:.4g} s relative to the 100 K step (P2, {n} elements; far face "
                  f"reached by {far:.0e} of it)", "-", 0.0, "[INC] sec. 5.7, eq. 5.57", 2e-3,
                  "P2 mesh error of the steepest (earliest) profile near the surface",
                  float(np.abs(f.snapshots[f"t={t:g}"][1] - semi_infinite(x, t, alpha, 400.0, 300.0)).max()) / 100,
                  scale=1.0) for t in times]


def order_errors(work, method: str, steps=(0.5, 0.25, 0.125)) -> list[float]:
    """Largest error of the manufactured uniform heating T = T0 + P0 (1 - cos w t) / (w C) of an
    adiabatic cube under P(t) = P0 sin(w t) (exact in space), for each fixed step [K]."""
    from ..stages import heat, transient as tr

    d = bar(work, 2, 0.01, 0.01)
    rho, c, P0, w = 2700.0, 900.0, 5.0, 2 * math.pi / 10
    C = rho * c * 1e-6
    hs = heat.HeatSpec({"body": material(100.0, rho, c)})
    out = []
    for h in steps:
        spec = tr.TransientSpec(hs, power={"body": tr.Profile(function=lambda t: P0 * math.sin(w * t))},
                                initial=300.0, method=method, end=10.0, step=h, adaptive=False)
        f = tr.solve(d, spec)
        out.append(float(np.abs(f.part_history[:, 0, 2] - (300.0 + P0 * (1 - np.cos(w * f.times)) / (w * C))).max()))
    return out


def order_checks(method: str, order: int):
    def checks(work, _):
        e = order_errors(work, method)
        return [Check(f"observed order in time, {method}, steps 0.25 -> 0.125 s", "-", float(order), HW, 0.15,
                      "the asymptotic range is reached at these steps (w h <= 0.16); 0.15 is common practice",
                      float(np.log2(e[1] / e[2])), order=True)]
    return checks


def energy_checks(work, _):
    from ..stages import heat, transient as tr

    d = bar(work, 3, 0.01, 0.01)
    hs = heat.HeatSpec({"body": material(150.0, 2700.0, 900.0)}, convection={"xmin": heat.Convection(500.0, 300.0)},
                       radiation={"xmax": heat.Radiation(0.8, 300.0)}, fixed_temperature={"ymin": 320.0})
    out = []
    for method in ("euler", "bdf2"):
        f = tr.solve(d, tr.TransientSpec(hs, power={"body": tr.Profile.duty_cycle(1.0, 0.3, 20.0)}, initial=300.0,
                                         method=method, end=3.0, step=1e-3, tolerance=0.01))
        residual = float(np.abs(f.energy[:, 3]).max() / np.abs(f.energy[:, 1:3]).max())
        out.append(Check(f"|stored + lost - supplied| / heat moved, every step ({method}, duty cycle, convection, "
                         "radiation, fixed T)", "-", 0.0, "conservation of energy (first law)", 1e-10,
                         "round-off: the Newton residual (1e-10 relative) and sums of nodal heat", residual, scale=1.0))
    return out


#: the Z_th slab: thickness [m], conductivity, density, specific heat (SI), side of its square section [m]
SLAB = (0.005, 150.0, 2330.0, 712.0, 0.002)


def slab_run(work, n):
    from ..stages import heat, transient as tr

    L, k, rho, c, w = SLAB
    alpha = k / (rho * c)
    d = bar(work, n, L, w)
    hs = heat.HeatSpec({"body": material(k, rho, c)}, fixed_temperature={"xmin": 300.0},
                       flux={"xmax": heat.HeatFlux(total=1.0)}, order=2)
    end = 2 * L**2 / alpha
    f = tr.solve(d, tr.TransientSpec(hs, initial=300.0, end=end, step=end / 1e5, tolerance=1e-4,
                                     impedance=tr.ImpedanceSpec("body", terms=6, tolerance=0.01)))
    z = f.impedance
    t, zth = np.array(z["times_s"]), np.array(z["zth_K_per_W"])
    return t, zth, slab_zth(t, L, k, w * w, alpha), z


def zth_checks(work, n):
    t, zth, exact, _ = slab_run(work, n)
    return [Check(f"Z_th(t), largest error relative to Z_th(end) over 0..2 L^2/alpha (P2, {n} elements)", "-", 0.0,
                  CJ, 5e-3, "P2 mesh error and the unresolved first instants (first step 2e-5 of the run)",
                  float(np.abs(zth - exact).max() / exact[-1]), scale=1.0)]


def foster_checks(work, n):
    from ..stages import impedance

    t, zth, exact, z = slab_run(work, n)
    fit = impedance.foster(t, [r["R_K_per_W"] for r in z["foster"]], [r["tau_s"] for r in z["foster"]])
    return [Check(f"Foster network ({z['terms']} terms) against the computed Z_th, relative to Z_th(end)", "-", 0.0,
                  "the fit's own stated tolerance (1 %)", 0.01, "the number of terms is chosen for this tolerance",
                  float(np.abs(fit - zth).max() / zth[-1]), scale=1.0),
            Check("sum of the Foster resistances against the steady L / (k A)", "K/W", SLAB[0] / (SLAB[1] * SLAB[4] ** 2),
                  "[INC] sec. 3.1 (plane wall)", 0.02,
                  "Z_th at 2 L^2/alpha is within 0.5 % of the steady value; the fit adds up to 1 %",
                  float(sum(r["R_K_per_W"] for r in z["foster"])))]


ALL = {"quick": None, "default": None, "fine": None}

CASES = [
    Case("transient_lumped", "lumped capacitance, exponential approach (BDF2, adaptive)", {"quick": 3, "default": 3, "fine": 3},
         lumped_checks, note="Stage functions on a numpy-built 10 mm cube of 3 x 1 x 1 hexahedra."),
    Case("transient_plane_wall", "plane wall after a sudden change of convection, series solution (P2, BDF2)",
         {"quick": 16, "default": 16, "fine": 32}, wall_checks),
    Case("transient_semi_infinite", "semi-infinite solid, step surface temperature, erfc (P2, BDF2)",
         {"quick": 40, "default": 40, "fine": 80}, semi_infinite_checks),
    Case("transient_order_euler", "observed order in time, backward Euler (manufactured)", ALL,
         order_checks("euler", 1), note="The power is a function of time: stage functions."),
    Case("transient_order_bdf2", "observed order in time, BDF2 (manufactured)", ALL, order_checks("bdf2", 2)),
    Case("transient_energy", "energy account at every step, both methods", ALL, energy_checks),
    Case("transient_zth_slab", "Z_th of a 1-D slab on a heat sink against its series (P2)",
         {"quick": 20, "default": 20, "fine": 40}, zth_checks),
    Case("transient_foster", "Foster network reproduces Z_th within its stated error", {"quick": 20, "default": 20, "fine": 40},
         foster_checks),
]
