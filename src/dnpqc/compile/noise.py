"""Processor noise for the noisy engine (qiskit-aer Kraus channels).

Each gate, reset and readout of duration t on a qubit with (T1, T2) gets thermal relaxation:
amplitude damping γ = 1 - exp(-t/T1) and coherence decaying as exp(-t/T2) (Nielsen & Chuang,
§8.3; qiskit-aer `thermal_relaxation_error`). On top of it, a depolarizing channel
E(ρ) = (1-λ)ρ + λ·I/d on the gate's d = 2^k-dimensional space brings the gate's average
infidelity up to its rated error ε. Alone it has average gate fidelity F = 1 - λ(d-1)/d (so
λ = ε·d/(d-1), what qiskit-aer's `depolarizing_error(λ, k)` takes); after relaxation of
infidelity ε_r the pair has 1 - F = (1-λ)·ε_r + λ(d-1)/d, which fixes λ exactly (zero when
relaxation alone exceeds ε).

Idle periods: the density-matrix simulator applies no noise to waiting qubits. The mapped circuit
is scheduled as soon as possible, as the exported hardware program runs (barriers synchronise,
durations from the processor; the simulator's save instructions take no time and synchronise
nothing, so a save reads the state at the end of its cycle), and every idle gap gets a
thermal-relaxation instruction, so a qubit left alone in |1> for t decays as exp(-t/T1).

Reset: after a reset the qubit is in |1> with probability `error_reset`, and then relaxes (T1,
T2) for the reset's duration `time_reset_s`, while the qubits that wait for it relax as idle.
Readout: a symmetric assignment error e scales each measured polarization by (1 - 2e); the
engines save probabilities, so it is applied to them (and a `ReadoutError` is in the model for
measurements).

`scale` multiplies every error rate and every relaxation rate (1/T1, 1/T2).

Zero-transfer baseline (`without_transfer`): the same program with the NV left maximally mixed
after each cycle's reset. Its gates and schedule are those of the program, but no polarization
can move (the state I/d is invariant under every unitary), so whatever the nuclei show on a
noisy processor is the processor's artefact (relaxation drives every qubit towards |0>, P = +1).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

from qiskit import QuantumCircuit
from qiskit.circuit import Instruction
from qiskit.quantum_info import average_gate_fidelity
from qiskit_aer.noise import (
    NoiseModel,
    QuantumError,
    ReadoutError,
    depolarizing_error,
    pauli_error,
    reset_error,
    thermal_relaxation_error,
)

from .budget import AsapClock
from .mapping import closes_segment
from .processor import VIRTUAL_GATES, Processor

INSTANT = frozenset({"barrier", "save_probabilities", "save_density_matrix"})


@dataclass(frozen=True)
class NoiseSettings:
    """How the noisy engine simulates processor noise.

    `scale` multiplies every error rate and every decoherence rate (1/T1, 1/T2); `method` is
    `auto` (density matrix when it fits in memory, else trajectories), `density_matrix` or
    `trajectories`; `trajectories` shots per point are sampled with `seed`; `idle` adds T1/T2
    relaxation on idle qubits.
    """

    scale: float = 1.0
    method: Literal["auto", "density_matrix", "trajectories"] = "auto"
    trajectories: int = 256
    seed: int = 0
    idle: bool = True


def relaxation(
    processor: Processor, qubit: int, time_s: float, scale: float
) -> QuantumError | None:
    """Thermal relaxation of physical `qubit` over `time_s` (None when nothing happens)."""
    if time_s <= 0 or scale <= 0:
        return None
    return thermal_relaxation_error(
        processor.t1_s[qubit] / scale, processor.t2_s[qubit] / scale, time_s
    )


def depolarizing_parameter(error: float, num_qubits: int) -> float:
    """λ with average gate infidelity `error` for E(ρ) = (1-λ)ρ + λ·I/d: λ = ε·d/(d-1)."""
    d = 2**num_qubits
    return error * d / (d - 1)


def topping_up_parameter(error: float, relax_error: float, num_qubits: int) -> float:
    """λ of the depolarizing channel that, after a channel of infidelity `relax_error`, gives
    average infidelity `error`: 1 - F(D_λ∘E) = (1-λ)·ε_E + λ(d-1)/d, solved for λ (0 if the
    relaxation alone is worse)."""
    d = 2**num_qubits
    if error <= relax_error:
        return 0.0
    return min((error - relax_error) / ((d - 1) / d - relax_error), d * d / (d * d - 1))


def gate_error(
    processor: Processor, name: str, qubits: list[int], scale: float
) -> QuantumError | None:
    """Relaxation during the gate, then depolarizing up to its rated infidelity."""
    if name in VIRTUAL_GATES:
        return None
    duration = processor.gate_duration_s(name)
    parts = [relaxation(processor, q, duration, scale) for q in qubits]
    if any(p is None for p in parts):
        relax = None
    else:
        relax = parts[0]
        for p in parts[1:]:
            relax = p.tensor(relax)  # qiskit order: the later qubit is the higher factor
    eps_relax = 0.0 if relax is None else 1.0 - average_gate_fidelity(relax)
    lam = topping_up_parameter(processor.gate_error(name) * scale, eps_relax, len(qubits))
    dep = depolarizing_error(lam, len(qubits)) if lam > 0 else None
    if relax is None:
        return dep
    return relax if dep is None else relax.compose(dep)


def instruction_errors(
    processor: Processor, region: tuple[int, ...], scale: float = 1.0
) -> dict[tuple[str, tuple[int, ...]], QuantumError]:
    """The error channel after each (instruction, circuit qubits) of a circuit on `region`
    (circuit qubit i = physical region[i]): gates (`gate_error`) and resets."""
    errors: dict[tuple[str, tuple[int, ...]], QuantumError] = {}
    local = {p: i for i, p in enumerate(region)}
    for name in processor.one_qubit_gates:
        for phys, i in local.items():
            error = gate_error(processor, name, [phys], scale)
            if error is not None:
                errors[name, (i,)] = error
    for a, b in processor.edges:
        if a in local and b in local:
            for pa, pb in ((a, b), (b, a)):
                error = gate_error(processor, processor.two_qubit_gate, [pa, pb], scale)
                if error is not None:
                    errors[processor.two_qubit_gate, (local[pa], local[pb])] = error
    p1 = min(1.0, processor.error_reset * scale)
    for phys, i in local.items():
        error = reset_error(1.0 - p1, p1) if p1 > 0 else None
        relax = relaxation(processor, phys, processor.time_reset_s, scale)
        if relax is not None:
            error = relax if error is None else error.compose(relax)
        if error is not None:
            errors["reset", (i,)] = error
    return errors


def noise_model(processor: Processor, region: tuple[int, ...], scale: float = 1.0) -> NoiseModel:
    """NoiseModel for a circuit on `region` (circuit qubit i = physical region[i]): the
    `instruction_errors` and a symmetric readout error on every qubit."""
    model = NoiseModel(basis_gates=[*processor.one_qubit_gates, processor.two_qubit_gate, "reset"])
    for (name, qubits), error in instruction_errors(processor, region, scale).items():
        model.add_quantum_error(error, name, list(qubits))
    e = min(0.5, processor.error_readout * scale)
    if e > 0:
        for i in range(len(region)):
            model.add_readout_error(ReadoutError([[1 - e, e], [e, 1 - e]]), [i])
    return model


def readout_factor(processor: Processor, scale: float = 1.0) -> float:
    """Polarization scale (1 - 2e) of a symmetric readout error e."""
    return 1.0 - 2.0 * min(0.5, processor.error_readout * scale)


def _after_cycle_resets(circuit: QuantumCircuit, add) -> QuantumCircuit:
    """A copy with `add(out, inst, c)` called after the reset that starts cycle c (0-based;
    the resets past the preparation, which the first full-width barrier closes)."""
    out = circuit.copy_empty_like()
    barriers = cycle = 0
    for inst in circuit.data:
        out.append(inst)
        if closes_segment(inst, circuit):
            barriers += 1
        elif inst.operation.name == "reset" and barriers:
            add(out, inst, cycle)
            cycle += 1
    return out


def without_transfer(circuit: QuantumCircuit) -> QuantumCircuit:
    """A copy with a fully depolarizing channel (ρ → I/2) after every reset past the
    preparation (the first full-width barrier): the zero-transfer baseline program."""
    mix = depolarizing_error(1.0, 1).to_instruction()
    return _after_cycle_resets(circuit, lambda out, inst, _: out.append(mix, inst.qubits))


def with_nv_flips(circuit: QuantumCircuit, pattern: tuple[int, ...]) -> QuantumCircuit:
    """A copy with an X on the NV after the reset of each cycle c with pattern[c] = 1. The
    2^C patterns with equal shots average to `without_transfer`: each cycle's map is affine in
    the NV's initial ±Z, so the pooled result is multilinear in the C signs, and the average
    over all sign patterns sets every one of them to 0 (the NV maximally mixed)."""

    def flip(out, inst, cycle: int) -> None:
        if pattern[cycle]:
            out.x(inst.qubits[0])

    return _after_cycle_resets(circuit, flip)


def with_readout_dephasing(circuit: QuantumCircuit) -> QuantumCircuit:
    """A copy with the back-action of a mid-circuit readout of the nuclei after every cycle but
    the last: a full dephasing ρ → Σ_b |b><b| ρ |b><b| of each saved qubit (a non-selective
    Z measurement), so each cycle's saved probabilities are those its register would read
    (Nielsen & Chuang §8.3.6; the measurement's duration is not modelled)."""
    saves = [
        i for i, inst in enumerate(circuit.data) if inst.operation.name == "save_probabilities"
    ]
    dephase = pauli_error([("I", 0.5), ("Z", 0.5)]).to_instruction()
    out = circuit.copy_empty_like()
    for i, inst in enumerate(circuit.data):
        out.append(inst)
        if i in saves[:-1]:
            for qubit in inst.qubits:
                out.append(dephase, [qubit])
    return out


def with_idle_relaxation(
    circuit: QuantumCircuit, region: tuple[int, ...], processor: Processor, scale: float = 1.0
) -> QuantumCircuit:
    """A copy of `circuit` with thermal relaxation inserted in every idle gap (ASAP schedule)."""
    out = circuit.copy_empty_like()
    clock = AsapClock(range(circuit.num_qubits))

    made: dict[tuple[int, float], Instruction | None] = {}  # one channel per (qubit, gap)

    def idle(gaps: dict[int, float]) -> None:
        for q, t in gaps.items():
            if (q, t) not in made:
                error = relaxation(processor, region[q], t, scale)
                made[q, t] = None if error is None else error.to_instruction()
            if made[q, t] is not None:
                out.append(made[q, t], [q], copy=False)

    for inst in circuit.data:
        qubits = [circuit.find_bit(q).index for q in inst.qubits]
        name = inst.operation.name
        if name.startswith("save"):
            pass  # a simulator snapshot, not part of the hardware program: it moves no idle gap
        elif name in INSTANT:
            idle(clock.sync(qubits))
        elif name == "delay":
            duration = processor.instruction_duration_s(inst.operation)
            idle({q: gap + duration for q, gap in clock.place(qubits, duration)[1].items()})
        else:
            idle(clock.place(qubits, processor.gate_duration_s(name))[1])
        out.append(inst)
    return out
