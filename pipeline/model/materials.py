"""Material records, the shipped library, user libraries and per-part orientation.

Values are SI: conductivity W/(m*K), moduli and strengths Pa, expansion 1/K, density kg/m^3,
specific heat J/(kg*K), temperatures K.  Orthotropic properties are principal values in the material axes; a part's
``axes`` (rows = material x, y, z directions in model coordinates) turn them into tensors.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from importlib import resources
from pathlib import Path

import numpy as np

from .. import errors, files
from . import curves as curves_mod

#: Properties every material must give, with their units.
REQUIRED = {
    "conductivity": "W/(m*K)",
    "youngs_modulus": "Pa",
    "poisson_ratio": "-",
    "expansion": "1/K",
    "density": "kg/m^3",
}
OPTIONAL = {
    "specific_heat": "J/(kg*K)",
    "shear_modulus": "Pa",
    "yield_strength": "Pa",
    "tensile_strength": "Pa",
    "tensile_strength_axes": "Pa",
    "shear_strength_axes": "Pa",
    "valid_from": "K",
    "valid_to": "K",
    "expansion_base": "K",
}
UNITS = REQUIRED | OPTIONAL
TEXT_KEYS = {"title", "kind", "brittle", "note", "sources", "expansion_convention"}
#: temperature-dependent conductivity: a table of rows [T, k] or [T, kx, ky, kz] (K, W/(m*K)), or
#: polynomial coefficients c0, c1, ... with k = sum c_i T^i (T in K)
CURVE_KEYS = {"conductivity_table", "conductivity_polynomial"}
#: temperature-dependent stiffness and expansion (``curves``): PROP_table rows [T, v] (expansion of an
#: orthotropic material also [T, ax, ay, az]) or PROP_polynomial [c0, c1, ...]; expansion_convention
#: "instantaneous" (default) or "mean" from expansion_base [K].  The constant of a property with a
#: curve may be left out: it is then the curve's value at 293.15 K (the instantaneous one for expansion)
MECHANICAL_CURVE_KEYS = {f"{p}_{form}" for p in curves_mod.PROPERTIES for form in ("table", "polynomial")}
KINDS = ("isotropic", "orthotropic")
#: a material file larger than this is refused unread
MAX_FILE_BYTES = 4 << 20


@dataclass(frozen=True)
class Material:
    """One material. Orthotropic entries are (x, y, z) principal values; see module docstring."""

    name: str
    title: str
    kind: str
    conductivity: tuple[float, ...]
    youngs_modulus: tuple[float, ...]
    poisson_ratio: tuple[float, ...]
    expansion: tuple[float, ...]
    density: float
    specific_heat: float | None = None
    shear_modulus: tuple[float, ...] = ()
    yield_strength: float | None = None
    tensile_strength: float | None = None
    tensile_strength_axes: tuple[float, ...] = ()
    shear_strength_axes: tuple[float, ...] = ()
    brittle: bool = False
    valid_from: float | None = None
    valid_to: float | None = None
    note: str = ""
    sources: dict[str, str] = field(default_factory=dict)
    axes: tuple[tuple[float, ...], ...] = ((1.0, 0.0, 0.0), (0.0, 1.0, 0.0), (0.0, 0.0, 1.0))
    conductivity_table: tuple[tuple[float, ...], ...] = ()
    conductivity_polynomial: tuple[float, ...] = ()
    curves: dict = field(default_factory=dict)  # property -> curves.Curve (youngs_modulus, poisson_ratio, expansion)
    expansion_convention: str = "instantaneous"
    expansion_base: float | None = None

    def __repr__(self) -> str:
        k = "k(T)" if self.conductivity_varies else f"k {', '.join(f'{v:.4g}' for v in self.conductivity)} W/(m K)"
        e = ", ".join(f"{v / 1e9:.4g}" for v in self.youngs_modulus)
        a = ", ".join(f"{v * 1e6:.3g}" for v in self.expansion)
        return f"<Material {self.name} ({self.kind}): {k}, E {e} GPa, alpha {a} 1e-6/K>"

    def to_dict(self) -> dict:
        """Every property in SI units, with its source (as ``thermochain materials --json`` prints it)."""
        out = {}
        for prop in UNITS:
            value = getattr(self, prop)
            if value not in (None, ()):
                out[prop] = {"value": list(value) if isinstance(value, tuple) else value, "unit": UNITS[prop],
                             "source": self.sources.get(prop, "")}
        return {"name": self.name, "title": self.title, "kind": self.kind, "brittle": self.brittle,
                "note": self.note, "properties": out}

    @property
    def stiffness_varies(self) -> bool:
        """E or nu depends on temperature."""
        return "youngs_modulus" in self.curves or "poisson_ratio" in self.curves

    def expansion_strain(self, t, t_ref) -> np.ndarray:
        """(3, ...) principal thermal strains from the stress-free temperature t_ref to t [K] (in the
        material axes), by the expansion's convention (``curves``)."""
        t, t_ref = np.broadcast_arrays(np.asarray(t, float), np.asarray(t_ref, float))
        if "expansion" not in self.curves:
            a = np.broadcast_to(np.asarray(self.expansion, float), (3,))
            return a.reshape(3, *([1] * t.ndim)) * (t - t_ref)
        eps = curves_mod.expansion_strain(self.curves["expansion"], self.expansion_convention, self.expansion_base,
                                          t, t_ref)
        return np.broadcast_to(eps, (3, *t.shape))

    @property
    def conductivity_varies(self) -> bool:
        return bool(self.conductivity_table or self.conductivity_polynomial)

    def conductivity_at(self, t: np.ndarray) -> tuple[np.ndarray, np.ndarray, int]:
        """Principal conductivities (3, *t.shape) [W/(m*K)] at temperatures t [K], their derivatives
        [W/(m*K^2)], and how many values lay outside a table (held at the end value there)."""
        t = np.asarray(t, dtype=float)
        if self.conductivity_table:
            table = np.asarray(self.conductivity_table, dtype=float)
            ts, ks = table[:, 0], np.broadcast_to(table[:, 1:].T, (3, len(table))) if table.shape[1] == 4 else \
                np.tile(table[:, 1], (3, 1))
            k = np.stack([np.interp(t, ts, ks[i]) for i in range(3)])
            slopes = np.diff(ks, axis=1) / np.diff(ts)
            seg = np.clip(np.searchsorted(ts, t, side="right") - 1, 0, len(ts) - 2)
            inside = (t >= ts[0]) & (t <= ts[-1])
            dk = np.stack([np.where(inside, slopes[i][seg], 0.0) for i in range(3)])
            return k, dk, int((~inside).sum())
        if self.conductivity_polynomial:
            c = np.asarray(self.conductivity_polynomial, dtype=float)
            k = np.polynomial.polynomial.polyval(t, c)
            dk = np.polynomial.polynomial.polyval(t, np.polynomial.polynomial.polyder(c))
            return np.stack([k] * 3), np.stack([dk] * 3), 0
        k = np.broadcast_to(np.asarray(self.conductivity, dtype=float), (3,))
        return (np.broadcast_to(k.reshape(3, *([1] * t.ndim)), (3, *t.shape)), np.zeros((3, *t.shape)), 0)

    def lowest_conductivity(self, t_low: float, t_high: float) -> tuple[float, float]:
        """(temperature [K], conductivity [W/(m*K)]) where the smallest principal conductivity is lowest on
        [t_low, t_high]: exact for a polynomial (its end points and stationary points), a table's rows and end
        values, a constant.  A value <= 0 means conduction is unphysical there (heat would flow uphill)."""
        t = [float(t_low), float(t_high)]
        if self.conductivity_polynomial:
            c = np.polynomial.polynomial.Polynomial(self.conductivity_polynomial)
            t += [r.real for r in c.deriv().roots() if abs(r.imag) < 1e-12 and t_low < r.real < t_high]
        elif self.conductivity_table:
            t += [row[0] for row in self.conductivity_table if t_low < row[0] < t_high]
        k, _, _ = self.conductivity_at(np.asarray(t))
        lowest = k.min(axis=0)
        i = int(np.argmin(lowest))
        return t[i], float(lowest[i])

    def compliance(self) -> np.ndarray:
        """(6, 6) compliance [1/Pa] in material axes, Voigt order xx, yy, zz, yz, xz, xy with engineering
        shear; orthotropic constants as in stages/constitutive.py (nu_xy, nu_xz, nu_yz; G_xy, G_xz, G_yz)."""
        e = np.broadcast_to(np.asarray(self.youngs_modulus, float), (3,))
        nu = np.broadcast_to(np.asarray(self.poisson_ratio, float), (3,))
        g = np.broadcast_to(np.asarray(self.shear_modulus or [e[0] / (2 * (1 + nu[0]))], float), (3,))
        s = np.diag([1 / e[0], 1 / e[1], 1 / e[2], 1 / g[2], 1 / g[1], 1 / g[0]])
        s[0, 1] = s[1, 0] = -nu[0] / e[0]
        s[0, 2] = s[2, 0] = -nu[1] / e[0]
        s[1, 2] = s[2, 1] = -nu[2] / e[1]
        return s

    def conductivity_tensor(self) -> np.ndarray:
        """(3, 3) conductivity in model coordinates [W/(m*K)]."""
        k = np.broadcast_to(np.asarray(self.conductivity, dtype=float), (3,))
        r = np.asarray(self.axes, dtype=float)
        return r.T @ np.diag(k) @ r

    def oriented(self, axes) -> "Material":
        """A copy whose material axes are ``axes`` (rows: material x, y, z in model coordinates)."""
        return replace(self, axes=_orthonormal_axes(axes, self.name))

    def reads(self, *props: str) -> dict:
        """The named properties and the axes, as plain data (what a stage's cache key reads)."""
        out = {p: getattr(self, p) for p in props}
        if "conductivity" in props and self.conductivity_varies:
            out |= {"conductivity_table": self.conductivity_table,
                    "conductivity_polynomial": self.conductivity_polynomial}
        for prop in props:
            if prop in self.curves:
                out[f"{prop}_curve"] = {"table": self.curves[prop].table, "polynomial": self.curves[prop].polynomial}
        if "expansion" in props and "expansion" in self.curves:
            out |= {"expansion_convention": self.expansion_convention, "expansion_base": self.expansion_base}
        if self.kind == "orthotropic":
            out["axes"] = self.axes
        return out


