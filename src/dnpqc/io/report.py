"""Reports: the CSV text, the plots and the terminal summary of a run (files: `output`).

User text (nucleus labels) is drawn as plain text, never as matplotlib math (`$...$`), and a
label in a CSV cell never starts a spreadsheet formula.
"""

from __future__ import annotations

import csv
import functools
import io

import numpy as np

from ..analysis.codesign import (
    DETECTION_SIGMAS,
    BudgetReport,
    ProcessorRow,
    ScalingTable,
    ShotPlan,
    StepsAdvice,
)
from ..compile.strategy import StrategyRow
from ..engines.results import MEASURED_ENGINE, SweepResult
from ..text import format_value
from .output import spreadsheet_cell

_UNITS = {"_hz": ("kHz", 1e-3), "_s": ("µs", 1e6)}


def axis_unit(parameter: str) -> tuple[str, float]:
    """Display unit and scale of a swept key: Hz shown in kHz, seconds in µs."""
    for suffix, unit in _UNITS.items():
        if parameter.endswith(suffix):
            return unit
    return "", 1.0


#: Readable names of the swept keys for axis labels (cyclic frequencies as Ω/2π etc.).
_SYMBOLS = {
    "rabi_hz": "Ω/2π",
    "detuning_hz": "Δ/2π",
    "tau_s": "τ",
    "interaction_time_s": "T",
}


def axis_label(parameter: str) -> str:
    """Axis label of a swept key, e.g. "Ω/2π (kHz)" for rabi_hz, "τ (µs)" for tau_s."""
    unit, _ = axis_unit(parameter)
    name = _SYMBOLS.get(parameter, parameter)
    return f"{name} ({unit})" if unit else name


def sweep_csv(results: list[SweepResult]) -> str:
    """Long-format CSV: engine, swept value, cycle (1-based), nucleus, polarization, and the
    standard error of sampling engines (empty for the deterministic ones)."""
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(["engine", results[0].parameter, "cycle", "nucleus", "polarization", "stderr"])
    for res in results:
        for i, value in enumerate(res.values):
            for c in range(res.cycles):
                for j, label in enumerate(res.nuclei):
                    writer.writerow(
                        [
                            res.engine,
                            repr(float(value)),
                            res.first_cycle + c,
                            spreadsheet_cell(label),
                            f"{res.polarization[i, c, j]:.12g}",
                            "" if res.stderr is None else f"{res.stderr[i, c, j]:.6g}",
                        ]
                    )
    return buf.getvalue()


def _pyplot():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def _plain_text(draw):
    """Draw with math text off, so a `$` in a label is a dollar sign, not TeX."""

    @functools.wraps(draw)
    def wrapper(*args, **kwargs):
        import matplotlib

        with matplotlib.rc_context({"text.parse_math": False, "text.usetex": False}):
            return draw(*args, **kwargs)

    return wrapper


@_plain_text
def spectrum_figure(result: SweepResult, resonances: dict[str, list[float]]):
    """P_j vs the swept value, one panel per nucleus, one line per cycle, a-priori lines dashed."""
    plt = _pyplot()
    _, scale = axis_unit(result.parameter)
    n = len(result.nuclei)
    fig, axes = plt.subplots(n, 1, figsize=(8, 1.9 * n + 0.8), sharex=True, squeeze=False)
    colours = plt.cm.viridis(np.linspace(0.1, 0.9, result.cycles))
    x = result.values * scale
    for j, (ax, label) in enumerate(zip(axes[:, 0], result.nuclei, strict=True)):
        for c in range(result.cycles):
            y = result.polarization[:, c, j]
            ax.plot(x, y, color=colours[c], lw=1.2, label=f"cycle {c + 1}" if j == 0 else None)
            if result.stderr is not None:  # sampling engines: ± one standard error
                err = result.stderr[:, c, j]
                ax.fill_between(x, y - err, y + err, color=colours[c], alpha=0.2, lw=0)
        for k, v in enumerate(resonances.get(label, [])):
            ax.axvline(
                v * scale,
                color="tab:red",
                ls="--",
                lw=0.9,
                label="a-priori resonance" if j == 0 and k == 0 else None,
            )
        ax.set_ylabel(f"P({label})")
        ax.axhline(0, color="0.7", lw=0.6)
    axes[-1, 0].set_xlabel(axis_label(result.parameter))
    fig.suptitle(
        f"Nuclear polarization vs {_SYMBOLS.get(result.parameter, result.parameter)} "
        f"({result.engine} engine)"
    )
    fig.tight_layout(rect=(0, 0, 0.76, 0.96))
    # beside the panels, below the title: the legend covers neither
    fig.legend(loc="upper left", bbox_to_anchor=(0.77, 0.93), fontsize=8)
    return fig


