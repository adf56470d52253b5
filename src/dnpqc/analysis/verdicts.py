"""Answers that can mislead, checked: engine comparisons on signed polarizations, and warnings.

A noisy processor adds a polarization of its own: relaxation drives every qubit towards |0>
(P = +1), and amplitude damping can even flip the sign of a nucleus. So the comparison of an
engine with the exact reference keeps the sign of P and subtracts the zero-transfer baseline of
the same noisy program (`noise.without_transfer`): the artefact is measured, not guessed. Without
a baseline run, the median over the sweep stands in for it, and the verdict says so. A peak on
the edge of the sweep is never counted as found: the true maximum may lie outside.

`run_warnings` lists what a planner should not miss: peaks on the sweep edge, a-priori
resonances outside the sweep, a large Trotter error, a best common value that leaves a nucleus
weak, no transfer at all, implausible inputs, step advice with no usable step count, and the
two matches of a detuning sweep.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from ..compile.program import Workload
from ..compile.strategy import ApproximationError
from ..engines.results import (
    MEASURED_ENGINE,
    NO_TRANSFER,
    BestCommon,
    Saturation,
    SweepResult,
    refined_peak,
)
from ..physics.model import effective_perp_hz, nuclear_frequency_hz
from ..physics.protocols import SpinLock, expected_resonances
from ..records import Record
from ..text import format_value
from .codesign import StepsAdvice

#: Warning thresholds (Trotter error in |ΔP|; the others as stated in each check).
TROTTER_ERROR_LIMIT = 0.05
WEAK_FRACTION = 0.10
HYPERFINE_RANGE_HZ = (100.0, 10e6)
#: A Rabi frequency is "far" from a match beyond this many resonance widths.
FAR_WIDTHS = 5.0


def at_edge(result: SweepResult, index: int) -> bool:
    """Whether grid point `index` is the first or the last of a sweep of several points."""
    return len(result.values) > 1 and index in (0, len(result.values) - 1)


@dataclass(frozen=True)
class SignedPeak(Record):
    """The peak of |P - baseline| of one nucleus: its refined swept value and height, the
    signed P - baseline at its grid point `index`, and whether that point is on the edge."""

    value: float
    magnitude: float
    polarization: float
    index: int
    at_edge: bool


def signed_peaks(
    result: SweepResult, cycle: int = -1, baseline: np.ndarray | None = None
) -> dict[str, SignedPeak]:
    """Per nucleus: the peak of |P - baseline| after `cycle` (baseline: (points, nuclei) or
    None for 0), with the signed P - baseline at the peak's grid point and its edge flag."""
    pol = result.polarization[:, cycle, :]
    if baseline is not None:
        pol = pol - baseline
    out = {}
    for j, label in enumerate(result.nuclei):
        mags = np.abs(pol[:, j])
        i = int(np.argmax(mags))
        value, height = refined_peak(result.values, mags)
        out[label] = SignedPeak(value, height, float(pol[i, j]), i, at_edge(result, i))
    return out


def _baseline(
    other: SweepResult, baseline: SweepResult | None, cycle: int, note: str | None
) -> tuple[np.ndarray | None, str]:
    if note is not None:
        return None, note
    if baseline is not None:
        return baseline.polarization[:, cycle, :], f"{baseline.engine} (same program, no transfer)"
    if other.engine.startswith("noisy") or other.engine == MEASURED_ENGINE:
        median = np.median(other.polarization[:, cycle, :], axis=0)
        return np.broadcast_to(median, other.polarization[:, cycle, :].shape), (
            "median over the sweep (no baseline run: guessed)"
        )
    return None, "none"


@dataclass(frozen=True)
class NucleusComparison(Record):
    """One nucleus of an engine against exact: its peak and shift from the exact one, the
    contrast ratio of |P - baseline|, the signed values, and whether the peak was found."""

    peak: float
    shift: float
    contrast_ratio: float
    signed_polarization: float
    exact_polarization: float
    signs_agree: bool
    at_edge: bool
    found: bool


