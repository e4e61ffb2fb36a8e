"""Material library: coverage, units, sources, orthotropic axes, user files and errors."""

from __future__ import annotations

import numpy as np
import pytest

from pipeline import errors
from pipeline.model import materials

NEEDED = ["aluminium_6061_t6", "aluminium_a380", "magnesium_az91d", "zinc_zamak3", "copper_c11000",
          "steel_304", "fr4", "alumina_96", "aluminium_nitride", "silicon", "sac305", "polycarbonate",
          "gap_pad"]


def test_the_library_covers_housings_boards_and_power_modules():
    lib = materials.library()
    assert len(lib) >= 12
    for name in NEEDED:
        assert name in lib


@pytest.mark.parametrize("name", NEEDED)
def test_every_value_carries_its_source(name):
    m = materials.library()[name]
    for prop in ["conductivity", "youngs_modulus", "poisson_ratio", "expansion", "density", "specific_heat",
                 "yield_strength", "tensile_strength", "shear_modulus"]:
        value = getattr(m, prop)
        if value not in (None, ()):
            assert m.sources.get(prop), f"{name}.{prop} has no source"
    assert m.yield_strength or m.tensile_strength
    assert m.specific_heat is not None and 100 < m.specific_heat < 3000, "J/(kg*K): the transient stage needs it"


def test_values_are_si_and_plausible():
    lib = materials.library()
    al = lib["aluminium_6061_t6"]
    # ASM Handbook Vol. 2 (1990), typical 6061-T6, from memory: k 167 W/(m K), E 68.9 GPa
    assert al.conductivity == (pytest.approx(167.0, rel=0.05),)
    assert al.youngs_modulus[0] == pytest.approx(68.9e9, rel=0.05)
    assert 1e-6 < al.expansion[0] < 1e-4
    for name in lib:
        m = lib[name]
        assert all(0.01 < k < 1000 for k in m.conductivity), name
        assert all(1e4 < e < 1e12 for e in m.youngs_modulus), name
        assert 100 < m.density < 20000, name


def test_fr4_is_orthotropic_and_rotates_with_its_axes():
    fr4 = materials.library()["fr4"]
    assert fr4.kind == "orthotropic"
    kx, ky, kz = fr4.conductivity
    assert kz < kx  # through-thickness lower than in-plane
    np.testing.assert_allclose(fr4.conductivity_tensor(), np.diag([kx, ky, kz]))
    standing = fr4.oriented([[1, 0, 0], [0, 0, 1]])  # board standing up: its z along model -y
    np.testing.assert_allclose(np.diag(standing.conductivity_tensor()), [kx, kz, ky], atol=1e-15)


def test_bad_axes_are_refused():
    fr4 = materials.library()["fr4"]
    with pytest.raises(errors.InputError, match="perpendicular"):
        fr4.oriented([[1, 0, 0], [1, 1, 0]])
    with pytest.raises(errors.InputError, match="right-handed"):
        fr4.oriented([[1, 0, 0], [0, 1, 0], [0, 0, -1]])


def test_user_file_adds_materials_and_reports_every_problem(tmp_path):
    good = tmp_path / "mine.toml"
    good.write_text("""
[materials.potting]
title = "Invented potting compound"
conductivity = 0.7
youngs_modulus = 3e9
poisson_ratio = 0.35
expansion = 60e-6
density = 1600.0
tensile_strength = 40e6
sources = { conductivity = "invented for a demo" }
""")
    lib = materials.read_file(good, materials.library())
    assert lib["potting"].conductivity == (0.7,)
    assert "aluminium_6061_t6" in lib
    bad = tmp_path / "bad.toml"
    bad.write_text("""
[materials.broken]
conductivity = -1.0
poisson_ratio = 0.5
expansion = 1e-5
density = 1000.0
colour = "red"
""")
    with pytest.raises(errors.InputError) as info:
        materials.read_file(bad)
    text = "\n".join(info.value.problems)
    assert "missing 'youngs_modulus' [Pa]" in text
    assert "'conductivity' must be positive" in text
    assert "poisson_ratio must lie in (-1, 0.5)" in text
    assert "unknown key 'colour'" in text


def test_unknown_material_names_the_closest():
    with pytest.raises(errors.InputError, match="did you mean 'silicon'"):
        materials.library()["silicone"]


def test_syntax_error_names_the_file(tmp_path):
    bad = tmp_path / "x.toml"
    bad.write_text("[materials.a\n")
    with pytest.raises(errors.InputError, match="x.toml: TOML syntax error"):
        materials.read_file(bad)
