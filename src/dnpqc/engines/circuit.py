"""The noiseless program engine (`trotter`, alias `noiseless`): the compiled program on qiskit-aer,
density matrix, whatever the strategy compiled.

A trotter program is one circuit with the swept quantity (and, with imperfections, the drive and
detuning errors) as Parameters: all sweep points and imperfection nodes run from it by parameter
binding. A cycle-unitary program has one bound circuit per row, run as a batch. The
density-matrix method makes the mid-circuit resets exact channels (with the statevector method
they would be sampled per shot).
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Sequence

import numpy as np
from qiskit import QuantumCircuit
from qiskit_aer import AerSimulator

from ..compile.program import Program, Workload
from ..compile.trotter import cycle_label
from ..physics.imperfections import DETUNING_ERROR, DRIVE_ERROR, average_nodes
from ..physics.model import z_signs
from ..resources import density_matrix_bytes, process_threads, require_memory
from .results import SweepResult
from .superop import SuperopSimulator

#: Experiments per Aer run. Aer converts a circuit once per run (~15-30 µs per gate) and then
#: binds each experiment in C++, so large batches amortise the conversion; progress per batch.
BATCH_POINTS = 32

Reader = Callable[[dict, int, int], np.ndarray]


def parallel_options() -> dict[str, int]:
    """Aer options that spread experiments over this process's threads (`process_threads`):
    small density matrices gain nothing from multithreaded state updates (measured: 1.9×
    faster on 2 cores)."""
    threads = process_threads()
    return {"max_parallel_experiments": threads, "max_parallel_threads": threads}


#: Aer fuses gates into blocks from this many qubits on; 1 fuses every run of small gates, which
#: measured 1.16× faster on the demo's noisy program (NV + 4) with equal results (to 1e-13).
FUSION_THRESHOLD = 1


def density_matrix_simulator(**options) -> AerSimulator:
    """Aer in density-matrix mode (exact resets), experiments in parallel, gates fused."""
    defaults = {**parallel_options(), "fusion_threshold": FUSION_THRESHOLD}
    return AerSimulator(method="density_matrix", **{**defaults, **options})


def saved_probabilities(data: dict, cycles: Iterable[int]) -> np.ndarray:
    """The nuclear probabilities one experiment saved after each of `cycles` (1-based):
    (cycles, 2^n), or (cycles, shots, 2^n) when saved per shot."""
    return np.array([np.asarray(data[cycle_label(c)], dtype=float) for c in cycles])


def nuclear_polarizations(data: dict, cycles: int, num_nuclei: int) -> np.ndarray:
    """(cycles, n) <Z_j> from the saved nuclear probabilities of one experiment."""
    return saved_probabilities(data, range(1, cycles + 1)) @ z_signs(num_nuclei)


def row_columns(work: Workload) -> dict[str, np.ndarray]:
    """Bind columns for every row (sweep point × imperfection node, points outer)."""
    rows = np.array(work.rows())
    return {work.parameter: rows[:, 0], DRIVE_ERROR: rows[:, 1], DETUNING_ERROR: rows[:, 2]}


def run_rows(
    circuits: Sequence[QuantumCircuit],
    columns: dict[str, np.ndarray],
    *,
    cycles: int,
    num_nuclei: int,
    simulator: AerSimulator | SuperopSimulator,
    shots: int = 1,
    reader: Reader = nuclear_polarizations,
    on_batch: Callable[[int], None] | None = None,
    out_shape: tuple[int, ...] | None = None,
) -> np.ndarray:
    """`reader` output (default: polarizations (cycles, n)) for each row.

    One circuit: bound to each row of `columns` (parameters matched by name; a column the
    circuit does not use is ignored). Several circuits: one per row, already bound.
    """
    count = len(next(iter(columns.values())))
    out = np.empty((count, *(out_shape or (cycles, num_nuclei))))
    for start in range(0, count, BATCH_POINTS):
        stop = min(start + BATCH_POINTS, count)
        datas = _run_batch(circuits, columns, start, stop, simulator, shots)
        for i, data in enumerate(datas):
            out[start + i] = reader(data, cycles, num_nuclei)
        if on_batch is not None:
            on_batch(stop - start)
    return out


def _run_batch(circuits, columns, start, stop, simulator, shots) -> list[dict]:
    if not isinstance(simulator, AerSimulator):  # superop.SuperopSimulator, one shot
        return simulator.run_batch(circuits, columns, start, stop)
    if len(circuits) > 1:
        result = simulator.run(list(circuits[start:stop]), shots=shots).result()
        return [result.data(i) for i in range(stop - start)]
    circuit = circuits[0]
    params = [p for p in circuit.parameters if p.name in columns]
    if not params:
        data = simulator.run(circuit, shots=shots).result().data(0)
        return [data] * (stop - start)
    binds = [{p: [float(v) for v in columns[p.name][start:stop]] for p in params}]
    result = simulator.run(circuit, parameter_binds=binds, shots=shots).result()
    return [result.data(i) for i in range(stop - start)]


def run_program(circuit, values, *, cycles, num_nuclei, simulator, on_point=None) -> np.ndarray:
    """(points, cycles, n) polarizations of one circuit at each value of its swept Parameter
    (the first Parameter by name order; a circuit without Parameters runs once per value)."""
    names = [p.name for p in circuit.parameters]
    columns = {names[0] if names else "_": np.asarray(values, dtype=float)}
    tick = (lambda k: [on_point() for _ in range(k)]) if on_point else None
    return run_rows(
        [circuit], columns, cycles=cycles, num_nuclei=num_nuclei, simulator=simulator, on_batch=tick
    )


def simulate_trotter(
    program: Program, *, on_point: Callable[[], None] | None = None
) -> SweepResult:
    """Noiseless polarizations of the compiled (logical) program over its sweep."""
    q = program.workload.system.num_qubits
    require_memory(
        "trotter",
        density_matrix_bytes(q),
        f"a density matrix of {q} qubits",
        "use the typical engine (`--engines typical` for run, `--engine typical` for "
        "sweep) for the physics, or the noisy "
        'engine with [noise] method = "trajectories"',
    )
    return simulate_circuits(
        program, program.circuits, "trotter", density_matrix_simulator(), on_point=on_point
    )


def point_ticker(on_point: Callable[[], None] | None, rows_per_point: int) -> Callable[[int], None]:
    """A batch callback (k more rows done) that calls `on_point` once per finished point."""
    done = [0]

    def tick(k: int) -> None:
        before = done[0] // rows_per_point
        done[0] += k
        for _ in range(done[0] // rows_per_point - before):
            if on_point is not None:
                on_point()

    return tick


def simulate_circuits(
    program: Program,
    circuits: Sequence[QuantumCircuit],
    engine: str,
    simulator: AerSimulator | SuperopSimulator,
    *,
    shots: int = 1,
    reader: Reader = nuclear_polarizations,
    on_point: Callable[[], None] | None = None,
) -> SweepResult:
    """Run `circuits` (the program's, logical or mapped) over its rows and average the nodes."""
    work = program.workload
    weights = work.weights()
    raw = run_rows(
        circuits,
        row_columns(work),
        cycles=work.cycles,
        num_nuclei=work.system.num_nuclei,
        simulator=simulator,
        shots=shots,
        reader=reader,
        on_batch=point_ticker(on_point, len(weights)),
    )
    pol, err = average_nodes(raw, weights, work.sampled)
    values = np.asarray(work.values)
    return SweepResult(engine, work.parameter, values, work.system.labels, pol, err)
