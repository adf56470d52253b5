"""The trotter engine: the compiled circuit run on qiskit-aer, noiseless, density matrix.

The circuit is built once with the swept quantity (and, with imperfections, the drive and
detuning errors) as Parameters; all sweep points and imperfection nodes run from that one
circuit by parameter binding. The density-matrix method makes the mid-circuit resets exact
channels (with the statevector method they would be sampled per shot).
"""

from __future__ import annotations

import os
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from qiskit import QuantumCircuit
from qiskit_aer import AerSimulator

from ..imperfections import DETUNING_ERROR, DRIVE_ERROR, average_nodes
from ..mapping import MappedProgram, map_program
from ..model import z_signs
from ..processor import Processor
from ..resources import density_matrix_bytes, require_memory
from ..results import SweepResult
from ..scenario import Scenario
from ..trotter import ProgramPlan, build_circuit, cycle_label, plan_program

#: Experiments per Aer run. Aer converts a circuit once per run (~15-30 µs per gate) and then
#: binds each experiment in C++, so large batches amortise the conversion; progress per batch.
BATCH_POINTS = 32


@dataclass(frozen=True)
class Program:
    """A compiled program: its plan, the logical circuit and which qubit is which."""

    plan: ProgramPlan
    circuit: QuantumCircuit
    nv_qubit: int
    nucleus_qubits: tuple[int, ...]

    @property
    def parameter(self):
        """The swept Parameter (None if the circuit does not depend on it)."""
        found = [p for p in self.circuit.parameters if p.name == self.plan.parameter_names[0]]
        return found[0] if found else None


def compile_program(
    scenario: Scenario, *, save: bool = True, imperfections: bool | None = None
) -> Program:
    """Trotter-compile the scenario into one parameterized logical circuit.

    `imperfections` (default: whether the scenario sets any) adds the drive and detuning errors
    as Parameters; hardware programs are compiled without them (nominal values).
    """
    active = scenario.imperfections.active if imperfections is None else imperfections
    plan = plan_program(
        scenario.system,
        scenario.schedule(),
        cycles=scenario.cycles,
        order=scenario.trotter.order,
        parameter_name=scenario.sweep.parameter,
        imperfections=active,
    )
    circuit = build_circuit(plan, save=save)
    return Program(plan, circuit, 0, tuple(range(1, plan.num_qubits)))


def parallel_options() -> dict[str, int]:
    """Aer options that spread experiments over the cores: small density matrices gain
    nothing from multithreaded state updates (measured: 1.9× faster on 2 cores)."""
    cores = os.cpu_count() or 1
    return {"max_parallel_experiments": cores, "max_parallel_threads": cores}


def mapped_program(
    scenario: Scenario, processor: Processor, *, imperfections: bool | None = None
) -> MappedProgram:
    """Compile the scenario and map it onto `processor` with the scenario's mapping settings."""
    program = compile_program(scenario, imperfections=imperfections)
    return map_program(
        program.circuit,
        scenario.system,
        processor,
        optimization_level=scenario.mapping.optimization_level,
        seed=scenario.mapping.seed,
    )


def density_matrix_simulator(**options) -> AerSimulator:
    """Aer in density-matrix mode (exact resets), experiments in parallel."""
    return AerSimulator(method="density_matrix", **{**parallel_options(), **options})


def nuclear_polarizations(data: dict, cycles: int, num_nuclei: int) -> np.ndarray:
    """(cycles, n) <Z_j> from the saved nuclear probabilities of one experiment."""
    signs = z_signs(num_nuclei)
    return np.array([np.asarray(data[cycle_label(c)]) @ signs for c in range(1, cycles + 1)])