ENGINE_STYLES = {"exact": "-", "trotter": ":", "noisy": "--"}


@_plain_text
def buildup_figure(
    results: list[SweepResult], point: int, fits: dict[str, dict[str, dict[str, float]]]
):
    """Signed P_j vs cycle at sweep point `point` for each engine (exact solid, noisy dashed),
    with the fitted saturation curves faint, signed like the last cycle (the fit is of |P|);
    `fits[engine][label]` as from `results.saturation`. A noisy nucleus whose sign differs
    from the exact one shows as such."""
    from matplotlib.ticker import MaxNLocator

    plt = _pyplot()
    fig, ax = plt.subplots(figsize=(8.0, 4.2))
    result = results[0]
    fine = np.linspace(0, result.cycles, 200)
    for res in results:
        style = ENGINE_STYLES.get(res.engine, "-.")
        cycles = np.arange(res.first_cycle, res.first_cycle + res.cycles)
        for j, label in enumerate(res.nuclei):
            fit = fits.get(res.engine, {}).get(label)
            curve = res.polarization[point, :, j]
            sign = 1.0 if curve[-1] >= 0 else -1.0
            ax.errorbar(
                cycles,
                curve,
                yerr=None if res.stderr is None else res.stderr[point, :, j],
                fmt=style,
                marker="o",
                ms=3,
                capsize=2,
                color=f"C{j}",
                label=f"{label} {res.engine}" + (f" (|P|sat {fit.saturation:.2f})" if fit else ""),
            )
            if fit is None:
                continue
            ax.plot(
                fine,
                sign * fit.saturation * (1 - (1 - fit.rate_per_cycle) ** fine),
                color=f"C{j}",
                lw=0.6,
                alpha=0.5,
            )
    ax.axhline(0.0, color="0.6", lw=0.5)
    ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    ax.set_xlabel("cycle")
    ax.set_ylabel("P (signed)")
    ax.set_ylim(-1.05, 1.05)
    ax.set_title(
        f"Build-up at {_SYMBOLS.get(result.parameter, result.parameter)} = "
        f"{format_value(result.parameter, result.values[point])}"
    )
    ax.legend(fontsize=8, loc="upper left", bbox_to_anchor=(1.01, 1.0), borderaxespad=0.0)
    fig.tight_layout()
    return fig


@_plain_text
def comparison_figure(results: list[SweepResult], cycle: int = -1):
    """Final-cycle spectra of several engines: exact solid, trotter dotted, noisy dashed."""
    plt = _pyplot()
    _, scale = axis_unit(results[0].parameter)
    fig, ax = plt.subplots(figsize=(7, 4))
    for res in results:
        style = ENGINE_STYLES.get(res.engine, "-.")
        for j, label in enumerate(res.nuclei):
            x, y = res.values * scale, res.polarization[:, cycle, j]
            if res.engine == MEASURED_ENGINE:  # data: points with ± one standard error
                err = res.stderr[:, cycle, j]
                ax.errorbar(
                    x,
                    y,
                    yerr=err,
                    fmt="o",
                    ms=3,
                    capsize=2,
                    color=f"C{j}",
                    label=f"{label} ({res.engine})",
                )
                continue
            ax.plot(x, y, style, color=f"C{j}", label=f"{label} ({res.engine})")
            if res.stderr is not None:
                err = res.stderr[:, cycle, j]
                ax.fill_between(x, y - err, y + err, color=f"C{j}", alpha=0.15, lw=0)
    ax.set_xlabel(axis_label(results[0].parameter))
    ax.set_ylabel(f"P after cycle {results[0].cycles if cycle == -1 else cycle + 1}")
    ax.legend(fontsize=7, ncol=2)
    ax.set_title("Engines compared")
    fig.tight_layout()
    return fig


