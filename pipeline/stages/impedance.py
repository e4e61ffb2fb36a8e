"""Thermal impedance Z_th(t) of a power step and its Foster network.

A Foster network of n terms has Z(t) = sum_i R_i (1 - exp(-t / tau_i)) (R_i [K/W], tau_i [s]); the
step response of any linear conduction model is such a sum over its eigenmodes (Carslaw & Jaeger,
Conduction of Heat in Solids, 2nd ed. (1959), Section 1.14, eigenfunction expansions), so a few
terms fitted to the computed Z_th represent it for circuit simulators.  The fit: time constants
start log-spaced over the computed times, resistances by non-negative least squares, then all
2n parameters (as logarithms, so that they stay positive, bounded to the computed time span) by
nonlinear least squares on the error
relative to Z_th at the end, sampled evenly in log t.  The number of terms is the smallest that
fits within the tolerance.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import least_squares, nnls


def foster(t: np.ndarray, resistances, time_constants) -> np.ndarray:
    """Z(t) = sum R_i (1 - exp(-t / tau_i)) [K/W]."""
    r, tau = np.asarray(resistances, float), np.asarray(time_constants, float)
    return (r[None, :] * -np.expm1(-np.asarray(t, float)[:, None] / tau[None, :])).sum(axis=1)


def _samples(times: np.ndarray, zth: np.ndarray, count: int = 200) -> tuple[np.ndarray, np.ndarray]:
    positive = times[times > 0]
    ts = np.geomspace(positive[0], times[-1], count)
    return ts, np.interp(ts, times, zth)


def fit(times: np.ndarray, zth: np.ndarray, terms: int) -> tuple[np.ndarray, np.ndarray, float]:
    """Foster network of ``terms`` terms fitted to Z_th at ``times``: (R [K/W], tau [s], largest error
    relative to Z_th at the end, over the computed times)."""
    ts, zs = _samples(times, zth)
    scale = float(zth[-1])
    tau0 = np.geomspace(ts[0], ts[-1], terms + 2)[1:-1] if terms > 1 else np.array([ts[len(ts) // 2]])
    basis = -np.expm1(-ts[:, None] / tau0[None, :])
    r0, _ = nnls(basis, zs)
    r0 = np.maximum(r0, 1e-6 * scale)

    def residual(x):
        return (foster(ts, np.exp(x[:terms]), np.exp(x[terms:])) - zs) / scale

    lower = np.concatenate([np.full(terms, np.log(1e-9 * scale)), np.full(terms, np.log(ts[0] / 10))])
    upper = np.concatenate([np.full(terms, np.log(10 * scale)), np.full(terms, np.log(10 * ts[-1]))])
    start = np.clip(np.concatenate([np.log(r0), np.log(tau0)]), lower + 1e-9, upper - 1e-9)
    got = least_squares(residual, start, bounds=(lower, upper), method="trf", xtol=1e-12, ftol=1e-12)
    r, tau = np.exp(got.x[:terms]), np.exp(got.x[terms:])
    order = np.argsort(tau)
    r, tau = r[order], tau[order]
    error = float(np.abs(foster(times, r, tau) - zth).max() / scale)
    return r, tau, error


def summary(times: np.ndarray, zth: np.ndarray, terms: int, tolerance: float) -> dict:
    """Z_th(t) and the smallest Foster network (at most ``terms`` terms) that fits it within
    ``tolerance``, or the best one found: plain data for the result and the summary."""
    best = None
    for n in range(1, terms + 1):
        r, tau, error = fit(times, zth, n)
        if best is None or error < best[2]:
            best = (r, tau, error)
        if error <= tolerance:
            break
    r, tau, error = best
    return {"times_s": [float(t) for t in times], "zth_K_per_W": [float(z) for z in zth], "terms": len(r),
            "foster": [{"R_K_per_W": float(a), "tau_s": float(b)} for a, b in zip(r, tau)],
            "fit_error": error, "tolerance": tolerance, "steady_K_per_W": float(zth[-1])}


def table(entry: dict) -> str:
    """The Foster network as plain numbers, one term a line: ``R_K_per_W,tau_s`` (CSV with a header)."""
    rows = [f"{t['R_K_per_W']:.10g},{t['tau_s']:.10g}" for t in entry["foster"]]
    return "R_K_per_W,tau_s\n" + "\n".join(rows) + "\n"