def run_bound(
    circuit: QuantumCircuit,
    columns: dict[str, np.ndarray],
    *,
    cycles: int,
    num_nuclei: int,
    simulator: AerSimulator,
    shots: int = 1,
    reader: Callable[[dict, int, int], np.ndarray] = nuclear_polarizations,
    on_batch: Callable[[int], None] | None = None,
    out_shape: tuple[int, ...] | None = None,
) -> np.ndarray:
    """`reader` output (default: polarizations (cycles, n)) for each row of `columns`.

    Circuit parameters are matched by name; a column the circuit does not use is ignored.
    """
    count = len(next(iter(columns.values())))
    params = [p for p in circuit.parameters if p.name in columns]
    out = np.empty((count, *(out_shape or (cycles, num_nuclei))))
    for start in range(0, count, BATCH_POINTS):
        stop = min(start + BATCH_POINTS, count)
        if params:
            binds = [{p: [float(v) for v in columns[p.name][start:stop]] for p in params}]
            result = simulator.run(circuit, parameter_binds=binds, shots=shots).result()
            datas = [result.data(i) for i in range(stop - start)]
        else:
            data = simulator.run(circuit, shots=shots).result().data(0)
            datas = [data] * (stop - start)
        for i, data in enumerate(datas):
            out[start + i] = reader(data, cycles, num_nuclei)
        if on_batch is not None:
            on_batch(stop - start)
    return out


def run_program(circuit, values, *, cycles, num_nuclei, simulator, on_point=None) -> np.ndarray:
    """(points, cycles, n) polarizations of `circuit` at each value of its swept Parameter."""
    names = [p.name for p in circuit.parameters]
    columns = {name: np.asarray(values) for name in names[:1]} or {"_": np.asarray(values)}
    tick = (lambda k: [on_point() for _ in range(k)]) if on_point else None
    return run_bound(
        circuit, columns, cycles=cycles, num_nuclei=num_nuclei, simulator=simulator, on_batch=tick
    )


def node_columns(scenario: Scenario) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Bind columns for every (sweep point, imperfection node), points outer; and the weights."""
    nodes = scenario.imperfections.nodes()
    values = np.asarray(scenario.sweep.values)
    weights = np.array([w for w, _, _ in nodes])
    columns = {
        scenario.sweep.parameter: np.repeat(values, len(nodes)),
        DRIVE_ERROR: np.tile([s for _, s, _ in nodes], len(values)),
        DETUNING_ERROR: np.tile([d for _, _, d in nodes], len(values)),
    }
    return columns, weights


def simulate_trotter(
    scenario: Scenario, *, on_point: Callable[[], None] | None = None
) -> SweepResult:
    """Noiseless Trotter-circuit polarizations over the scenario's sweep."""
    q = scenario.system.num_qubits
    require_memory(
        "trotter",
        density_matrix_bytes(q),
        f"a density matrix of {q} qubits",
        "use the typical engine (`--engines typical` for run, `--engine typical` for "
        "sweep) for the physics, or the noisy "
        'engine with [noise] method = "trajectories"',
    )
    program = compile_program(scenario)
    return simulate_circuit(
        scenario, program.circuit, "trotter", density_matrix_simulator(), on_point=on_point
    )


def simulate_circuit(
    scenario: Scenario,
    circuit: QuantumCircuit,
    engine: str,
    simulator: AerSimulator,
    *,
    shots: int = 1,
    reader: Callable[[dict, int, int], np.ndarray] = nuclear_polarizations,
    on_point: Callable[[], None] | None = None,
) -> SweepResult:
    """Run `circuit` over the sweep × imperfection nodes and average the nodes."""
    columns, weights = node_columns(scenario)
    per_node = len(weights)
    done = [0]

    def tick(k: int) -> None:
        before = done[0] // per_node
        done[0] += k
        for _ in range(done[0] // per_node - before):
            if on_point is not None:
                on_point()

    raw = run_bound(
        circuit,
        columns,
        cycles=scenario.cycles,
        num_nuclei=scenario.system.num_nuclei,
        simulator=simulator,
        shots=shots,
        reader=reader,
        on_batch=tick,
    )
    sampled = scenario.imperfections.method == "sampling"
    pol, err = average_nodes(raw, weights, sampled)
    values = np.asarray(scenario.sweep.values)
    return SweepResult(engine, scenario.sweep.parameter, values, scenario.system.labels, pol, err)
