"""Co-design views: Trotter error, Trotter-step advice, processors side by side, scaling.

Trotter error is measured, where the exact engine fits (NV + up to `EXACT_LIMIT_NUCLEI` nuclei),
as max |P_trotter - P_exact| over evenly spaced sweep points. Beyond that it is bounded with the
commutator bounds of Childs et al. (Phys. Rev. X 11, 011020, 2021) on each cycle's propagator:

    order 1: ‖U - S1‖ ≤ (T²/2r)·Σ_{a<b} ‖[H_a, H_b]‖
    order 2: ‖U - S2‖ ≤ (T³/r²)·Σ_b (‖S_b‖/6 + ‖H_b‖/12)·‖[S_b, H_b]‖,   S_b = Σ_{c>b} H_c

(angular units 2π·h, ‖[h_a P_a, h_b P_b]‖ = 2|h_a h_b| for anticommuting Paulis, 0 otherwise),
and a cycle-propagator error ε changes a polarization by at most 2ε per cycle.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import replace

import numpy as np

from .budget import gate_budget
from .engines.circuit import mapped_program, simulate_trotter
from .engines.exact import simulate_exact
from .model import Nucleus, SpinSystem
from .processor import Processor, coupling_graph
from .protocols import Evolve
from .results import SweepResult
from .scenario import Scenario, Sweep
from .trotter import pauli_terms

EXACT_LIMIT_NUCLEI = 10
ERROR_POINTS = 5


def _subsweep(scenario: Scenario, points: int) -> Scenario:
    values = scenario.sweep.values
    if len(values) > points:
        idx = np.unique(np.linspace(0, len(values) - 1, points).round().astype(int))
        values = tuple(values[i] for i in idx)
    return replace(scenario, sweep=Sweep(scenario.sweep.parameter, values))


def with_steps(scenario: Scenario, steps: int) -> Scenario:
    return replace(scenario, trotter=replace(scenario.trotter, steps=steps))


def _anticommute(a: tuple[str, tuple[int, ...]], b: tuple[str, tuple[int, ...]]) -> bool:
    pa = dict(zip(a[1], a[0], strict=True))
    pb = dict(zip(b[1], b[0], strict=True))
    clashes = sum(1 for q in pa.keys() & pb.keys() if pa[q] != pb[q])
    return clashes % 2 == 1


def commutator_bound(scenario: Scenario) -> float:
    """Bound on max |ΔP| from the Trotter splitting (see module docstring), all points."""
    worst = 0.0
    for x in scenario.sweep.values:
        eps = 0.0
        for seg in scenario.schedule().segments():
            if isinstance(seg, Evolve):
                eps += _segment_bound(scenario, seg, x)
        worst = max(worst, eps)
    return min(2.0, 2.0 * scenario.cycles * worst)


def _segment_bound(scenario: Scenario, seg: Evolve, x: float) -> float:
    terms = pauli_terms(scenario.system, seg, "x")
    keys = list(terms)
    h = [2 * math.pi * abs(terms[k].at({"x": x})) for k in keys]
    t, r = seg.duration_s.at(x), seg.steps
    if scenario.trotter.order == 1:
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


def measured_trotter_error(exact: SweepResult, circuit: SweepResult) -> dict[str, object]:
    """The Trotter error record {value, method, points}: max |P_circuit - P_exact| over every
    point, cycle and nucleus the two results share (the one definition used everywhere)."""
    return {
        "value": float(np.max(np.abs(exact.polarization - circuit.polarization))),
        "method": "exact engine vs noiseless circuit",
        "points": len(exact.values),
    }


def trotter_error(scenario: Scenario, points: int = ERROR_POINTS) -> dict[str, object]:
    """Trotter error of the swept polarizations: measured when small enough, else bounded."""
    if scenario.system.num_nuclei <= EXACT_LIMIT_NUCLEI:
        sub = _subsweep(scenario, points)
        return measured_trotter_error(simulate_exact(sub), simulate_trotter(sub))
    return {
        "value": commutator_bound(scenario),
        "method": "commutator bound (Childs et al. 2021), 2·cycles·‖ΔU‖",
        "points": len(scenario.sweep.values),
    }


def program_budget(scenario: Scenario, processor: Processor) -> dict[str, object]:
    """Map the scenario's (nominal) program onto `processor` and return its gate budget."""
    return gate_budget(mapped_program(scenario, processor, imperfections=False))


