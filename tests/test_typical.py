"""The typicality engine against the dense exact engine, and the memory guards."""

from dataclasses import replace

import numpy as np
import pytest
from conftest import AZIMUTH_TRIPLE, THREE_NUCLEI, pulsed_text

from dnpqc import parse_scenario, simulate
from dnpqc.errors import RunError
from dnpqc.physics.model import Nucleus, SpinSystem
from dnpqc.resources import require_memory

SIX = (
    "[spins]\nfield_t = 0.03\n"
    + "".join(
        f'[[spins.nuclei]]\nlabel = "N{j}"\na_par_hz = {6e3 * j}\na_perp_hz = {4e3 + 2e3 * j}\n'
        for j in range(1, 7)
    )
    + '[drive]\nprotocol = "spin-lock"\nrabi_hz = 330e3\n'
    + '[sweep]\nparameter = "rabi_hz"\nstart = 322e3\nstop = 340e3\npoints = 3\n'
    + "[cycle]\ninteraction_time_s = 30e-6\ncount = 3\n[typical]\nstates = 96\nseed = 2\n"
)


def test_typical_agrees_with_exact_within_its_error():
    # quantum typicality (Popescu, Short & Winter, Nat. Phys. 2, 754, 2006) with the reset
    # unravelled by NV measurement: unbiased, so the deviation from exact is statistical
    sc = parse_scenario(SIX)
    exact, typical = simulate(sc, "exact"), simulate(sc, "typical")
    z = np.abs(exact.polarization - typical.polarization) / typical.stderr
    assert np.mean(z) < 1.5 and np.max(z) < 5
    assert np.all(typical.stderr < 0.02)


def test_typical_keeps_the_azimuthal_hyperfine_terms():
    # the complex Z_NV·Y_j terms enter the sparse H too: still unbiased against exact
    sc = parse_scenario(AZIMUTH_TRIPLE + "[typical]\nstates = 96\nseed = 1\n")
    exact, typical = simulate(sc, "exact"), simulate(sc, "typical")
    assert np.all(np.abs(exact.polarization - typical.polarization) < 5 * typical.stderr + 1e-3)


def test_typical_error_shrinks_with_states():
    small = parse_scenario(SIX.replace("states = 96", "states = 24"))
    large = parse_scenario(SIX.replace("states = 96", "states = 384"))
    ratio = simulate(small, "typical").stderr.mean() / simulate(large, "typical").stderr.mean()
    assert ratio == pytest.approx(4.0, rel=0.3)  # 1/sqrt(states)


def test_typical_pulsed_and_imperfections_run():
    sc = parse_scenario(pulsed_text(tau=2.8e-6, blocks=5, extra="pulse_rabi_hz = 20e6"))
    exact, typical = simulate(sc, "exact"), simulate(sc, "typical")
    assert np.all(np.abs(exact.polarization - typical.polarization) < 5 * typical.stderr + 1e-3)
    imperfect = parse_scenario(THREE_NUCLEI + "[imperfections]\ndrive_sigma_rel = 0.05\n")
    assert simulate(imperfect, "typical").polarization.shape == (4, 3, 3)


def test_memory_guards_name_the_figure_and_the_way_out():
    with pytest.raises(RunError, match=r"needs about 1 EiB .* use the typical engine"):
        require_memory("exact", 2**60, "NV + 28 nuclei", "use the typical engine")
    sc = parse_scenario(THREE_NUCLEI)
    big = SpinSystem(0.03, tuple(Nucleus(f"N{j}", 1e4, 1e4) for j in range(24)))
    with pytest.raises(RunError, match=r"the exact engine needs about .* typical"):
        simulate(replace(sc, system=big), "exact")
    with pytest.raises(RunError, match="the trotter engine needs about"):
        simulate(replace(sc, system=big), "trotter")


def test_chebyshev_propagator_equals_scipy_expm_multiply():
    # against scipy's expm_multiply (Al-Mohy & Higham, SIAM J. Sci. Comput. 33, 488, 2011),
    # an independent algorithm, on the model's sparse Hamiltonian and a block of random states
    import scipy.sparse.linalg

    from dnpqc.engines.typical import ScaledHamiltonian, chebyshev_propagate
    from dnpqc.physics.model import hamiltonian

    system = SpinSystem(0.03, tuple(Nucleus(f"N{j}", 8e3 * j - 9e3, 4e3 * j) for j in (1, 2, 3)))
    h = hamiltonian(system, rabi_hz=330e3, detuning_hz=2e3).to_matrix(sparse=True).tocsr()
    rng = np.random.default_rng(7)
    states = rng.normal(size=(16, 5)) + 1j * rng.normal(size=(16, 5))
    states /= np.linalg.norm(states, axis=0)  # unit columns, as the engine's states
    for time_s in (1e-9, 3e-6, 40e-6):
        expected = scipy.sparse.linalg.expm_multiply(-2j * np.pi * time_s * h, states)
        got = chebyshev_propagate(ScaledHamiltonian.of(h), states, time_s)
        # single-precision recurrence, double-precision sum: ~1e-6 of the norm (docstring)
        assert np.allclose(got, expected, atol=3e-6, rtol=0)
        assert got.dtype == np.complex128
        # row blocks on threads do the same arithmetic row by row (common practice, no source)
        for threads in (2, 3):
            split = chebyshev_propagate(ScaledHamiltonian.of(h, threads), states, time_s)
            assert np.array_equal(split, got)
