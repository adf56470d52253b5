"""Trotter compilation: first a plan (pure data), then a qiskit `QuantumCircuit`.

A term h·P of H/h (Hz) evolves for dt as exp(-2πi·h·dt·P) = R_P(θ) with θ = 4π·h·dt, where
R_P(θ) = exp(-i·θ/2·P) is qiskit's rotation convention. Angles are polynomials (`Poly`) of the
program's variables: the swept quantity (a Parameter named after the swept key) and, when system
imperfections are compiled in, the drive error s (Ω → Ω·(1+s), ideal pulse angles θ → θ·(1+s))
and the detuning error δ (Δ → Δ + δ), Parameters named as in `imperfections`.

One Trotter step is a sequence of layers; a layer holds rotations on disjoint qubits (so they
commute exactly). Single-qubit terms form one layer per Pauli letter; the two-qubit terms are
grouped by qubit pair, and the pairs are edge-coloured (greedy colouring of the line graph) so
pairs of one colour share no qubit. Order 1: S1(dt) = Π_layers exp(...dt); order 2 (Strang):
S2(dt) = S1(dt/2)·reversed S1(dt/2). Adjacent layers with identical rotations are merged.

Hardware-executable preparation of the maximally mixed nuclear state: for each nucleus j,
H_j, CX(j → NV), reset NV. The CX leaves nucleus and NV in a Bell state; resetting the NV
discards its half, so nucleus j is left exactly in I/2 (the NV is the ancilla of a dilation).
"""

from __future__ import annotations

import math
from collections import defaultdict
from dataclasses import dataclass

import networkx as nx
import numpy as np
from qiskit.circuit import Parameter, QuantumCircuit
from qiskit_aer.library import SaveProbabilities

from ..physics.expr import Poly
from ..physics.imperfections import DETUNING_ERROR, DRIVE_ERROR
from ..physics.model import SpinSystem, hamiltonian
from ..physics.protocols import CycleSchedule, Evolve, Pulse

#: A nucleus–nucleus term is weak when |h| ≤ this fraction of the smallest NV–nucleus term.
WEAK_FRACTION = 0.25


@dataclass(frozen=True)
class PauliRotation:
    """exp(-i·θ/2·P) with P = ⊗ pauli[i] on qubits[i]; θ (rad) the polynomial `angle`."""

    pauli: str
    qubits: tuple[int, ...]
    angle: Poly


@dataclass(frozen=True)
class Layer:
    """Rotations on pairwise disjoint qubits."""

    rotations: tuple[PauliRotation, ...]

    def signature(self) -> tuple[tuple[str, tuple[int, ...]], ...]:
        return tuple((r.pauli, r.qubits) for r in self.rotations)


@dataclass(frozen=True)
class PulseRotation:
    """An ideal NV pulse R_φ(θ): qiskit's r(θ, φ) on qubit 0, θ the polynomial `angle`."""

    angle: Poly
    phase_rad: float


Operation = Layer | PulseRotation


@dataclass(frozen=True)
class CyclePlan:
    """The operations of one cycle (after the NV reset), in time order."""

    operations: tuple[Operation, ...]

    def layers(self) -> list[Layer]:
        return [op for op in self.operations if isinstance(op, Layer)]


@dataclass(frozen=True)
class ProgramPlan:
    """A whole program: mixed-state preparation, then `cycles` × (NV reset, cycle)."""

    num_qubits: int
    cycles: int
    cycle: CyclePlan
    parameter_names: tuple[str, ...]
    pair_colours: dict[tuple[int, int], int]
    weak_every: int = 1

    def layering(self) -> dict[str, object]:
        """Counts per cycle: layers, rotations by Pauli, two-qubit layers and colours."""
        layers = self.cycle.layers()
        by_pauli: dict[str, int] = defaultdict(int)
        for layer in layers:
            for rot in layer.rotations:
                by_pauli[rot.pauli] += 1
        return {
            "layers_per_cycle": len(layers),
            "two_qubit_layers_per_cycle": sum(
                1 for ly in layers if len(ly.rotations[0].qubits) == 2
            ),
            "rotations_per_cycle": dict(sorted(by_pauli.items())),
            "ideal_pulses_per_cycle": sum(
                isinstance(op, PulseRotation) for op in self.cycle.operations
            ),
            "pair_colours": len(set(self.pair_colours.values())),
        }