@dataclass(frozen=True)
class Comparison(Record):
    """An engine against the exact one (`compare_to_exact`); `best_common*` only when the best
    common values were given, `saturation` (the engine's mean |P|sat) when the run has it."""

    engine: str
    baseline: str
    resolution: float
    per_nucleus: dict[str, NucleusComparison]
    all_found: bool
    best_common: float | None = None
    best_common_shift: float | None = None
    best_common_found: bool | None = None
    verdict: str = ""
    saturation: float | None = None

    def to_json(self) -> dict[str, object]:
        out = super().to_json()
        if self.best_common is None:
            for key in ("best_common", "best_common_shift", "best_common_found"):
                del out[key]
        return out


def compare_to_exact(
    exact: SweepResult,
    other: SweepResult,
    *,
    baseline: SweepResult | None = None,
    best_common: tuple[float, float] | None = None,
    cycle: int = -1,
    subtracted: str | None = None,
) -> Comparison:
    """`other` against the exact engine, on signed P minus the zero-transfer baseline
    (`subtracted`: a note that `other` has had its baseline removed already).

    A nucleus's peak is found when it lies within one grid step of the exact peak, neither peak
    sits on the sweep edge, and the signs agree. `best_common` = (exact, other) best common
    values, checked against the same resolution.
    """
    values = exact.values
    step = float(abs(values[1] - values[0])) if len(values) > 1 else 0.0
    base, described = _baseline(other, baseline, cycle, subtracted)
    ref, mine = signed_peaks(exact, cycle), signed_peaks(other, cycle, base)
    per: dict[str, NucleusComparison] = {}
    for label, peak in ref.items():
        m = mine[label]
        shift = m.value - peak.value
        signs_agree = bool(np.sign(m.polarization) == np.sign(peak.polarization))
        edge = bool(m.at_edge or peak.at_edge)
        per[label] = NucleusComparison(
            peak=m.value,
            shift=shift,
            contrast_ratio=m.magnitude / peak.magnitude if peak.magnitude > 0 else float("nan"),
            signed_polarization=m.polarization,
            exact_polarization=peak.polarization,
            signs_agree=signs_agree,
            at_edge=edge,
            found=abs(shift) <= step and not edge and signs_agree,
        )
    common = {}
    if best_common is not None:
        shift = best_common[1] - best_common[0]
        common = {
            "best_common": best_common[1],
            "best_common_shift": shift,
            "best_common_found": abs(shift) <= step,
        }
    comp = Comparison(
        other.engine, described, step, per, all(p.found for p in per.values()), **common
    )
    return replace(comp, verdict=_verdict(comp, exact.parameter))


def _verdict(comp: Comparison, parameter: str) -> str:
    per = comp.per_nucleus
    found = sum(p.found for p in per.values())
    parts = [
        f"{comp.engine}: {found} of {len(per)} peaks found within the sweep resolution "
        f"({format_value(parameter, comp.resolution)}) of the exact peaks, signed P against "
        f"the baseline {comp.baseline}"
    ]
    edge = [label for label, p in per.items() if p.at_edge]
    if edge:
        parts.append(f"on the sweep edge, not counted: {', '.join(edge)}")
    flipped = [label for label, p in per.items() if not p.signs_agree]
    if flipped:
        parts.append(f"sign opposite to exact: {', '.join(flipped)}")
    if comp.best_common_found is False:
        shift = format_value(parameter, comp.best_common_shift)
        parts.append(f"best common value off the exact one by {shift}")
    return "; ".join(parts)


