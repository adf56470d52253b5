"""The main job: simulate a scenario with several engines and draw the physics answers."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from .codesign import compare_processors, measured_trotter_error, program_budget
from .engines.circuit import Program, compile_program
from .engines.noisy import BASELINE_ENGINE
from .model import effective_perp_hz, nuclear_frequency_hz
from .processor import processor_for_spec
from .protocols import expected_resonances
from .report import count_of, format_value
from .results import SweepResult, best_common, peaks, saturation
from .scenario import Scenario, dnpqc_version, scenario_settings
from .store import ResultsStore
from .sweep import run_engines
from .verdicts import best_common_lines, compare_to_exact, run_warnings, saturation_lines


@dataclass(frozen=True)
class RunOutcome:
    """Results of every engine for one scenario, with the compiled program."""

    scenario: Scenario
    results: dict[str, SweepResult]
    program: Program
    budget: dict[str, object] | None = None
    compare: list[dict[str, object]] | None = None

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
        """`engine` against the exact reference (see `verdicts.compare_to_exact`): signed P
        minus the zero-transfer baseline of the same noisy program, edge peaks never found."""
        ref, other = self.analysis(self.reference.engine), self.analysis(engine)
        baseline = self.results.get(BASELINE_ENGINE) if engine == "noisy" else None
        out = compare_to_exact(
            self.reference,
            self.results[engine],
            baseline=baseline,
            best_common=(ref["best_common"]["value"], other["best_common"]["value"]),
        )
        out["saturation"] = other["saturation"]["mean_saturation"]
        return out

    def comparisons(self) -> list[dict[str, object]]:
        ref = self.reference.engine
        return [
            self.comparison(e)
            for e in self.results
            if e not in (ref, BASELINE_ENGINE) and ref == "exact"
        ]

    def trotter_error(self) -> dict[str, object] | None:
        """{value, method, points} over every point of the run (with exact and trotter)."""
        if "exact" in self.results and "trotter" in self.results:
            return measured_trotter_error(self.results["exact"], self.results["trotter"])
        return None

    def warnings(self) -> list[str]:
        """What a planner must not miss (`verdicts.run_warnings`), plus unfound noisy peaks."""
        error = self.trotter_error()
        value = error["value"] if error else None
        out = run_warnings(self.scenario, self.reference, trotter_error=value)
        out += [c["verdict"] for c in self.comparisons() if not c["all_found"]]
        return out

    def to_json(self) -> dict[str, object]:
        sc = self.scenario
        circuit = self.program.circuit
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
            "analysis": {name: self.analysis(name) for name in self.results},
            "compiler": {
                "trotter_steps": sc.trotter.steps,
                "trotter_order": sc.trotter.order,
                **self.program.plan.layering(),
                "qubits": circuit.num_qubits,
                "gate_counts": {k: int(v) for k, v in circuit.count_ops().items()},
                "depth": circuit.depth(),
            },
        }
        if self.trotter_error() is not None:
            out["trotter_error"] = self.trotter_error()
        if self.comparisons():
            out["comparison"] = self.comparisons()
        if self.budget is not None:
            out["budget"] = self.budget
            if self.trotter_error() is not None:
                out["budget"] = {**self.budget, "trotter_error": self.trotter_error()}
        if self.compare:
            out["compare"] = self.compare
        out["warnings"] = self.warnings()
        return out

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
        for j, (label, peak) in enumerate(ana["peaks"].items()):
            guide = ", ".join(format_value(par, v) for v in expected[label]) or "-"
            spread = ""
            if res.stderr is not None:  # sampling engines: the standard error at the peak
                i = int(np.argmin(np.abs(res.values - peak["value"])))
                spread = f" ± {res.stderr[i, -1, j]:.3f}"
            lines.append(
                f"  {label:>6}: peak at {format_value(par, peak['value'])}, "
                f"|P| = {peak['polarization']:.3f}{spread} (a-priori: {guide})"
            )
        lines += best_common_lines(par, ana["best_common"])
        lines += saturation_lines(ana["saturation"])
        if self.trotter_error() is not None:
            err = self.trotter_error()
            lines.append(
                f"  Trotter error (max |P_trotter - P_exact|, {err['points']} points): "
                f"{err['value']:.2e}"
            )
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
        warnings = self.warnings()
        if warnings:
            lines.append(f"  warnings ({len(warnings)}):")
            lines += [f"  ! {w}" for w in warnings]
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

    `on_point(engine, k)` reports k more finished points.
    """
    results = run_engines(
        scenario, engines, store=store, workers=workers, scheduler=scheduler, on_point=on_point
    )
    budget = compare = None
    if scenario.processor is not None:
        budget = program_budget(scenario, scenario.processor)
        others = [processor_for_spec(s, scenario.processor) for s in scenario.processor.compare]
        if others:
            compare = compare_processors(scenario, [scenario.processor, *others])
    return RunOutcome(scenario, results, compile_program(scenario), budget, compare)
