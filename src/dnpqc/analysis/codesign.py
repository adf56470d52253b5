"""Co-design views: the Trotter error, Trotter-step advice, processors side by side, scaling.

Errors and costs come from `strategy.py` (one definition of the approximation error; costs from
probe programs mapped onto each processor).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from ..compile.budget import GateBudget, SegmentCost, costliest_budget, gate_budget
from ..compile.processor import Processor, coupling_graph
from ..compile.program import CompileJob, Program, compile_workload, map_onto
from ..compile.strategy import (
    ApproximationError,
    Programs,
    StrategyRow,
    probe_cost,
    strategy_error,
)
from ..engines.results import SweepResult
from ..physics.model import Nucleus, SpinSystem
from ..records import Record


def trotter_error(job: CompileJob, trotter=None) -> ApproximationError:
    """The Trotter error of the job's product formula (value, method, points)."""
    trotter = trotter or job.trotter
    if trotter.weak_every is None:
        trotter = replace(trotter, weak_every=1)
    return strategy_error(job.workload, "trotter", trotter)


def measured_trotter_error(exact: SweepResult, circuit: SweepResult) -> ApproximationError:
    """The Trotter error of a run: max |P_circuit - P_exact| over every point, cycle and
    nucleus the two results share (method "measured")."""
    value = float(np.max(np.abs(exact.polarization - circuit.polarization)))
    return ApproximationError(value, "measured", len(exact.values))


@dataclass(frozen=True)
class ProgramBudget(Record):
    """The gate budget of a mapped program (of its costliest row, for a per-value program),
    with the program's strategy, description and number of programs (per-value only)."""

    gates: GateBudget
    strategy: str
    description: str
    programs: int | None = None

    def to_json(self) -> dict[str, object]:
        program: dict[str, object] = {"strategy": self.strategy, "description": self.description}
        if self.programs is not None:
            program["programs"] = self.programs
        return {**self.gates.to_json(), "program": program}


def program_budget(program: Program) -> ProgramBudget:
    """The gate budget of a mapped program; for a per-value program, of its costliest row."""
    worst = costliest_budget(list(program.mapped))
    count = len(program.mapped) if program.per_row else None
    return ProgramBudget(worst, program.strategy, program.describe(), count)


@dataclass(frozen=True)
class StepsRow(Record):
    """One Trotter step count: its error, cost and total error estimate (error + 1 - S)."""

    steps: int
    trotter_error: float
    two_qubit_per_cycle: float
    success_estimate: float
    total_error: float


@dataclass(frozen=True)
class StepsAdvice(Record):
    """The doubling ladder of step counts, the fewest steps that meet `target_error` (None if
    none does) and the optimum of least total error."""

    target_error: float
    smallest: StepsRow | None
    ladder: list[StepsRow]
    optimum: StepsRow


