"""What a program costs and needs before it is run: the report of `dnpqc budget` (gates, depth,
time and success per cycle, strategies, errors, processors compared, step advice, scaling and
the shot plan)."""

from __future__ import annotations

import contextlib
from collections.abc import Callable
from dataclasses import dataclass, replace

from ..analysis import codesign, verdicts
from ..compile.processor import Processor, processor_for_spec
from ..compile.strategy import Programs, approximation_error
from ..engines import simulate_program
from ..engines.noisy import BASELINE_ENGINE
from ..errors import ScenarioError
from ..io.scenario import Scenario, program_gates
from ..limits import check_program_size
from .job import engine_options, scenario_processor, scenario_programs

#: A progress display: `progress(total or None, title)` is a context manager whose value has
#: `update(k=1)` and `set_postfix_str(text)` (a tqdm bar has both).
Progress = Callable[[int | None, str], contextlib.AbstractContextManager]


class _Silent:
    def update(self, k: int = 1) -> None:
        pass

    def set_postfix_str(self, text: str) -> None:
        pass


def silent(total: int | None, title: str) -> contextlib.AbstractContextManager:
    """The progress display that shows nothing."""
    return contextlib.nullcontext(_Silent())


@dataclass(frozen=True)
class BudgetRequest:
    """What `dnpqc budget` was asked for: the processor (a spec, else the scenario's),
    processors to compare, a Trotter error target for step advice, the scaling table, and the
    shot plan at a standard error on P."""

    processor: str | None = None
    compare: tuple[str, ...] = ()
    target_error: float | None = None
    scaling: bool = False
    shots: bool = True
    target_stderr: float = 0.01

    def __post_init__(self) -> None:
        if not 0 < self.target_stderr < 1:
            raise ScenarioError(
                f"`--target-stderr` must be > 0 and < 1, got {self.target_stderr:g}"
            )
        if self.target_error is not None and not 0 < self.target_error < float("inf"):
            raise ScenarioError(
                f"`--target-error` must be > 0 and finite, got {self.target_error:g}"
            )


def budget_report(
    scenario: Scenario, request: BudgetRequest, progress: Progress = silent
) -> codesign.BudgetReport:
    """The budget report of the scenario's program on the requested processor."""
    if request.target_error is not None and scenario.compile.strategy == "auto":
        settings = replace(scenario.compile, target_error=request.target_error)
        scenario = replace(scenario, compile=settings)
    processor = scenario_processor(scenario, request.processor)
    compared = [processor_for_spec(s, processor) for s in request.compare]
    check_program_size(program_gates(scenario))
    programs = scenario_programs(scenario, request.processor)
    job = programs.job
    program = programs.mapped(processor, nominal=True)
    budget = codesign.program_budget(program)
    choice = programs.choice(processor)
    trotter_error = codesign.trotter_error(job, programs.trotter()[0])
    advice = scaling = shots = None
    if request.target_error is not None:
        with progress(None, "step advice") as bar:

            def measured(steps: int) -> None:
                bar.set_postfix_str(f"{steps} steps")
                bar.update(1)

            advice = codesign.steps_advice(job, processor, request.target_error, on_step=measured)
    if request.scaling:
        with progress(4 * 12, "scaling") as bar:  # the default 4 graphs × 1..12 nuclei
            scaling = codesign.scaling_table(job, processor, on_step=lambda: bar.update(1))
    if request.shots:
        with progress(None, "shot plan") as bar:
            shots = _shot_plan(
                scenario, programs, processor, budget, request.target_stderr, bar.update
            )
    return codesign.BudgetReport(
        budget=budget,
        strategy=choice.strategy,
        strategy_reason=choice.reason,
        strategies=list(programs.rows(processor)),
        approximation_error=approximation_error(program),
        trotter_error=trotter_error,
        compare=codesign.compare_processors(programs, compared) if compared else None,
        steps_advice=advice,
        scaling=scaling,
        shots=shots,
        warnings=tuple(verdicts.budget_warnings(trotter_error, advice)),
    )


def _shot_plan(
    scenario: Scenario,
    programs: Programs,
    processor: Processor,
    budget: codesign.ProgramBudget,
    stderr: float,
    on_point: Callable[[], None],
) -> codesign.ShotPlan:
    """The shot plan of the budget, from the exact engine and the noisy program with its
    zero-transfer baseline on `processor`."""
    options = engine_options(scenario)
    exact = simulate_program(programs.job.workload, "exact", options, on_point=on_point)
    noisy_program = programs.mapped(processor)
    noisy = simulate_program(noisy_program, "noisy", options, on_point=on_point)
    base = simulate_program(noisy_program, BASELINE_ENGINE, options, on_point=on_point)
    return codesign.shot_plan(exact, noisy, base, budget.gates, processor, stderr)
