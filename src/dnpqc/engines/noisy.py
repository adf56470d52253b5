"""The noisy engine: the mapped program with processor noise, on Aer.

The program must be mapped (`program.map_onto`); idle relaxation is inserted, and each mapped
circuit runs with the processor's `NoiseModel`:
with the density-matrix method when 16·4^q bytes fit in half the memory, else as trajectories
(statevector with sampled noise and sampled resets, `noise.trajectories` shots, seeded), which
report the statistical error of each value. Imperfection nodes are averaged as in the other
engines.
"""

from __future__ import annotations

import hashlib
import struct
from collections.abc import Callable

import numpy as np
from qiskit import QuantumCircuit
from qiskit_aer import AerSimulator
from qiskit_aer.library import SaveProbabilities
from qiskit_aer.noise import NoiseModel

from ..compile.noise import (
    NoiseSettings,
    instruction_errors,
    noise_model,
    readout_factor,
    with_idle_relaxation,
    without_transfer,
)
from ..compile.program import Program
from ..errors import RunError
from ..physics.model import z_signs
from ..resources import density_matrix_bytes, format_bytes, memory_budget_bytes
from .circuit import (
    density_matrix_simulator,
    nuclear_polarizations,
    row_columns,
    run_rows,
    saved_probabilities,
    simulate_circuits,
)
from .results import SweepResult
from .superop import SuperopSimulator, supports


def choose_method(noise: NoiseSettings, num_qubits: int) -> str:
    """`density_matrix` or `trajectories`, refusing a density matrix that would not fit."""
    need, have = density_matrix_bytes(num_qubits), memory_budget_bytes()
    method = noise.method
    if method == "auto":
        return "density_matrix" if need <= have else "trajectories"
    if method == "density_matrix" and need > have:
        raise RunError(
            f'`noise.method` = "density_matrix" needs {format_bytes(need)} for {num_qubits} '
            f"qubits (16·4^q bytes), more than half the memory ({format_bytes(have)}); use "
            '"trajectories"'
        )
    return method


def _pershot(circuit: QuantumCircuit) -> QuantumCircuit:
    out = circuit.copy_empty_like()
    for inst in circuit.data:
        op = inst.operation
        if op.name == "save_probabilities":
            op = SaveProbabilities(op.num_qubits, label=op.label, pershot=True)
        out.append(op, inst.qubits, inst.clbits)
    return out


def _trajectory_reader(factor: float) -> Callable[[dict, int, int], np.ndarray]:
    """Mean and standard error over shots, as a (2, cycles, n) array."""

    def read(data: dict, cycles: int, num_nuclei: int) -> np.ndarray:
        per_shot = saved_probabilities(data, range(1, cycles + 1)) @ z_signs(num_nuclei)
        # (cycles, shots, n)
        shots = per_shot.shape[1]
        mean = per_shot.mean(axis=1)
        err = per_shot.std(axis=1, ddof=1) / np.sqrt(shots)
        return factor * np.stack([mean, err])

    return read


BASELINE_ENGINE = "noisy-baseline"


def noisy_circuits(
    program: Program, noise: NoiseSettings
) -> tuple[list[QuantumCircuit], NoiseModel]:
    """The mapped circuits with idle relaxation (when `noise.idle`), and their noise model."""
    if not program.mapped:
        raise ValueError("the noisy engine needs a mapped program (program.map_onto)")
    first = program.mapped[0]
    processor, scale = first.processor, noise.scale
    circuits = [m.circuit for m in program.mapped]
    if noise.idle:
        circuits = [with_idle_relaxation(c, first.region, processor, scale) for c in circuits]
    return circuits, noise_model(processor, first.region, scale)


def density_matrix_runner(
    program: Program, circuits: list[QuantumCircuit], model: NoiseModel, noise: NoiseSettings
) -> AerSimulator | SuperopSimulator:
    """The batched superoperator simulator when it runs `circuits` (`superop.supports`), else
    Aer's density-matrix method with `model`; both apply the same channels."""
    if supports(circuits):
        first = program.mapped[0]
        return SuperopSimulator(instruction_errors(first.processor, first.region, noise.scale))
    return density_matrix_simulator(noise_model=model)


def simulate_noisy(
    program: Program,
    noise: NoiseSettings | None = None,
    *,
    on_point: Callable[[], None] | None = None,
    transfer: bool = True,
) -> SweepResult:
    """Polarizations of the mapped program under processor noise (and imperfections).

    Without `transfer`: the zero-transfer baseline of the same program (`without_transfer`).
    """
    noise = noise or NoiseSettings()
    circuits, model = noisy_circuits(program, noise)
    engine = "noisy"
    if not transfer:
        circuits, engine = [without_transfer(c) for c in circuits], BASELINE_ENGINE
    first = program.mapped[0]
    factor = readout_factor(first.processor, noise.scale)
    if choose_method(noise, first.circuit.num_qubits) == "density_matrix":
        sim = density_matrix_runner(program, circuits, model, noise)

        def read(data: dict, cycles: int, num_nuclei: int) -> np.ndarray:
            return factor * nuclear_polarizations(data, cycles, num_nuclei)

        return simulate_circuits(program, circuits, engine, sim, reader=read, on_point=on_point)
    pershot = [_pershot(c) for c in circuits]
    return _trajectories(program, pershot, model, factor, noise, on_point, engine)


def simulate_noisy_baseline(
    program: Program,
    noise: NoiseSettings | None = None,
    *,
    on_point: Callable[[], None] | None = None,
) -> SweepResult:
    """The zero-transfer baseline of the noisy program: the processor's own artefact."""
    return simulate_noisy(program, noise, on_point=on_point, transfer=False)


def point_seed(base: int, value: float) -> int:
    """Seed of one sweep point, from its value: the same however the sweep is split."""
    digest = hashlib.sha256(struct.pack("<d", float(value))).digest()
    return (base + int.from_bytes(digest[:4], "little")) % 2**31


def _trajectories(program, circuits, model, factor, noise, on_point, engine) -> SweepResult:
    """Per point (own seed): means and standard errors, combined over imperfection nodes."""
    work = program.workload
    n, cycles = work.system.num_nuclei, work.cycles
    columns = row_columns(work)
    weights = work.weights()
    per_point = len(weights)
    mean = np.empty((len(work.values), cycles, n))
    err = np.empty_like(mean)
    for i, value in enumerate(work.values):
        sim = AerSimulator(
            method="statevector",
            noise_model=model,
            seed_simulator=point_seed(noise.seed, value),
        )
        rows = slice(i * per_point, (i + 1) * per_point)
        raw = run_rows(
            circuits[rows] if len(circuits) > 1 else circuits,
            {k: v[rows] for k, v in columns.items()},
            cycles=cycles,
            num_nuclei=n,
            simulator=sim,
            shots=noise.trajectories,
            reader=_trajectory_reader(factor),
            out_shape=(2, cycles, n),
        )
        mean[i] = np.tensordot(weights, raw[:, 0], axes=([0], [0]))
        err[i] = np.sqrt(np.tensordot(weights**2, raw[:, 1] ** 2, axes=([0], [0])))
        if on_point is not None:
            on_point()
    values = np.asarray(work.values)
    return SweepResult(engine, work.parameter, values, work.system.labels, mean, err)
