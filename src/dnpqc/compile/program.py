"""The compile stage: the physics of a sweep (a `Workload`) → one compiled `Program`.

Strategies (`[compile] strategy`):

- ``trotter``: the product formula of `trotter.py`, one circuit with the swept quantity (and the
  imperfections) as Parameters, for the whole sweep. Weak terms (nucleus–nucleus couplings far
  below the hyperfine ones) may be applied once every k steps (`weak_every`), chosen so that the
  measured Trotter error grows by at most `WEAK_ERROR_GROWTH`.
- ``cycle-unitary``: the exact unitary of one cycle, from the same propagator as the exact engine
  (pulses included), synthesized by qiskit into CX and one-qubit gates (quantum Shannon
  decomposition; Shende, Bullock & Markov, IEEE TCAD 25, 1000, 2006), one circuit per sweep value
  and imperfection node (a synthesized unitary cannot carry Parameters). No Trotter error; the
  cost grows as about (23/48)·4^q two-qubit gates, so it is refused beyond
  `MAX_SYNTHESIS_QUBITS`.
- ``auto``: chosen by the co-design stage (`codesign.choose_strategy`) from the measured errors
  and the success estimates on the processor.

Rows of a per-value program are ordered value-major, imperfection nodes inner (as `rows()`).
Every program keeps the mixed-state preparation and the NV reset of `trotter.build_circuit`.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Literal

import numpy as np
from qiskit import QuantumCircuit, transpile
from qiskit.circuit.library import UnitaryGate

from ..errors import ScenarioError
from ..physics.imperfections import DETUNING_ERROR, DRIVE_ERROR, Imperfections
from ..physics.model import SpinSystem
from ..physics.propagation import Propagators, cycle_unitary, polarization_by_cycle
from ..physics.protocols import CycleSchedule, Protocol, cycle_schedule, perturbed
from .budget import segment_durations_s
from .mapping import MappedProgram, MappingSettings, closes_segment, map_program
from .processor import Processor
from .trotter import ProgramPlan, assemble_program, build_circuit, plan_program, plan_unitary

Strategy = Literal["trotter", "cycle-unitary", "auto"]
STRATEGIES: tuple[str, ...] = ("trotter", "cycle-unitary", "auto")

#: Largest register (NV + nuclei) that `cycle-unitary` synthesizes: NV + 5 nuclei.
MAX_SYNTHESIS_QUBITS = 6
#: `weak_every` is chosen so that the measured Trotter error grows by at most this factor.
WEAK_ERROR_GROWTH = 1.10
#: Largest register whose Trotter error is measured with the dense plan evaluator.
PLAN_EVALUATION_QUBITS = 9
#: Sweep points on which errors are measured (evenly spaced, ends included).
ERROR_POINTS = 5
#: Basis of the all-to-all synthesized cycle (mapping translates it to the native gates).
SYNTHESIS_BASIS = ("cx", "u")


@dataclass(frozen=True)
class TrotterSettings:
    """Steps per cycle (pulsed: per free window), order 1 or 2, steps per finite pulse, and
    `weak_every` (None: chosen automatically; 1: every step)."""

    steps: int = 40
    order: int = 1
    pulse_steps: int = 2
    weak_every: int | None = None


@dataclass(frozen=True)
class CompileSettings:
    """`[compile]`: the strategy and, for `auto`, an optional ceiling on the approximation error."""

    strategy: Strategy = "trotter"
    target_error: float | None = None


@dataclass(frozen=True)
class Workload:
    """What a program computes: the spins, the drive, the swept values, the cycles, the nodes."""

    name: str
    digest: str
    system: SpinSystem
    protocol: Protocol
    parameter: str
    values: tuple[float, ...]
    cycles: int
    imperfections: Imperfections = field(default_factory=Imperfections)

    def schedule(self, trotter: TrotterSettings | None = None) -> CycleSchedule:
        """One cycle's segments with the swept quantity as the variable."""
        t = trotter or TrotterSettings()
        return cycle_schedule(
            self.protocol, swept=self.parameter, steps=t.steps, pulse_steps=t.pulse_steps
        )

    def nodes(self) -> list[tuple[float, float, float]]:
        return self.imperfections.nodes()

    def weights(self) -> np.ndarray:
        """Weights of the imperfection nodes (sum 1)."""
        return np.array([w for w, _, _ in self.nodes()])

    @property
    def sampled(self) -> bool:
        return self.imperfections.method == "sampling" and self.imperfections.active

    def rows(self) -> list[tuple[float, float, float]]:
        """(value, drive error, detuning error) of every experiment: values outer, nodes inner."""
        return [(x, s, d) for x in self.values for _, s, d in self.nodes()]

    def subset(self, indices) -> Workload:
        return replace(self, values=tuple(self.values[i] for i in indices))

    def nominal(self) -> Workload:
        """Without imperfections: the program submitted to hardware."""
        return replace(self, imperfections=Imperfections())


