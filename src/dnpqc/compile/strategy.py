"""Choosing a program for hardware: each strategy's error and cost on a processor, the `auto`
choice, and the programs of one compile job, compiled and mapped once per processor.

Approximation error (one definition, used everywhere): max |P_program - P_exact| over evenly
spaced sweep points (`program.ERROR_POINTS`), imperfection nodes, cycles and nuclei.
- trotter, up to `PLAN_EVALUATION_QUBITS`: the plan's cycle unitary evaluated densely against the
  exact engine's propagator (`method` "measured");
- trotter, larger: the commutator bounds of Childs et al. (Phys. Rev. X 11, 011020, 2021) on each
  cycle's propagator, a propagator error ε changing a polarization by at most 2ε per cycle:

      order 1: ‖U - S1‖ ≤ (T²/2r)·Σ_{a<b} ‖[H_a, H_b]‖
      order 2: ‖U - S2‖ ≤ (T³/r²)·Σ_b (‖S_b‖/6 + ‖H_b‖/12)·‖[S_b, H_b]‖,   S_b = Σ_{c>b} H_c

  (angular units 2π·h; ‖[h_a P_a, h_b P_b]‖ = 2|h_a h_b| for anticommuting Paulis), `method`
  "bound" (it ignores the weak-term schedule);
- cycle-unitary: the synthesized cycle's operator against the exact unitary ("measured").

Cost: two-qubit gates per cycle and the success estimate of the whole program, from the gate
budget of a probe program of two cycles at the middle sweep value mapped onto the processor
(`S = S_probe · S_cycle^(c-2)`), so that comparing strategies never maps the whole program of
each; the row of the strategy that runs takes its figures from the whole mapped program.

`auto` minimises approximation error + (1 - success estimate) over the strategies (trotter at
steps 2, 4, … up to `MAX_AUTO_STEPS`, the weak-term interval scaled with the step length); with a
target error E it takes the fewest two-qubit gates among candidates whose error is ≤ E (or, if
none reaches E, the smallest error, and says so).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
from qiskit.quantum_info import Operator

from ..physics.propagation import polarization_by_cycle
from ..physics.protocols import Evolve
from .budget import GateBudget, costliest_budget, gate_budget
from .processor import Processor
from .program import (
    MAX_SYNTHESIS_QUBITS,
    PLAN_EVALUATION_QUBITS,
    CompileJob,
    Program,
    TrotterSettings,
    Workload,
    choose_weak_every,
    compile_workload,
    error_points,
    exact_polarizations,
    map_onto,
    plan_error,
    row_unitaries,
    synthesize_cycle,
    trotter_plan,
)
from .trotter import pauli_terms

#: Largest Trotter step count that `auto` tries.
MAX_AUTO_STEPS = 1024
#: Cycles of the probe programs that cost a strategy (two: the second cycle starts from the
#: qubit placement that routing left, as every later cycle does).
PROBE_CYCLES = 2


@dataclass(frozen=True)
class ApproximationError:
    """max |P_program - P_exact| (`value`), how it was obtained, and on how many sweep points."""

    value: float
    method: str
    points: int

    def to_json(self) -> dict[str, object]:
        return {"value": self.value, "method": self.method, "points": self.points}


@dataclass(frozen=True)
class StrategyRow:
    """One strategy's program on one processor: its cost and its approximation error."""

    strategy: str
    steps: int | None
    weak_every: int | None
    two_qubit_per_cycle: float
    approximation_error: ApproximationError
    success_estimate: float

    @property
    def total_error(self) -> float:
        return self.approximation_error.value + 1.0 - self.success_estimate

    def to_json(self) -> dict[str, object]:
        return {
            "strategy": self.strategy,
            "steps": self.steps,
            "two_qubit_per_cycle": self.two_qubit_per_cycle,
            "approximation_error": self.approximation_error.value,
            "success_estimate": self.success_estimate,
            "weak_every": self.weak_every,
            "error_method": self.approximation_error.method,
            "total_error": self.total_error,
        }