def _orthonormal_axes(axes, where: str) -> tuple[tuple[float, ...], ...]:
    r = np.asarray(axes, dtype=float)
    if r.shape == (2, 3):  # x and y given: z follows
        r = np.vstack([r, np.cross(r[0], r[1])])
    if r.shape != (3, 3):
        raise errors.InputError(f"{where}: axes must be 2 or 3 vectors of 3 components, got shape {r.shape}")
    norms = np.linalg.norm(r, axis=1)
    if np.any(norms == 0):
        raise errors.InputError(f"{where}: an axis vector is zero")
    r = r / norms[:, None]
    if not np.allclose(r @ r.T, np.eye(3), atol=1e-6):
        raise errors.InputError(f"{where}: axes must be mutually perpendicular")
    if np.linalg.det(r) < 0:
        raise errors.InputError(f"{where}: axes must form a right-handed set (x cross y = z)")
    return tuple(tuple(float(v) for v in row) for row in r)


def from_record(name: str, record: dict, where: str) -> Material:
    """Build a ``Material`` from a TOML table; every problem is reported at once."""
    where = f"{where}: material '{name}'"
    problems = []
    unknown = set(record) - set(UNITS) - TEXT_KEYS - CURVE_KEYS - MECHANICAL_CURVE_KEYS - {"axes"}
    for key in sorted(unknown):
        problems.append(f"{where}: unknown key '{key}'{errors.closest(key, list(UNITS) + list(TEXT_KEYS))}")
    kind = record.get("kind", "isotropic")
    if kind not in KINDS:
        problems.append(f"{where}: kind must be one of {', '.join(KINDS)}, got {kind!r}")
    width = 3 if kind == "orthotropic" else 1
    values: dict = {}
    mechanical = {p: c for p in curves_mod.PROPERTIES
                  if (c := curves_mod.parse(record, p, width, where, problems)) is not None}
    for key in REQUIRED:
        if key not in record and key not in mechanical:
            problems.append(f"{where}: missing '{key}' [{UNITS[key]}]")
    for key in UNITS:
        if key not in record:
            continue
        vector = key in ("conductivity", "youngs_modulus", "poisson_ratio", "expansion", "shear_modulus",
                         "tensile_strength_axes", "shear_strength_axes")
        raw = record[key]
        seq = raw if isinstance(raw, list) else [raw]
        if not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in seq):
            problems.append(f"{where}: '{key}' must be a number [{UNITS[key]}], got {raw!r}")
            continue
        if vector and len(seq) not in (1, width):
            problems.append(f"{where}: '{key}' must have {width} value(s) for kind '{kind}', got {len(seq)}")
            continue
        if not vector and len(seq) != 1:
            problems.append(f"{where}: '{key}' must be a single number [{UNITS[key]}]")
            continue
        try:
            seq = [float(v) for v in seq]
        except OverflowError:
            problems.append(f"{where}: '{key}' is too large a number [{UNITS[key]}]")
            continue
        if not all(np.isfinite(seq)):
            problems.append(f"{where}: '{key}' must be a finite number [{UNITS[key]}], got {raw!r}")
            continue
        problems += _range_problems(where, key, seq)
        values[key] = tuple(seq) if vector else seq[0]
    values |= _curves(record, where, problems)
    values |= _mechanical(record, mechanical, values, kind, where, problems)
    if problems:
        raise errors.InputError(problems)
    problems += _elastic_problems(kind, values, where) + _conductivity_range_problems(name, values, where)
    if problems:
        raise errors.InputError(problems)
    material = Material(
        name=name,
        title=str(record.get("title", name)),
        kind=kind,
        brittle=bool(record.get("brittle", False)),
        note=str(record.get("note", "")),
        sources={str(k): str(v) for k, v in dict(record.get("sources", {})).items()},
        **values,
    )
    if "axes" in record:
        material = material.oriented(record["axes"])
    return material