@dataclass(frozen=True)
class CompileJob:
    """Everything the compile stage reads: the workload and the stage settings."""

    workload: Workload
    trotter: TrotterSettings = field(default_factory=TrotterSettings)
    settings: CompileSettings = field(default_factory=CompileSettings)
    mapping: MappingSettings = field(default_factory=MappingSettings)

    def with_steps(self, steps: int) -> CompileJob:
        return replace(self, trotter=replace(self.trotter, steps=steps))


@dataclass(frozen=True)
class Program:
    """A compiled program: strategy, logical circuits, and (once mapped) the mapped circuits.

    `circuits` holds one parameterized circuit (trotter) or one circuit per row of
    `workload.rows()` (cycle-unitary); `mapped` the same circuits on `processor`'s region.
    """

    workload: Workload
    strategy: Literal["trotter", "cycle-unitary"]
    circuits: tuple[QuantumCircuit, ...]
    trotter: TrotterSettings | None = None
    plan: ProgramPlan | None = None
    mapped: tuple[MappedProgram, ...] = ()
    choice: str = ""

    @property
    def per_row(self) -> bool:
        return self.strategy == "cycle-unitary"

    @property
    def steps(self) -> int | None:
        return self.trotter.steps if self.trotter is not None else None

    @property
    def processor(self) -> Processor | None:
        return self.mapped[0].processor if self.mapped else None

    @property
    def parameter(self):
        """The swept Parameter of a trotter program (None if its circuit does not use it)."""
        found = [p for p in self.circuits[0].parameters if p.name == self.workload.parameter]
        return found[0] if found else None

    @property
    def circuit(self) -> QuantumCircuit:
        """The first logical circuit (the only one of a trotter program)."""
        return self.circuits[0]

    def subset(self, indices) -> Program:
        """The same program restricted to the sweep points `indices`."""
        work = self.workload.subset(indices)
        if not self.per_row:
            return replace(self, workload=work)
        per = len(self.workload.nodes())
        rows = [i * per + k for i in indices for k in range(per)]
        mapped = tuple(self.mapped[r] for r in rows) if self.mapped else ()
        return replace(
            self, workload=work, circuits=tuple(self.circuits[r] for r in rows), mapped=mapped
        )

    def describe(self) -> str:
        """One line: the strategy and its settings."""
        if self.strategy == "cycle-unitary":
            return f"cycle-unitary ({len(self.circuits)} synthesized programs)"
        t = self.trotter
        weak = (
            f", weak terms every {self.plan.weak_every} steps" if self.plan.weak_every > 1 else ""
        )
        return f"trotter ({t.steps} steps, order {t.order}{weak})"


def compile_trotter(work: Workload, trotter: TrotterSettings) -> Program:
    """The product-formula program; `weak_every` None is chosen by measured error."""
    choice = ""
    if trotter.weak_every is None:
        k, choice = choose_weak_every(work, trotter)
        trotter = replace(trotter, weak_every=k)
    plan = trotter_plan(work, trotter)
    return Program(work, "trotter", (build_circuit(plan),), trotter, plan, choice=choice)


def trotter_plan(work: Workload, trotter: TrotterSettings) -> ProgramPlan:
    """The Trotter plan of `work` (weak_every None counts as 1)."""
    return plan_program(
        work.system,
        work.schedule(trotter),
        cycles=work.cycles,
        order=trotter.order,
        parameter_name=work.parameter,
        imperfections=work.imperfections.active,
        weak_every=trotter.weak_every or 1,
    )


