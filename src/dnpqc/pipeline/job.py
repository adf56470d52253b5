"""The main job: simulate a scenario with several engines and draw the physics answers."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from ..analysis.codesign import (
    ProcessorRow,
    ProgramBudget,
    compare_processors,
    measured_trotter_error,
    program_budget,
)
from ..analysis.counts import MeasuredCounts
from ..analysis.mitigation import Mitigated, MitigationSettings, mitigate
from ..analysis.verdicts import (
    Comparison,
    best_common_lines,
    compare_to_exact,
    run_warnings,
    saturation_lines,
)
from ..compile.processor import Processor, make_processor, processor_for_spec
from ..compile.program import Program, Workload
from ..compile.strategy import ApproximationError, Programs, StrategyRow
from ..engines import NOISY_ENGINES, EngineOptions, engine_name, simulate_program
from ..engines.noisy import BASELINE_ENGINE
from ..engines.results import MEASURED_ENGINE, Analysis, SweepResult, analyse
from ..engines.shots import readout_confusion
from ..io.scenario import Scenario, dnpqc_version, program_gates, scenario_settings, sweep_work
from ..io.store import ResultsStore
from ..limits import check_program_size, check_work
from ..physics.model import effective_perp_hz, nuclear_frequency_hz
from ..physics.protocols import expected_resonances
from ..text import count_of, format_value
from .sweep import run_engines

#: Another strategy is "cheaper" when it needs at most this fraction of the two-qubit gates per
#: cycle at an approximation error no larger than max(the chosen one's, CHEAPER_ERROR_FLOOR).
CHEAPER_FRACTION = 0.9
CHEAPER_ERROR_FLOOR = 1e-3


def scenario_processor(scenario: Scenario, spec: str | None = None) -> Processor:
    """The processor of a run: `spec` over the scenario's `[processor]` over the defaults."""
    base = scenario.processor
    if spec is not None:
        return processor_for_spec(spec, base)
    return base if base is not None else make_processor({})


def scenario_programs(scenario: Scenario, spec: str | None = None) -> Programs:
    """The scenario's programs, compiled once per processor (default: the run's processor)."""
    return Programs(scenario.compile_job(), scenario_processor(scenario, spec))


def engine_targets(
    scenario: Scenario, engines: tuple[str, ...], programs: Programs | None = None
) -> dict[str, Program | Workload]:
    """What each engine runs: the logical program (trotter), the mapped one (noisy and its
    baseline), or the workload (exact, typical); programs compiled once, from `programs`."""
    programs = programs or scenario_programs(scenario)
    targets: dict[str, Program | Workload] = {}
    for name in engines:
        engine = engine_name(name)
        if engine == "trotter":
            targets[engine] = programs.logical()
        elif engine in NOISY_ENGINES:
            targets[engine] = programs.mapped()
        else:
            targets[engine] = scenario.workload()
    return targets


def engine_options(scenario: Scenario) -> EngineOptions:
    return EngineOptions(scenario.noise, scenario.typical)


def compile_program(scenario: Scenario, processor: Processor | None = None) -> Program:
    """The scenario's logical program (strategy resolved on `processor`, default the run's)."""
    programs = scenario_programs(scenario)
    return programs.logical(processor)


def simulate(
    scenario: Scenario, engine: str = "exact", *, on_point: Callable[[], None] | None = None
) -> SweepResult:
    """Run one engine over the scenario's sweep (compiling and mapping what it needs)."""
    target = engine_targets(scenario, (engine,))[engine_name(engine)]
    return simulate_program(target, engine, engine_options(scenario), on_point=on_point)


def default_processor_note(scenario: Scenario, engines) -> str | None:
    """The line that names the processor of a noisy run without a `[processor]` table."""
    if "noisy" not in engines or scenario.processor is not None:
        return None
    name = make_processor({}).name
    return (
        f"note: no [processor] table, so the noisy engine runs on the default processor {name} "
        "with typical figures; add a [processor] table to choose one"
    )


def check_engines_work(scenario: Scenario, engines, limit: float, what: str) -> int:
    """The work of `engines` over the sweep, refused beyond `limit`; circuit engines also
    need a program of bounded size."""
    if {"trotter", "noisy"} & set(engines):
        check_program_size(program_gates(scenario))
    work = sum(sweep_work(scenario, e) for e in engines)
    check_work(work, limit, what)
    return work