def pauli_terms(
    system: SpinSystem, segment: Evolve, variable: str = "x", imperfections: bool = False
) -> dict[tuple[str, tuple[int, ...]], Poly]:
    """Non-identity terms of H/h during `segment`: {(pauli, qubits): coefficient in Hz}.

    H is affine in (Ω, Δ): H = H_0 + Ω·H_Ω + Δ·H_Δ at fixed phase. With Ω and Δ the segment's
    values (affine in `variable`), and with the imperfection variables when asked for.
    """
    phase = segment.phase_rad
    base = _by_support(hamiltonian(system, rabi_hz=0.0, detuning_hz=0.0, phase_rad=phase))
    per_rabi = _by_support(hamiltonian(system, rabi_hz=1.0, detuning_hz=0.0, phase_rad=phase))
    per_det = _by_support(hamiltonian(system, rabi_hz=0.0, detuning_hz=1.0, phase_rad=phase))
    rabi = Poly.from_linear(segment.rabi_hz, variable)
    detuning = Poly.from_linear(segment.detuning_hz, variable)
    if imperfections:
        rabi = rabi * (Poly.constant(1.0) + Poly.variable(DRIVE_ERROR))
        detuning = detuning + Poly.variable(DETUNING_ERROR)
    terms = {}
    for key in sorted(set(base) | set(per_rabi) | set(per_det)):
        h0 = base.get(key, 0.0)
        coeff = (
            Poly.constant(h0)
            + rabi * (per_rabi.get(key, 0.0) - h0)
            + detuning * (per_det.get(key, 0.0) - h0)
        )
        if coeff.terms:
            terms[key] = coeff
    return terms


def _by_support(op) -> dict[tuple[str, tuple[int, ...]], float]:
    """{(pauli letters, qubits ascending): real coefficient} of a Hermitian SparsePauliOp."""
    out: dict[tuple[str, tuple[int, ...]], float] = {}
    for letters, indices, coeff in op.to_sparse_list():
        support = sorted((q, p) for q, p in zip(indices, letters, strict=True) if p != "I")
        if not support:
            continue
        if abs(coeff.imag) > 1e-12:
            raise ValueError(f"non-Hermitian term {letters} on {list(indices)}: {coeff}")
        key = ("".join(p for _, p in support), tuple(q for q, _ in support))
        out[key] = out.get(key, 0.0) + float(coeff.real)
    return out


def colour_pairs(pairs: list[tuple[int, int]]) -> dict[tuple[int, int], int]:
    """Edge colouring of the interaction graph: pairs with one colour share no qubit."""
    graph = nx.Graph(pairs)
    colouring = nx.greedy_color(nx.line_graph(graph), strategy="largest_first")
    return {tuple(sorted(edge)): colour for edge, colour in colouring.items()}