def check_synthesis_size(num_qubits: int) -> None:
    """Refuse `cycle-unitary` beyond MAX_SYNTHESIS_QUBITS, giving the cost it would have."""
    if num_qubits > MAX_SYNTHESIS_QUBITS:
        raise ScenarioError(
            f'`compile.strategy` = "cycle-unitary" synthesizes at most {MAX_SYNTHESIS_QUBITS} '
            f"qubits (NV + {MAX_SYNTHESIS_QUBITS - 1} nuclei); this scenario has {num_qubits}, "
            f"whose cycle would cost about {synthesis_cost(num_qubits):,} two-qubit gates "
            'all-to-all; use "trotter"'
        )


def synthesis_cost(num_qubits: int) -> int:
    """CX count of the quantum Shannon decomposition: (23/48)·4^q - (3/2)·2^q + 4/3
    (Shende, Bullock & Markov, IEEE TCAD 25, 1000, 2006)."""
    return round(23 / 48 * 4**num_qubits - 1.5 * 2**num_qubits + 4 / 3)


def row_unitaries(work: Workload, props: Propagators | None = None) -> list[np.ndarray]:
    """The exact cycle unitary of every row (value × imperfection node); `props` a cache of
    eigendecompositions to share between calls."""
    props = props or Propagators(work.system)
    nominal = work.schedule()
    schedules = [perturbed(nominal, drive_error=s, detuning_error_hz=d) for _, s, d in work.nodes()]
    return [cycle_unitary(props, sched, x) for x in work.values for sched in schedules]


def synthesize_cycle(unitary: np.ndarray) -> QuantumCircuit:
    """All-to-all CX + U circuit of `unitary` (qubit 0 the NV), exact (approximation off)."""
    q = unitary.shape[0].bit_length() - 1
    block = QuantumCircuit(q, name="cycle")
    block.append(UnitaryGate(unitary, check_input=False), range(q))
    return transpile(
        block,
        basis_gates=list(SYNTHESIS_BASIS),
        optimization_level=3,
        approximation_degree=1.0,
        seed_transpiler=0,
    )


def compile_cycle_unitary(work: Workload) -> Program:
    """One synthesized program per row (sweep value × imperfection node)."""
    check_synthesis_size(work.system.num_qubits)
    circuits = tuple(
        assemble_program(synthesize_cycle(u), work.cycles) for u in row_unitaries(work)
    )
    return Program(work, "cycle-unitary", circuits)


def compile_workload(
    work: Workload, strategy: str, trotter: TrotterSettings | None = None
) -> Program:
    """Compile `work` with a concrete strategy (`auto` is resolved by the co-design stage)."""
    if strategy == "trotter":
        return compile_trotter(work, trotter or TrotterSettings())
    if strategy == "cycle-unitary":
        return compile_cycle_unitary(work)
    raise ScenarioError(
        f"`compile.strategy` must be trotter or cycle-unitary here; got {strategy!r}"
    )


def map_onto(
    program: Program,
    processor: Processor,
    settings: MappingSettings,
    fixed: MappedProgram | None = None,
) -> Program:
    """The program with its circuits mapped onto `processor`.

    A per-row program picks its region and layout on the first row and keeps them for the rest,
    so every row runs on the same physical qubits; with `fixed`, every row keeps that mapping's.
    """
    system = program.workload.system
    first = map_program(
        program.circuits[0],
        system,
        processor,
        optimization_level=settings.optimization_level,
        seed=settings.seed,
        fixed=fixed,
    )
    rest = [
        map_program(
            c,
            system,
            processor,
            optimization_level=settings.optimization_level,
            seed=settings.seed,
            fixed=first,
        )
        for c in program.circuits[1:]
    ]
    return replace(program, mapped=(first, *rest))


def baseline_program(program: Program, settings: MappingSettings) -> Program:
    """The zero-transfer baseline of `program`: every hyperfine and dipolar coupling set to zero,
    so no polarization can move; what its nuclei show on a processor is the processor's drift.

    The uncoupled cycle is compiled with the program's strategy and settings (it needs no
    two-qubit gate). Mapped, it keeps the program's qubits and initial layout, and each segment
    is padded with a delay to the program's duration, so the qubits relax as long as in the
    program (gate errors other than relaxation are not reproduced; they bias no qubit).
    """
    work = program.workload
    free = replace(work, system=work.system.without_couplings())
    if program.strategy == "trotter":
        base = replace(compile_trotter(free, program.trotter), workload=work)
    else:
        base = replace(compile_cycle_unitary(free), workload=work)
    note = "baseline: couplings set to zero"
    if program.mapped:
        base = map_onto(base, program.processor, settings, fixed=program.mapped[0])
        padded = [
            replace(b, circuit=padded_to(b, segment_durations_s(m)))
            for b, m in zip(base.mapped, program.mapped, strict=True)
        ]
        base = replace(base, mapped=tuple(padded))
        note += ", each cycle padded with a delay to the program's duration"
    return replace(base, choice=note)