def steps_advice(
    job: CompileJob,
    processor: Processor,
    target_error: float,
    max_steps: int = 1024,
    on_step: Callable[[int], None] | None = None,
) -> StepsAdvice:
    """Smallest Trotter steps per cycle with error ≤ target, its cost, and the optimum steps.

    Candidates double from 2; the crossing is refined by bisection and checked at 1.1× and 1.25×
    the result (else the ladder value is kept). The optimum minimises the total error estimate
    `trotter_error + (1 - success_estimate)` over the doubling ladder. Costs come from probe
    programs (see `strategy.probe_cost`).
    `on_step(steps)` reports each step count whose Trotter error has been measured.
    """
    errors: dict[int, float] = {}
    base = job.trotter if job.trotter.weak_every is not None else replace(job.trotter, weak_every=1)

    def settings(steps: int):
        return replace(base, steps=steps, weak_every=min(base.weak_every, steps))

    def error(steps: int) -> float:
        if steps not in errors:
            errors[steps] = strategy_error(job.workload, "trotter", settings(steps)).value
            if on_step is not None:
                on_step(steps)
        return errors[steps]

    def row(steps: int) -> StepsRow:
        two_qubit, success = probe_cost(job, "trotter", settings(steps), processor)
        return StepsRow(steps, error(steps), two_qubit, success, error(steps) + 1.0 - success)

    rows = []
    steps = 2
    while steps <= max_steps:
        rows.append(row(steps))
        if error(steps) <= target_error:
            break
        steps *= 2
    passing = [r.steps for r in rows if r.trotter_error <= target_error]
    smallest = None
    if passing:
        lo, hi = (passing[0] // 2, passing[0]) if passing[0] > 2 else (1, 2)
        while hi - lo > 1:
            mid = (lo + hi) // 2
            lo, hi = (lo, mid) if error(mid) <= target_error else (mid, hi)
        # the error is not monotonic at small step counts (aliasing of fast precession):
        # accept the bisection only if slightly larger step counts pass too
        if any(error(math.ceil(f * hi)) > target_error for f in (1.1, 1.25)):
            hi = passing[0]
        smallest = row(hi)
    optimum = min(rows, key=lambda r: r.total_error)
    return StepsAdvice(target_error, smallest, rows, optimum)


@dataclass(frozen=True)
class ProcessorRow(Record):
    """The program on one processor: its layout method, per-cycle and total costs."""

    processor: str
    layout: str
    per_cycle: SegmentCost
    total: SegmentCost


def compare_processors(programs: Programs, processors: list[Processor]) -> list[ProcessorRow]:
    """The same job on several processors: per-cycle and total figures side by side."""
    rows = []
    for proc in processors:
        b = program_budget(programs.mapped(proc, nominal=True)).gates
        rows.append(ProcessorRow(proc.name, b.layout.method, b.per_cycle, b.total))
    return rows


def _graph_for(kind: str, qubits: int) -> str:
    if kind == "grid":
        rows = math.isqrt(qubits)
        cols = math.ceil(qubits / rows)
        return f"grid:{rows}x{cols}"
    if kind == "heavy-hex":
        d = 1
        while coupling_graph(f"heavy-hex:{d}")[0] < qubits:
            d += 2
        return f"heavy-hex:{d}"
    return f"{kind}:{qubits}"


@dataclass(frozen=True)
class ScalingTable(Record):
    """Two-qubit gates per cycle against the number of nuclei on each graph kind, with the
    fitted growth exponent and the gates each added nucleus costs."""

    nuclei: list[int]
    two_qubit_per_cycle: dict[str, list[float]]
    growth_exponent: dict[str, float]
    per_added_nucleus: dict[str, float]
    steps_per_cycle: int


def scaling_table(
    job: CompileJob,
    processor: Processor,
    kinds: tuple[str, ...] = ("line", "grid", "heavy-hex", "star"),
    max_nuclei: int = 12,
    probe_steps: int = 4,
    on_step: Callable[[], None] | None = None,
) -> ScalingTable:
    """Two-qubit gates per cycle vs number of nuclei on each graph kind, with fitted growth.

    The cluster is NV-centric (nuclei coupled to the NV only, no dipolar pairs). Counts are taken
    from a program of `probe_steps` steps and scaled to the scenario's steps per cycle. Growth:
    the slope of log(count) against log(n) over the larger half of n (the asymptotic exponent),
    and the two-qubit gates each added nucleus costs there. `on_step()` reports each
    (graph, n) done.
    """
    n_values = list(range(1, max_nuclei + 1))
    table: dict[str, list[float]] = {}
    for kind in kinds:
        counts = []
        for n in n_values:
            nuclei = tuple(Nucleus(f"N{j}", 10e3 + 1e3 * j, 5e3 + 5e2 * j) for j in range(1, n + 1))
            work = job.workload
            probe = replace(
                work,
                system=SpinSystem(work.system.field_t, nuclei),
                cycles=1,
                values=work.values[:1],
                imperfections=work.nominal().imperfections,
            )
            trotter = replace(job.trotter, steps=probe_steps, weak_every=1)
            program = compile_workload(probe, "trotter", trotter)
            mapped = map_onto(
                program, processor.with_topology(_graph_for(kind, n + 1)), job.mapping
            )
            budget = gate_budget(mapped.mapped[0])
            counts.append(budget.per_cycle.two_qubit * job.trotter.steps / probe_steps)
            if on_step is not None:
                on_step()
        table[kind] = counts
    upper = slice(len(n_values) // 2, None)
    growth = {
        kind: float(np.polyfit(np.log(n_values[upper]), np.log(c[upper]), 1)[0])
        for kind, c in table.items()
    }
    increment = {
        kind: float(np.polyfit(n_values[upper], c[upper], 1)[0]) for kind, c in table.items()
    }
    return ScalingTable(n_values, table, growth, increment, job.trotter.steps)


#: A peak counts as detectable when its expected contrast exceeds this many standard errors.
DETECTION_SIGMAS = 3.0


@dataclass(frozen=True)
class PeakDetection(Record):
    """One nucleus at its exact peak: the noisy and baseline P expected there, their contrast
    and its standard error with the planned shots, and whether it is detectable."""

    nucleus: str
    value: float
    exact_polarization: float
    noisy_polarization: float
    baseline_polarization: float
    contrast: float
    stderr: float
    sigmas: float
    detectable: bool


@dataclass(frozen=True)
class ShotPlan(Record):
    """Shots per sweep value for a standard error on P, the processor time they take, and
    whether each exact peak stands out of the noise."""

    target_stderr: float
    engine: str
    values: list[float]
    shots: list[int]
    program_s: float
    initial_reset_s: float
    readout_inversion_shot_factor: float
    peaks: list[PeakDetection]

    @property
    def per_shot_s(self) -> float:
        return self.program_s + self.initial_reset_s

    @property
    def total_shots(self) -> int:
        return sum(self.shots)

    @property
    def all_detectable(self) -> bool:
        return all(p.detectable for p in self.peaks)

    def to_json(self) -> dict[str, object]:
        return {
            "target_stderr": self.target_stderr,
            "engine": self.engine,
            "per_value": [
                {"value": v, "shots": n} for v, n in zip(self.values, self.shots, strict=True)
            ],
            "max_shots_per_value": max(self.shots),
            "total_shots": self.total_shots,
            "per_shot_s": self.per_shot_s,
            "per_shot": {"program_s": self.program_s, "initial_reset_s": self.initial_reset_s},
            "total_time_s": float(self.total_shots * self.per_shot_s),
            "readout_inversion_shot_factor": self.readout_inversion_shot_factor,
            "peaks": [p.to_json() for p in self.peaks],
            "all_detectable": self.all_detectable,
            "detection_sigmas": DETECTION_SIGMAS,
        }


def shot_plan(
    exact: SweepResult,
    noisy: SweepResult,
    baseline: SweepResult,
    budget: GateBudget,
    processor: Processor,
    target_stderr: float,
) -> ShotPlan:
    """Shots per sweep value for a standard error `target_stderr` on every P, the processor
    time of the sweep, and whether each exact peak stands out of the noise.

    N = ceil(max (1 - P²)/σ²) over cycles and nuclei, P the noisy engine's expected value (the
    binomial error of a ±1 mean; common practice, no source). A shot lasts the program
    (`budget` total, final readout included) plus the initial reset of the qubits. A peak's
    contrast is |P_noisy - P_baseline| at the exact peak (the zero-transfer baseline of the same
    program), detectable above DETECTION_SIGMAS·sqrt(σ_P² + σ_B²), both measured with N shots.
    """
    spread = np.clip(1.0 - noisy.polarization**2, 0.0, None)  # (points, cycles, n)
    shots = np.maximum(np.ceil(spread.max(axis=(1, 2)) / target_stderr**2), 1).astype(int)
    gain = 1.0 - 2.0 * min(0.5, processor.error_readout)
    detections = []
    for j, label in enumerate(exact.nuclei):
        i = int(np.argmax(np.abs(exact.polarization[:, -1, j])))
        p, b = noisy.polarization[i, -1, j], baseline.polarization[i, -1, j]
        sigma = math.sqrt(max(0.0, 1 - p**2) / shots[i] + max(0.0, 1 - b**2) / shots[i])
        contrast = abs(p - b)
        detections.append(
            PeakDetection(
                nucleus=label,
                value=float(exact.values[i]),
                exact_polarization=float(exact.polarization[i, -1, j]),
                noisy_polarization=float(p),
                baseline_polarization=float(b),
                contrast=float(contrast),
                stderr=sigma,
                sigmas=float(contrast / sigma) if sigma > 0 else float("inf"),
                detectable=bool(contrast > DETECTION_SIGMAS * sigma),
            )
        )
    return ShotPlan(
        target_stderr=target_stderr,
        engine=noisy.engine,
        values=[float(v) for v in exact.values],
        shots=[int(n) for n in shots],
        program_s=float(budget.total.duration_s),
        initial_reset_s=processor.time_reset_s,
        readout_inversion_shot_factor=1.0 / gain**2 if gain > 0 else float("inf"),
        peaks=detections,
    )


@dataclass(frozen=True)
class BudgetReport(Record):
    """The report of `dnpqc budget`: the program's budget, the strategy chosen and why, every
    strategy's row, the errors, and the optional views (processors compared, step advice,
    scaling, shot plan) with the warnings."""

    budget: ProgramBudget
    strategy: str
    strategy_reason: str
    strategies: list[StrategyRow]
    approximation_error: ApproximationError
    trotter_error: ApproximationError
    compare: list[ProcessorRow] | None = None
    steps_advice: StepsAdvice | None = None
    scaling: ScalingTable | None = None
    shots: ShotPlan | None = None
    warnings: tuple[str, ...] = ()

    def to_json(self) -> dict[str, object]:
        out: dict[str, object] = {
            **self.budget.to_json(),
            "strategy": self.strategy,
            "strategy_reason": self.strategy_reason,
            "strategies": [r.to_json() for r in self.strategies],
            "approximation_error": self.approximation_error.to_json(),
            "trotter_error": self.trotter_error.to_json(),
        }
        if self.compare is not None:
            out["compare"] = [r.to_json() for r in self.compare]
        for key in ("steps_advice", "scaling", "shots"):
            view = getattr(self, key)
            if view is not None:
                out[key] = view.to_json()
        out["warnings"] = list(self.warnings)
        return out
