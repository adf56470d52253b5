"""The main job: simulate a scenario with several engines and draw the physics answers."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from .codesign import compare_processors, program_budget
from .engines import EngineOptions, engine_name, simulate_program
from .model import effective_perp_hz, nuclear_frequency_hz
from .processor import Processor, make_processor, processor_for_spec
from .program import Program, Workload
from .protocols import expected_resonances
from .report import format_value
from .results import SweepResult, best_common, max_difference, peaks, saturation
from .scenario import Scenario
from .store import ResultsStore
from .strategy import Programs, StrategyRow
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
    """What each engine runs: the logical program (trotter), the mapped one (noisy), or the
    workload (exact, typical); programs compiled once, from `programs`."""
    programs = programs or scenario_programs(scenario)
    targets: dict[str, Program | Workload] = {}
    for name in engines:
        engine = engine_name(name)
        if engine == "trotter":
            targets[engine] = programs.logical()
        elif engine == "noisy":
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
    budget: dict[str, object] | None = None
    compare: list[dict[str, object]] | None = None
    strategies: tuple[StrategyRow, ...] = ()

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

    def analysis(self, engine: str) -> dict[str, object]:
        res = self.results[engine]
        common = best_common(res)
        return {
            "peaks": peaks(res),
            "best_common": common,
            "saturation": saturation(res, common["index"]),
        }

    def comparison(self, engine: str) -> dict[str, object]:
        """`engine` against the exact reference: peak shifts, contrast, best value, verdict.

        Peaks are taken on the baseline-subtracted signal |P - median| of both engines, so the
        relaxation bias of a noisy processor does not count as a shift. A peak is found when it
        lies within one grid step of the exact peak; contrast is the ratio of the peak heights.
        """
        ref, other = self.analysis(self.reference.engine), self.analysis(engine)
        ref_peaks = peaks(self.reference, baseline=True)
        other_peaks = peaks(self.results[engine], baseline=True)
        values = self.scenario.sweep.values
        step = abs(values[1] - values[0]) if len(values) > 1 else 0.0
        per: dict[str, dict[str, float | bool]] = {}
        for label, peak in ref_peaks.items():
            mine = other_peaks[label]
            shift = mine["value"] - peak["value"]
            per[label] = {
                "peak": mine["value"],
                "shift": shift,
                "contrast_ratio": mine["polarization"] / peak["polarization"]
                if peak["polarization"] > 0
                else float("nan"),
                "found": abs(shift) <= step,
            }
        found = sum(p["found"] for p in per.values())
        par = self.scenario.sweep.parameter
        verdict = (
            f"{engine}: {found} of {len(per)} peaks within the sweep resolution "
            f"({format_value(par, step)}) of the exact peaks"
        )
        return {
            "engine": engine,
            "resolution": step,
            "per_nucleus": per,
            "best_common": other["best_common"]["value"],
            "best_common_shift": other["best_common"]["value"] - ref["best_common"]["value"],
            "saturation": other["saturation"]["mean_saturation"],
            "all_found": found == len(per),
            "verdict": verdict,
        }

    def comparisons(self) -> list[dict[str, object]]:
        ref = self.reference.engine
        return [self.comparison(e) for e in self.results if e != ref and ref == "exact"]

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
            "analysis": {name: self.analysis(name) for name in self.results},
            "compiler": self.compiler(),
        }
        if "exact" in self.results and "trotter" in self.results:
            out["trotter_error"] = max_difference(self.results["exact"], self.results["trotter"])
        if self.comparisons():
            out["comparison"] = self.comparisons()
        if self.budget is not None:
            out["budget"] = self.budget
        if self.compare:
            out["compare"] = self.compare
        return out

    def summary_lines(self) -> list[str]:
        """A short human summary for the terminal."""
        sc = self.scenario
        par = sc.sweep.parameter
        res = self.reference
        ana = self.analysis(res.engine)
        lines = [
            f"scenario {sc.name!r}: {sc.protocol.kind}, {sc.system.num_nuclei} nuclei, "
            f"{len(sc.sweep.values)} points of {par}, {sc.cycles} cycles ({res.engine} engine)",
        ]
        expected = self.resonances()
        for label, peak in ana["peaks"].items():
            guide = ", ".join(format_value(par, v) for v in expected[label]) or "-"
            lines.append(
                f"  {label:>6}: peak at {format_value(par, peak['value'])}, "
                f"|P| = {peak['polarization']:.3f} (a-priori: {guide})"
            )
        common = ana["best_common"]
        lines.append(
            f"  best common {par}: {format_value(par, common['value'])} "
            f"(mean |P| {common['mean_polarization']:.3f}, worst {common['min_polarization']:.3f})"
        )
        sat = ana["saturation"]
        note = " (extrapolated beyond the run)" if sat["extrapolated"] else ""
        lines.append(
            f"  saturation there: mean |P| -> {sat['mean_saturation']:.3f}; "
            f"{sat['cycles']} cycles reach {sat['fraction']:.0%} of it{note}"
        )
        lines.append(f"  program: {self.program.describe()}")
        if "exact" in self.results and "trotter" in self.results:
            err = max_difference(self.results["exact"], self.results["trotter"])
            lines.append(f"  program error (max |P_program - P_exact|): {err:.2e}")
        for comp in self.comparisons():
            if comp["engine"] == "trotter":
                continue
            lines.append(f"  {comp['verdict']}")
            for label, p in comp["per_nucleus"].items():
                lines.append(
                    f"  {label:>6}: {comp['engine']} peak {format_value(par, p['peak'])} "
                    f"(shift {format_value(par, p['shift'])}), contrast x{p['contrast_ratio']:.2f}"
                )
            best = format_value(par, comp["best_common"])
            lines.append(
                f"  best common {par} ({comp['engine']}): {best}; "
                f"saturation {comp['saturation']:.3f}"
            )
        if self.budget is not None:
            per, total = self.budget["per_cycle"], self.budget["total"]
            lines.append(
                f"  on {self.budget['processor']['name']}: {per['two_qubit']:.0f} 2q gates and "
                f"{per['swaps']:.0f} SWAPs per cycle, {total['duration_s'] * 1e6:.4g} µs in all, "
                f"success estimate {total['success_estimate']:.3g}"
            )
        note = self.cheaper_note()
        if note:
            lines.append(note)
        return lines


def run_scenario(
    scenario: Scenario,
    engines: tuple[str, ...] = ("exact", "trotter"),
    *,
    store: ResultsStore | None = None,
    workers: int = 1,
    scheduler: str | None = None,
    on_point: Callable[[str, int], None] | None = None,
) -> RunOutcome:
    """Simulate `scenario` with each engine (points missing from `store` only), then analyse.

    Every circuit engine runs the program compiled once for the scenario's processor (the
    default processor without a `[processor]` table). `on_point(engine, k)` reports k more
    finished points.
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
        budget["strategy"] = programs.choice().strategy
        budget["strategies"] = [r.to_json() for r in rows]
        others = [processor_for_spec(s, scenario.processor) for s in scenario.processor.compare]
        if others:
            compare = compare_processors(programs, [scenario.processor, *others])
    return RunOutcome(scenario, results, programs.logical(), budget, compare, rows)
