"""The main job: simulate a scenario with several engines and draw the physics answers."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from .codesign import compare_processors, program_budget
from .engines import simulate
from .engines.circuit import Program, compile_program
from .model import effective_perp_hz, nuclear_frequency_hz
from .processor import processor_for_spec
from .protocols import expected_resonances
from .report import format_value
from .results import SweepResult, best_common, max_difference, peaks, saturation
from .scenario import Scenario


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

    def to_json(self) -> dict[str, object]:
        sc = self.scenario
        circuit = self.program.circuit
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
        if "exact" in self.results and "trotter" in self.results:
            out["trotter_error"] = max_difference(self.results["exact"], self.results["trotter"])
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
        if "exact" in self.results and "trotter" in self.results:
            err = max_difference(self.results["exact"], self.results["trotter"])
            lines.append(f"  Trotter error (max |P_trotter - P_exact|): {err:.2e}")
        if self.budget is not None:
            per, total = self.budget["per_cycle"], self.budget["total"]
            lines.append(
                f"  on {self.budget['processor']['name']}: {per['two_qubit']:.0f} 2q gates and "
                f"{per['swaps']:.0f} SWAPs per cycle, {total['duration_s'] * 1e6:.4g} µs in all, "
                f"success estimate {total['success_estimate']:.3g}"
            )
        return lines


def run_scenario(
    scenario: Scenario,
    engines: tuple[str, ...] = ("exact", "trotter"),
    *,
    on_point: Callable[[str], None] | None = None,
) -> RunOutcome:
    """Simulate `scenario` with each engine in turn; `on_point(engine)` ticks after each point."""
    results = {}
    for engine in engines:
        tick = (lambda e=engine: on_point(e)) if on_point else None
        results[engine] = simulate(scenario, engine, on_point=tick)
    budget = compare = None
    if scenario.processor is not None:
        budget = program_budget(scenario, scenario.processor)
        others = [processor_for_spec(s, scenario.processor) for s in scenario.processor.compare]
        if others:
            compare = compare_processors(scenario, [scenario.processor, *others])
    return RunOutcome(scenario, results, compile_program(scenario), budget, compare)
