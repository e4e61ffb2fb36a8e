"""Temperature-dependent properties (pipeline/model/curves.py) and their use by materials."""

import numpy as np
import pytest

from pipeline import errors
from pipeline.model import curves, materials

TABLE = curves.Curve(table=((250.0, 10e-6), (300.0, 20e-6), (400.0, 22e-6)))
BASE = {"conductivity": 1.0, "youngs_modulus": 70e9, "poisson_ratio": 0.3, "density": 1.0}


def test_table_integral_is_exact_for_the_interpolant_held_at_its_ends():
    # the interpolant, sampled finely and integrated by the trapezoid rule (exact for a piecewise-linear
    # function whose knees are on the grid); beyond the table the end value is held
    for t0, t in ((260.0, 390.0), (200.0, 450.0), (300.0, 250.0)):
        x = np.unique(np.concatenate([np.linspace(min(t0, t), max(t0, t), 1001), [250.0, 300.0, 400.0]]))
        x = x[(x >= min(t0, t)) & (x <= max(t0, t))]
        expected = np.sign(t - t0) * np.trapezoid(TABLE.values(x)[0], x)
        assert TABLE.integral(t0, t)[0] == pytest.approx(expected, rel=1e-13)


def test_mean_and_instantaneous_give_the_same_strain_after_conversion():
    # ASTM E228 definitions (from memory): a table of mean coefficients from T_0, computed from an
    # instantaneous table at its own temperatures, gives the same strain there from any T_ref
    base, t_ref = 293.15, 298.15
    ts = np.array([250.0, 300.0, 350.0, 400.0])
    mean = curves.Curve(table=tuple(zip(ts, curves.mean_from_instantaneous(TABLE, base, ts)[0])))
    for t in ts:
        direct = curves.expansion_strain(TABLE, "instantaneous", None, t, t_ref)[0]
        converted = mean.values(t)[0] * (t - base) - \
            curves.mean_from_instantaneous(TABLE, base, t_ref)[0] * (t_ref - base)
        assert converted == pytest.approx(direct, rel=1e-12)
    # and back: the instantaneous coefficient of a linear mean polynomial, alpha_m = m0 + m1 T
    poly = curves.Curve(polynomial=(21e-6, 0.75e-8))
    t = np.array([250.0, 350.0])
    assert curves.instantaneous_from_mean(poly, base, t)[0] == pytest.approx(21e-6 + 0.75e-8 * (2 * t - base), rel=1e-14)


def test_strain_is_measured_from_the_stress_free_temperature_not_the_base():
    m = materials.from_record("m", BASE | {"expansion_table": [[250.0, 20e-6], [400.0, 20e-6]],
                                           "expansion_convention": "mean", "expansion_base": 293.15}, "test")
    assert m.expansion_strain(np.array(298.15), 298.15)[0] == pytest.approx(0.0, abs=1e-18)
    assert m.expansion_strain(np.array(398.15), 298.15)[0] == pytest.approx(20e-6 * 100, rel=1e-13)


def test_curves_enter_the_cache_key_and_give_the_nominal_constant():
    m = materials.from_record("m", BASE | {"expansion_polynomial": [19e-6, 1.5e-8]}, "test")
    assert m.expansion == pytest.approx((19e-6 + 1.5e-8 * 293.15,))
    other = materials.from_record("m", BASE | {"expansion_polynomial": [19e-6, 1.6e-8]}, "test")
    assert m.reads("expansion") != other.reads("expansion")
    assert "expansion_curve" not in m.reads("youngs_modulus")


@pytest.mark.parametrize("extra, words", [
    ({"expansion_table": [[300.0, 1e-5]]}, "at least two rows"),
    ({"expansion_table": [[300.0, 1e-5], [250.0, 1e-5]]}, "increasing temperatures"),
    ({"expansion_polynomial": [1e-5], "expansion_convention": "mean"}, "needs expansion_base"),
    ({"expansion_polynomial": [1e-5], "expansion_convention": "secnt"}, "instantaneous, mean"),
    ({"expansion": 1e-5, "expansion_convention": "mean"}, "belong to an expansion_table"),
    ({"youngs_modulus_table": [[300.0, 7e10], [400.0, -1.0]]}, "must be positive"),
    ({"poisson_ratio_table": [[300.0, 0.3], [400.0, 0.6]]}, "(-1, 0.5)"),
])
def test_bad_curves_are_named(extra, words):
    record = ({"expansion": 1e-5} | BASE) | extra
    with pytest.raises(errors.InputError) as exc:
        materials.from_record("m", record, "lib.toml")
    assert words in str(exc.value) and "material 'm'" in str(exc.value)


def test_laminate_rules_and_bad_layers():
    # two isotropic layers: in-plane k in parallel, through-thickness in series (composite-wall closed
    # forms, Incropera et al. 6th ed. sec. 3.1, from memory); a full-copper patterned layer is copper
    lib = materials.library()
    cu, al = lib["copper_c11000"], lib["alumina_96"]
    out = lib.extended({"two": {"kind": "laminate", "layers": [{"material": "copper_c11000", "thickness": 1e-3},
                                                               {"material": "alumina_96", "thickness": 3e-3}]}}, "t")
    m = out["two"]
    assert m.kind == "orthotropic"
    assert m.conductivity[0] == pytest.approx((cu.conductivity[0] + 3 * al.conductivity[0]) / 4, rel=1e-14)
    assert m.conductivity[2] == pytest.approx(4 / (1 / cu.conductivity[0] + 3 / al.conductivity[0]), rel=1e-14)
    # heat capacity per volume adds up through the stack: c = sum t rho c / sum t rho (mass-weighted)
    mass = cu.density + 3 * al.density
    assert m.specific_heat == pytest.approx((cu.density * cu.specific_heat + 3 * al.density * al.specific_heat) / mass,
                                            rel=1e-14)
    same = lib.extended({"cu": {"kind": "laminate", "layers": [
        {"material": "copper_c11000", "thickness": 1e-3, "fraction": 1.0, "fill": "fr4"}]}}, "t")["cu"]
    assert same.expansion == pytest.approx(cu.expansion * 3, rel=1e-12)
    assert same.youngs_modulus == pytest.approx(cu.youngs_modulus * 3, rel=1e-12)
    with pytest.raises(errors.InputError) as exc:
        lib.extended({"bad": {"kind": "laminate", "layers": [{"material": "coper", "thickness": -1.0},
                                                             {"material": "fr4", "thickness": 1e-3, "fraction": 0.5}]}},
                     "lib.toml")
    text = str(exc.value)
    assert "copper_c11000" in text and "positive length" in text and "needs fill" in text
