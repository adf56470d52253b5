"""The batched superoperator simulator of noisy programs, against independent references:
qiskit-aer's density-matrix method (an independent general-purpose simulator) and dense
np.kron channels written out here."""

import numpy as np
import pytest
from conftest import THREE_NUCLEI
from qiskit import QuantumCircuit
from qiskit.circuit import Parameter
from qiskit_aer import AerSimulator
from qiskit_aer.noise import NoiseModel, depolarizing_error, thermal_relaxation_error

from dnpqc import parse_scenario, simulate
from dnpqc.compile.noise import NoiseSettings, instruction_errors, noise_model
from dnpqc.engines.circuit import density_matrix_simulator, row_columns, run_rows
from dnpqc.engines.noisy import density_matrix_runner, noisy_circuits
from dnpqc.engines.superop import SuperopSimulator, simulate_rows, supports
from dnpqc.pipeline.job import scenario_programs

THETA = Parameter("theta")
VALUES = (0.1, 0.7, 2.0)


def _random_circuit(seed: int, n: int = 4) -> QuantumCircuit:
    """Gates, parameterised rotations, relaxation channels, resets and saves of permuted
    qubits, in random order."""
    rng = np.random.default_rng(seed)
    qc = QuantumCircuit(n)
    qc.h(range(n))
    for step in range(40):
        kind = rng.integers(6)
        a, b = (int(x) for x in rng.choice(n, 2, replace=False))
        if kind == 0:
            qc.sx(a)
        elif kind == 1:
            qc.rz(THETA * rng.normal() + rng.normal(), a)
        elif kind == 2:
            qc.cz(a, b)
        elif kind == 3:
            qc.cx(a, b)
        elif kind == 4:
            qc.append(thermal_relaxation_error(1e-4, 5e-5, 2e-5).to_instruction(), [a])
        elif rng.random() < 0.3:
            qc.reset(a)
        if rng.random() < 0.08:
            qc.save_probabilities([int(x) for x in rng.permutation(n)[:3]], label=f"s{step}")
    qc.save_probabilities([3, 0, 2], label="end")
    return qc


def _random_errors(n: int = 4) -> dict:
    errors = {}
    for a in range(n):
        errors["sx", (a,)] = thermal_relaxation_error(1e-4, 5e-5, 3e-5 * (a + 1))
        errors["reset", (a,)] = depolarizing_error(0.05, 1)
        for b in range(n):
            if a != b:
                relax = thermal_relaxation_error(1e-4, 5e-5, 1e-5).tensor(
                    thermal_relaxation_error(1e-4, 6e-5, 2e-5 * b + 1e-6)
                )
                errors["cz", (a, b)] = depolarizing_error(0.02 * (a + 1), 2).compose(relax)
                errors["cx", (a, b)] = depolarizing_error(0.01 * (b + 1), 2)
    return errors


@pytest.mark.parametrize("seed", range(6))
def test_random_noisy_circuits_match_aer(seed):
    # reference: qiskit-aer density matrix with the same channels in a NoiseModel (independent
    # general-purpose simulator)
    qc, errors = _random_circuit(seed), _random_errors()
    model = NoiseModel(basis_gates=["h", "cz", "cx", "rz", "sx", "reset"])
    for (name, qubits), error in errors.items():
        model.add_quantum_error(error, name, list(qubits))
    aer = AerSimulator(method="density_matrix", noise_model=model)
    result = aer.run(qc, parameter_binds=[{THETA: list(VALUES)}]).result()
    ours = simulate_rows(qc, errors, [{"theta": v} for v in VALUES])
    for i in range(len(VALUES)):
        for label, probs in ours[i].items():
            assert np.allclose(probs, result.data(i)[label], atol=1e-12, rtol=0)


def _kraus_relax(t, t1, t2):
    """Amplitude damping then pure dephasing, T2 ≤ 2·T1 (Nielsen & Chuang §8.3)."""
    g = 1 - np.exp(-t / t1)
    lam = 1 - np.exp(-t / t2) / np.sqrt(1 - g)
    damp = [np.array([[1, 0], [0, np.sqrt(1 - g)]]), np.array([[0, np.sqrt(g)], [0, 0]])]
    phase = [np.sqrt(1 - lam / 2) * np.eye(2), np.sqrt(lam / 2) * np.diag([1, -1])]
    return [p @ d for p in phase for d in damp]


