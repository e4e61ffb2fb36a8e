"""Results that flow between stages: frozen records of numpy arrays, stored as npz + JSON (never pickle)."""

from __future__ import annotations

import json
from dataclasses import dataclass, field

import numpy as np

from .stages.solvers import SolveRecord
from .model.units import celsius


@dataclass(frozen=True, repr=False)
class TemperatureField:
    """Steady temperature on a domain.

    temperature: value at each degree of freedom [K] (P1: vertices; P2: vertices then edge midpoints).
    order: element order (1 or 2).  vertices: number of mesh vertices.
    parts: part -> {"min", "max", "mean"} [K] (mean is volume-weighted).
    balance: one record per load or boundary: {"name", "kind", "heat_in_W"} (heat into the body > 0).
    probes: probe name -> temperature [K].  loads: per-part power records (W and W/m^3).
    adiabatic: surfaces with no boundary condition.  solver: how the system was solved.
    notices: cautions found while solving.  domain_hash: content hash of the mesh file.
    interfaces: per contact {"name", "parts", "conductance_W_per_m2K", "area_m2", "heat_W" (from the
    first part to the second), "mean_drop_K" (area mean of T_a - T_b), "max_drop_K" (largest at a node)}.
    cavities: per cavity {"name", "temperature_K" (the air), "films_W" (surface -> heat into the air),
    "from_solids_W", "ventilation_W" (m_dot c_p (T_air - T_in)), "ventilation_W_per_K", "inlet_K"}.
    Cavity films are in ``balance`` with kind "cavity"; contacts are internal and are not.
    """

    temperature: np.ndarray
    order: int
    vertices: int
    parts: dict[str, dict[str, float]]
    balance: tuple[dict, ...]
    probes: dict[str, float]
    loads: tuple[dict, ...]
    adiabatic: tuple[str, ...]
    solver: SolveRecord
    notices: tuple[str, ...] = ()
    domain_hash: str = ""
    meta: dict = field(default_factory=dict)
    interfaces: tuple[dict, ...] = ()
    cavities: tuple[dict, ...] = ()

    @property
    def at_vertices(self) -> np.ndarray:
        """Temperature at the mesh vertices [K]."""
        return self.temperature[: self.vertices]

    @property
    def heat_in(self) -> float:
        """Total heat entering the body through loads and boundaries that supply heat [W]."""
        return float(sum(max(r["heat_in_W"], 0.0) for r in self.balance))

    @property
    def imbalance(self) -> float:
        """Sum of all heat flows relative to the larger of heat in and heat out (0 when balanced)."""
        total = sum(r["heat_in_W"] for r in self.balance)
        scale = max(self.heat_in, sum(max(-r["heat_in_W"], 0.0) for r in self.balance)) or 1.0
        return float(abs(total) / scale)

    def to_arrays(self) -> tuple[dict[str, np.ndarray], dict]:
        """Arrays for an npz file and a JSON-able description of everything else."""
        meta = {
            "order": self.order, "vertices": self.vertices, "parts": self.parts,
            "balance": list(self.balance), "probes": self.probes, "loads": list(self.loads),
            "adiabatic": list(self.adiabatic), "solver": self.solver.to_dict(),
            "notices": list(self.notices), "domain_hash": self.domain_hash, "meta": self.meta,
            "interfaces": list(self.interfaces), "cavities": list(self.cavities),
        }
        json.dumps(meta, allow_nan=False)  # fails early if anything is not plain data
        return {"temperature": self.temperature}, meta

    @classmethod
    def from_arrays(cls, arrays: dict[str, np.ndarray], meta: dict) -> "TemperatureField":
        solver = dict(meta["solver"])
        solver["history"] = tuple(solver.get("history", ()))
        return cls(
            temperature=np.asarray(arrays["temperature"]), order=meta["order"], vertices=meta["vertices"],
            parts=meta["parts"], balance=tuple(meta["balance"]), probes=meta["probes"],
            loads=tuple(meta["loads"]), adiabatic=tuple(meta["adiabatic"]), solver=SolveRecord(**solver),
            notices=tuple(meta["notices"]), domain_hash=meta["domain_hash"], meta=meta.get("meta", {}),
            interfaces=tuple(meta.get("interfaces", ())), cavities=tuple(meta.get("cavities", ())),
        )

    def __repr__(self) -> str:
        t = celsius(self.temperature)
        return (
            f"<TemperatureField P{self.order}, {len(self.temperature)} dofs, {t.min():.2f} to {t.max():.2f} degC, "
            f"{len(self.parts)} parts, heat in {self.heat_in:.4g} W, imbalance {self.imbalance:.1e}>"
        )


