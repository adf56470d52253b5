"""Physical constants used by the model, each with its source.

Gyromagnetic ratios are given as cyclic frequencies per tesla (gamma / 2π, in Hz/T).
"""

import math

#: Reduced Planck constant ħ in J·s (CODATA 2018, exact in the 2019 SI).
HBAR_J_S = 1.054571817e-34

#: Magnetic constant over 4π, μ0/4π in T·m/A (CODATA 2018: μ0 = 1.25663706212e-6 N/A²).
MU0_OVER_4PI = 1.25663706212e-6 / (4.0 * math.pi)

#: Electron gyromagnetic ratio |γ_e|/2π in Hz/T (CODATA 2018: 28 024.951 4242 MHz/T).
GAMMA_E_HZ_PER_T = 28_024.9514242e6

#: 13C gyromagnetic ratio γ_C/2π in Hz/T (IUPAC, Harris et al., Pure Appl. Chem. 73, 1795, 2001:
#: γ = 6.728284e7 rad s⁻¹ T⁻¹).
GAMMA_C13_HZ_PER_T = 6.728284e7 / (2.0 * math.pi)

#: Cubic lattice constant of diamond in nm (handbook value, 3.567 Å at room temperature).
DIAMOND_LATTICE_NM = 0.3567

#: Natural abundance of 13C (IUPAC isotopic composition, 1.07 %).
C13_NATURAL_ABUNDANCE = 0.0107


def larmor_hz(field_t: float) -> float:
    """13C Larmor frequency ν_L = γ_C·B0 in Hz for a field in tesla."""
    return GAMMA_C13_HZ_PER_T * field_t


def electron_nuclear_dipolar_hz_nm3() -> float:
    """Point-dipole prefactor (μ0/4π)·γ_e·γ_C·ħ/(2π) for an NV–13C pair, in Hz·nm³.

    Divide by r³ (r in nm) to get the coupling a in Hz.
    """
    gamma_e = 2.0 * math.pi * GAMMA_E_HZ_PER_T
    gamma_c = 2.0 * math.pi * GAMMA_C13_HZ_PER_T
    return MU0_OVER_4PI * gamma_e * gamma_c * HBAR_J_S / (2.0 * math.pi) * 1e27


def nuclear_dipolar_hz_nm3() -> float:
    """Point-dipole prefactor (μ0/4π)·γ_C²·ħ/(2π) for a 13C–13C pair, in Hz·nm³."""
    gamma_c = 2.0 * math.pi * GAMMA_C13_HZ_PER_T
    return MU0_OVER_4PI * gamma_c**2 * HBAR_J_S / (2.0 * math.pi) * 1e27