def cheaper_strategies(chosen: StrategyRow, rows: list[StrategyRow]) -> list[StrategyRow]:
    """Rows that cost clearly fewer two-qubit gates than `chosen` at no larger error."""
    ceiling = max(chosen.approximation_error.value, CHEAPER_ERROR_FLOOR)
    return [
        r
        for r in rows
        if r.strategy != chosen.strategy
        and r.two_qubit_per_cycle <= CHEAPER_FRACTION * chosen.two_qubit_per_cycle
        and r.approximation_error.value <= ceiling
    ]


@dataclass(frozen=True)
class RunOutcome:
    """Results of every engine for one scenario, with the compiled program."""

    scenario: Scenario
    results: dict[str, SweepResult]
    program: Program
    budget: ProgramBudget | None = None
    compare: list[ProcessorRow] | None = None
    strategies: tuple[StrategyRow, ...] = ()
    measured: Mitigated | None = None

    @property
    def reference(self) -> SweepResult:
        return self.results.get("exact") or next(iter(self.results.values()))

    def resonances(self) -> dict[str, list[float]]:
        values = self.scenario.sweep.values
        return expected_resonances(
            self.scenario.system,
            self.scenario.protocol,
            self.scenario.sweep.parameter,
            min(values),
            max(values),
        )

    def analysis(self, engine: str) -> Analysis:
        """Peaks, best common value and (with every cycle from the first) saturation."""
        return analyse(self.results[engine])

    def comparison(self, engine: str) -> Comparison:
        """`engine` against the exact reference (see `verdicts.compare_to_exact`): signed P
        minus the zero-transfer baseline of the same noisy program, edge peaks never found."""
        ref, other = self.analysis(self.reference.engine), self.analysis(engine)
        baseline = self.results.get(BASELINE_ENGINE) if engine == "noisy" else None
        subtracted = None
        if engine == MEASURED_ENGINE and self.measured and "baseline" in self.measured.applied:
            subtracted = "the measured baseline program (couplings zero), subtracted in mitigation"
        out = compare_to_exact(
            self.reference,
            self.results[engine],
            baseline=baseline,
            best_common=(ref.best_common.value, other.best_common.value),
            subtracted=subtracted,
        )
        sat = other.saturation
        return replace(out, saturation=sat.mean_saturation if sat is not None else None)

    def comparisons(self) -> list[Comparison]:
        ref = self.reference.engine
        return [
            self.comparison(e)
            for e in self.results
            if e not in (ref, BASELINE_ENGINE) and ref == "exact"
        ]

    def trotter_error(self) -> ApproximationError | None:
        """The program error over every point of the run (with exact and trotter)."""
        if "exact" in self.results and "trotter" in self.results:
            return measured_trotter_error(self.results["exact"], self.results["trotter"])
        return None

    def warnings(self) -> list[str]:
        """What a planner must not miss (`verdicts.run_warnings`), plus unfound noisy peaks."""
        error = self.trotter_error()
        value = error.value if error else None
        out = run_warnings(self.scenario.workload(), self.reference, trotter_error=value)
        out += [c.verdict for c in self.comparisons() if not c.all_found]
        if (
            self.measured is not None
            and "baseline" in self.measured.applied
            and self.measured.notes.get("baseline_kind") != "mixed-nv"
        ):
            out.append(
                "measured: the baseline subtracted is the drift of the uncoupled program over the "
                "program's time; where the program's dynamics carry drift to the reset NV it "
                "overshoots (README 'From program to measured answer'); prefer the mixed-NV "
                "baseline (`compile --baseline mixed-nv`) or compare with --mitigate readout,zne"
            )
        return out

    def compiler(self) -> dict[str, object]:
        """The compiled (logical) program: strategy, settings, layering, gate counts."""
        program, circuit = self.program, self.program.circuit
        out: dict[str, object] = {"strategy": program.strategy, "program": program.describe()}
        if program.choice:
            out["choice"] = program.choice
        if program.plan is not None:
            out.update(
                {
                    "trotter_steps": program.trotter.steps,
                    "trotter_order": program.trotter.order,
                    "weak_every": program.plan.weak_every,
                    **program.plan.layering(),
                }
            )
        else:
            out["programs"] = len(program.circuits)
        out.update(
            {
                "qubits": circuit.num_qubits,
                "gate_counts": {k: int(v) for k, v in circuit.count_ops().items()},
                "depth": circuit.depth(),
            }
        )
        return out

    def cheaper_note(self) -> str | None:
        """A line naming a cheaper strategy on the scenario's processor, if there is one."""
        chosen = [r for r in self.strategies if r.strategy == self.program.strategy]
        if not chosen:
            return None
        better = cheaper_strategies(chosen[0], list(self.strategies))
        if not better:
            return None
        best = min(better, key=lambda r: r.two_qubit_per_cycle)
        return (
            f"  note: strategy {best.strategy!r} would be cheaper here: "
            f"{best.two_qubit_per_cycle:.0f} two-qubit gates per cycle instead of "
            f"{chosen[0].two_qubit_per_cycle:.0f}, approximation error "
            f"{best.approximation_error.value:.2g}, success estimate {best.success_estimate:.3g} "
            f'(set [compile] strategy = "{best.strategy}")'
        )

    def to_json(self) -> dict[str, object]:
        sc = self.scenario
        out: dict[str, object] = {
            "scenario": {
                "name": sc.name,
                "digest": sc.digest,
                "dnpqc_version": dnpqc_version(),
                "settings": scenario_settings(sc),
                "protocol": sc.protocol.kind,
                "parameter": sc.sweep.parameter,
                "field_t": sc.system.field_t,
                "larmor_hz": sc.system.larmor_hz,
                "cycles": sc.cycles,
                "nuclei": [
                    {
                        "label": n.label,
                        "a_par_hz": n.a_par_hz,
                        "a_perp_hz": n.a_perp_hz,
                        "azimuth_deg": n.azimuth_deg,
                        "position_nm": list(n.position_nm) if n.position_nm else None,
                        "nu_tilde_hz": nuclear_frequency_hz(sc.system, j),
                        "a_perp_eff_hz": effective_perp_hz(sc.system, j),
                    }
                    for j, n in enumerate(sc.system.nuclei)
                ],
                "couplings": [
                    {
                        "pair": [sc.system.labels[c.first], sc.system.labels[c.second]],
                        "d_hz": c.d_hz,
                    }
                    for c in sc.system.couplings
                ],
            },
            "expected_resonances": self.resonances(),
            "engines": {name: res.to_dict() for name, res in self.results.items()},
            "analysis": {name: self.analysis(name).to_json() for name in self.results},
            "compiler": self.compiler(),
        }
        if self.trotter_error() is not None:
            out["trotter_error"] = self.trotter_error().to_json()
        if self.comparisons():
            out["comparison"] = [c.to_json() for c in self.comparisons()]
        if self.budget is not None:
            out["budget"] = self.budget_json()
        if self.compare:
            out["compare"] = [r.to_json() for r in self.compare]
        if self.measured is not None:
            out["measured"] = self.measured_json()
        out["warnings"] = self.warnings()
        return out

    def budget_json(self) -> dict[str, object]:
        """The budget of the program on the scenario's processor, with every strategy's row
        and the run's Trotter error."""
        out = {
            **self.budget.to_json(),
            "strategy": self.budget.strategy,
            "strategies": [r.to_json() for r in self.strategies],
        }
        if self.trotter_error() is not None:
            out["trotter_error"] = self.trotter_error().to_json()
        return out

    def measured_json(self) -> dict[str, object]:
        """What was measured and done to it: mitigation, raw values, the error against exact."""
        out = self.measured.to_json()
        res = self.results[MEASURED_ENGINE]
        out["cycles_measured"] = list(range(res.first_cycle, res.first_cycle + res.cycles))
        if "exact" in self.results:
            exact = self.results["exact"].polarization[:, res.first_cycle - 1 :, :]
            out["max_abs_error_vs_exact"] = {
                "raw": float(np.max(np.abs(self.measured.raw.value - exact))),
                "mitigated": float(np.max(np.abs(res.polarization - exact))),
            }
        return out

    def measured_line(self) -> str:
        """One summary line: the mitigation applied and the error against exact."""
        applied = ", ".join(self.measured.applied) or "none"
        line = f"  measured: mitigation {applied}"
        errors = self.measured_json().get("max_abs_error_vs_exact")
        if errors:
            line += (
                f"; max |P - P_exact| {errors['raw']:.3f} raw, {errors['mitigated']:.3f} "
                "mitigated (an estimate with an error bar, not a measurement of the physics)"
            )
        return line

    def summary_lines(self) -> list[str]:
        """A short human summary for the terminal."""
        sc = self.scenario
        par = sc.sweep.parameter
        res = self.reference
        ana = self.analysis(res.engine)
        lines = [
            f"scenario {sc.name!r}: {sc.protocol.kind}, "
            f"{count_of(sc.system.num_nuclei, 'nucleus', 'nuclei')}, "
            f"{count_of(len(sc.sweep.values), 'point')} of {par}, "
            f"{count_of(sc.cycles, 'cycle')} ({res.engine} engine)",
        ]
        expected = self.resonances()
        for j, (label, peak) in enumerate(ana.peaks.items()):
            guide = ", ".join(format_value(par, v) for v in expected[label]) or "-"
            spread = ""
            if res.stderr is not None:  # sampling engines: the standard error at the peak
                i = int(np.argmin(np.abs(res.values - peak.value)))
                spread = f" ± {res.stderr[i, -1, j]:.3f}"
            lines.append(
                f"  {label:>6}: peak at {format_value(par, peak.value)}, "
                f"|P| = {peak.polarization:.3f}{spread} (a-priori: {guide})"
            )
        lines += best_common_lines(par, ana.best_common)
        if ana.saturation is not None:
            lines += saturation_lines(ana.saturation)
        lines.append(f"  program: {self.program.describe()}")
        if self.trotter_error() is not None:
            err = self.trotter_error()
            lines.append(
                f"  program error (max |P_program - P_exact|, {err.points} points): {err.value:.2e}"
            )
        for comp in self.comparisons():
            if comp.engine == "trotter":
                continue
            lines.append(f"  {comp.verdict}")
            for label, p in comp.per_nucleus.items():
                lines.append(
                    f"  {label:>6}: {comp.engine} peak {format_value(par, p.peak)} "
                    f"(shift {format_value(par, p.shift)}), contrast x{p.contrast_ratio:.2f}"
                )
            best = format_value(par, comp.best_common)
            sat = comp.saturation
            lines.append(
                f"  best common {par} ({comp.engine}): {best}"
                + (f"; saturation {sat:.3f}" if sat is not None else "")
            )
            if comp.engine == MEASURED_ENGINE and self.measured is not None:
                lines.append(self.measured_line())
        if self.budget is not None:
            gates = self.budget.gates
            per, total = gates.per_cycle, gates.total
            lines.append(
                f"  on {gates.processor.name}: {per.two_qubit:.0f} 2q gates and "
                f"{per.swaps:.0f} SWAPs per cycle, {total.duration_s * 1e6:.4g} µs in all, "
                f"success estimate {total.success_estimate:.3g}"
            )
        note = self.cheaper_note()
        if note:
            lines.append(note)
        warnings = self.warnings()
        if warnings:
            lines.append(f"  warnings ({len(warnings)}):")
            lines += [f"  ! {w}" for w in warnings]
        return lines


