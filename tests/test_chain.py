"""heat -> map -> stress through the Python API: the demo assembly and NAFEMS LE11 through all stages."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from pipeline import load_mesh, material_library
from pipeline.model.units import kelvin
from pipeline.stages import heat, mapping, stress
from pipeline.stages.supports import Support

ROOT = Path(__file__).parent.parent


def demo_chain(supports):
    """The invented heat-spreader demo: aluminium spreader, FR-4 board, silicon chip, alumina regulator."""
    d = load_mesh(ROOT / "cases" / "heat_spreader" / "heat_spreader_coarse.msh", unit="mm")
    lib = material_library()
    mats = {"spreader": lib["aluminium_6061_t6"], "board": lib["fr4"], "chip": lib["silicon"],
            "regulator": lib["alumina_96"]}
    t = heat.solve(d, heat.HeatSpec(mats, power={"chip": 2.5, "regulator": 1.0},
                                    fixed_temperature={"mount": kelvin(45.0)},
                                    convection={"top_air": heat.Convection(8.0, kelvin(25.0)),
                                                "spreader_sides": heat.Convection(8.0, kelvin(25.0))}))
    load = mapping.transfer(t, d, d, mapping.MapSpec(reference=kelvin(25.0)))
    s = stress.solve(d, load, stress.StressSpec(mats, supports, order=1,
                                                probes={"chip_top": (0.030, 0.020, 0.0068)}))
    return d, t, s


def test_free_assembly_reports_mismatch_stress_per_part():
    """Under the minimal support only the expansion mismatch between bonded parts loads the assembly:
    the reactions vanish (statically determinate support, self-equilibrated load; statics)."""
    d, t, s = demo_chain({"free": Support("minimal")})
    assert s.equilibrium["relative"] < 1e-8
    assert np.linalg.norm(s.reactions["free"]) < 1e-6 * max(abs(r) for r in s.equilibrium["applied_N"] + [1.0])
    for part in d.parts:
        fig = s.parts[part]
        assert fig["von_mises_max_Pa"] > 0 and len(fig["von_mises_max_at_m"]) == 3
        assert fig["safety_factor"] is None or fig["safety_factor"] > 0
    assert "brittle" in s.parts["chip"]["criterion"] and "ductile" in s.parts["spreader"]["criterion"]
    assert np.isfinite(s.probes["chip_top"]["von_mises_Pa"])
    assert "von Mises max" in repr(s)


def test_clamped_mount_reactions_balance():
    """Fixing the mount to a rigid cold plate restrains the spreader's expansion: the reactions are large,
    but their sum is zero (no external load; statics), to solver tolerance."""
    d, t, s = demo_chain({"mount": Support("fixed")})
    r = np.array(s.reactions["mount"])
    assert s.equilibrium["relative"] < 1e-8
    assert np.linalg.norm(r) < 1e-6
    assert s.parts["spreader"]["von_mises_max_Pa"] > 1e6  # restrained expansion of a 20 K warmer plate


def test_nafems_le11_through_the_heat_stage():
    """NAFEMS LE11 (TNSB Rev. 3, 1990; target sigma_zz(A) = -105 MPa) with the temperature computed by the
    heat stage: -div(k grad T) = -k / r reproduces T = r + z (since laplacian(r + z) = 1/r in 3-D, derived
    here), with T = r + z on the curved and end faces and insulated symmetry planes, where dT/dn = 0
    exactly. P2 heat -> same-mesh map -> P2 stress on the h = 0.1 m mesh: 3 %, as in test_stress."""
    d = load_mesh(ROOT / "cases" / "le11" / "le11_h0.1.msh", unit="m")
    lib = material_library()
    steel = lib["steel_304"]
    r = lambda x: np.sqrt(x[0] ** 2 + x[1] ** 2)  # noqa: E731
    exact = lambda x: 273.15 + r(x) + x[2]  # noqa: E731
    k = steel.conductivity[0]
    t = heat.solve(d, heat.HeatSpec({"body": steel}, generation={"body": lambda x: -k / r(x)},
                                    fixed_temperature={s: exact for s in ("inner", "outer", "bottom", "top")},
                                    order=2))
    node = int(np.argmin(np.linalg.norm(d.points - [1.0, 0, 0], axis=1)))
    assert t.temperature[node] == pytest.approx(exact(d.points[node]), abs=1e-9)  # a Dirichlet node
    interior = np.abs(t.temperature[: d.mesh.nvertices] - exact(d.points.T)).max()
    assert interior < 2e-3  # K, on a 2.79 K range: P2 with straight facets
    le11 = replace(steel, youngs_modulus=(210e9,), poisson_ratio=(0.3,), expansion=(2.3e-4,))
    load = mapping.transfer(t, d, d, mapping.MapSpec(reference=273.15))
    sup = {s: Support("symmetry") for s in ("symmetry_xz", "symmetry_yz", "bottom", "top")}
    s = stress.solve(d, load, stress.StressSpec({"body": le11}, sup, order=2))
    assert s.nodal_stress("body", node)[2] / 1e6 == pytest.approx(-105.0, rel=0.03)