@dataclass(frozen=True, repr=False)
class ThermalLoad:
    """Temperature on the structural model and the stress-free temperature.

    temperature: values at the degrees of freedom of a P``order`` field on the structural domain [K]
    (the stress stage evaluates it at its own quadrature points).  reference: stress-free temperature
    per element [K].  diagnostics: method ("same mesh", "cross mesh", "external file", "function"),
    points outside the source and the largest distance [m], source and mapped min/max [K].
    """

    temperature: np.ndarray
    order: int
    reference: np.ndarray
    diagnostics: dict = field(default_factory=dict)

    def to_arrays(self) -> tuple[dict[str, np.ndarray], dict]:
        json.dumps(self.diagnostics, allow_nan=False)
        return ({"temperature": self.temperature, "reference": self.reference},
                {"order": self.order, "diagnostics": self.diagnostics})

    @classmethod
    def from_arrays(cls, arrays: dict[str, np.ndarray], meta: dict) -> "ThermalLoad":
        return cls(np.asarray(arrays["temperature"]), meta["order"], np.asarray(arrays["reference"]),
                   meta["diagnostics"])

    def __repr__(self) -> str:
        t = celsius(self.temperature)
        return (f"<ThermalLoad P{self.order} ({self.diagnostics.get('method', '?')}), {t.min():.2f} to "
                f"{t.max():.2f} degC, stress-free {celsius(self.reference.min()):.2f} to "
                f"{celsius(self.reference.max()):.2f} degC>")