def _elastic_problems(kind: str, values: dict, where: str) -> list[str]:
    """An orthotropic material's compliance must be positive definite (else no strain energy is positive and
    the stiffness has no inverse): checked when the material is read."""
    if kind != "orthotropic" or len(values.get("shear_modulus", ())) != 3:
        return []  # without three shear moduli it is usable for heat only (a stress stage refuses it)
    trial = Material("check", "", kind, (1.0,), values["youngs_modulus"], values["poisson_ratio"], (0.0,), 1.0,
                     shear_modulus=values["shear_modulus"])
    lowest = float(np.linalg.eigvalsh(trial.compliance()).min())
    if lowest > 0:
        return []
    e = np.broadcast_to(np.asarray(values["youngs_modulus"], float), (3,))
    nu = np.broadcast_to(np.asarray(values["poisson_ratio"], float), (3,))
    bounds = [f"|nu_xy| < {np.sqrt(e[0] / e[1]):.3g}", f"|nu_xz| < {np.sqrt(e[0] / e[2]):.3g}",
              f"|nu_yz| < {np.sqrt(e[1] / e[2]):.3g}"]
    return [f"{where}: the orthotropic constants give a compliance that is not positive definite (smallest "
            f"eigenvalue {lowest:.3g} 1/Pa), so no such material exists; with these moduli the Poisson ratios "
            f"(nu_xy, nu_xz, nu_yz) = {tuple(float(v) for v in nu)} need {', '.join(bounds)} and "
            "1 - nu_xy nu_yx - nu_yz nu_zy - nu_xz nu_zx - 2 nu_yx nu_zy nu_xz > 0"]


