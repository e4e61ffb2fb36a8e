"""Temperature-dependent mechanical properties: tables and polynomials, and the expansion conventions.

A curve is a table of rows [T, v] (or [T, vx, vy, vz] for an orthotropic expansion), interpolated
linearly and held at its end values outside the table, or polynomial coefficients c0, c1, ... with
v = sum c_i T^i.  T in K throughout; v in the property's SI unit.

Two published conventions for the thermal-expansion coefficient (ASTM E228 and E831 define both; the
terms are those of the trade):
  instantaneous (tangent)  alpha_i(T) = d(eps)/dT, so eps(T_ref -> T) = int_{T_ref}^{T} alpha_i dT;
  mean (secant) from a stated base temperature T_0:  alpha_m(T) = eps(T_0 -> T) / (T - T_0), so
      eps(T_ref -> T) = alpha_m(T) (T - T_0) - alpha_m(T_ref) (T_ref - T_0).
The thermal strain is always measured from the stress-free temperature T_ref, never from T_0.
Conversions: alpha_m(T) = int_{T_0}^{T} alpha_i dT / (T - T_0) (alpha_i(T_0) at T = T_0), and
alpha_i(T) = alpha_m(T) + (T - T_0) d(alpha_m)/dT.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

CONVENTIONS = ("instantaneous", "mean")
#: the mechanical properties that may be given as curves (TOML keys PROP_table and PROP_polynomial)
PROPERTIES = ("youngs_modulus", "poisson_ratio", "expansion")
#: the temperature at which a curve gives a material's nominal (room-temperature) constant [K]
ROOM = 293.15


@dataclass(frozen=True)
class Curve:
    """v(T) from a table (rows [T, v...], increasing T) or from polynomial coefficients (c0, c1, ...)."""

    table: tuple[tuple[float, ...], ...] = ()
    polynomial: tuple[float, ...] = ()

    def _columns(self):
        rows = np.asarray(self.table, dtype=float)
        return rows[:, 0], rows[:, 1:].T  # (m,), (width, m)

    @property
    def width(self) -> int:
        return len(self.table[0]) - 1 if self.table else 1

    def values(self, t) -> np.ndarray:
        """(width, *t.shape) values at temperatures t [K]."""
        t = np.asarray(t, dtype=float)
        if not self.table:
            return np.polynomial.polynomial.polyval(t, np.asarray(self.polynomial, float))[None]
        ts, vs = self._columns()
        return np.stack([np.interp(t, ts, v) for v in vs])

    def slope(self, t) -> np.ndarray:
        """(width, *t.shape) dv/dT [per K] (a table's segment slope; zero outside it)."""
        t = np.asarray(t, dtype=float)
        if not self.table:
            c = np.polynomial.polynomial.polyder(np.asarray(self.polynomial, float))
            return np.polynomial.polynomial.polyval(t, c)[None]
        ts, vs = self._columns()
        seg = np.clip(np.searchsorted(ts, t, side="right") - 1, 0, len(ts) - 2)
        inside = (t >= ts[0]) & (t <= ts[-1])
        return np.stack([np.where(inside, (np.diff(v) / np.diff(ts))[seg], 0.0) for v in vs])

    def antiderivative(self, t) -> np.ndarray:
        """(width, *t.shape) F(t) with F' = v: exact for the linear interpolant held constant outside the
        table, and for a polynomial."""
        t = np.asarray(t, dtype=float)
        if not self.table:
            return np.polynomial.polynomial.polyval(t, np.polynomial.polynomial.polyint(
                np.asarray(self.polynomial, float)))[None]
        ts, vs = self._columns()
        out = []
        for v in vs:
            nodes = np.concatenate([[0.0], np.cumsum(0.5 * (v[1:] + v[:-1]) * np.diff(ts))])
            seg = np.clip(np.searchsorted(ts, t, side="right") - 1, 0, len(ts) - 2)
            tc = np.clip(t, ts[0], ts[-1])
            slope = (np.diff(v) / np.diff(ts))[seg]
            dx = tc - ts[seg]
            inner = nodes[seg] + v[seg] * dx + 0.5 * slope * dx**2
            out.append(inner + v[0] * np.minimum(t - ts[0], 0.0) + v[-1] * np.maximum(t - ts[-1], 0.0))
        return np.stack(out)

    def integral(self, t0, t) -> np.ndarray:
        """(width, ...) int_{t0}^{t} v dT."""
        return self.antiderivative(t) - self.antiderivative(t0)

    def outside(self, t) -> int:
        """How many temperatures lie outside a table (where the end value is held)."""
        if not self.table:
            return 0
        ts = self._columns()[0]
        t = np.asarray(t, dtype=float)
        return int(((t < ts[0]) | (t > ts[-1])).sum())

    def span(self) -> tuple[float, float] | None:
        """The table's temperature range [K] (None for a polynomial)."""
        return (self.table[0][0], self.table[-1][0]) if self.table else None


def expansion_strain(curve: Curve, convention: str, base: float | None, t, t_ref) -> np.ndarray:
    """(width, ...) principal thermal strain from the stress-free temperature t_ref to t [K]."""
    if convention == "instantaneous":
        return curve.integral(t_ref, t)
    t, t_ref = np.asarray(t, float), np.asarray(t_ref, float)
    return curve.values(t) * (t - base) - curve.values(t_ref) * (t_ref - base)


def mean_from_instantaneous(curve: Curve, base: float, t) -> np.ndarray:
    """(width, ...) mean coefficient from ``base`` [K] at t [K] of an instantaneous curve [1/K]."""
    t = np.asarray(t, dtype=float)
    dt = t - base
    near = np.abs(dt) < 1e-9
    return np.where(near, curve.values(t), curve.integral(base, t) / np.where(near, 1.0, dt))


def instantaneous_from_mean(curve: Curve, base: float, t) -> np.ndarray:
    """(width, ...) instantaneous coefficient at t [K] of a mean curve from ``base`` [K] [1/K]."""
    t = np.asarray(t, dtype=float)
    return curve.values(t) + (t - base) * curve.slope(t)


def parse(record: dict, prop: str, width: int, where: str, problems: list[str]) -> Curve | None:
    """The curve of ``prop`` in a material's TOML table (keys PROP_table, PROP_polynomial), or None."""
    table, poly = record.get(f"{prop}_table"), record.get(f"{prop}_polynomial")
    if table is not None and poly is not None:
        problems.append(f"{where}: give {prop}_table or {prop}_polynomial, not both")
        return None
    widths = (1, 3) if width == 3 and prop == "expansion" else (1,)
    if table is not None:
        try:
            rows = np.asarray(table, dtype=float) if isinstance(table, list) else np.zeros((0, 0))
        except (TypeError, ValueError, OverflowError):
            rows = np.zeros((0, 0))
        shape = " or ".join(f"[T, {', '.join(['v'] if w == 1 else ['vx', 'vy', 'vz'])}]" for w in widths)
        if rows.ndim != 2 or len(rows) < 2 or rows.shape[1] - 1 not in widths or not np.all(np.isfinite(rows)):
            problems.append(f"{where}: {prop}_table must be at least two rows {shape} (T in K, SI values)")
            return None
        if np.any(np.diff(rows[:, 0]) <= 0) or rows[0, 0] < 0:
            problems.append(f"{where}: {prop}_table needs increasing temperatures >= 0 K")
            return None
        return Curve(table=tuple(tuple(float(v) for v in r) for r in rows))
    if poly is not None:
        ok = isinstance(poly, list) and poly and all(isinstance(c, (int, float)) and not isinstance(c, bool)
                                                     and np.isfinite(float(c)) for c in poly)
        if not ok:
            problems.append(f"{where}: {prop}_polynomial must be coefficients [c0, c1, ...] of v(T), T in K")
            return None
        return Curve(polynomial=tuple(float(c) for c in poly))
    return None
