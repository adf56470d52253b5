"""Gate budget: schedule, counts and the success estimate against closed forms and a simulation."""

import math

import numpy as np
import pytest
from qiskit import QuantumCircuit
from qiskit.quantum_info import (
    DensityMatrix,
    Operator,
    Statevector,
    SuperOp,
    process_fidelity,
    state_fidelity,
)
from qiskit_aer import AerSimulator
from qiskit_aer.noise import depolarizing_error, thermal_relaxation_error

from dnpqc import parse_scenario
from dnpqc.compile.budget import gate_budget, segment_cost, split_segments
from dnpqc.compile.noise import noise_model, with_idle_relaxation
from dnpqc.compile.processor import make_processor
from dnpqc.pipeline.job import scenario_programs

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
    # process infidelity ε·(d+1)/d per gate (Horodecki et al., PRA 60, 1888, 1999), the reset
    # error as a probability
    expected = (
        (1 - 2e-4 * 3 / 2) ** 2
        * (1 - 5e-3 * 5 / 4)
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


NV_PLUS_TWO = """
[spins]
field_t = 0.03
[[spins.nuclei]]
label = "A"
a_par_hz = 25e3
a_perp_hz = 12e3
[[spins.nuclei]]
label = "B"
a_par_hz = -10e3
a_perp_hz = 8e3
[[spins.couplings]]
pair = ["A", "B"]
d_hz = 900.0
[drive]
protocol = "spin-lock"
rabi_hz = 330e3
[cycle]
interaction_time_s = 12e-6
count = 3
[trotter]
steps = 6
order = 2
weak_every = 1
[processor]
topology = "line:3"
"""


def _noisy_and_ideal(mapped, circuit, save):
    """(noisy, ideal) results of `circuit` with the noisy engine's model and idle relaxation."""
    out = []
    for noisy in (True, False):
        qc = with_idle_relaxation(circuit, mapped.region, mapped.processor) if noisy else circuit
        qc = qc.copy()
        getattr(qc, "save_" + save)()
        method = "superop" if save == "superop" else "density_matrix"
        model = noise_model(mapped.processor, mapped.region) if noisy else None
        data = AerSimulator(method=method, noise_model=model).run(qc).result().data()
        out.append(np.asarray(data[save]))
    return out


@pytest.mark.parametrize("t1_s", [100e-6, 10e-3], ids=["idle-dominated", "gate-dominated"])
def test_estimate_is_pessimistic_per_cycle_and_per_program(t1_s):
    # S against a density-matrix simulation of the NV + 2 program with the noisy engine's noise
    # model (relaxation + depolarizing to the rated ε, idle relaxation). Per cycle: the process
    # fidelity of the simulated cycle channel, against the ideal cycle (qiskit's
    # process_fidelity: Choi-state fidelity; Gilchrist et al., PRA 71, 062310, 2005) and, gates
    # only, against the ideal unitary. Per program: the state fidelity of the final state.
    sc = parse_scenario(NV_PLUS_TWO + f"t1_s = {t1_s}\nt2_s = {t1_s}\n")
    mapped = scenario_programs(sc).mapped(nominal=True).mapped[0]
    budget = gate_budget(mapped)
    circuit = mapped.circuit.assign_parameters(dict.fromkeys(mapped.circuit.parameters, 330e3))
    cycle = split_segments(circuit)[1]
    s_cycle = budget.cycles[0].success_estimate
    for instructions in (cycle, [i for i in cycle if i.operation.name != "reset"]):
        qc = QuantumCircuit(circuit.num_qubits)
        qc.barrier()
        for inst in instructions:
            qc.append(inst)
        qc.barrier()
        noisy, ideal = _noisy_and_ideal(mapped, qc, "superop")
        target = Operator(qc) if len(instructions) < len(cycle) else SuperOp(ideal)
        fidelity = process_fidelity(SuperOp(noisy), target)
        assert 0.6 * fidelity < s_cycle <= fidelity
    # with the average infidelity in place of the process infidelity, S would be optimistic
    # when the gates dominate (the figure this estimate replaced)
    per_cycle = budget.per_cycle
    e1, e2 = sc.processor.error_1q, sc.processor.error_2q
    old = (
        s_cycle
        * ((1 - e1) / (1 - 1.5 * e1)) ** budget.cycles[0].one_qubit
        * ((1 - e2) / (1 - 1.25 * e2)) ** budget.cycles[0].two_qubit
    )
    assert per_cycle.two_qubit > 50 and (old > fidelity) == (t1_s > 1e-3)
    program = QuantumCircuit(circuit.num_qubits)
    for inst in circuit.data:
        if not inst.operation.name.startswith("save"):
            program.append(inst)
    noisy, ideal = _noisy_and_ideal(mapped, program, "density_matrix")
    s_program = budget.total.success_estimate / budget.readout.success_estimate
    assert s_program <= state_fidelity(DensityMatrix(noisy), DensityMatrix(ideal))