def _conductivity_range_problems(name: str, values: dict, where: str) -> list[str]:
    """k(T) must stay positive over the material's stated validity range (valid_from..valid_to)."""
    if "conductivity_polynomial" not in values and "conductivity_table" not in values:
        return []
    low, high = values.get("valid_from"), values.get("valid_to")
    if low is None or high is None:
        return []
    trial = Material(name, "", "isotropic", (1.0,), (1.0,), (0.0,), (0.0,), 1.0,
                     conductivity_table=values.get("conductivity_table", ()),
                     conductivity_polynomial=values.get("conductivity_polynomial", ()))
    t, k = trial.lowest_conductivity(low, high)
    if k > 0:
        return []
    return [f"{where}: the conductivity k(T) falls to {k:.3g} W/(m*K) at {t:.1f} K, inside its validity range "
            f"{low:g}..{high:g} K; a conductivity must stay positive: correct the coefficients or the range"]


def _curves(record: dict, where: str, problems: list[str]) -> dict:
    out = {}
    table = record.get("conductivity_table")
    if table is not None:
        try:
            rows = np.asarray(table, dtype=float) if isinstance(table, list) else np.zeros((0, 0))
        except (TypeError, ValueError, OverflowError):  # text, dates, tables or ragged rows
            rows = np.zeros((0, 0))
        if rows.ndim != 2 or not np.all(np.isfinite(rows)) or rows.shape[1] not in (2, 4) or len(rows) < 2:
            problems.append(f"{where}: conductivity_table must be rows [T, k] or [T, kx, ky, kz] (K, W/(m*K)), "
                            "at least two")
        elif np.any(np.diff(rows[:, 0]) <= 0) or np.any(rows[:, 1:] <= 0) or rows[0, 0] < 0:
            problems.append(f"{where}: conductivity_table needs increasing temperatures >= 0 K and positive values")
        else:
            out["conductivity_table"] = tuple(tuple(float(v) for v in r) for r in rows)
    poly = record.get("conductivity_polynomial")
    if poly is not None:
        if not isinstance(poly, list) or not poly or not all(_finite_number(c) for c in poly):
            problems.append(f"{where}: conductivity_polynomial must be coefficients [c0, c1, ...] of k(T), T in K")
        else:
            out["conductivity_polynomial"] = tuple(float(c) for c in poly)
    if len(out) == 2:
        problems.append(f"{where}: give conductivity_table or conductivity_polynomial, not both")
    return out


