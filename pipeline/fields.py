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
        )

    def __repr__(self) -> str:
        t = celsius(self.temperature)
        return (
            f"<TemperatureField P{self.order}, {len(self.temperature)} dofs, {t.min():.2f} to {t.max():.2f} degC, "
            f"{len(self.parts)} parts, heat in {self.heat_in:.4g} W, imbalance {self.imbalance:.1e}>"
        )