@dataclass(frozen=True)
class Choice:
    """The strategy a job runs with on a processor (and its Trotter settings), and why."""

    strategy: str
    trotter: TrotterSettings
    reason: str
    rows: tuple[StrategyRow, ...] = ()


def applicable(work: Workload) -> list[str]:
    """The strategies that can compile `work`."""
    fits = work.system.num_qubits <= MAX_SYNTHESIS_QUBITS
    return ["trotter", "cycle-unitary"] if fits else ["trotter"]


# --- approximation error ----------------------------------------------------------------


def approximation_error(program: Program) -> ApproximationError:
    """The program's approximation error (see the module docstring)."""
    return strategy_error(program.workload, program.strategy, program.trotter)


def strategy_error(
    work: Workload, strategy: str, trotter: TrotterSettings | None
) -> ApproximationError:
    """The approximation error `strategy` would have on `work` (no circuit is built)."""
    indices = error_points(work.values)
    if strategy == "cycle-unitary":
        return ApproximationError(_synthesis_error(work, indices), "measured", len(indices))
    if work.system.num_qubits <= PLAN_EVALUATION_QUBITS:
        reference = exact_polarizations(work, indices)
        value = plan_error(work, trotter_plan(work, trotter), reference, indices)
        return ApproximationError(value, "measured", len(indices))
    return ApproximationError(commutator_bound(work, trotter), "bound", len(work.values))


def _synthesis_error(work: Workload, indices: list[int]) -> float:
    nominal = work.nominal().subset(indices)
    n, cycles = work.system.num_nuclei, work.cycles
    worst = 0.0
    for u in row_unitaries(nominal):
        synth = Operator(synthesize_cycle(u)).data
        exact = polarization_by_cycle(u, cycles, n)
        worst = max(worst, float(np.max(np.abs(polarization_by_cycle(synth, cycles, n) - exact))))
    return worst


def _anticommute(a: tuple[str, tuple[int, ...]], b: tuple[str, tuple[int, ...]]) -> bool:
    pa = dict(zip(a[1], a[0], strict=True))
    pb = dict(zip(b[1], b[0], strict=True))
    clashes = sum(1 for q in pa.keys() & pb.keys() if pa[q] != pb[q])
    return clashes % 2 == 1


def commutator_bound(work: Workload, trotter: TrotterSettings) -> float:
    """Bound on max |ΔP| from the Trotter splitting (see the module docstring), all points."""
    worst = 0.0
    for x in work.values:
        eps = 0.0
        for seg in work.schedule(trotter).segments():
            if isinstance(seg, Evolve):
                eps += _segment_bound(work, seg, x, trotter.order)
        worst = max(worst, eps)
    return min(2.0, 2.0 * work.cycles * worst)


def _segment_bound(work: Workload, seg: Evolve, x: float, order: int) -> float:
    terms = pauli_terms(work.system, seg, "x")
    keys = list(terms)
    h = [2 * math.pi * abs(terms[k].at({"x": x})) for k in keys]
    t, r = seg.duration_s.at(x), seg.steps
    if order == 1:
        total = sum(
            2 * h[a] * h[b]
            for a in range(len(keys))
            for b in range(a + 1, len(keys))
            if _anticommute(keys[a], keys[b])
        )
        return t**2 / (2 * r) * total
    total = 0.0
    for b in range(len(keys)):
        comm = sum(
            2 * h[c] * h[b] for c in range(b + 1, len(keys)) if _anticommute(keys[b], keys[c])
        )
        total += (sum(h[b + 1 :]) / 6 + h[b] / 12) * comm
    return t**3 / r**2 * total


# --- cost on a processor -----------------------------------------------------------------


