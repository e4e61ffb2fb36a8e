"""Ranges between states (the ``cycle`` stage): stress, strain and von Mises between two or more
solved states of one structure (e.g. -40 and +125 degC ambient; power off and full power).

For states a, b with stresses sigma_a, sigma_b (Voigt, Pa):
  equivalent range      von Mises(sigma_b - sigma_a), largest over all pairs (the governing pair);
  von Mises range       max_k vM(sigma_k) - min_k vM(sigma_k) (smaller or equal: it forgets direction);
  component range       max_k sigma_k,i - min_k sigma_k,i;
  mean stress           (sigma_a + sigma_b) / 2 of the governing pair (its von Mises and its
                        hydrostatic part sigma_m = tr / 3 are reported: a tensile mean shortens fatigue lives);
  strain range          von Mises equivalent of the mechanical (elastic) strain difference S_b sigma_b -
                        S_a sigma_a of the governing pair (S = C^-1 at the element's temperature in that state).
Per part the figures come from each state's recovered nodal field (one field per part, as every stress
output); a peak range near a singular feature (``features``: bimaterial free edges, re-entrant edges,
support rims) is flagged and the peak away from such features reported beside it, as the stress stage
does; per element from the element means (for the VTU file and the figure).  Linear elasticity:
the ranges of an elastic analysis, no plasticity or creep (solder relaxes: see docs/limits.md).
"""

from __future__ import annotations

import itertools
import time
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from .. import errors
from ..fields import CycleField, StressField
from . import constitutive, features, fem, life

STAGE_VERSION = 1


@dataclass(frozen=True)
class CycleSpec:
    """states: the state names in order (at least two).  materials: part -> Material (for the strain).
    joints: name -> ``life.Joint`` (solder-joint life estimates; empty for none).  supports: the states'
    supports (surface -> Support), for the singular features the range peaks are flagged at."""

    states: tuple[str, ...]
    materials: Mapping[str, object]
    joints: Mapping[str, object] = field(default_factory=dict)
    supports: Mapping[str, object] = field(default_factory=dict)


def check(domain, fields: Mapping[str, StressField], spec: CycleSpec, where: str = "cycle") -> None:
    """Every state on the same structure: same element order and the same recovered points per part."""
    problems = []
    if len(spec.states) < 2:
        problems.append(f"{where}.states: name at least two stress stages (got {len(spec.states)})")
    first = None
    for name in spec.states:
        f = fields.get(name)
        if f is None:
            continue
        if first is None:
            first = (name, f)
            continue
        if f.order != first[1].order or f.stress.shape != first[1].stress.shape or sorted(f.nodal) != sorted(first[1].nodal):
            problems.append(f"{where}.states: {name} is not the same structural model as {first[0]} (mesh, parts or "
                            "order differ); a cycle compares states of one model")
    problems += life.check(domain, spec.joints, spec.materials, where)
    if problems:
        raise errors.InputError(problems)


def ranges(stack: np.ndarray) -> dict[str, np.ndarray]:
    """Ranges of Voigt stresses stacked (n_states, n, 6) [Pa]: see the module docstring."""
    pairs = list(itertools.combinations(range(len(stack)), 2))
    eq = np.stack([constitutive.von_mises((stack[b] - stack[a]).T) for a, b in pairs])  # (n_pairs, n)
    best = np.argmax(eq, axis=0)
    pair = np.asarray(pairs)[best]  # (n, 2)
    n = np.arange(stack.shape[1])
    vm = np.stack([constitutive.von_mises(s.T) for s in stack])
    return {"equivalent_range": eq[best, n], "pair": pair, "von_mises_range": vm.max(axis=0) - vm.min(axis=0),
            "component_range": stack.max(axis=0) - stack.min(axis=0),
            "mean": 0.5 * (stack[pair[:, 0], n] + stack[pair[:, 1], n]),
            "state_max": np.argmax(vm, axis=0), "state_min": np.argmin(vm, axis=0), "von_mises": vm}