def steps_advice(
    scenario: Scenario,
    processor: Processor,
    target_error: float,
    max_steps: int = 1024,
    on_step: Callable[[int], None] | None = None,
) -> dict[str, object]:
    """Smallest steps per cycle with Trotter error ≤ target, its cost, and the optimum steps.

    Candidates double from 2; the crossing is refined by bisection and checked at 1.1× and 1.25×
    the result (else the ladder value is kept). The optimum minimises the
    total error estimate `trotter_error + (1 - success_estimate)` over the doubling ladder.
    `on_step(steps)` reports each step count whose Trotter error has been measured.
    """
    rows = []
    errors: dict[int, float] = {}

    def error(steps: int) -> float:
        if steps not in errors:
            errors[steps] = float(trotter_error(with_steps(scenario, steps))["value"])
            if on_step is not None:
                on_step(steps)
        return errors[steps]

    steps = 2
    while steps <= max_steps:
        budget = program_budget(with_steps(scenario, steps), processor)
        rows.append(
            {
                "steps": steps,
                "trotter_error": error(steps),
                "two_qubit_per_cycle": budget["per_cycle"]["two_qubit"],
                "success_estimate": budget["total"]["success_estimate"],
            }
        )
        if error(steps) <= target_error:
            break
        steps *= 2
    passing = [r["steps"] for r in rows if r["trotter_error"] <= target_error]
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
        budget = program_budget(with_steps(scenario, hi), processor)
        smallest = {
            "steps": hi,
            "trotter_error": error(hi),
            "two_qubit_per_cycle": budget["per_cycle"]["two_qubit"],
            "success_estimate": budget["total"]["success_estimate"],
        }
    for r in rows:
        r["total_error"] = r["trotter_error"] + 1.0 - r["success_estimate"]
    optimum = min(rows, key=lambda r: r["total_error"])
    return {"target_error": target_error, "smallest": smallest, "ladder": rows, "optimum": optimum}


def compare_processors(scenario: Scenario, processors: list[Processor]) -> list[dict[str, object]]:
    """The same program on several processors: per-cycle and total figures side by side."""
    rows = []
    for proc in processors:
        b = program_budget(scenario, proc)
        rows.append(
            {
                "processor": proc.name,
                "layout": b["layout"]["method"],
                "per_cycle": b["per_cycle"],
                "total": b["total"],
            }
        )
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


def scaling_table(
    scenario: Scenario,
    processor: Processor,
    kinds: tuple[str, ...] = ("line", "grid", "heavy-hex", "star"),
    max_nuclei: int = 12,
    probe_steps: int = 4,
    on_step: Callable[[], None] | None = None,
) -> dict[str, object]:
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
            probe = replace(
                scenario,
                system=SpinSystem(scenario.system.field_t, nuclei),
                cycles=1,
                sweep=Sweep(scenario.sweep.parameter, scenario.sweep.values[:1]),
            )
            budget = program_budget(
                with_steps(probe, probe_steps), processor.with_topology(_graph_for(kind, n + 1))
            )
            counts.append(budget["per_cycle"]["two_qubit"] * scenario.trotter.steps / probe_steps)
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
    return {
        "nuclei": n_values,
        "two_qubit_per_cycle": table,
        "growth_exponent": growth,
        "per_added_nucleus": increment,
        "steps_per_cycle": scenario.trotter.steps,
    }