@dataclass(frozen=True, repr=False)
class StressField:
    """Linear-elastic result.

    displacement: (n_dofs / 3, 3) at the displacement nodes [m] (P1: vertices; P2: vertices then edge
    midpoints).  order: element order.  stress: (n_elements, 6) element-mean stress [Pa] in the order
    xx, yy, zz, yz, xz, xy.  von_mises, tresca: (n_elements,) [Pa].  principal: (n_elements, 3) [Pa],
    largest first.  parts: part -> figures (peak von Mises [Pa] with location [m], principal extremes,
    safety factor and its criterion).  reactions: support -> force [N] (x, y, z).
    equilibrium: sum of reactions and applied loads [N] and its size relative to the largest force.
    probes: name -> {"part", "displacement_m", "temperature_K", "stress_Pa" (xx, yy, zz, xy, yz, xz),
    "principal_Pa" (largest first), "von_mises_Pa"}: the recovered field of the part the probe lies in.
    lines: name -> one such record per point along the line, with "distance_m", "x_m", "outside".
    features: singular features found, counted by kind (``stages.features``).
    solver: how the system was solved.
    safety: (n_elements,) element safety factor by its part's criterion (inf where unloaded).
    nodal: part -> (point ids, (n, 6) stress [Pa]): the L2 projection within the part; point ids number
    the vertices first, then (P2) the edge midpoints, as ``displacement`` does.  nodal_safety: part ->
    (n,) safety factor at those points by the part's criterion (inf unloaded, NaN without a strength).
    temperature: mapped temperature at the displacement points [K]; reference: stress-free
    temperature per element [K].
    supports: support -> {"kind", "force_N" (x, y, z) and, for normal supports (symmetry, contact),
    "compression_N", "tension_N" (pressing and pulling totals, >= 0), "normal"; for contact also
    "contact_area_m2", "separated_area_m2", "iterations", "least_pressing_N", "penetration_max_m"}.
    cautions: records {"code", "where", "message", "data"} of results a reader must not miss (e.g.
    "support_pulls": a bilateral normal support in tension).
    """

    displacement: np.ndarray
    order: int
    stress: np.ndarray
    von_mises: np.ndarray
    tresca: np.ndarray
    principal: np.ndarray
    parts: dict[str, dict]
    reactions: dict[str, list[float]]
    equilibrium: dict
    probes: dict[str, dict]
    solver: SolveRecord
    safety: np.ndarray = field(default_factory=lambda: np.zeros(0))
    nodal: dict[str, tuple[np.ndarray, np.ndarray]] = field(default_factory=dict)
    notices: tuple[str, ...] = ()
    meta: dict = field(default_factory=dict)
    supports: dict[str, dict] = field(default_factory=dict)
    cautions: tuple[dict, ...] = ()
    lines: dict[str, list[dict]] = field(default_factory=dict)
    features: dict[str, int] = field(default_factory=dict)
    temperature: np.ndarray = field(default_factory=lambda: np.zeros(0))
    reference: np.ndarray = field(default_factory=lambda: np.zeros(0))
    nodal_safety: dict[str, np.ndarray] = field(default_factory=dict)

    ARRAYS = ("displacement", "stress", "von_mises", "tresca", "principal", "safety", "temperature", "reference")

    def nodal_stress(self, part: str, point: int) -> np.ndarray:
        """Projected stress (6,) [Pa] of ``part`` at a point (vertex id, or P2 edge point)."""
        ids, values = self.nodal[part]
        where = np.flatnonzero(ids == point)
        if not len(where):
            raise KeyError(f"point {point} is not in part '{part}'")
        return values[where[0]]

    def to_arrays(self) -> tuple[dict[str, np.ndarray], dict]:
        meta = {"order": self.order, "parts": self.parts, "reactions": self.reactions,
                "equilibrium": self.equilibrium, "probes": self.probes, "solver": self.solver.to_dict(),
                "notices": list(self.notices), "meta": self.meta, "nodal_parts": sorted(self.nodal),
                "supports": self.supports, "cautions": list(self.cautions), "lines": self.lines,
                "features": self.features}
        json.dumps(meta, allow_nan=False)
        arrays = {name: getattr(self, name) for name in self.ARRAYS}
        for i, part in enumerate(sorted(self.nodal)):
            arrays[f"nodal_points_{i}"], arrays[f"nodal_stress_{i}"] = self.nodal[part]
            if part in self.nodal_safety:
                arrays[f"nodal_safety_{i}"] = self.nodal_safety[part]
        return arrays, meta

    @classmethod
    def from_arrays(cls, arrays: dict[str, np.ndarray], meta: dict) -> "StressField":
        solver = dict(meta["solver"])
        solver["history"] = tuple(solver.get("history", ()))
        nodal = {p: (np.asarray(arrays[f"nodal_points_{i}"]), np.asarray(arrays[f"nodal_stress_{i}"]))
                 for i, p in enumerate(meta.get("nodal_parts", []))}
        safety = {p: np.asarray(arrays[f"nodal_safety_{i}"]) for i, p in enumerate(meta.get("nodal_parts", []))
                  if f"nodal_safety_{i}" in arrays}
        return cls(**{n: np.asarray(arrays[n]) for n in cls.ARRAYS if n in arrays}, order=meta["order"],
                   parts=meta["parts"], nodal_safety=safety,
                   reactions=meta["reactions"], equilibrium=meta["equilibrium"], probes=meta["probes"],
                   solver=SolveRecord(**solver), nodal=nodal, notices=tuple(meta["notices"]),
                   meta=meta.get("meta", {}), supports=meta.get("supports", {}),
                   cautions=tuple(meta.get("cautions", ())), lines=meta.get("lines", {}),
                   features=meta.get("features", {}))

    def __repr__(self) -> str:
        umax = np.linalg.norm(self.displacement, axis=1).max()
        return (f"<StressField P{self.order}, {len(self.displacement)} nodes, |u| max {umax * 1e3:.4g} mm, "
                f"von Mises max {self.von_mises.max() / 1e6:.4g} MPa, {len(self.parts)} parts, "
                f"equilibrium {self.equilibrium.get('relative', 0):.1e}>")


@dataclass(frozen=True, repr=False)
class GroupView:
    """View factors of one group of surfaces (pipeline/stages/view.py).

    facets: the group's facet ids; patch: each facet's patch; area: patch areas [m^2]; F: patch to
    patch view factors (n, n); surroundings: each patch's view factor to the surroundings (zero in an
    enclosure); label: each patch's index into labels, the (surface, part) pairs; residuals:
    reciprocity and summation residuals of the raw and of the corrected matrix."""

    facets: np.ndarray
    patch: np.ndarray
    area: np.ndarray
    F: np.ndarray
    surroundings: np.ndarray
    label: np.ndarray
    labels: tuple[tuple[str, str], ...]
    enclosure: bool
    residuals: dict

    @property
    def surfaces(self) -> tuple[str, ...]:
        return tuple(dict.fromkeys(s for s, _ in self.labels))


