"""Trotter plan and circuit: gate conventions, layering, resets, mixed-state preparation."""

import math
from dataclasses import replace

import numpy as np
import pytest
import scipy.linalg
from conftest import one_nucleus
from qiskit import QuantumCircuit
from qiskit.quantum_info import Operator, SparsePauliOp
from qiskit_aer import AerSimulator

from dnpqc import compile_program
from dnpqc.compile.trotter import (
    Layer,
    PauliRotation,
    _append_rotation,
    merge_layers,
    pauli_terms,
    prepare_mixed_nuclei,
)
from dnpqc.physics.expr import Poly
from dnpqc.physics.protocols import Linear


@pytest.mark.parametrize(
    ("pauli", "qubits"),
    [
        ("Z", (0,)),
        ("X", (1,)),
        ("Y", (0,)),
        ("ZZ", (0, 2)),
        ("XX", (1, 2)),
        ("YY", (2, 1)),
        ("ZX", (0, 2)),
        ("XZ", (2, 0)),
        ("ZX", (2, 1)),
        ("ZY", (0, 2)),
        ("YZ", (2, 0)),
        ("ZY", (2, 1)),
        ("XY", (1, 2)),
        ("YX", (0, 1)),
    ],
)
def test_rotation_gates_equal_pauli_exponentials(pauli, qubits):
    # R_P(θ) = exp(-iθ/2·P) against scipy.linalg.expm of the dense Pauli (independent library)
    theta = 0.731
    circuit = QuantumCircuit(3)
    _append_rotation(circuit, PauliRotation(pauli, qubits, Poly.constant(theta)), {})
    label = ["I"] * 3
    for p, q in zip(pauli, qubits, strict=True):
        label[2 - q] = p
    expected = scipy.linalg.expm(-0.5j * theta * SparsePauliOp("".join(label)).to_matrix())
    assert np.allclose(Operator(circuit).data, expected)


def test_layers_act_on_disjoint_qubits(three_nuclei):
    plan = compile_program(three_nuclei).plan
    for layer in plan.cycle.layers():
        used = [q for r in layer.rotations for q in r.qubits]
        assert len(used) == len(set(used))


def _two_qubit_rotations(program) -> int:
    return sum(
        1
        for inst in program.circuit.data
        if inst.operation.num_qubits == 2 and inst.operation.name != "cx"
    )


def test_two_qubit_gate_count_matches_term_count(three_nuclei):
    # per first-order step each interaction term is one two-qubit rotation (common practice):
    # 2 per nucleus (ZZ, ZX with the NV) + 3 per dipolar pair (XX, YY, ZZ)
    sc = three_nuclei
    per_step = 2 * sc.system.num_nuclei + 3 * len(sc.system.couplings)
    order1 = replace(sc, trotter=replace(sc.trotter, order=1, weak_every=1))
    assert _two_qubit_rotations(compile_program(order1)) == per_step * sc.trotter.steps * sc.cycles
    # order 2 (Strang): twice the terms per step, less the merged middle layer (≥ 1 rotation)
    order2 = replace(sc, trotter=replace(sc.trotter, order=2, weak_every=1))
    got = _two_qubit_rotations(compile_program(order2)) / (sc.trotter.steps * sc.cycles)
    assert 2 * per_step - sc.system.num_nuclei <= got <= 2 * per_step - 1


def test_order_two_merges_adjacent_layers():
    a = Layer((PauliRotation("Z", (0,), Poly.from_linear(Linear(0.1, 1.0), "x")),))
    b = Layer((PauliRotation("Z", (0,), Poly.from_linear(Linear(0.2, 2.0), "x")),))
    c = Layer((PauliRotation("X", (0,), Poly.constant(0.3)),))
    merged = merge_layers([a, b, c])
    assert len(merged) == 2
    assert merged[0].rotations[0].angle == Poly.from_linear(Linear(0.1 + 0.2, 3.0), "x")


def test_terms_split_into_offset_and_slope():
    # rabi_hz swept: the X_0 coefficient is Ω/2 → Linear(0, 0.5); nuclear terms are constant
    sc = one_nucleus(sweep='[sweep]\nparameter = "rabi_hz"\nstart = 1e5\nstop = 2e5\npoints = 2\n')
    seg = sc.schedule().block[0]
    terms = pauli_terms(sc.system, seg, "x")
    assert terms[("X", (0,))] == Poly.variable("x", 0.5)
    assert terms[("ZX", (0, 1))] == Poly.constant(20e3 / 4)
    assert terms[("Z", (1,))].variables == set()


def test_circuit_has_true_mid_circuit_resets(three_nuclei):
    ops = compile_program(three_nuclei).circuit.count_ops()
    # one reset per nucleus in the mixed-state preparation, one per cycle
    assert ops["reset"] == three_nuclei.system.num_nuclei + three_nuclei.cycles
    assert ops["save_probabilities"] == three_nuclei.cycles


def test_mixed_state_preparation_is_exactly_maximally_mixed():
    # H, CX(nucleus → NV), reset NV leaves I/2^n on the nuclei and |0> on the NV
    circuit = QuantumCircuit(4)
    prepare_mixed_nuclei(circuit, 0, [1, 2, 3])
    circuit.save_density_matrix()
    rho = AerSimulator(method="density_matrix").run(circuit).result().data()["density_matrix"]
    expected = np.kron(np.eye(8) / 8, np.diag([1.0, 0.0]))
    assert np.allclose(np.asarray(rho), expected, atol=1e-12)


def test_parameter_is_the_swept_key(three_nuclei):
    program = compile_program(three_nuclei)
    assert [p.name for p in program.circuit.parameters] == ["rabi_hz"]


def test_angle_formula():
    # θ = 4π·h·dt for a term h·P, so that R_P(θ) = exp(-2πi·h·dt·P)
    sc = one_nucleus(steps=1, order=1)
    plan = compile_program(sc).plan
    rot = next(r for ly in plan.cycle.layers() for r in ly.rotations if r.pauli == "ZX")
    assert rot.angle.at({}) == pytest.approx(4 * math.pi * (20e3 / 4) * 20e-6)