def probe_cost(
    job: CompileJob, strategy: str, trotter: TrotterSettings, processor: Processor
) -> tuple[float, float]:
    """(two-qubit gates per cycle, whole-program success estimate) from a probe of at most
    `PROBE_CYCLES` cycles at the middle sweep value: S = S_probe · S_cycle^(cycles - probe)."""
    work = job.workload.nominal()
    middle = len(work.values) // 2
    cycles = min(work.cycles, PROBE_CYCLES)
    probe = replace(work.subset([middle]), cycles=cycles)
    program = map_onto(compile_workload(probe, strategy, trotter), processor, job.mapping)
    return budget_cost(gate_budget(program.mapped[0]), work.cycles - cycles)


def budget_cost(budget: GateBudget, extra_cycles: int = 0) -> tuple[float, float]:
    """(two-qubit gates per cycle, success estimate) of a budget, with `extra_cycles` more."""
    per_cycle = budget.per_cycle
    success = budget.total.success_estimate * per_cycle.success_estimate**extra_cycles
    return float(per_cycle.two_qubit), float(success)


def strategy_row(
    job: CompileJob, strategy: str, trotter: TrotterSettings, processor: Processor
) -> StrategyRow:
    """Cost and error of one strategy (trotter settings with `weak_every` resolved)."""
    error = strategy_error(job.workload, strategy, trotter)
    two_qubit, success = probe_cost(job, strategy, trotter, processor)
    steps = trotter.steps if strategy == "trotter" else None
    weak = trotter.weak_every if strategy == "trotter" else None
    return StrategyRow(strategy, steps, weak, two_qubit, error, success)


def resolved_trotter(job: CompileJob) -> tuple[TrotterSettings, str]:
    """The job's Trotter settings with `weak_every` chosen (when not forced), and how."""
    if job.trotter.weak_every is not None:
        return job.trotter, f"weak terms every {job.trotter.weak_every} steps (set)"
    k, note = choose_weak_every(job.workload, job.trotter)
    return replace(job.trotter, weak_every=k), note


def _ladder_settings(trotter: TrotterSettings, steps: int) -> TrotterSettings:
    """Settings at `steps`, the weak-term interval k·dt kept (k scaled with the steps)."""
    k = max(1, round((trotter.weak_every or 1) * steps / trotter.steps))
    return replace(trotter, steps=steps, weak_every=min(k, steps))


def choose_strategy(job: CompileJob, processor: Processor) -> Choice:
    """The `auto` choice on `processor` (see the module docstring)."""
    trotter, _ = resolved_trotter(job)
    target = job.settings.target_error
    rows: list[StrategyRow] = []
    if "cycle-unitary" in applicable(job.workload):
        rows.append(strategy_row(job, "cycle-unitary", trotter, processor))
    steps = 2
    while steps <= MAX_AUTO_STEPS:
        row = strategy_row(job, "trotter", _ladder_settings(trotter, steps), processor)
        rows.append(row)
        best = min(r.total_error for r in rows)
        reached = target is not None and row.approximation_error.value <= target
        if reached or (target is None and 1.0 - row.success_estimate >= best):
            break  # more steps only lower the success estimate further
        steps *= 2
    chosen, reason = _pick(rows, target)
    settings = trotter if chosen.steps is None else _ladder_settings(trotter, chosen.steps)
    return Choice(chosen.strategy, settings, reason, tuple(rows))


def _pick(rows: list[StrategyRow], target: float | None) -> tuple[StrategyRow, str]:
    if target is None:
        best = min(rows, key=lambda r: r.total_error)
        return best, "auto: smallest approximation error + (1 - success estimate)"
    passing = [r for r in rows if r.approximation_error.value <= target]
    if passing:
        best = min(passing, key=lambda r: (r.two_qubit_per_cycle, r.approximation_error.value))
        return best, f"auto: fewest two-qubit gates with approximation error <= {target:g}"
    best = min(rows, key=lambda r: r.approximation_error.value)
    return best, (
        f"auto: no candidate reaches approximation error {target:g}; "
        f"the most accurate ({best.approximation_error.value:.2g}) was taken"
    )