@dataclass(frozen=True, repr=False)
class ViewFactors:
    """View factors of every group, by name; patch_size [m]; domain_hash of the mesh they belong to."""

    groups: dict[str, GroupView]
    patch_size: float
    domain_hash: str = ""
    meta: dict = field(default_factory=dict)

    ARRAYS = ("facets", "patch", "area", "F", "surroundings", "label")

    def to_arrays(self) -> tuple[dict[str, np.ndarray], dict]:
        arrays = {f"{i}_{a}": getattr(g, a) for i, g in enumerate(self.groups.values()) for a in self.ARRAYS}
        meta = {"groups": [{"name": n, "labels": [list(l) for l in g.labels], "enclosure": g.enclosure,
                            "residuals": g.residuals} for n, g in self.groups.items()],
                "patch_size": self.patch_size, "domain_hash": self.domain_hash, "meta": self.meta}
        json.dumps(meta, allow_nan=False)
        return arrays, meta

    @classmethod
    def from_arrays(cls, arrays: dict[str, np.ndarray], meta: dict) -> "ViewFactors":
        groups = {g["name"]: GroupView(**{a: np.asarray(arrays[f"{i}_{a}"]) for a in cls.ARRAYS},
                                       labels=tuple(tuple(l) for l in g["labels"]), enclosure=g["enclosure"],
                                       residuals=g["residuals"])
                  for i, g in enumerate(meta["groups"])}
        return cls(groups=groups, patch_size=meta["patch_size"], domain_hash=meta["domain_hash"],
                   meta=meta.get("meta", {}))

    def __repr__(self) -> str:
        inner = ", ".join(f"{n}: {len(g.area)} patches" for n, g in self.groups.items())
        return f"<ViewFactors {inner}; patch size {self.patch_size * 1e3:g} mm>"


@dataclass(frozen=True, repr=False)
class CycleField:
    """Ranges between two or more states of one structure (the ``cycle`` stage).

    states: the stress stages compared, in order.  Per element (element means of each state's stress):
    equivalent_range: max over pairs of states of von Mises(sigma_b - sigma_a) [Pa]; pair: (n, 2) the
    states (indices into ``states``) of that largest range; von_mises_range: max - min of von Mises over
    the states [Pa]; component_range: (n, 6) max - min of each component xx, yy, zz, yz, xz, xy [Pa];
    mean: (n, 6) (sigma_a + sigma_b) / 2 of the governing pair [Pa]; strain_range: (n,) von Mises
    equivalent of the mechanical (elastic) strain difference of that pair [-]; state_max, state_min:
    (n,) the states of the largest and smallest von Mises.  parts: part -> figures from the recovered
    nodal field of each state (``stages.cycle``).  life: per named joint, the life estimates.
    """

    states: tuple[str, ...]
    equivalent_range: np.ndarray
    pair: np.ndarray
    von_mises_range: np.ndarray
    component_range: np.ndarray
    mean: np.ndarray
    strain_range: np.ndarray
    state_max: np.ndarray
    state_min: np.ndarray
    parts: dict[str, dict]
    life: dict[str, dict] = field(default_factory=dict)
    meta: dict = field(default_factory=dict)

    ARRAYS = ("equivalent_range", "pair", "von_mises_range", "component_range", "mean", "strain_range",
              "state_max", "state_min")

    def to_arrays(self) -> tuple[dict[str, np.ndarray], dict]:
        meta = {"states": list(self.states), "parts": self.parts, "life": self.life, "meta": self.meta}
        json.dumps(meta, allow_nan=False)
        return {n: getattr(self, n) for n in self.ARRAYS}, meta

    @classmethod
    def from_arrays(cls, arrays: dict[str, np.ndarray], meta: dict) -> "CycleField":
        return cls(states=tuple(meta["states"]), parts=meta["parts"], life=meta.get("life", {}),
                   meta=meta.get("meta", {}), **{n: np.asarray(arrays[n]) for n in cls.ARRAYS})

    def __repr__(self) -> str:
        return (f"<CycleField {' / '.join(self.states)}: {len(self.equivalent_range)} elements, equivalent range "
                f"max {self.equivalent_range.max() / 1e6:.4g} MPa, {len(self.parts)} parts>")