def measured_result(
    scenario: Scenario, counts: MeasuredCounts, settings: MitigationSettings
) -> tuple[SweepResult, Mitigated]:
    """The `measured` engine: polarizations of the counts, mitigated as `settings` ask (the
    readout inverted with the file's confusion matrix, else the processor's readout figure)."""
    work = scenario.workload()
    n = work.system.num_nuclei
    confusion = counts.confusion
    if confusion is None:
        confusion = readout_confusion(scenario_processor(scenario).error_readout, n)
    done = mitigate(counts, settings, confusion)
    first = 1 if counts.registers == work.cycles else work.cycles
    values = np.asarray(work.values)
    est = done.estimate
    result = SweepResult(
        MEASURED_ENGINE, work.parameter, values, work.system.labels, est.value, est.stderr, first
    )
    return result, done


def run_scenario(
    scenario: Scenario,
    engines: tuple[str, ...] = ("exact", "trotter"),
    *,
    store: ResultsStore | None = None,
    workers: int = 1,
    scheduler: str | None = None,
    on_point: Callable[[str, int], None] | None = None,
    measured: tuple[MeasuredCounts, MitigationSettings] | None = None,
) -> RunOutcome:
    """Simulate `scenario` with each engine (points missing from `store` only), then analyse.

    Every circuit engine runs the program compiled once for the scenario's processor (the
    default processor without a `[processor]` table). `on_point(engine, k)` reports k more
    finished points. `measured`: counts of a hardware run (and the mitigation to apply), added
    as the engine `measured`.
    """
    programs = scenario_programs(scenario)
    results = run_engines(
        engine_targets(scenario, engines, programs),
        engine_options(scenario),
        store=store,
        workers=workers,
        scheduler=scheduler,
        on_point=on_point,
    )
    budget = compare = None
    rows: tuple[StrategyRow, ...] = ()
    if scenario.processor is not None:
        budget = program_budget(programs.mapped(nominal=True))
        rows = tuple(programs.rows())
        others = [processor_for_spec(s, scenario.processor) for s in scenario.processor.compare]
        if others:
            compare = compare_processors(programs, [scenario.processor, *others])
    mitigated = None
    if measured is not None:
        results[MEASURED_ENGINE], mitigated = measured_result(scenario, *measured)
    return RunOutcome(scenario, results, programs.logical(), budget, compare, rows, mitigated)