def padded_to(mapped: MappedProgram, durations_s: list[float]) -> QuantumCircuit:
    """The mapped circuit with a delay on every qubit at the end of each segment that is shorter
    than `durations_s` (per segment, from `budget.segment_durations_s`), so that each segment
    lasts as long as the target's and the qubits relax as long."""
    own = segment_durations_s(mapped)
    circuit = mapped.circuit
    out = circuit.copy_empty_like()
    segment = 0
    for inst in circuit.data:
        if closes_segment(inst, circuit):
            gap = durations_s[segment] - own[segment] if segment < len(own) else 0.0
            if gap > 0:
                out.delay(gap, out.qubits, unit="s")
            segment += 1
        out.append(inst)
    return out


def _bound(program: Program, name: str, value: float) -> Program:
    """`program` with the Parameter called `name` (where present) bound to `value`."""

    def bind(circuit: QuantumCircuit) -> QuantumCircuit:
        found = {p: value for p in circuit.parameters if p.name == name}
        return circuit.assign_parameters(found) if found else circuit

    return replace(
        program,
        circuits=tuple(bind(c) for c in program.circuits),
        mapped=tuple(replace(m, circuit=bind(m.circuit)) for m in program.mapped),
    )


# --- measured approximation error ---------------------------------------------------------


def error_points(values: tuple[float, ...], points: int = ERROR_POINTS) -> list[int]:
    """Evenly spaced indices of `values`, both ends included."""
    if len(values) <= points:
        return list(range(len(values)))
    return [int(i) for i in np.unique(np.linspace(0, len(values) - 1, points).round())]


def exact_polarizations(work: Workload, indices: list[int]) -> np.ndarray:
    """(points, nodes, cycles, n) exact polarizations at the sweep points `indices`."""
    sub = work.subset(indices)
    units = row_unitaries(sub)
    per = len(sub.nodes())
    out = [polarization_by_cycle(u, work.cycles, work.system.num_nuclei) for u in units]
    return np.array(out).reshape(len(indices), per, work.cycles, work.system.num_nuclei)


def plan_error(work: Workload, plan: ProgramPlan, reference: np.ndarray, indices) -> float:
    """max |P_plan - P_exact| over `indices` × nodes × cycles × nuclei (dense evaluation)."""
    worst = 0.0
    nodes = work.nodes()
    for a, i in enumerate(indices):
        for b, (_, s, d) in enumerate(nodes):
            values = {work.parameter: work.values[i], DRIVE_ERROR: s, DETUNING_ERROR: d}
            u = plan_unitary(plan, values)
            pol = polarization_by_cycle(u, work.cycles, work.system.num_nuclei)
            worst = max(worst, float(np.max(np.abs(pol - reference[a, b]))))
    return worst


def choose_weak_every(work: Workload, trotter: TrotterSettings) -> tuple[int, str]:
    """The largest k (doubling from 2) whose measured error ≤ WEAK_ERROR_GROWTH × that of k = 1.

    Returns (k, a note saying how it was chosen). k = 1 when there is no weak term or the
    register is too large to measure the error densely.
    """
    base = trotter_plan(work, replace(trotter, weak_every=1))
    if trotter_plan(work, replace(trotter, weak_every=2)).cycle == base.cycle:
        return 1, "no weak terms"
    if work.system.num_qubits > PLAN_EVALUATION_QUBITS:
        return (
            1,
            f"weak terms every step (no error measured beyond {PLAN_EVALUATION_QUBITS} qubits)",
        )
    indices = error_points(work.values)
    reference = exact_polarizations(work, indices)
    limit = WEAK_ERROR_GROWTH * plan_error(work, base, reference, indices)
    best, k = 1, 2
    while k <= trotter.steps:
        plan = trotter_plan(work, replace(trotter, weak_every=k))
        if plan_error(work, plan, reference, indices) <= limit:
            best = k
        k *= 2
    return (
        best,
        f"weak terms every {best} steps (measured error within "
        f"{WEAK_ERROR_GROWTH - 1:.0%} of every step)",
    )