def run_warnings(
    work: Workload,
    reference: SweepResult,
    *,
    trotter_error: float | None = None,
    steps_advice: StepsAdvice | None = None,
) -> list[str]:
    """Every warning for a run, as one-line messages (empty when nothing misleads)."""
    checks = [
        _no_transfer(reference),
        _edge_peaks(reference),
        _resonances_outside(work),
        _weak_at_best_common(reference),
        _implausible_couplings(work),
        _rabi_far_from_matches(work),
        _detuning_matches(work),
    ]
    checks.append(_trotter_too_large(trotter_error))
    if steps_advice is not None:
        checks.append(_hopeless_advice(steps_advice))
    return [w for check in checks for w in check]


def budget_warnings(
    trotter_error: ApproximationError, steps_advice: StepsAdvice | None = None
) -> list[str]:
    """Warnings of `dnpqc budget`: a large Trotter error, step advice with no usable count."""
    hopeless = _hopeless_advice(steps_advice) if steps_advice is not None else []
    return _trotter_too_large(trotter_error.value) + hopeless


def _trotter_too_large(error: float | None) -> list[str]:
    if error is None or error <= TROTTER_ERROR_LIMIT:
        return []
    return [
        f"Trotter error {error:.3g} exceeds {TROTTER_ERROR_LIMIT}: raise `trotter.steps` (keep "
        "ν_L·T/steps ≲ 0.15) before trusting the circuit engines"
    ]


def _no_transfer(result: SweepResult) -> list[str]:
    top = float(np.max(np.abs(result.polarization)))
    if top >= NO_TRANSFER:
        return []
    return [
        f"no transfer at all: max |P| = {top:.1e} < {NO_TRANSFER:g} over the whole sweep; the "
        "peaks, best common value and saturation below mean nothing"
    ]


def _edge_peaks(result: SweepResult) -> list[str]:
    par = result.parameter
    out = []
    for label, peak in signed_peaks(result).items():
        if peak.at_edge and peak.magnitude >= NO_TRANSFER:
            out.append(
                f"{label}: the peak lies on the sweep edge ({format_value(par, peak.value)}); "
                "the true maximum may lie outside the sweep"
            )
    return out


def _resonances_outside(work: Workload) -> list[str]:
    par, values = work.parameter, work.values
    lo, hi = min(values), max(values)
    inside = expected_resonances(work.system, work.protocol, par, lo, hi)
    if par == "tau_s":
        return [
            f"{label}: no a-priori resonance τ = m/(2ν̃) inside the sweep "
            f"[{format_value(par, lo)}, {format_value(par, hi)}]"
            for label, found in inside.items()
            if not found
        ]
    every = expected_resonances(work.system, work.protocol, par, -math.inf, math.inf)
    out = []
    for label, found in every.items():
        for v in found:
            if v not in inside[label]:
                out.append(
                    f"{label}: a-priori resonance at {format_value(par, v)} lies outside the "
                    f"sweep [{format_value(par, lo)}, {format_value(par, hi)}]"
                )
    return out


def _weak_at_best_common(result: SweepResult) -> list[str]:
    mags = np.abs(result.polarization[:, -1, :])
    i = int(np.argmax(mags.mean(axis=1)))
    par = result.parameter
    out = []
    for j, label in enumerate(result.nuclei):
        own = mags[:, j].max()
        if own >= NO_TRANSFER and mags[i, j] < WEAK_FRACTION * own:
            out.append(
                f"{label}: the best common value {format_value(par, result.values[i])} leaves it "
                f"at |P| = {mags[i, j]:.3g}, below {WEAK_FRACTION:.0%} of its own peak "
                f"{own:.3g}; see the worst-nucleus (maximin) choice"
            )
    return out


def _implausible_couplings(work: Workload) -> list[str]:
    low, high = HYPERFINE_RANGE_HZ
    out = []
    for n in work.system.nuclei:
        size = math.hypot(n.a_par_hz, n.a_perp_hz)
        if not low <= size <= high:
            out.append(
                f"{n.label}: hyperfine coupling |A| = {size:.3g} Hz is outside the plausible "
                f"{low:g} Hz .. {high:g} Hz for a 13C near an NV; check the units (Hz)"
            )
    return out