def _mechanical(record: dict, found: dict, values: dict, kind: str, where: str, problems: list[str]) -> dict:
    """The mechanical curves, the expansion convention and the constants they stand in for."""
    if not found:
        if "expansion_convention" in record or "expansion_base" in record:
            problems.append(f"{where}: expansion_convention and expansion_base belong to an expansion_table or "
                            "expansion_polynomial")
        return {}
    out: dict = {"curves": found}
    if kind == "orthotropic" and ({"youngs_modulus", "poisson_ratio"} & set(found)):
        problems.append(f"{where}: temperature-dependent youngs_modulus or poisson_ratio is for isotropic materials")
    convention = record.get("expansion_convention", "instantaneous")
    if convention not in curves_mod.CONVENTIONS:
        problems.append(f"{where}: expansion_convention must be one of {', '.join(curves_mod.CONVENTIONS)}, got "
                        f"{convention!r}{errors.closest(str(convention), curves_mod.CONVENTIONS)}")
    elif convention == "mean" and values.get("expansion_base") is None:
        problems.append(f"{where}: a mean expansion coefficient needs expansion_base, the temperature [K] it is "
                        "measured from (often 293.15 K)")
    out["expansion_convention"] = convention
    for prop, curve in found.items():
        rows = np.asarray(curve.table, float)[:, 1:] if curve.table else None
        if prop == "youngs_modulus" and rows is not None and np.any(rows <= 0):
            problems.append(f"{where}: youngs_modulus_table values must be positive [Pa]")
        if prop == "poisson_ratio" and rows is not None and not np.all((rows > -1) & (rows < 0.5)):
            problems.append(f"{where}: poisson_ratio_table values must lie in (-1, 0.5)")
        if prop not in values:  # the nominal constant: the curve at room temperature
            nominal = (curves_mod.instantaneous_from_mean(curve, values.get("expansion_base") or curves_mod.ROOM,
                                                          curves_mod.ROOM)
                       if prop == "expansion" and convention == "mean" else curve.values(curves_mod.ROOM))
            out[prop] = tuple(float(v) for v in np.ravel(nominal))
    return out


