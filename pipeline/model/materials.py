"""Material records, the shipped library, user libraries and per-part orientation.

Values are SI: conductivity W/(m*K), moduli and strengths Pa, expansion 1/K, density kg/m^3,
temperatures K.  Orthotropic properties are principal values in the material axes; a part's
``axes`` (rows = material x, y, z directions in model coordinates) turn them into tensors.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, field, replace
from importlib import resources
from pathlib import Path

import numpy as np

from .. import errors

#: Properties every material must give, with their units.
REQUIRED = {
    "conductivity": "W/(m*K)",
    "youngs_modulus": "Pa",
    "poisson_ratio": "-",
    "expansion": "1/K",
    "density": "kg/m^3",
}
OPTIONAL = {
    "shear_modulus": "Pa",
    "yield_strength": "Pa",
    "tensile_strength": "Pa",
    "tensile_strength_axes": "Pa",
    "shear_strength_axes": "Pa",
    "valid_from": "K",
    "valid_to": "K",
}
UNITS = REQUIRED | OPTIONAL
TEXT_KEYS = {"title", "kind", "brittle", "note", "sources"}
#: temperature-dependent conductivity: a table of rows [T, k] or [T, kx, ky, kz] (K, W/(m*K)), or
#: polynomial coefficients c0, c1, ... with k = sum c_i T^i (T in K)
CURVE_KEYS = {"conductivity_table", "conductivity_polynomial"}
KINDS = ("isotropic", "orthotropic")


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
    unknown = set(record) - set(UNITS) - TEXT_KEYS - CURVE_KEYS - {"axes"}
    for key in sorted(unknown):
        problems.append(f"{where}: unknown key '{key}'{errors.closest(key, list(UNITS) + list(TEXT_KEYS))}")
    kind = record.get("kind", "isotropic")
    if kind not in KINDS:
        problems.append(f"{where}: kind must be one of {', '.join(KINDS)}, got {kind!r}")
    width = 3 if kind == "orthotropic" else 1
    values: dict = {}
    for key in REQUIRED:
        if key not in record:
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
        problems, added = [], {}
        for name, record in records.items():
            try:
                added[name] = from_record(name, record, where)
            except errors.InputError as exc:
                problems += exc.problems
        if problems:
            raise errors.InputError(problems)
        return Library({**self.materials, **added}, {**self.origin, **{n: where for n in added}})


def read_file(path: str | Path, base: Library | None = None) -> Library:
    """Read a materials TOML file (``[materials.NAME]`` tables) on top of ``base``."""
    path = Path(path)
    try:
        with path.open("rb") as f:
            data = tomllib.load(f)
    except FileNotFoundError:
        raise errors.InputError(f"{path}: material file not found") from None
    except tomllib.TOMLDecodeError as exc:
        raise errors.InputError(f"{path}: not valid TOML: {exc}") from None
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