def step_layers(
    terms: dict[tuple[str, tuple[int, ...]], Poly],
    dt: Poly,
    colours: dict[tuple[int, int], int],
) -> list[Layer]:
    """Layers of one first-order step of length dt (s); θ = 4π·h·dt per term."""

    def rotation(key: tuple[str, tuple[int, ...]]) -> PauliRotation:
        return PauliRotation(key[0], key[1], terms[key] * dt * (4 * math.pi))

    layers: list[Layer] = []
    for letter in "ZXY":
        single = [rotation(k) for k in terms if len(k[1]) == 1 and k[0] == letter]
        if single:
            layers.append(Layer(tuple(sorted(single, key=lambda r: r.qubits))))
    per_pair: dict[tuple[int, int], list[tuple[str, tuple[int, ...]]]] = defaultdict(list)
    for key in terms:
        if len(key[1]) == 2:
            per_pair[key[1]].append(key)
    for colour in sorted(set(colours[p] for p in per_pair)):
        pairs = sorted(p for p in per_pair if colours[p] == colour)
        depth = max(len(per_pair[p]) for p in pairs)
        for i in range(depth):
            rots = [rotation(per_pair[p][i]) for p in pairs if i < len(per_pair[p])]
            layers.append(Layer(tuple(rots)))
    return layers


def weak_keys(terms: dict[tuple[str, tuple[int, ...]], Poly]) -> set[tuple[str, tuple[int, ...]]]:
    """Nucleus–nucleus terms far below every NV–nucleus term (|h| ≤ WEAK_FRACTION of the
    smallest): the dipolar couplings against the hyperfine ones. Sizes at the variables' zero."""

    def size(poly: Poly) -> float:
        return max((abs(c) for _, c in poly.terms), default=0.0)

    nv = [size(p) for k, p in terms.items() if len(k[1]) == 2 and 0 in k[1]]
    if not nv:
        return set()
    limit = WEAK_FRACTION * min(nv)
    return {k for k, p in terms.items() if len(k[1]) == 2 and 0 not in k[1] and size(p) <= limit}


def _step(terms, dt: Poly, order: int, colours) -> list[Layer]:
    if order == 1:
        return step_layers(terms, dt, colours)
    half = step_layers(terms, dt * 0.5, colours)
    return half + half[::-1]