_BUDGET_ROWS = (
    ("1q gates", "one_qubit", "{:.0f}"),
    ("virtual Z", "virtual_z", "{:.0f}"),
    ("2q gates", "two_qubit", "{:.0f}"),
    ("SWAPs", "swaps", "{:.0f}"),
    ("resets", "resets", "{:.0f}"),
    ("measurements", "measurements", "{:.0f}"),
    ("depth", "depth", "{:.0f}"),
    ("2q depth", "two_qubit_depth", "{:.0f}"),
    ("duration [µs]", "duration_s", "{:.5g}"),
    ("success estimate", "success_estimate", "{:.3g}"),
)


def _table(header: list[str], rows: list[list[str]]) -> list[str]:
    widths = [max(len(r[i]) for r in [header, *rows]) for i in range(len(header))]
    fmt = "  ".join(f"{{:<{widths[0]}}}" if i == 0 else f"{{:>{w}}}" for i, w in enumerate(widths))
    return [fmt.format(*header), *(fmt.format(*r) for r in rows)]


def _cell(key: str, value: float, pattern: str) -> str:
    return pattern.format(value * 1e6 if key == "duration_s" else value)


def budget_lines(plan: BudgetReport) -> list[str]:
    """The terminal view of `dnpqc budget`: one table, plus the optional co-design views."""
    gates = plan.budget.gates
    proc, q, layout = gates.processor, gates.qubits, gates.layout
    lines = [
        f"processor {proc.name} ({proc.num_qubits} qubits, {proc.native_gates}); "
        f"layout: {layout.method} (2q gates by candidate: "
        + ", ".join(f"{k} {v}" for k, v in layout.two_qubit_by_method.items())
        + ")",
        f"NV on qubit {q.nv} (after the program: {q.nv_final}), nuclei on "
        + ", ".join(map(str, q.nuclei_initial))
        + " (after the program: "
        + ", ".join(map(str, q.nuclei_final))
        + ")",
    ]
    rows = [
        [label] + [_cell(key, getattr(part, key), pat) for part in (gates.per_cycle, gates.total)]
        for label, key, pat in _BUDGET_ROWS
    ]
    lines += _table(["", "per cycle", "total"], rows)
    te = plan.trotter_error
    lines.append(f"Trotter error: {te.value:.3g} ({te.method}, {te.points} points)")
    lines += ["", f"strategy: {plan.strategy} ({plan.strategy_reason})"]
    lines += strategy_table(plan.strategies)
    if plan.compare is not None:
        lines += ["", *_compare_table(plan.compare)]
    if plan.steps_advice is not None:
        lines += ["", *_advice_lines(plan.steps_advice)]
    if plan.scaling is not None:
        lines += ["", *_scaling_lines(plan.scaling)]
    return lines


def _compare_table(rows: list[ProcessorRow]) -> list[str]:
    header = [
        "processor",
        "layout",
        "2q/cycle",
        "SWAPs/cycle",
        "depth/cycle",
        "µs/cycle",
        "success",
    ]
    cells = [
        [
            r.processor,
            r.layout,
            f"{r.per_cycle.two_qubit:.0f}",
            f"{r.per_cycle.swaps:.0f}",
            f"{r.per_cycle.depth:.0f}",
            f"{r.per_cycle.duration_s * 1e6:.4g}",
            f"{r.total.success_estimate:.3g}",
        ]
        for r in rows
    ]
    return _table(header, cells)


