"""The exact engine against independent constructions, QuTiP and published resonance laws."""

import math
from dataclasses import replace

import numpy as np
import pytest
import qutip
from conftest import AZIMUTH_TRIPLE, THREE_NUCLEI, one_nucleus, pulsed_text
from helpers import spin_lock_reference

from dnpqc import parse_scenario, simulate
from dnpqc.physics.model import effective_perp_hz, hamiltonian, nuclear_frequency_hz
from dnpqc.physics.propagation import nv_rotation, reset_kraus
from dnpqc.physics.protocols import PULSEPOL


def test_against_full_density_matrix_reference(three_nuclei):
    # independent path: full-space ρ, scipy expm, explicit reset |0><0| ⊗ Tr_NV (helpers.py)
    result = simulate(three_nuclei, "exact")
    for i, rabi in enumerate(three_nuclei.sweep.values):
        ref = spin_lock_reference(
            three_nuclei.system, rabi=rabi, detuning=3e3, time_s=12e-6, cycles=3
        )
        assert np.allclose(result.polarization[i], ref, atol=1e-10)


def test_against_qutip_mesolve(three_nuclei):
    # QuTiP's ODE solver (Johansson, Nation & Nori, Comput. Phys. Commun. 184, 1234, 2013) on the
    # same model, the reset done by ptrace and re-tensoring; tolerance set by the ODE accuracy
    system = three_nuclei.system
    rabi = three_nuclei.sweep.values[1]
    h = hamiltonian(system, rabi_hz=rabi, detuning_hz=3e3).to_matrix()
    n = system.num_nuclei
    dims = [[2] * (n + 1)] * 2  # qutip order: first factor most significant = nucleus n ... NV
    h_q = qutip.Qobj(2 * np.pi * h, dims=dims)
    ry = qutip.Qobj(nv_rotation(math.pi / 2, math.pi / 2))
    nv0 = qutip.basis(2, 0).proj()
    rho_n = qutip.tensor([qutip.qeye(2)] * n) / 2**n
    options = {"atol": 1e-10, "rtol": 1e-8, "nsteps": 100000}
    expected = simulate(three_nuclei, "exact").polarization[1]
    for c in range(3):
        full = qutip.tensor(rho_n, ry * nv0 * ry.dag())
        out = qutip.mesolve(h_q, full, [0.0, 12e-6], options=options).states[-1]
        rho_n = out.ptrace(list(range(n)))
        # nucleus j (1-based qubit j) is tensor factor n - j of the nuclear part
        for j in range(1, n + 1):
            zj = qutip.tensor([qutip.sigmaz() if f == n - j else qutip.qeye(2) for f in range(n)])
            assert qutip.expect(zj, rho_n) == pytest.approx(expected[c, j - 1], abs=1e-6)


def test_reset_kraus_is_trace_preserving(three_nuclei):
    # Σ K_a† K_a = 1 for any unitary (a CPTP map, Nielsen & Chuang 2000, §8.2)
    rng = np.random.default_rng(3)
    m = rng.normal(size=(16, 16)) + 1j * rng.normal(size=(16, 16))
    u, _ = np.linalg.qr(m)
    k0, k1 = reset_kraus(u)
    assert np.allclose(k0.conj().T @ k0 + k1.conj().T @ k1, np.eye(8))


def test_hartmann_hahn_resonance_position():
    # Hartmann & Hahn, Phys. Rev. 128, 2042 (1962); Henstra et al., J. Magn. Reson. 77, 389
    # (1988): transfer peaks at Ω = ν̃ = sqrt((ν_L + A∥/2)² + (A⊥/2)²) in our sign convention
    sweep = '[sweep]\nparameter = "rabi_hz"\nstart = 520e3\nstop = 570e3\npoints = 101\n'
    sc = one_nucleus(a_par=20e3, a_perp=6e3, time_s=80e-6, sweep=sweep)
    result = simulate(sc, "exact")
    curve = np.abs(result.polarization[:, 0, 0])
    step = result.values[1] - result.values[0]
    assert abs(result.values[np.argmax(curve)] - nuclear_frequency_hz(sc.system, 0)) <= step
    # also a wrong sign convention (ν_L - A∥/2) would put it 10 kHz away: check that is not it
    wrong = math.hypot(sc.system.larmor_hz - 10e3, 3e3)
    assert curve[np.argmin(np.abs(result.values - wrong))] < 0.2 * curve.max()


