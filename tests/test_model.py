"""The model Hamiltonian against an independent np.kron construction, and its conventions."""

import numpy as np
import pytest
import scipy.linalg
from helpers import X, Y, Z, dense_reference, embed
from hypothesis import given, settings
from hypothesis import strategies as st

from dnpqc import parse_scenario
from dnpqc.physics.model import (
    Coupling,
    Nucleus,
    SpinSystem,
    effective_perp_hz,
    hamiltonian,
    nuclear_frequency_hz,
    z_signs,
)


def test_matches_kron_construction(three_nuclei):
    system = three_nuclei.system
    got = hamiltonian(system, rabi_hz=320e3, detuning_hz=2.5e3, phase_rad=0.3).to_matrix()
    assert np.allclose(got, dense_reference(system, 320e3, 2.5e3, 0.3), atol=1e-9)


def test_nv_operator_convention():
    # S_z = (Z_0 - 1)/2 = -|1><1|: with only Δ set, the NV |1> (m_s -1) has energy -Δ
    system = SpinSystem(0.01, (Nucleus("C", 0.0, 0.0),))
    h = hamiltonian(system, rabi_hz=0.0, detuning_hz=1e3).to_matrix()
    larmor = system.larmor_hz
    # basis |nucleus, nv>: index = 2·nucleus + nv; nucleus |0> (up) has energy -ν_L/2
    assert np.allclose(
        np.diag(h).real, [-larmor / 2, -larmor / 2 - 1e3, larmor / 2, larmor / 2 - 1e3]
    )


def test_time_evolution_sign():
    # U = exp(-2πi·H·t): a nucleus along +x under H = -ν_L·I_z turns to <X> = cos(2πν_L t),
    # <Y> = -sin(2πν_L t) (checked against scipy.linalg.expm of the 2×2 matrix by hand)
    system = SpinSystem(0.01, (Nucleus("C", 0.0, 0.0),))
    h = hamiltonian(system, rabi_hz=0.0, detuning_hz=0.0).to_matrix()
    t = 0.3 / system.larmor_hz
    u = scipy.linalg.expm(-2j * np.pi * h * t)
    psi = np.kron(np.array([1, 1]) / np.sqrt(2), np.array([1, 0]))  # nucleus |+>, NV |0>
    out = u @ psi
    assert np.vdot(out, embed({1: X}, 2) @ out).real == pytest.approx(np.cos(2 * np.pi * 0.3))
    assert np.vdot(out, embed({1: Y}, 2) @ out).real == pytest.approx(-np.sin(2 * np.pi * 0.3))


def test_nuclear_frequency_and_effective_coupling():
    # ν̃ = sqrt((ν_L + A∥/2)² + (A⊥/2)²) and A⊥,eff = A⊥·ν_L/ν̃ (Hartmann–Hahn match in our
    # convention); cross-check ν̃ as the eigenfrequency of the nuclear Hamiltonian with
    # <S_z> = -1/2 (the NV spin-locked), by numpy eigvalsh
    system = SpinSystem(0.05, (Nucleus("C", 30e3, 15e3),))
    nu = nuclear_frequency_hz(system, 0)
    h_nuc = -system.larmor_hz * Z / 2 - 0.5 * (30e3 * Z / 2 + 15e3 * X / 2)
    w = np.linalg.eigvalsh(h_nuc)
    assert nu == pytest.approx(w[1] - w[0], rel=1e-12)
    assert effective_perp_hz(system, 0) == pytest.approx(15e3 * system.larmor_hz / nu)


def test_z_signs():
    s = z_signs(2)
    assert s.tolist() == [[1, 1], [-1, 1], [1, -1], [-1, -1]]


@settings(max_examples=25, deadline=None)
@given(
    a=st.lists(st.floats(-1e5, 1e5), min_size=4, max_size=4),
    d=st.floats(-5e3, 5e3),
    rabi=st.floats(0, 1e6),
    detuning=st.floats(-1e5, 1e5),
    phase=st.floats(0, 6.3),
)
def test_hermitian_and_matches_reference(a, d, rabi, detuning, phase):
    system = SpinSystem(
        0.04, (Nucleus("A", a[0], a[1]), Nucleus("B", a[2], a[3])), (Coupling(0, 1, d),)
    )
    h = hamiltonian(system, rabi_hz=rabi, detuning_hz=detuning, phase_rad=phase).to_matrix()
    assert np.allclose(h, h.conj().T)
    assert np.allclose(h, dense_reference(system, rabi, detuning, phase), atol=1e-6)


AZIMUTH_CLUSTER = """
[spins]
field_t = 0.02
[[spins.nuclei]]
label = "A"
position_nm = [0.16, 0.0, 0.62]
[[spins.nuclei]]
label = "B"
position_nm = [-0.08, 0.139, 0.62]
[[spins.nuclei]]
label = "C"
position_nm = [-0.08, -0.139, 0.62]
[[spins.nuclei]]
label = "D"
a_par_hz = 12e3
a_perp_hz = 9e3
azimuth_deg = 75
[drive]
protocol = "spin-lock"
rabi_hz = 280e3
[cycle]
interaction_time_s = 1e-5
"""


def test_full_secular_hyperfine_row_against_reference():
    # nuclei at three azimuths plus one given by couplings at 75°: the whole row
    # S_z·(A_zz·I_z + A_zx·I_x + A_zy·I_y), built from the positions in helpers.py
    system = parse_scenario(AZIMUTH_CLUSTER).system
    got = hamiltonian(system, rabi_hz=280e3, detuning_hz=1e3, phase_rad=0.2).to_matrix()
    assert np.allclose(got, dense_reference(system, 280e3, 1e3, 0.2), atol=1e-9, rtol=0)
    labels = {label for label, _ in hamiltonian(system, rabi_hz=1.0, detuning_hz=0.0).to_list()}
    assert {"IIYIZ", "YIIIZ"} <= labels  # Z_NV·Y_B and Z_NV·Y_D are kept


def test_azimuth_multiples_of_90_degrees_give_single_terms():
    # cos 90° is exactly 0 here, so no stray 1e-17 Hz term (and no gate) is compiled
    system = SpinSystem(0.05, (Nucleus("C", 10e3, 8e3, azimuth_deg=90.0),))
    terms = dict(hamiltonian(system, rabi_hz=0.0, detuning_hz=0.0).to_list())
    assert "XZ" not in terms and "XI" not in terms
    assert terms["YZ"] == pytest.approx(2e3)
    assert nuclear_frequency_hz(system, 0) == nuclear_frequency_hz(
        SpinSystem(0.05, (Nucleus("C", 10e3, 8e3),)), 0
    )
