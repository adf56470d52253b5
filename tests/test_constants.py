"""Constants against published values."""

import math

import pytest

from dnpqc.physics import constants
from dnpqc.physics.lattice import dipolar_from_positions, hyperfine_from_position


def test_gyromagnetic_ratios():
    # 13C: γ/2π = 10.7084 MHz/T (IUPAC, Harris et al., Pure Appl. Chem. 73, 1795, 2001)
    assert pytest.approx(10.7084e6, rel=1e-5) == constants.GAMMA_C13_HZ_PER_T
    # electron: |γ_e|/2π = 28 024.951 4242 MHz/T (CODATA 2018)
    assert pytest.approx(28_024.9514242e6, rel=1e-12) == constants.GAMMA_E_HZ_PER_T
    # ħ (CODATA 2018, exact) and μ0/4π ≈ 1e-7 T·m/A (CODATA 2018)
    assert constants.HBAR_J_S == 1.054571817e-34
    assert pytest.approx(1e-7, rel=1e-9) == constants.MU0_OVER_4PI


def test_larmor_frequency():
    # 13C at 1 T precesses at 10.7084 MHz (Harris et al. 2001); ν_L = γ_C·B0 is linear
    assert constants.larmor_hz(1.0) == pytest.approx(10.7084e6, rel=1e-5)
    assert constants.larmor_hz(0.05) == pytest.approx(535.42e3, rel=1e-4)


def test_electron_nuclear_prefactor():
    # a·r³ = (μ0/4π)·γ_e·γ_C·ħ/(2π) ≈ 19.885 kHz·nm³ (value given in the issue; recomputed
    # by hand from CODATA 2018 constants: 1e-7·2π·28.025e9·10.7084e6·1.05457e-34 Hz·m³)
    assert constants.electron_nuclear_dipolar_hz_nm3() == pytest.approx(19.885e3, rel=1e-4)


def test_nuclear_prefactor_at_bond_length():
    # b = (μ0/4π)·γ_C²·ħ/(2π·r³) ≈ 2.08 kHz at the C–C bond length 1.54 Å (handbook bond
    # length; value from memory, common in 13C NMR of diamond)
    b = constants.nuclear_dipolar_hz_nm3() / 0.154**3
    assert b == pytest.approx(2.08e3, rel=5e-3)


def test_point_dipole_worked_examples():
    # Point-dipole secular hyperfine: A∥ = a(3cos²θ - 1), A⊥ = 3a sinθ cosθ (textbook form,
    # e.g. Abragam, Principles of Nuclear Magnetism, 1961), a = 19.885 kHz at r = 1 nm
    a = constants.electron_nuclear_dipolar_hz_nm3()
    a_par, a_perp = hyperfine_from_position((0.0, 0.0, 1.0))
    assert (a_par, a_perp) == pytest.approx((2 * a, 0.0), abs=1e-9)
    a_par, a_perp = hyperfine_from_position((1.0, 0.0, 0.0))
    assert (a_par, a_perp) == pytest.approx((-a, 0.0), abs=1e-9)
    s = 1 / math.sqrt(2)
    a_par, a_perp = hyperfine_from_position((0.0, 2 * s, 2 * s))  # r = 2 nm, θ = 45°
    assert a_par == pytest.approx(a / 8 * 0.5, rel=1e-12)
    assert a_perp == pytest.approx(a / 8 * 1.5, rel=1e-12)


def test_nuclear_dipolar_angles():
    # D = b(1 - 3cos²θ)/2: -b along B0, +b/2 perpendicular, 0 at the magic angle 54.74°
    b = constants.nuclear_dipolar_hz_nm3() / 0.2**3
    assert dipolar_from_positions((0, 0, 0), (0, 0, 0.2)) == pytest.approx(-b)
    assert dipolar_from_positions((0, 0, 0), (0.2, 0, 0)) == pytest.approx(b / 2)
    magic = math.acos(1 / math.sqrt(3))
    p = (0.2 * math.sin(magic), 0.0, 0.2 * math.cos(magic))
    assert dipolar_from_positions((0, 0, 0), p) == pytest.approx(0.0, abs=1e-9)
