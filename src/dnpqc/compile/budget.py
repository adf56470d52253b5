"""Gate budget of a mapped program: counts, depth, ASAP duration, idle time, success estimate.

The budget is that of the hardware program: the mapped circuit without the simulator's save
instructions, plus a final readout of every nuclear qubit.

Schedule: as soon as possible, each instruction starting when all its qubits are free, with the
processor's durations (virtual RZ takes 0); full-width barriers synchronise all qubits and close
the preparation and each cycle. A qubit is idle whenever the segment runs and it is not busy.

Success estimate (a lower-bound style figure, not a simulation):

    S = Π_gates (1 - ε_i·(d_i+1)/d_i) · Π_resets, readouts (1 - ε_i)
        · Π_qubits exp(-t_idle,q / T1_q) · exp(-t_idle,q / T2_q)

A gate on k qubits (d = 2^k) with rated average infidelity ε has process (entanglement)
infidelity ε·(d+1)/d (Horodecki et al., PRA 60, 1888, 1999; Nielsen, Phys. Lett. A 303, 249,
2002), and process fidelities of independent errors multiply. A reset or readout error is the
probability of a wrong outcome and enters as it is. Gate errors are taken to include
decoherence during the gate, so only idle time is charged with T1 and T2. Charging both T1 and
T2 counts the T1 part of T2 twice, so S errs on the pessimistic side (a test checks it against
simulated process and state fidelities).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import networkx as nx
from qiskit import QuantumCircuit

from ..records import Record
from .mapping import MappedProgram, split_segments
from .processor import VIRTUAL_GATES, Processor


@dataclass(frozen=True)
class SegmentCost(Record):
    """Cost of one segment (preparation, one cycle, or the final readout); the mean over the
    cycles (`GateBudget.per_cycle`) has fractional counts."""

    one_qubit: float
    virtual_z: float
    two_qubit: float
    swaps: float
    resets: float
    measurements: float
    depth: float
    two_qubit_depth: float
    duration_s: float
    idle_s: dict[int, float]
    success_estimate: float

    def to_json(self) -> dict[str, object]:
        out = super().to_json()
        out["idle_s"] = {str(q): t for q, t in sorted(self.idle_s.items())}
        return out


class AsapClock:
    """As-soon-as-possible timing on a set of qubits (times in s).

    An instruction starts when all its qubits are free; `place` and `sync` (a barrier) return
    the idle gap each qubit waited before the start.
    """

    def __init__(self, qubits):
        self.free_at = dict.fromkeys(qubits, 0.0)

    def place(self, qubits, duration: float) -> tuple[float, dict[int, float]]:
        start = max(self.free_at[q] for q in qubits)
        gaps = {q: start - self.free_at[q] for q in qubits}
        for q in qubits:
            self.free_at[q] = start + duration
        return start, gaps

    def sync(self, qubits) -> dict[int, float]:
        return self.place(qubits, 0.0)[1]

    @property
    def span(self) -> float:
        return max(self.free_at.values(), default=0.0)


def instruction_infidelity(processor: Processor, name: str, num_qubits: int) -> float:
    """Process infidelity ε·(d+1)/d of a gate on d = 2^k levels; a reset or readout error as is."""
    error = processor.gate_error(name)
    if name in ("reset", "measure"):
        return error
    d = 2**num_qubits
    return min(1.0, error * (d + 1) / d)


def segment_cost(
    instructions: list,
    circuit: QuantumCircuit,
    region: tuple[int, ...],
    processor: Processor,
    swaps: int = 0,
    idle_qubits: list[int] | None = None,
) -> SegmentCost:
    """Counts, depths, ASAP duration, idle time and success estimate of one segment.

    Idle time is charged on `idle_qubits` (default: all qubits of the region).
    """
    qubits = [region[i] for i in range(circuit.num_qubits)]
    clock = AsapClock(qubits)
    busy = dict.fromkeys(qubits, 0.0)
    depth = dict.fromkeys(qubits, 0)
    depth2 = dict.fromkeys(qubits, 0)
    counts = {"one": 0, "virtual": 0, "two": 0, "reset": 0, "measure": 0}
    log_success = 0.0
    for inst in instructions:
        name = inst.operation.name
        phys = [region[circuit.find_bit(q).index] for q in inst.qubits]
        duration = processor.instruction_duration_s(inst.operation)
        clock.place(phys, duration)
        if name == "delay":
            continue  # waiting: idle time, charged with T1 and T2 below
        d = max(depth[q] for q in phys) + 1
        d2 = max(depth2[q] for q in phys) + (len(phys) == 2)
        for q in phys:
            busy[q] += duration
            depth[q], depth2[q] = d, d2
        if name in ("reset", "measure"):
            kind = name
        elif len(phys) == 2:
            kind = "two"
        else:
            kind = "virtual" if name in VIRTUAL_GATES else "one"
        counts[kind] += 1
        log_success += math.log1p(-instruction_infidelity(processor, name, len(phys)))
    span = clock.span
    idle = {q: span - busy[q] for q in (qubits if idle_qubits is None else idle_qubits)}
    for q, t in idle.items():
        log_success -= t / processor.t1_s[q] + t / processor.t2_s[q]
    return SegmentCost(
        one_qubit=counts["one"],
        virtual_z=counts["virtual"],
        two_qubit=counts["two"],
        swaps=swaps,
        resets=counts["reset"],
        measurements=counts["measure"],
        depth=max(depth.values(), default=0),
        two_qubit_depth=max(depth2.values(), default=0),
        duration_s=span,
        idle_s=idle,
        success_estimate=math.exp(log_success),
    )


def readout_segment(mapped: MappedProgram) -> list:
    """The final measurement of every nuclear qubit (on its final physical qubit)."""
    circuit = QuantumCircuit(mapped.circuit.num_qubits, mapped.circuit.num_qubits - 1)
    index = {p: i for i, p in enumerate(mapped.region)}
    for clbit, phys in enumerate(mapped.final[1:]):
        circuit.measure(index[phys], clbit)
    return list(circuit.data), circuit


def _sum(costs: list[SegmentCost]) -> SegmentCost:
    idle: dict[int, float] = {}
    for c in costs:
        for q, t in c.idle_s.items():
            idle[q] = idle.get(q, 0.0) + t
    return SegmentCost(
        one_qubit=sum(c.one_qubit for c in costs),
        virtual_z=sum(c.virtual_z for c in costs),
        two_qubit=sum(c.two_qubit for c in costs),
        swaps=sum(c.swaps for c in costs),
        resets=sum(c.resets for c in costs),
        measurements=sum(c.measurements for c in costs),
        depth=sum(c.depth for c in costs),
        two_qubit_depth=sum(c.two_qubit_depth for c in costs),
        duration_s=sum(c.duration_s for c in costs),
        idle_s=idle,
        success_estimate=math.prod(c.success_estimate for c in costs),
    )


def _mean(costs: list[SegmentCost]) -> SegmentCost:
    n = len(costs)
    total = _sum(costs)
    return SegmentCost(
        one_qubit=total.one_qubit / n,
        virtual_z=total.virtual_z / n,
        two_qubit=total.two_qubit / n,
        swaps=total.swaps / n,
        resets=total.resets / n,
        measurements=total.measurements / n,
        depth=total.depth / n,
        two_qubit_depth=total.two_qubit_depth / n,
        duration_s=total.duration_s / n,
        idle_s={q: t / n for q, t in total.idle_s.items()},
        success_estimate=total.success_estimate ** (1 / n),
    )


@dataclass(frozen=True)
class ProcessorSummary(Record):
    """What a budget says of its processor: size, graph, native gates and figures."""

    name: str
    num_qubits: int
    edges: int
    max_degree: int
    diameter: int
    native_gates: str
    time_1q_s: float
    time_2q_s: float
    error_1q: float
    error_2q: float
    t1_s: list[float]
    t2_s: list[float]


@dataclass(frozen=True)
class QubitPlacement(Record):
    """The physical qubits of a mapped program: its region, and the NV's and nuclei's qubits
    before and after the program (routing moves them)."""

    region: list[int]
    nv: int
    nuclei_initial: list[int]
    nv_final: int
    nuclei_final: list[int]


@dataclass(frozen=True)
class LayoutChoice(Record):
    """How the initial layout was chosen, and the two-qubit gates of each candidate method."""

    method: str
    two_qubit_by_method: dict[str, int]


@dataclass(frozen=True)
class GateBudget(Record):
    """The budget of a mapped program: the preparation, each cycle and their mean
    (`per_cycle`), the final readout, and the `total` of all of them."""

    processor: ProcessorSummary
    qubits: QubitPlacement
    layout: LayoutChoice
    preparation: SegmentCost
    per_cycle: SegmentCost
    cycles: list[SegmentCost]
    readout: SegmentCost
    total: SegmentCost


def gate_budget(mapped: MappedProgram) -> GateBudget:
    """The budget of a mapped program: `per_cycle` (mean of the cycles), `cycles`, `total`."""
    proc, circ, region = mapped.processor, mapped.circuit, mapped.region
    segments = split_segments(circ)
    swaps = list(mapped.swaps_per_segment) + [0] * len(segments)
    costs = [segment_cost(seg, circ, region, proc, swaps[i]) for i, seg in enumerate(segments)]
    readout_insts, readout_circ = readout_segment(mapped)
    readout = segment_cost(
        readout_insts, readout_circ, region, proc, idle_qubits=list(mapped.final[1:])
    )
    preparation, cycles = costs[0], [c for c in costs[1:] if c.duration_s > 0 or c.one_qubit]
    return GateBudget(
        processor=processor_summary(proc),
        qubits=QubitPlacement(
            region=list(region),
            nv=mapped.initial[0],
            nuclei_initial=list(mapped.initial[1:]),
            nv_final=mapped.final[0],
            nuclei_final=list(mapped.final[1:]),
        ),
        layout=LayoutChoice(mapped.layout_method, mapped.candidates),
        preparation=preparation,
        per_cycle=_mean(cycles),
        cycles=cycles,
        readout=readout,
        total=_sum([preparation, *cycles, readout]),
    )


def segment_durations_s(mapped: MappedProgram) -> list[float]:
    """ASAP duration (s) of each segment of the mapped circuit: preparation, then each cycle."""
    proc, circ, region = mapped.processor, mapped.circuit, mapped.region
    return [segment_cost(seg, circ, region, proc).duration_s for seg in split_segments(circ)]


def costliest_budget(mapped: list[MappedProgram]) -> GateBudget:
    """The budget of the program (of a per-value set) with most two-qubit gates per cycle."""
    budgets = [gate_budget(m) for m in mapped]
    return max(budgets, key=lambda b: b.per_cycle.two_qubit)


def processor_summary(proc: Processor) -> ProcessorSummary:
    graph = proc.graph()
    return ProcessorSummary(
        name=proc.name,
        num_qubits=proc.num_qubits,
        edges=graph.number_of_edges(),
        max_degree=max(dict(graph.degree).values(), default=0),
        diameter=nx.diameter(graph) if graph.number_of_nodes() > 1 else 0,
        native_gates=proc.native_gates,
        time_1q_s=proc.time_1q_s,
        time_2q_s=proc.time_2q_s,
        error_1q=proc.error_1q,
        error_2q=proc.error_2q,
        t1_s=list(proc.t1_s),
        t2_s=list(proc.t2_s),
    )