@pytest.mark.parametrize("time_s", [10e-6, 25e-6, 50e-6, 75e-6])
def test_two_spin_transfer_law(time_s):
    # |P(t)| = sin²(π·A⊥,eff·t/2), A⊥,eff = A⊥·ν_L/ν̃, at the match (Henstra et al. 1988);
    # weak coupling A/ν_L ≈ 0.04, so the rotating-wave error is ≲ 0.02
    sc = one_nucleus(a_par=20e3, a_perp=20e3, time_s=time_s)
    nu = nuclear_frequency_hz(sc.system, 0)
    sc = one_nucleus(a_par=20e3, a_perp=20e3, time_s=time_s, rabi=nu)
    p = simulate(sc, "exact").polarization[0, 0, 0]
    expected = math.sin(math.pi * effective_perp_hz(sc.system, 0) * time_s / 2) ** 2
    assert abs(p) == pytest.approx(expected, abs=0.02)


ALPHA = (2 + math.sqrt(2)) / (3 * math.pi)  # PulsePol n = 3 scaling (Schwartz et al. 2018)


def _pulsed(tau, blocks, extra=""):
    return parse_scenario(pulsed_text(tau=tau, blocks=blocks, extra=extra))


def test_pulsepol_full_transfer_at_third_order_resonance():
    # Schwartz et al., Sci. Adv. 4, eaat8978 (2018): resonance at τ = 3/(2ν̃), effective
    # flip-flop rate (2+√2)/(3π)·A⊥ → full transfer after t = 1/(2·α·A⊥,eff)
    probe = _pulsed(1e-6, 1)
    nu = nuclear_frequency_hz(probe.system, 0)
    a_eff = effective_perp_hz(probe.system, 0)
    tau = 3 / (2 * nu)
    blocks = round(1 / (2 * ALPHA * a_eff) / tau)
    p = simulate(_pulsed(tau, blocks), "exact").polarization[0, 0, 0]
    assert abs(p) > 0.99
    # and the law sin²(π·α·A⊥,eff·t) at a quarter and a half of that time
    for b in (blocks // 4, blocks // 2):
        p = simulate(_pulsed(tau, b), "exact").polarization[0, 0, 0]
        assert abs(p) == pytest.approx(math.sin(math.pi * ALPHA * a_eff * b * tau) ** 2, abs=5e-3)


def test_pulsepol_resonance_positions():
    # resonances at τ = m/(2ν̃) for odd m (Schwartz et al. 2018); scan m = 3 and m = 5
    probe = _pulsed(1e-6, 1)
    nu = nuclear_frequency_hz(probe.system, 0)
    for m in (3, 5):
        tau_m = m / (2 * nu)
        sweep = (
            f'[sweep]\nparameter = "tau_s"\nstart = {0.97 * tau_m}\nstop = {1.03 * tau_m}\n'
            "points = 61\n"
        )
        text = pulsed_text(tau=tau_m, blocks=10) + sweep
        result = simulate(parse_scenario(text), "exact")
        curve = np.abs(result.polarization[:, 0, 0])
        step = result.values[1] - result.values[0]
        assert abs(result.values[np.argmax(curve)] - tau_m) <= step
        assert curve.max() > 0.05


def test_custom_block_equal_to_builtin_pulsepol():
    # the same block given as data must give the same numbers as the named sequence
    axes = {0.0: "x", math.pi / 2: "y", math.pi: "-x", 3 * math.pi / 2: "-y"}
    rows = []
    for e in PULSEPOL:
        if hasattr(e, "fraction"):
            rows.append(f"[[drive.block]]\nwait = {e.fraction}\n")
        else:
            rows.append(
                f"[[drive.block]]\nangle_deg = {math.degrees(e.angle_rad)}\n"
                f'axis = "{axes[e.phase_rad]}"\n'
            )
    text = pulsed_text(tau=2.8e-6, blocks=7)
    custom = text.replace('sequence = "pulsepol"', 'sequence = "custom"').replace(
        "[cycle]", "".join(rows) + "[cycle]"
    )
    a = simulate(parse_scenario(text), "exact").polarization
    b = simulate(parse_scenario(custom), "exact").polarization
    assert np.array_equal(a, b)


def test_finite_pulses_approach_ideal_pulses():
    # finite pulses of growing Rabi frequency converge to the ideal-pulse result (common
    # practice, no source); the block period stays τ (pulse-centre convention)
    ideal = simulate(_pulsed(2.8e-6, 20), "exact").polarization[0, 0, 0]
    errors = []
    for rabi in (20e6, 80e6):
        finite = _pulsed(2.8e-6, 20, f"pulse_rabi_hz = {rabi}")
        errors.append(abs(simulate(finite, "exact").polarization[0, 0, 0] - ideal))
    assert errors[1] < errors[0]
    assert errors[1] < 0.01


def _rotated_positions(text: str, angle_deg: float, only: str | None = None) -> str:
    """The same cluster with every position (or only the one of `only`) turned about z."""
    sc = parse_scenario(text)
    c, s = math.cos(math.radians(angle_deg)), math.sin(math.radians(angle_deg))
    for n in sc.system.nuclei:
        if only in (None, n.label):
            x, y, z = n.position_nm
            text = text.replace(
                f"{list(n.position_nm)}", f"[{c * x - s * y}, {s * x + c * y}, {z}]"
            )
    return text


def test_whole_hyperfine_row_against_reference():
    # reference: full-space ρ, scipy expm of the np.kron Hamiltonian whose hyperfine row
    # (A_zz, A_zx, A_zy) comes from the point-dipole tensor of each position (helpers.py)
    sc = parse_scenario(AZIMUTH_TRIPLE)
    result = simulate(sc, "exact")
    for i, rabi in enumerate(sc.sweep.values):
        ref = spin_lock_reference(sc.system, rabi=rabi, detuning=0.0, time_s=100e-6, cycles=4)
        assert np.allclose(result.polarization[i], ref, atol=1e-9, rtol=0)
    # the test can fail: rotating A_zy away per nucleus moves P by more than 1e-3 here
    flat = replace(
        sc,
        system=replace(
            sc.system, nuclei=tuple(replace(n, azimuth_deg=0.0) for n in sc.system.nuclei)
        ),
    )
    assert np.max(np.abs(simulate(flat, "exact").polarization - result.polarization)) > 1e-3


def test_polarizations_invariant_under_a_common_rotation_about_z():
    # H commutes with a common rotation exp(-iβ·Σ_j I_z^j) of all nuclei apart from the
    # hyperfine azimuths, and I/2^n and Z_j are invariant (symmetry, common practice)
    base = simulate(parse_scenario(AZIMUTH_TRIPLE), "exact").polarization
    turned = simulate(parse_scenario(_rotated_positions(AZIMUTH_TRIPLE, 37.0)), "exact")
    assert np.allclose(turned.polarization, base, atol=1e-9, rtol=0)
    one = simulate(parse_scenario(_rotated_positions(AZIMUTH_TRIPLE, 37.0, only="B")), "exact")
    assert np.max(np.abs(one.polarization - base)) > 1e-3


def test_polarizations_invariant_under_a_common_change_of_azimuths(three_nuclei):
    def with_azimuths(azimuths):
        nuclei = tuple(
            replace(n, azimuth_deg=a)
            for n, a in zip(three_nuclei.system.nuclei, azimuths, strict=True)
        )
        return simulate(
            replace(three_nuclei, system=replace(three_nuclei.system, nuclei=nuclei)), "exact"
        ).polarization

    base = with_azimuths((10.0, 130.0, -100.0))
    assert np.allclose(with_azimuths((60.0, 180.0, -50.0)), base, atol=1e-9, rtol=0)
    assert np.max(np.abs(with_azimuths((10.0, 130.0, 0.0)) - base)) > 1e-4


def test_eigendecomposition_cache_stays_bounded(monkeypatch):
    # a swept Rabi frequency gives a new H per point; the cache must not grow with the sweep
    from dnpqc.physics import propagation

    sc = parse_scenario(THREE_NUCLEI)
    props = propagation.Propagators(sc.system)
    monkeypatch.setattr(propagation, "CACHE_BYTES", 3 * 16 * 16 * 17)  # three 16×16 eigh results
    for rabi in np.linspace(300e3, 350e3, 10):
        props._decomposition((float(rabi), 0.0, 0.0))
    assert len(props._eig) == 3
