"""The trotter engine against the exact engine: convergence rates and sweep binding."""

from dataclasses import replace

import numpy as np
import pytest
import scipy.linalg
from conftest import AZIMUTH_TRIPLE, one_nucleus, pulsed_text
from qiskit.quantum_info import Operator

from dnpqc import compile_program, parse_scenario, simulate
from dnpqc.compile.trotter import cycle_circuit, program_parameters
from dnpqc.engines.circuit import density_matrix_simulator, run_program
from dnpqc.engines.results import max_difference
from dnpqc.physics.model import hamiltonian
from dnpqc.physics.propagation import Propagators, cycle_unitary


def _with_steps(sc, steps, order):
    return replace(sc, trotter=replace(sc.trotter, steps=steps, order=order, weak_every=1))


def _propagator_error(sc, steps, order, x):
    """‖U_trotter - U_exact‖₂ of one cycle at swept value x, up to a global phase."""
    sc = _with_steps(sc, steps, order)
    plan = compile_program(sc).plan
    params = program_parameters(plan)
    circuit = cycle_circuit(plan, params)
    u = Operator(circuit.assign_parameters({params[sc.sweep.parameter]: x})).data
    exact = cycle_unitary(Propagators(sc.system), sc.schedule(), x)
    phase = np.vdot(exact.ravel(), u.ravel())
    return np.linalg.norm(u - phase / abs(phase) * exact, 2)


@pytest.mark.parametrize(("order", "ratio"), [(1, 2.0), (2, 4.0)])
def test_propagator_error_shrinks_at_the_order_rate(three_nuclei, order, ratio):
    # product formulas: error O(dt^order) per unit time (Suzuki, Phys. Lett. A 146, 319, 1990);
    # doubling the steps divides the cycle-propagator error by 2^order
    x = three_nuclei.sweep.values[1]
    e1 = _propagator_error(three_nuclei, 40, order, x)
    e2 = _propagator_error(three_nuclei, 80, order, x)
    assert e1 / e2 == pytest.approx(ratio, rel=0.15)


@pytest.mark.parametrize(("order", "ratio"), [(1, 2.0), (2, 4.0)])
def test_azimuthal_terms_compile_at_the_order_rate(order, ratio):
    # nuclei at three azimuths: the Z_NV·Y_j rotations (compiled through S·X·S† = Y) converge
    # to the exact propagator at the product-formula rate (Suzuki 1990), like the other terms
    sc = parse_scenario(AZIMUTH_TRIPLE.replace("= 100e-6", "= 10e-6"))
    assert "ZY" in compile_program(sc).plan.layering()["rotations_per_cycle"]
    x = sc.sweep.values[-1]
    e1 = _propagator_error(sc, 80, order, x)
    e2 = _propagator_error(sc, 160, order, x)
    assert e1 / e2 == pytest.approx(ratio, rel=0.15)


def test_polarization_error_shrinks_with_steps(three_nuclei):
    # the polarizations converge to the exact engine: ratio ≈ 4 per doubling for order 2.
    # (Order 1 also shows ≈ 4 here: H and the initial state are real, so by time-reversal
    # symmetry the O(dt) error term cannot change a real observable — common practice, no source.)
    sc = replace(
        three_nuclei, sweep=replace(three_nuclei.sweep, values=three_nuclei.sweep.values[:2])
    )
    exact = simulate(sc, "exact")
    errors = [
        max_difference(exact, simulate(_with_steps(sc, s, 2), "trotter")) for s in (20, 40, 80)
    ]
    assert errors[0] / errors[1] == pytest.approx(4.0, rel=0.2)
    assert errors[1] / errors[2] == pytest.approx(4.0, rel=0.2)
    assert errors[2] < 1e-3


def test_trotter_matches_exact_for_fine_steps():
    sweep = '[sweep]\nparameter = "rabi_hz"\nstart = 530e3\nstop = 560e3\npoints = 5\n'
    sc = one_nucleus(time_s=30e-6, count=3, steps=200, sweep=sweep)
    assert max_difference(simulate(sc, "exact"), simulate(sc, "trotter")) < 2e-3


def test_binding_a_sweep_equals_binding_each_point_first(three_nuclei):
    # one compiled circuit with all points bound in one Aer run = bind-then-run per point
    program = compile_program(three_nuclei)
    values = np.asarray(three_nuclei.sweep.values)
    sim = density_matrix_simulator()
    swept = run_program(program.circuit, values, cycles=3, num_nuclei=3, simulator=sim)
    for i, v in enumerate(values):
        bound = program.circuit.assign_parameters({program.parameter: v})
        single = run_program(bound, np.array([v]), cycles=3, num_nuclei=3, simulator=sim)
        assert np.allclose(swept[i], single[0], atol=1e-12)


def test_detuning_and_time_sweeps_compile_as_parameters():
    for name, start, stop in [("detuning_hz", -5e3, 5e3), ("interaction_time_s", 5e-6, 15e-6)]:
        sweep = f'[sweep]\nparameter = "{name}"\nstart = {start}\nstop = {stop}\npoints = 3\n'
        sc = one_nucleus(sweep=sweep, steps=60)
        assert [p.name for p in compile_program(sc).circuit.parameters] == [name]
        assert max_difference(simulate(sc, "exact"), simulate(sc, "trotter")) < 5e-3


def test_pulsed_program_matches_exact():
    sweep = '[sweep]\nparameter = "tau_s"\nstart = 2.7e-6\nstop = 2.9e-6\npoints = 3\n'
    trotter = "[trotter]\nsteps = 12\npulse_steps = 2\n"
    text = pulsed_text(blocks=6, count=2, extra="pulse_rabi_hz = 10e6") + sweep + trotter
    sc = parse_scenario(text)
    assert max_difference(simulate(sc, "exact"), simulate(sc, "trotter")) < 2e-3
    ideal = parse_scenario(text.replace("pulse_rabi_hz = 10e6\n", ""))
    assert compile_program(ideal).circuit.count_ops()["r"] == 6 * 6 * 2
    assert max_difference(simulate(ideal, "exact"), simulate(ideal, "trotter")) < 2e-3


def test_exact_propagator_matches_scipy_expm(three_nuclei):
    # the engine's eigh propagator against scipy.linalg.expm (independent library)
    sc = three_nuclei
    x = sc.sweep.values[2]
    seg = sc.schedule().block[0]
    h = hamiltonian(sc.system, rabi_hz=x, detuning_hz=3e3).to_matrix()
    got = Propagators(sc.system).evolve(seg, x)
    assert np.allclose(got, scipy.linalg.expm(-2j * np.pi * h * 12e-6), atol=1e-10)