def test_two_qubit_program_against_dense_kraus_reference():
    # reference: ρ → Σ K ρ K† with np.kron-embedded operators, written out here
    t1, t2, t = 50e-6, 40e-6, 7e-6
    qc = QuantumCircuit(2)
    qc.sx(0)
    qc.rz(0.4, 1)
    qc.cx(0, 1)
    qc.append(thermal_relaxation_error(t1, t2, t).to_instruction(), [1])
    qc.reset(0)
    qc.sx(0)
    qc.save_probabilities([1, 0], label="p")
    errors = {("cx", (0, 1)): depolarizing_error(0.1, 2)}
    ours = simulate_rows(qc, errors, [{}])[0]["p"]

    sx = 0.5 * np.array([[1 + 1j, 1 - 1j], [1 - 1j, 1 + 1j]])
    rz = np.diag([np.exp(-0.2j), np.exp(0.2j)])
    eye = np.eye(2)
    cx = np.array([[1, 0, 0, 0], [0, 0, 0, 1], [0, 0, 1, 0], [0, 1, 0, 0]])  # control = bit 0

    def on(op, qubit):  # index = b1 b0: qubit 1 is the left factor
        return np.kron(eye, op) if qubit == 0 else np.kron(op, eye)

    rho = np.zeros((4, 4), complex)
    rho[0, 0] = 1
    u = cx @ on(rz, 1) @ on(sx, 0)
    rho = u @ rho @ u.conj().T
    rho = 0.9 * rho + 0.1 * np.eye(4) / 4  # λ = 0.1 depolarizing on both qubits
    rho = sum(on(k, 1) @ rho @ on(k, 1).conj().T for k in _kraus_relax(t, t1, t2))
    resets = [np.array([[1, 0], [0, 0]]), np.array([[0, 1], [0, 0]])]
    rho = sum(on(k, 0) @ rho @ on(k, 0).conj().T for k in resets)
    rho = on(sx, 0) @ rho @ on(sx, 0).conj().T
    diag = np.real(np.diag(rho))  # index b1 b0; the save lists qubit 1 first (its low bit)
    expected = np.array([diag[0], diag[2], diag[1], diag[3]])
    assert np.allclose(ours, expected, atol=1e-12, rtol=0)


def test_noisy_program_rows_match_aer():
    # reference: qiskit-aer density matrix with the processor's NoiseModel, same circuits.
    # Aer is off by up to ~1e-7 here (T2 < T1; it approximates near-identity channel terms),
    # while this engine matches the dense reference below to 1e-13: hence the tolerance.
    text = (
        THREE_NUCLEI.replace("points = 4", "points = 3").replace("steps = 30", "steps = 3")
        + '[processor]\ntopology = "grid:2x2"\nt1_s = 30e-6\nt2_s = 25e-6\n'
        + "[imperfections]\ndrive_sigma_rel = 0.02\n"
    )
    sc = parse_scenario(text)
    program = scenario_programs(sc).mapped()
    noise = NoiseSettings()
    circuits, model = noisy_circuits(program, noise)
    runner = density_matrix_runner(program, circuits, model, noise)
    assert isinstance(runner, SuperopSimulator)
    work = program.workload
    shape = {"cycles": work.cycles, "num_nuclei": work.system.num_nuclei}
    columns = row_columns(work)
    ours = run_rows(circuits, columns, simulator=runner, **shape)
    aer_sim = density_matrix_simulator(noise_model=model)
    aer = run_rows(circuits, columns, simulator=aer_sim, **shape)
    assert len(ours) > len(sc.sweep.values)  # imperfection nodes are rows too
    assert np.allclose(ours, aer, atol=1e-6, rtol=0)


@pytest.mark.parametrize("times", ["t1_s = 30e-6\nt2_s = 25e-6\n", "t1_s = 1.0\nt2_s = 1.0\n"])
def test_noisy_engine_matches_the_dense_kraus_reference(times):
    # reference: the hand-built np.kron Kraus simulation of the mapped program (test_noise)
    from test_noise import _hand_built_noisy

    text = (
        THREE_NUCLEI.replace("points = 4", "points = 2").replace("steps = 30", "steps = 2")
        + '[processor]\ntopology = "line:4"\noptimization_level = 1\n'
        + times
    )
    sc = parse_scenario(text)
    result = simulate(sc, "noisy")
    mapped = scenario_programs(sc).mapped().mapped[0]
    expected = np.array([_hand_built_noisy(mapped, v) for v in sc.sweep.values])
    assert np.allclose(result.polarization, expected, atol=1e-11, rtol=0)


def test_instruction_errors_are_the_noise_model_errors():
    # the runner's table and Aer's model are built from one function
    sc = parse_scenario(THREE_NUCLEI + '[processor]\ntopology = "line:4"\n')
    mapped = scenario_programs(sc).mapped().mapped[0]
    errors = instruction_errors(mapped.processor, mapped.region)
    model = noise_model(mapped.processor, mapped.region)
    assert set(model.noise_instructions) >= {name for name, _ in errors}
    assert ("reset", (0,)) in errors


def test_supports_only_one_small_circuit_of_gates_and_channels():
    qc = QuantumCircuit(2, 1)
    qc.cx(0, 1)
    assert supports([qc])
    assert not supports([qc, qc])  # a circuit per row: Aer runs the batch
    measured = qc.copy()
    measured.measure(0, 0)
    assert not supports([measured])
    big = QuantumCircuit(3)
    big.ccx(0, 1, 2)
    assert not supports([big])
    assert not supports([QuantumCircuit(10)])