def _advice_lines(adv: StepsAdvice) -> list[str]:
    rows = [
        [
            str(r.steps),
            f"{r.trotter_error:.3g}",
            f"{r.two_qubit_per_cycle:.0f}",
            f"{r.success_estimate:.3g}",
            f"{r.total_error:.3g}",
        ]
        for r in adv.ladder
    ]
    lines = _table(["steps", "Trotter err", "2q/cycle", "success", "total err"], rows)
    best = adv.smallest
    if best:
        lines.append(
            f"fewest steps with Trotter error <= {adv.target_error:g}: {best.steps} "
            f"({best.two_qubit_per_cycle:.0f} 2q gates per cycle, success "
            f"{best.success_estimate:.3g})"
        )
    else:
        lines.append(f"no step count up to the ladder's end reaches {adv.target_error:g}")
    lines.append(f"optimum (least Trotter + hardware error): {adv.optimum.steps} steps")
    return lines


def _scaling_lines(sc: ScalingTable) -> list[str]:
    kinds = list(sc.two_qubit_per_cycle)
    rows = [
        [str(n)] + [f"{sc.two_qubit_per_cycle[k][i]:.0f}" for k in kinds]
        for i, n in enumerate(sc.nuclei)
    ]
    rows.append(["growth n^k"] + [f"{sc.growth_exponent[k]:.2f}" for k in kinds])
    rows.append(["+1 nucleus"] + [f"{sc.per_added_nucleus[k]:.0f}" for k in kinds])
    return [
        f"2q gates per cycle ({sc.steps_per_cycle} steps) vs nuclei:",
        *_table(["nuclei", *kinds], rows),
    ]


def strategy_table(rows: list[StrategyRow]) -> list[str]:
    """The strategies side by side: steps, two-qubit gates per cycle, errors, success."""
    header = ["strategy", "steps", "2q/cycle", "approx err", "success", "err+1-S"]
    cells = [
        [
            r.strategy,
            "-" if r.steps is None else str(r.steps),
            f"{r.two_qubit_per_cycle:.0f}",
            f"{r.approximation_error.value:.2g}"
            + ("" if r.approximation_error.method == "measured" else " (bound)"),
            f"{r.success_estimate:.3g}",
            f"{r.total_error:.3g}",
        ]
        for r in rows
    ]
    return _table(header, cells)


@_plain_text
def budget_figure(rows: list[ProcessorRow]):
    """Bars of two-qubit gates and SWAPs per cycle on each processor."""
    plt = _pyplot()
    fig, ax = plt.subplots(figsize=(7, 3.8))
    names = [r.processor for r in rows]
    x = np.arange(len(rows))
    ax.bar(x - 0.2, [r.per_cycle.two_qubit for r in rows], 0.4, label="2q gates")
    ax.bar(x + 0.2, [r.per_cycle.swaps for r in rows], 0.4, label="SWAPs")
    ax.set_xticks(x, names, rotation=20)
    ax.set_ylabel("per cycle")
    ax.set_title("The program on each processor")
    ax.legend()
    fig.tight_layout()
    return fig


def shot_lines(plan: ShotPlan) -> list[str]:
    """The shot plan of `dnpqc budget`: shots, processor time, peaks against the noise."""
    lines = [
        f"shots for a standard error {plan.target_stderr:g} on P (noisy engine's P): "
        f"up to {max(plan.shots)} per value, {plan.total_shots} in all; "
        f"{plan.per_shot_s * 1e6:.4g} µs per shot (program + initial reset), "
        f"{plan.total_shots * plan.per_shot_s:.3g} s of processor time for the sweep",
        f"  readout inversion multiplies the shots needed by "
        f"{plan.readout_inversion_shot_factor:.3g}",
    ]
    for p in plan.peaks:
        verdict = "detectable" if p.detectable else "NOT detectable"
        lines.append(
            f"  {p.nucleus:>6}: at its exact peak, noisy contrast {p.contrast:.3f} "
            f"= {p.sigmas:.3g} standard errors ({verdict} at {DETECTION_SIGMAS:g}σ)"
        )
    return lines