def _finite_number(value) -> bool:
    """A finite real number that fits a float (a TOML integer may not)."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return False
    try:
        return bool(np.isfinite(float(value)))
    except OverflowError:
        return False


def _range_problems(where: str, key: str, values: list[float]) -> list[str]:
    bad = []
    if key == "poisson_ratio" and len(values) == 1 and not -1.0 < values[0] < 0.5:
        bad.append(f"{where}: poisson_ratio must lie in (-1, 0.5), got {values[0]}")
    elif key in ("valid_from", "valid_to") and values[0] < 0:
        bad.append(f"{where}: '{key}' is a temperature in K and must be >= 0, got {values[0]}")
    elif key not in ("poisson_ratio", "expansion") and any(v <= 0 for v in values):
        bad.append(f"{where}: '{key}' must be positive [{UNITS[key]}], got {values if len(values) > 1 else values[0]}")
    return bad


@dataclass(frozen=True)
class Library:
    """Materials by name, with the file each came from."""

    materials: dict[str, Material]
    origin: dict[str, str]

    def __getitem__(self, name: str) -> Material:
        if name not in self.materials:
            raise errors.InputError(errors.unknown_name("material", name, self.materials, "material library"))
        return self.materials[name]

    def __contains__(self, name: str) -> bool:
        return name in self.materials

    def __iter__(self):
        return iter(sorted(self.materials))

    def __len__(self) -> int:
        return len(self.materials)

    def __repr__(self) -> str:
        names = sorted(self.materials)
        shown = ", ".join(names[:6]) + (f", ... ({len(names) - 6} more)" if len(names) > 6 else "")
        return f"<Library of {len(names)} materials: {shown}>"

    def extended(self, records: dict, where: str) -> "Library":
        """A library with ``records`` (name -> TOML table) added; a name already present is replaced."""
        from . import laminate

        problems, added = [], {}
        plain = {n: r for n, r in records.items() if not (isinstance(r, dict) and r.get("kind") == "laminate")}
        for name, record in plain.items():
            try:
                added[name] = from_record(name, record, where)
            except errors.InputError as exc:
                problems += exc.problems
        for name in (n for n in records if n not in plain):  # a stack-up reads the materials above
            try:
                added[name] = laminate.build(name, records[name], Library({**self.materials, **added}, {}), where)
            except errors.InputError as exc:
                problems += exc.problems
        if problems:
            raise errors.InputError(problems)
        return Library({**self.materials, **added}, {**self.origin, **{n: where for n in added}})


def read_file(path: str | Path, base: Library | None = None) -> Library:
    """Read a materials TOML file (``[materials.NAME]`` tables) on top of ``base``."""
    path = Path(path)
    data = files.read_toml(path, "material file", MAX_FILE_BYTES)
    records = data.get("materials")
    if not isinstance(records, dict):
        raise errors.InputError(f"{path}: expected tables [materials.NAME]")
    return (base or Library({}, {})).extended(records, str(path))


def library() -> Library:
    """The library shipped with thermochain (``pipeline/data/materials.toml``)."""
    ref = resources.files("pipeline") / "data" / "materials.toml"
    with resources.as_file(ref) as path:
        lib = read_file(path)
    return Library(lib.materials, {n: "thermochain library" for n in lib.materials})
