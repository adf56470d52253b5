"""Gate budget: schedule, counts and the success estimate against closed forms and a simulation."""

import math

import numpy as np
import pytest
from qiskit import QuantumCircuit
from qiskit.quantum_info import DensityMatrix, Statevector, state_fidelity
from qiskit_aer import AerSimulator
from qiskit_aer.noise import depolarizing_error, thermal_relaxation_error

from dnpqc.budget import segment_cost, split_segments
from dnpqc.processor import make_processor

PROC = make_processor({"topology": "line:3", "t1_s": 100e-6, "t2_s": 80e-6})


def test_asap_schedule_and_idle_time():
    # hand-made: sx(0) sx(0) cz(0,1) rz(2) reset(2): ASAP span = 2·35 ns + 100 ns = 170 ns on
    # qubits 0/1, reset 1 µs on qubit 2 (common practice, no source: longest path)
    qc = QuantumCircuit(3)
    qc.sx(0)
    qc.sx(0)
    qc.cz(0, 1)
    qc.rz(0.3, 2)
    qc.reset(2)
    cost = segment_cost(list(qc.data), qc, (0, 1, 2), PROC)
    assert cost.duration_s == pytest.approx(1e-6)
    assert cost.idle_s[0] == pytest.approx(1e-6 - 170e-9)
    assert cost.idle_s[1] == pytest.approx(1e-6 - 100e-9)
    assert cost.idle_s[2] == pytest.approx(0.0)
    assert (cost.one_qubit, cost.virtual_z, cost.two_qubit, cost.resets) == (2, 1, 1, 1)
    assert cost.depth == 3 and cost.two_qubit_depth == 1
    expected = (
        (1 - 2e-4) ** 2
        * (1 - 5e-3)
        * (1 - 1e-3)
        * math.exp(-sum(t * (1 / 100e-6 + 1 / 80e-6) for t in (1e-6 - 170e-9, 1e-6 - 100e-9)))
    )
    assert cost.success_estimate == pytest.approx(expected)


def test_segments_split_at_full_width_barriers():
    qc = QuantumCircuit(2)
    qc.h(0)
    qc.barrier()
    qc.cz(0, 1)
    qc.barrier(0)  # partial barrier: not a segment boundary
    qc.x(1)
    qc.barrier()
    segments = split_segments(qc)
    assert [len(s) for s in segments] == [1, 2, 0]


def test_estimate_against_a_noisy_density_matrix_simulation():
    # the success estimate vs the state fidelity of an Aer density-matrix run with depolarizing
    # gate errors (λ = ε·d/(d-1), so the average infidelity is ε: Nielsen & Chuang 2000, §9.3)
    # and T1/T2 relaxation on an idle qubit (thermal_relaxation_error). Same order of
    # magnitude expected: the estimate charges T1 and T2 both and so is pessimistic.
    qc = QuantumCircuit(3)
    for _ in range(10):
        qc.sx(0)
        qc.cz(0, 1)
        qc.sx(1)
    qc.h(2)
    cost = segment_cost(list(qc.data)[:-1], qc, (0, 1, 2), PROC)
    noisy = QuantumCircuit(3)
    for inst in qc.data:
        noisy.append(inst)
        name = inst.operation.name
        qubits = [qc.find_bit(q).index for q in inst.qubits]
        d = 2 ** len(qubits)
        eps = PROC.gate_error(name)
        noisy.append(depolarizing_error(eps * d / (d - 1), len(qubits)).to_instruction(), qubits)
    idle = cost.idle_s[2]
    noisy.append(thermal_relaxation_error(100e-6, 80e-6, idle).to_instruction(), [2])
    noisy.save_density_matrix()
    rho = AerSimulator(method="density_matrix").run(noisy).result().data()["density_matrix"]
    ideal = Statevector(qc)
    fidelity = state_fidelity(DensityMatrix(np.asarray(rho)), ideal)
    ratio = (1 - cost.success_estimate) / (1 - fidelity)
    assert 1 <= ratio < 10