def _drive_values(work: Workload, key: str) -> list[float]:
    if work.parameter == key:
        return list(work.values)
    return [getattr(work.protocol, key)]


def _rabi_far_from_matches(work: Workload) -> list[str]:
    """Spin-lock: every Rabi frequency more than FAR_WIDTHS widths from every match ν̃_j, the
    width being max(A⊥,eff, 1/T) (flip-flop rate and Fourier limit of the lock time T)."""
    protocol, system = work.protocol, work.system
    if not isinstance(protocol, SpinLock) or work.parameter == "detuning_hz":
        return []
    shortest = min(_drive_values(work, "interaction_time_s"))
    width = max(max(effective_perp_hz(system, j) for j in range(system.num_nuclei)), 1.0 / shortest)
    nus = [nuclear_frequency_hz(system, j) for j in range(system.num_nuclei)]
    rabis = _drive_values(work, "rabi_hz")
    nearest = min(abs(r - nu) for r in rabis for nu in nus)
    if nearest <= FAR_WIDTHS * width:
        return []
    return [
        f"the Rabi frequency is far from every Hartmann–Hahn match: the nearest is "
        f"{nearest / 1e3:.4g} kHz away, more than {FAR_WIDTHS:g} widths "
        f"({width / 1e3:.3g} kHz); the matches ν̃ are "
        + ", ".join(f"{nu / 1e3:.4g} kHz" for nu in nus)
    ]


def _detuning_matches(work: Workload) -> list[str]:
    if work.parameter != "detuning_hz" or not isinstance(work.protocol, SpinLock):
        return []
    every = expected_resonances(work.system, work.protocol, "detuning_hz", -math.inf, math.inf)
    par = "detuning_hz"
    return [
        f"{label}: a detuning sweep matches at both Δ = {format_value(par, v[0])} and "
        f"{format_value(par, v[1])}; the peak reported is the larger of the two"
        for label, v in every.items()
        if len(v) == 2
    ]


def _hopeless_advice(advice: StepsAdvice) -> list[str]:
    if advice.ladder and all(r.total_error >= 1.0 for r in advice.ladder):
        return [
            "step advice: every step count tried has Trotter error + (1 - S) ≥ 1, so none is "
            "usable on this processor; the 'optimum' is only the least bad"
        ]
    return []


def best_common_lines(parameter: str, common: BestCommon) -> list[str]:
    """Summary lines: what the best common value maximises, and the worst-nucleus choice."""
    worst = common.maximin
    return [
        f"  best common {parameter} (maximises the mean |P|): "
        f"{format_value(parameter, common.value)} (mean |P| "
        f"{common.mean_polarization:.3f}, worst {common.min_polarization:.3f})",
        f"  worst-nucleus choice (maximises the smallest |P|): "
        f"{format_value(parameter, worst.value)} (mean |P| {worst.mean_polarization:.3f}, "
        f"worst {worst.min_polarization:.3f})",
    ]


def saturation_lines(sat: Saturation) -> list[str]:
    """Summary lines: the slowest nucleus as the headline, then every nucleus."""
    fraction = f"{sat.fraction:.0%}"
    if sat.slowest is None:
        return ["  saturation: no nucleus is polarized there"]
    note = " (extrapolated beyond the run)" if sat.extrapolated else ""
    per = sat.per_nucleus
    each = ", ".join(
        f"{label} {p.cycles} ({p.saturation:.3f})" for label, p in per.items() if p.polarized
    )
    return [
        f"  saturation there: the slowest nucleus, {sat.slowest}, needs {sat.cycles} cycles to "
        f"reach {fraction} of its |P|sat {per[sat.slowest].saturation:.3f}{note}",
        f"  cycles to {fraction} (|P|sat) per nucleus: {each}",
    ]