class Programs:
    """The programs of one compile job, each strategy resolved, compiled and mapped once.

    `default_processor` stands in where a processor is needed and none is given (the `auto`
    choice of a job without a processor, the noisy engine).
    """

    def __init__(self, job: CompileJob, default_processor: Processor):
        self.job = job
        self.default_processor = default_processor
        self._choices: dict[Processor, Choice] = {}
        self._programs: dict[tuple[str, Processor, bool], Program] = {}
        self._trotter: tuple[TrotterSettings, str] | None = None
        self._rows: dict[tuple, StrategyRow] = {}

    def trotter(self) -> tuple[TrotterSettings, str]:
        if self._trotter is None:
            self._trotter = resolved_trotter(self.job)
        return self._trotter

    def choice(self, processor: Processor | None = None) -> Choice:
        """The strategy on `processor` (`auto` resolved there)."""
        processor = processor or self.default_processor
        if processor not in self._choices:
            strategy = self.job.settings.strategy
            if strategy == "auto":
                choice = choose_strategy(self.job, processor)
            else:
                trotter, note = self.trotter()
                choice = Choice(strategy, trotter, note if strategy == "trotter" else "set")
            self._choices[processor] = choice
        return self._choices[processor]

    def logical(self, processor: Processor | None = None, *, nominal: bool = False) -> Program:
        """The unmapped program (strategy chosen on `processor`)."""
        processor = processor or self.default_processor
        key = (processor, nominal or not self.job.workload.imperfections.active)
        if ("logical", *key) not in self._programs:
            choice = self.choice(processor)
            work = self.job.workload.nominal() if nominal else self.job.workload
            program = compile_workload(work, choice.strategy, choice.trotter)
            self._programs[("logical", *key)] = replace(program, choice=choice.reason)
        return self._programs[("logical", *key)]

    def mapped(self, processor: Processor | None = None, *, nominal: bool = False) -> Program:
        """The program mapped onto `processor` (nominal: without imperfections, for hardware)."""
        processor = processor or self.default_processor
        key = (processor, nominal or not self.job.workload.imperfections.active)
        if ("mapped", *key) not in self._programs:
            logical = self.logical(processor, nominal=nominal)
            self._programs[("mapped", *key)] = map_onto(logical, processor, self.job.mapping)
        return self._programs[("mapped", *key)]

    def row(self, strategy: str, trotter: TrotterSettings, processor: Processor) -> StrategyRow:
        """The cost and error of one strategy on `processor` (computed once)."""
        key = (strategy, trotter if strategy == "trotter" else None, processor)
        if key not in self._rows:
            self._rows[key] = strategy_row(self.job, strategy, trotter, processor)
        return self._rows[key]

    def rows(self, processor: Processor | None = None) -> list[StrategyRow]:
        """One row per applicable strategy at the job's Trotter settings, plus the chosen one
        where `auto` took other steps; the chosen row costed on the whole mapped program."""
        processor = processor or self.default_processor
        choice = self.choice(processor)
        for row in choice.rows:  # rows the auto search already costed
            trotter = _ladder_settings(choice.trotter, row.steps) if row.steps else None
            self._rows.setdefault((row.strategy, trotter, processor), row)
        trotter, _ = self.trotter()
        wanted = [(s, trotter) for s in applicable(self.job.workload)]
        if choice.strategy == "trotter" and choice.trotter != trotter:
            wanted.append(("trotter", choice.trotter))
        rows = []
        for strategy, settings in wanted:
            row = self.row(strategy, settings, processor)
            if strategy == choice.strategy and (
                strategy != "trotter" or settings == choice.trotter
            ):
                program = self.mapped(processor, nominal=True)
                two_qubit, success = budget_cost(costliest_budget(list(program.mapped)))
                row = replace(row, two_qubit_per_cycle=two_qubit, success_estimate=success)
            rows.append(row)
        return rows
