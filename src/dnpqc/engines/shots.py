"""What a hardware run of the exported programs reads: the distribution of each readout
register, for sampling counts (`counts.sample_counts`).

The readout of the nuclei (`qasm.hardware_program`) measures them at the end, or after every
cycle with `measure_each_cycle`. The distribution of each register is that of the saved
probabilities of its cycle; with a readout after every cycle, the earlier readouts' back-action
(a full dephasing of the nuclei) is simulated (`noise.with_readout_dephasing`), so every
register's distribution is exact. Registers are sampled independently: the correlations between
cycles (which P does not depend on) are not reproduced.

The distributions are before the readout error; `readout_confusion` gives that error per
nucleus. With imperfection nodes the distribution is their weighted mixture (the counts of a
run that splits its shots over the nodes' programs by weight).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from ..compile.noise import NoiseSettings, with_readout_dephasing, without_transfer
from ..compile.program import Program
from ..errors import RunError
from ..physics.imperfections import average_nodes
from .circuit import (
    density_matrix_simulator,
    point_ticker,
    row_columns,
    run_rows,
    saved_probabilities,
)
from .noisy import choose_method, density_matrix_runner, noisy_circuits


def readout_distributions(
    program: Program,
    noise: NoiseSettings | None,
    *,
    measure_each_cycle: bool = False,
    mixed_nv: bool = False,
    on_point: Callable[[], None] | None = None,
) -> np.ndarray:
    """(points, registers, 2^n) probabilities of the nuclear readout registers, before readout
    error; registers = cycles with `measure_each_cycle`, else 1 (the last cycle). Nucleus j is
    bit j of the index. `noise` None: the logical program without noise; else the mapped
    program with processor noise (density matrix only). `mixed_nv`: the NV left maximally
    mixed after each cycle's reset (`noise.without_transfer`: the pooled 2^C programs of
    `noise.with_nv_flips`)."""
    work = program.workload
    n, cycles = work.system.num_nuclei, work.cycles
    if noise is None:
        circuits, simulator = list(program.circuits), density_matrix_simulator()
    else:
        circuits, model = noisy_circuits(program, noise)
        if choose_method(noise, program.mapped[0].circuit.num_qubits) != "density_matrix":
            raise RunError(
                "sampled counts need the noisy engine's density-matrix method; this program is "
                'too large for it (set [noise] method = "density_matrix" to see the memory it '
                "needs)"
            )
    if mixed_nv:
        circuits = [without_transfer(c) for c in circuits]
    if measure_each_cycle:
        circuits = [with_readout_dephasing(c) for c in circuits]
    if noise is not None:
        simulator = density_matrix_runner(program, circuits, model, noise)
    registers = range(1, cycles + 1) if measure_each_cycle else (cycles,)

    def read(data: dict, _cycles: int, _n: int) -> np.ndarray:
        return saved_probabilities(data, registers)

    weights = work.weights()
    raw = run_rows(
        circuits,
        row_columns(work),
        cycles=cycles,
        num_nuclei=n,
        simulator=simulator,
        reader=read,
        on_batch=point_ticker(on_point, len(weights)),
        out_shape=(len(registers), 2**n),
    )
    mixed, _ = average_nodes(raw, weights, sampled=False)
    return np.clip(mixed, 0.0, None)


def readout_confusion(error: float, num_nuclei: int) -> np.ndarray:
    """(n, 2, 2) confusion matrices M[read, prepared] of a symmetric readout error."""
    e = min(0.5, max(0.0, error))
    return np.tile(np.array([[1 - e, e], [e, 1 - e]]), (num_nuclei, 1, 1))
