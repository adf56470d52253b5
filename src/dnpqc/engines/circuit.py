"""The trotter engine: the compiled circuit run on qiskit-aer, noiseless, density matrix.

The circuit is built once with the swept quantity as a Parameter; all sweep points run from that
one circuit by parameter binding. The density-matrix method makes the mid-circuit resets exact
channels (with the statevector method they would be sampled per shot).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from qiskit import QuantumCircuit
from qiskit_aer import AerSimulator

from ..model import z_signs
from ..results import SweepResult
from ..scenario import Scenario
from ..trotter import ProgramPlan, build_circuit, cycle_label, plan_program

#: Sweep points per Aer run. Aer converts a circuit once per run (~15-30 µs per gate) and then
#: binds each point in C++, so large batches amortise the conversion; progress ticks per batch.
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
        params = list(self.circuit.parameters)
        return params[0] if params else None


def compile_program(scenario: Scenario, *, save: bool = True) -> Program:
    """Trotter-compile the scenario into one parameterized logical circuit."""
    plan = plan_program(
        scenario.system,
        scenario.schedule(),
        cycles=scenario.cycles,
        order=scenario.trotter.order,
        parameter_name=scenario.sweep.parameter,
    )
    circuit = build_circuit(plan, save=save)
    return Program(plan, circuit, 0, tuple(range(1, plan.num_qubits)))


def density_matrix_simulator(**options) -> AerSimulator:
    """Aer in density-matrix mode (exact resets), fusion tuned for small circuits."""
    return AerSimulator(method="density_matrix", fusion_threshold=1, **options)


def nuclear_polarizations(data: dict, cycles: int, num_nuclei: int) -> np.ndarray:
    """(cycles, n) <Z_j> from the saved nuclear probabilities of one experiment."""
    signs = z_signs(num_nuclei)
    return np.array([np.asarray(data[cycle_label(c)]) @ signs for c in range(1, cycles + 1)])


def run_program(
    circuit: QuantumCircuit,
    values: np.ndarray,
    *,
    cycles: int,
    num_nuclei: int,
    simulator: AerSimulator,
    on_point: Callable[[], None] | None = None,
) -> np.ndarray:
    """(points, cycles, n) polarizations of `circuit` bound to each value of the sweep."""
    params = list(circuit.parameters)
    out = np.empty((len(values), cycles, num_nuclei))
    for start in range(0, len(values), BATCH_POINTS):
        chunk = values[start : start + BATCH_POINTS]
        if params:
            binds = [{params[0]: [float(v) for v in chunk]}]
            result = simulator.run(circuit, parameter_binds=binds, shots=1).result()
            datas = [result.data(i) for i in range(len(chunk))]
        else:
            data = simulator.run(circuit, shots=1).result().data(0)
            datas = [data] * len(chunk)
        for i, data in enumerate(datas):
            out[start + i] = nuclear_polarizations(data, cycles, num_nuclei)
            if on_point is not None:
                on_point()
    return out


def simulate_trotter(
    scenario: Scenario, *, on_point: Callable[[], None] | None = None
) -> SweepResult:
    """Noiseless Trotter-circuit polarizations over the scenario's sweep."""
    program = compile_program(scenario)
    values = np.asarray(scenario.sweep.values)
    pol = run_program(
        program.circuit,
        values,
        cycles=scenario.cycles,
        num_nuclei=scenario.system.num_nuclei,
        simulator=density_matrix_simulator(),
        on_point=on_point,
    )
    return SweepResult("trotter", scenario.sweep.parameter, values, scenario.system.labels, pol)