def _segment_operations(
    system: SpinSystem,
    segment: Evolve,
    order: int,
    colours: dict[tuple[int, int], int],
    variable: str,
    imperfections: bool,
    weak_every: int = 1,
) -> list[Layer]:
    """Steps of one window; weak terms (see `weak_keys`) once per group of `weak_every` steps.

    A group of m steps is S^⌊m/2⌋·W(m·dt)·S^⌈m/2⌉: the weak part W, applied for the whole
    group's time in its middle, splits the group symmetrically (second order at the group level,
    a Strang splitting of strong and weak parts); the last group holds the remaining steps.
    """
    terms = pauli_terms(system, segment, variable, imperfections)
    dt = Poly.from_linear(segment.duration_s, variable) * (1.0 / segment.steps)
    weak = weak_keys(terms) if weak_every > 1 else set()
    if not weak:
        return _step(terms, dt, order, colours) * segment.steps
    strong = {k: v for k, v in terms.items() if k not in weak}
    slow = {k: v for k, v in terms.items() if k in weak}
    step = _step(strong, dt, order, colours)
    operations: list[Layer] = []
    for start in range(0, segment.steps, weak_every):
        m = min(weak_every, segment.steps - start)
        operations += step * (m // 2) + step_layers(slow, dt * m, colours) + step * (m - m // 2)
    return operations


def _pulse_operation(pulse: Pulse, imperfections: bool) -> PulseRotation:
    angle = Poly.constant(pulse.angle_rad)
    if imperfections:
        angle = angle * (Poly.constant(1.0) + Poly.variable(DRIVE_ERROR))
    return PulseRotation(angle, pulse.phase_rad)


def merge_layers(operations: list[Operation]) -> list[Operation]:
    """Fuse consecutive layers with the same rotations: R_P(a)·R_P(b) = R_P(a + b)."""
    merged: list[Operation] = []
    for op in operations:
        last = merged[-1] if merged else None
        if isinstance(op, Layer) and isinstance(last, Layer) and last.signature() == op.signature():
            merged[-1] = Layer(
                tuple(
                    PauliRotation(a.pauli, a.qubits, a.angle + b.angle)
                    for a, b in zip(last.rotations, op.rotations, strict=True)
                )
            )
        else:
            merged.append(op)
    return merged


def plan_program(
    system: SpinSystem,
    schedule: CycleSchedule,
    *,
    cycles: int,
    order: int,
    parameter_name: str,
    imperfections: bool = False,
    weak_every: int = 1,
) -> ProgramPlan:
    """Trotter plan of `cycles` cycles of `schedule` on NV + nuclei.

    `parameter_name` is the swept variable; with `imperfections`, the angles also depend on the
    drive and detuning errors (variables `DRIVE_ERROR`, `DETUNING_ERROR`). `weak_every` = k
    applies the weak terms once every k steps, for k·dt.
    """
    pairs = [(0, j) for j in range(1, system.num_qubits)]
    pairs += [(c.first + 1, c.second + 1) for c in system.couplings]
    colours = colour_pairs(pairs)
    operations: list[Operation] = []
    for segment in schedule.segments():
        if isinstance(segment, Pulse):
            operations.append(_pulse_operation(segment, imperfections))
        else:
            operations.extend(
                _segment_operations(
                    system, segment, order, colours, parameter_name, imperfections, weak_every
                )
            )
    cycle = CyclePlan(tuple(merge_layers(operations)))
    names = (parameter_name, DRIVE_ERROR, DETUNING_ERROR) if imperfections else (parameter_name,)
    return ProgramPlan(system.num_qubits, cycles, cycle, names, colours, weak_every)


def _pauli_action(pauli: str, qubits: tuple[int, ...], dim: int) -> tuple[np.ndarray, np.ndarray]:
    """P as (source row, phase): (P·M)[i] = phase[i]·M[source[i]] (qubit q = bit q of i)."""
    index = np.arange(dim)
    flip = sum(1 << q for p, q in zip(pauli, qubits, strict=True) if p in "XY")
    source = index ^ flip
    phase = np.ones(dim, dtype=np.complex128)
    for p, q in zip(pauli, qubits, strict=True):
        bit = (source >> q) & 1
        if p == "Z":
            phase *= 1 - 2 * bit
        elif p == "Y":
            phase *= 1j * (1 - 2 * bit)  # Y|0> = i|1>, Y|1> = -i|0>
    return source, phase


def plan_unitary(plan: ProgramPlan, values: dict[str, float]) -> np.ndarray:
    """The numeric unitary of one planned cycle with every variable set from `values`.

    Each rotation acts as cos(θ/2)·M - i·sin(θ/2)·P·M on the running product; an ideal pulse
    is R_φ(θ) on qubit 0. Used to measure Trotter errors without a circuit simulator.
    """
    dim = 2**plan.num_qubits
    u = np.eye(dim, dtype=np.complex128)
    actions: dict[tuple[str, tuple[int, ...]], tuple[np.ndarray, np.ndarray]] = {}
    for op in plan.cycle.operations:
        if isinstance(op, PulseRotation):
            theta, phi = op.angle.at(values), op.phase_rad
            c, s = math.cos(theta / 2), math.sin(theta / 2)
            e = complex(math.cos(phi), math.sin(phi))
            rot = np.array([[c, -1j * s / e], [-1j * s * e, c]])
            u = np.einsum("ab,ibj->iaj", rot, u.reshape(dim // 2, 2, dim)).reshape(dim, dim)
            continue
        for r in op.rotations:
            key = (r.pauli, r.qubits)
            if key not in actions:
                actions[key] = _pauli_action(r.pauli, r.qubits, dim)
            source, phase = actions[key]
            theta = r.angle.at(values)
            u = math.cos(theta / 2) * u - 1j * math.sin(theta / 2) * (phase[:, None] * u[source])
    return u


def _append_rotation(
    circuit: QuantumCircuit, rot: PauliRotation, parameters: dict[str, Parameter]
) -> None:
    theta = rot.angle.expression(parameters)
    if len(rot.qubits) == 1:
        getattr(circuit, "r" + rot.pauli.lower())(theta, rot.qubits[0])
        return
    a, b = rot.qubits
    if rot.pauli in ("ZZ", "XX", "YY"):
        getattr(circuit, "r" + rot.pauli.lower())(theta, a, b)
    elif rot.pauli == "ZX":
        circuit.rzx(theta, a, b)
    elif rot.pauli == "XZ":
        circuit.rzx(theta, b, a)
    elif "Y" in rot.pauli:
        _append_with_y_as_x(circuit, rot, parameters)
    else:
        raise ValueError(f"no native rotation for Pauli {rot.pauli} on {rot.qubits}")


def _append_with_y_as_x(
    circuit: QuantumCircuit, rot: PauliRotation, parameters: dict[str, Parameter]
) -> None:
    """A two-qubit rotation with one Y (ZY, YZ, XY, YX) by S·X·S† = Y on that qubit."""
    turned = [q for q, p in zip(rot.qubits, rot.pauli, strict=True) if p == "Y"]
    for q in turned:
        circuit.sdg(q)
    as_x = PauliRotation(rot.pauli.replace("Y", "X"), rot.qubits, rot.angle)
    _append_rotation(circuit, as_x, parameters)
    for q in turned:
        circuit.s(q)


def prepare_mixed_nuclei(circuit: QuantumCircuit, nv: int, nuclei: list[int]) -> None:
    """Leave every nuclear qubit in I/2: H, CX(nucleus → NV), reset NV, for each nucleus."""
    for q in nuclei:
        circuit.h(q)
        circuit.cx(q, nv)
        circuit.reset(nv)


def program_parameters(plan: ProgramPlan) -> dict[str, Parameter]:
    """One fresh Parameter per program variable (the swept key first)."""
    return {name: Parameter(name) for name in plan.parameter_names}


def cycle_circuit(plan: ProgramPlan, parameters: dict[str, Parameter]) -> QuantumCircuit:
    """The unitary part of one cycle (after the NV reset) as a circuit."""
    circuit = QuantumCircuit(plan.num_qubits, name="cycle")
    for op in plan.cycle.operations:
        if isinstance(op, PulseRotation):
            circuit.r(op.angle.expression(parameters), op.phase_rad, 0)
        else:
            for rot in op.rotations:
                _append_rotation(circuit, rot, parameters)
    return circuit


def cycle_label(cycle: int) -> str:
    """Label of the saved nuclear probabilities after cycle `cycle` (1-based)."""
    return f"cycle_{cycle}"


def build_circuit(plan: ProgramPlan) -> QuantumCircuit:
    """The logical circuit of `plan` (see `assemble_program`)."""
    return assemble_program(cycle_circuit(plan, program_parameters(plan)), plan.cycles)


def assemble_program(cycle: QuantumCircuit, cycles: int) -> QuantumCircuit:
    """The logical program: qubit 0 the NV, qubits 1..n the nuclei; `cycle` the unitary part.

    Mixed-state preparation, then per cycle: NV reset, `cycle`, a full-width barrier, and the
    saved probabilities of the nuclear qubits (ordered 1..n) under `cycle_label(c)` (Aer
    `save_probabilities`, which is safe after transpiling). The barriers close the preparation
    and every cycle, so each cycle is a segment that stays in place through transpiling and
    scheduling.
    """
    circuit = QuantumCircuit(cycle.num_qubits, name="dnp_program")
    nuclei = list(range(1, cycle.num_qubits))
    prepare_mixed_nuclei(circuit, 0, nuclei)
    circuit.barrier()
    for c in range(1, cycles + 1):
        circuit.reset(0)
        circuit.compose(cycle, inplace=True)
        circuit.barrier()
        circuit.append(SaveProbabilities(len(nuclei), label=cycle_label(c)), nuclei)
    return circuit
