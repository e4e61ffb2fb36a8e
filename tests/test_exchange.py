"""Grey radiation exchange in the heat stage (pipeline/stages/exchange.py): the exact Newton tangent,
quadratic convergence, the balance of an enclosure, input checks, and the view stage reused by the
runner when only a power changes."""

from __future__ import annotations

import shutil

import numpy as np
import pytest

from pipeline import errors
from pipeline.flow import runner
from pipeline.model import materials, mesh
from pipeline.stages import exchange, heat, view
from pipeline.verification import cases_folder
from pipeline.verification import catalogue as cat
from pipeline.verification import meshes as mk


@pytest.fixture(scope="module")
def shells(tmp_path_factory):
    folder = tmp_path_factory.mktemp("shells")
    mk.shells(folder / "s.msh", cat.SPHERES, 4)
    domain = mesh.load(folder / "s.msh", "m")
    factors = view.solve(domain, view.ViewSpec({"gap": view.Group(("inner", "outer"), enclosure=True)}, 0.2))
    return domain, factors


def _spec(factors, **kw):
    conductor = materials.library()["aluminium_a380"]
    base = dict(materials={"inside": conductor, "outside": conductor}, power={"inside": 10.0},
                convection={"skin": heat.Convection(2.0, 293.15)},
                exchange={"gap": exchange.ExchangeGroup({"inner": 0.8, "outer": 0.6})}, view=factors)
    return heat.HeatSpec(**(base | kw))


def test_tangent_is_the_derivative_of_the_residual(shells):
    domain, factors = shells
    problem = heat._Problem(domain, _spec(factors))
    rng = np.random.default_rng(1)
    T = 300 + 40 * rng.random(problem.space.N)
    d = rng.standard_normal(problem.space.N)
    A = problem.tangent(T)
    (g,) = problem.exchange.groups
    exact = A @ d - g.L @ d + g.U @ (g.Q @ (g.V @ d))
    eps = 1e-3  # central difference: error O(eps^2) of the T^4 terms, far below the 1e-7 asked
    numeric = (problem.residual(T + eps * d) - problem.residual(T - eps * d)) / (2 * eps)
    assert np.linalg.norm(numeric - exact) <= 1e-7 * np.linalg.norm(exact)


def test_enclosure_converges_quadratically_and_balances(shells):
    domain, factors = shells
    field = heat.solve(domain, _spec(factors))
    newton = field.meta["newton"]
    assert len(newton) <= 6
    # Newton with its exact tangent: updates u1, u2, u3 fall quadratically (u3 ~ u2^3 / u1^2); a step
    # that left out the exchange between patches would converge linearly (u3 ~ u2^2 / u1)
    u1, u2, u3 = (h["update_K"] for h in newton[:3])
    assert u3 < 0.1 * u2**2 / u1
    exchanged = [r["heat_in_W"] for r in field.balance if r["kind"] == "radiation_exchange"]
    assert abs(sum(exchanged)) <= 1e-10 * 10.0  # an enclosure's net exchange sums to zero
    assert field.imbalance <= 1e-8
    (path,) = field.meta["radiative_paths"]
    assert path["from"] == "inner/inside" and path["to"] == "outer/outside" and path["W"] == pytest.approx(10.0, rel=1e-8)


def test_exchange_inputs_are_checked(shells):
    domain, factors = shells
    spec = _spec(factors, exchange={"gap": exchange.ExchangeGroup({"iner": 0.8, "outer": 1.5}, 300.0),
                                    "gaps": exchange.ExchangeGroup({"outer": 0.5})},
                 radiation={"inner": heat.Radiation(0.5, 300.0)})
    with pytest.raises(errors.InputError) as info:
        heat.check(domain, spec, "w.toml: stages.heat")
    text = str(info.value)
    for part in ("'iner'", "must lie in 0..1", "no emissivity for inner/inside", "is an enclosure",
                 "'gaps'", "radiates in a radiation_exchange group already"):
        assert part in text


def test_power_change_reuses_the_view_factors(tmp_path):
    for name in ("exchange_enclosure.toml", "_exchange.toml", "_output.toml"):
        shutil.copyfile(cases_folder() / name, tmp_path / name)
    mk.shells(tmp_path / "exchange_enclosure.msh", cat.SPHERES, 2)
    path, store = tmp_path / "exchange_enclosure.toml", str(tmp_path / "store")
    first = runner.run(path, store=store, out=str(tmp_path / "a"))
    assert first["stages"]["view"]["status"] == "computed"
    second = runner.run(path, sets=['stages.heat.power.inside="5 W"'], store=store, out=str(tmp_path / "b"))
    assert second["stages"]["view"]["status"] == "reused"
    assert second["stages"]["heat"]["status"] == "computed"
    assert second["stages"]["heat"]["reads"] == "view"
    paths = second["stages"]["heat"]["radiative_paths_W"]
    assert paths[0]["W"] == pytest.approx(5.0, rel=1e-8)
    changed = runner.run(path, sets=['stages.view.patch_size="0.5 m"'], store=store, out=str(tmp_path / "a"))
    assert changed["stages"]["heat"]["reason"].endswith("its source view changed")


def test_misnamed_view_stage_is_reported(tmp_path):
    for name in ("exchange_enclosure.toml", "_exchange.toml", "_output.toml"):
        shutil.copyfile(cases_folder() / name, tmp_path / name)
    mk.shells(tmp_path / "exchange_enclosure.msh", cat.SPHERES, 2)
    with pytest.raises(errors.InputError) as info:
        runner.plan(tmp_path / "exchange_enclosure.toml", sets=['stages.heat.view="veiw"'])
    assert "stages.heat.view" in str(info.value) and "'view'" in str(info.value)