def _elastic_strain(domain, f: StressField, spec: CycleSpec) -> np.ndarray:
    """(n_elements, 6) mechanical strain S sigma of the element means, S at the element's temperature."""
    out = np.zeros_like(f.stress)
    temps = f.temperature[domain.tetrahedra].mean(axis=1) if len(f.temperature) else None
    for part, ids in domain.parts.items():
        m = spec.materials[part]
        if m.stiffness_varies and temps is not None:
            c = constitutive.stiffness_at(m, temps[ids])
            out[ids] = np.linalg.solve(c, f.stress[ids][:, :, None])[:, :, 0]
        else:
            out[ids] = np.linalg.solve(constitutive.stiffness_matrix(m), f.stress[ids].T).T
    return out


def evaluate(domain, fields: Mapping[str, StressField], spec: CycleSpec, where: str = "cycle",
             checked: bool = False) -> CycleField:
    """The ranges between the states ``spec.states`` of ``fields`` (name -> StressField)."""
    if not checked:
        check(domain, fields, spec, where)
    start = time.perf_counter()
    states = [fields[n] for n in spec.states]
    elements = ranges(np.stack([f.stress for f in states]))
    strains = np.stack([_elastic_strain(domain, f, spec) for f in states])
    n = np.arange(len(domain.tetrahedra))
    a, b = elements["pair"][:, 0], elements["pair"][:, 1]
    strain_range = constitutive.equivalent_strain((strains[b, n] - strains[a, n]).T)
    order = states[0].order
    xyz = fem.space(domain, order).doflocs.T
    found = features.find(domain, spec.supports)
    parts = {}
    for part in sorted(domain.parts):
        dofs = states[0].nodal[part][0]
        nodal = ranges(np.stack([f.nodal[part][1] for f in states]))
        parts[part] = _part_figures(spec.states, nodal, xyz[dofs], elements, strain_range, domain.parts[part])
        parts[part]["equivalent_range"] = features.flag(nodal["equivalent_range"], xyz[dofs], features.point_sizes(
            domain, order, domain.parts[part], dofs), found, part)
    joints = life.estimate(domain, spec.joints, spec.materials, states, spec.states, parts, strain_range)
    return CycleField(states=tuple(spec.states), strain_range=strain_range, parts=parts, life=joints,
                      meta={"seconds": time.perf_counter() - start, "stage_version": STAGE_VERSION,
                            "stress_order": "xx, yy, zz, yz, xz, xy",
                            "recovery": "per part: each state's recovered nodal field; per element: element means"},
                      **{k: elements[k] for k in ("equivalent_range", "pair", "von_mises_range", "component_range",
                                                  "mean", "state_max", "state_min")})


def _part_figures(names, nodal: dict, xyz: np.ndarray, elements: dict, strain_range: np.ndarray, ids) -> dict:
    """One part's peaks: equivalent range (where, between which states, the mean stress there), von Mises
    range, largest component ranges, strain range (element means) and the states of its extremes."""
    i = int(np.argmax(nodal["equivalent_range"]))
    a, b = (int(k) for k in nodal["pair"][i])
    mean = nodal["mean"][i]
    j = int(ids[np.argmax(strain_range[ids])])
    vm = nodal["von_mises"]  # (n_states, n)
    high, low = np.unravel_index(np.argmax(vm), vm.shape), np.unravel_index(np.argmin(vm), vm.shape)
    return {
        "equivalent_range_max_Pa": float(nodal["equivalent_range"][i]), "at_m": xyz[i].tolist(),
        "between": [names[a], names[b]],
        "mean_von_mises_Pa": float(constitutive.von_mises(mean[:, None])[0]),
        "mean_hydrostatic_Pa": float(mean[:3].mean()),
        "von_mises_range_max_Pa": float(nodal["von_mises_range"].max()),
        "von_mises_at_peak_Pa": {names[k]: float(vm[k, i]) for k in range(len(names))},
        "component_range_max_Pa": dict(zip(("xx", "yy", "zz", "yz", "xz", "xy"),
                                           (float(v) for v in nodal["component_range"].max(axis=0)))),
        "strain_range_max": float(strain_range[j]), "strain_range_element": j,
        "von_mises_max_Pa": float(vm[high]), "von_mises_max_state": names[int(high[0])],
        "von_mises_min_Pa": float(vm[low]), "von_mises_min_state": names[int(low[0])],
    }
