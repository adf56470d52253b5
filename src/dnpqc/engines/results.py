"""Sweep results and the physics answers drawn from them.

`polarization[point, cycle, nucleus]` is P_j = <Z_j> after cycle 1..count. Peaks, the best
common value and saturation work on the magnitude |P_j|: the transfer direction depends on the
NV dressed state and the resonance order, the hyperpolarization yield does not. Comparisons of
engines (`verdicts.py`) keep the sign.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..records import Record

#: The engine of measured counts (`dnpqc run --counts`): not a simulation.
MEASURED_ENGINE = "measured"


@dataclass(frozen=True)
class SweepResult:
    """Nuclear polarizations of one engine over a sweep: arrays with their labels."""

    engine: str
    parameter: str
    values: np.ndarray  # (points,)
    nuclei: tuple[str, ...]
    polarization: np.ndarray  # (points, cycles, nuclei)
    stderr: np.ndarray | None = None  # same shape, for sampling engines
    first_cycle: int = 1  # cycle number of polarization[:, 0] (a run read at the end only: C)

    @property
    def cycles(self) -> int:
        return int(self.polarization.shape[1])

    def to_dict(self) -> dict[str, object]:
        """The JSON shape of `dnpqc sweep`."""
        out: dict[str, object] = {
            "parameter": self.parameter,
            "values": [float(v) for v in self.values],
            "nuclei": list(self.nuclei),
            "cycles": self.cycles,
            "engine": self.engine,
            "polarization": self.polarization.tolist(),
        }
        if self.stderr is not None:
            out["stderr"] = self.stderr.tolist()
        if self.first_cycle != 1:
            out["first_cycle"] = self.first_cycle
        return out

    @property
    def has_buildup(self) -> bool:
        """Whether every cycle from the first is there (a build-up can be fitted)."""
        return self.first_cycle == 1


def refined_peak(values: np.ndarray, curve: np.ndarray) -> tuple[float, float]:
    """Position and height of the maximum of `curve`, refined by a parabola through 3 points."""
    i = int(np.argmax(curve))
    if 0 < i < len(curve) - 1:
        y0, y1, y2 = curve[i - 1 : i + 2]
        denom = y0 - 2 * y1 + y2
        if denom < 0:
            shift = 0.5 * (y0 - y2) / denom
            step = values[i + 1] - values[i]
            return float(values[i] + shift * step), float(y1 - 0.25 * (y0 - y2) * shift)
    return float(values[i]), float(curve[i])


@dataclass(frozen=True)
class Peak(Record):
    """The swept value of largest |P| of one nucleus, and that |P|."""

    value: float
    polarization: float


def peaks(result: SweepResult, cycle: int = -1) -> dict[str, Peak]:
    """Per nucleus: the swept value of largest |P| after `cycle` (index), and that |P|."""
    mags = np.abs(result.polarization[:, cycle, :])
    out = {}
    for j, label in enumerate(result.nuclei):
        value, height = refined_peak(result.values, mags[:, j])
        out[label] = Peak(value, height)
    return out


@dataclass(frozen=True)
class CommonValue(Record):
    """One grid value for all nuclei at once: what it maximises, where, and the |P| there."""

    maximises: str
    index: int
    value: float
    mean_polarization: float
    min_polarization: float


@dataclass(frozen=True)
class BestCommon(CommonValue):
    """The grid value of largest mean |P|, each nucleus's |P| there, and the worst-nucleus
    choice `maximin` (the grid value of largest smallest |P|)."""

    per_nucleus: dict[str, float]
    maximin: CommonValue


def _common_value(result: SweepResult, mags: np.ndarray, i: int, maximises: str) -> CommonValue:
    return CommonValue(
        maximises, i, float(result.values[i]), float(mags[i].mean()), float(mags[i].min())
    )


def best_common(result: SweepResult, cycle: int = -1) -> BestCommon:
    """The grid value that maximises the mean |P| over all nuclei after `cycle`, and the
    worst-nucleus choice `maximin` (the grid value that maximises the smallest |P|)."""
    mags = np.abs(result.polarization[:, cycle, :])
    i = int(np.argmax(mags.mean(axis=1)))
    k = int(np.argmax(mags.min(axis=1)))
    mean = _common_value(result, mags, i, "mean |P| over the nuclei")
    return BestCommon(
        **vars(mean),
        per_nucleus={label: float(mags[i, j]) for j, label in enumerate(result.nuclei)},
        maximin=_common_value(result, mags, k, "the smallest |P| of any nucleus"),
    )


def fit_buildup(curve: np.ndarray) -> tuple[float, float]:
    """Fit |P|(c) = P_sat·(1 - (1 - k)^c), c = 1..len(curve); returns (P_sat, k).

    This is exact for one nucleus that takes a fixed fraction k of the remaining polarization
    each cycle; for a cluster it is a phenomenological saturation model. P_sat is held to the
    physical bound |P| <= 1 (a build-up still linear over the run fits as P_sat = 1, slow k).
    """
    c = np.arange(1, len(curve) + 1, dtype=float)
    y = np.abs(np.asarray(curve, dtype=float))
    if len(y) == 1 or y[-1] <= 0:
        return float(y[-1]), 1.0
    ks = np.linspace(1e-4, 1.0, 4000)
    basis = 1.0 - (1.0 - ks[:, None]) ** c[None, :]
    amps = np.minimum((basis @ y) / np.einsum("kc,kc->k", basis, basis), 1.0)
    resid = np.einsum(
        "kc,kc->k", amps[:, None] * basis - y[None, :], amps[:, None] * basis - y[None, :]
    )
    best = int(np.argmin(resid))
    return float(amps[best]), float(ks[best])


def cycles_to_fraction(rate: float, fraction: float = 0.9) -> int:
    """Smallest cycle count c with 1 - (1 - k)^c >= fraction."""
    if rate >= 1.0:
        return 1
    return math.ceil(math.log(1.0 - fraction) / math.log(1.0 - rate) - 1e-12)


#: Below this |P| a nucleus counts as not polarized at all.
NO_TRANSFER = 1e-6


@dataclass(frozen=True)
class Buildup(Record):
    """One nucleus's fitted build-up: |P|sat, the fraction k taken per cycle, the cycles to
    reach the target fraction of |P|sat (`extrapolated` beyond the run), and whether it moved."""

    saturation: float
    rate_per_cycle: float
    cycles: int
    extrapolated: bool
    polarized: bool


@dataclass(frozen=True)
class Saturation(Record):
    """Build-up at one swept value: per nucleus, the slowest polarized nucleus and its cycles
    (the headline), and the fit to the mean |P| (`mean_*`, which hides a slow nucleus)."""

    value: float
    fraction: float
    per_nucleus: dict[str, Buildup]
    slowest: str | None
    cycles: int | None
    extrapolated: bool
    mean_saturation: float
    mean_rate_per_cycle: float
    mean_cycles: int


def saturation(result: SweepResult, point: int, fraction: float = 0.9) -> Saturation:
    """Build-up at sweep point `point`: the fitted saturation level of each nucleus and the
    cycles it needs to reach `fraction` of it (``extrapolated`` when beyond the run).

    The headline `cycles` is that of the slowest polarized nucleus (`slowest`); a fit to the
    mean |P| hides a slow nucleus behind fast ones, so it is kept only as `mean_*`.
    """
    curves = np.abs(result.polarization[point])  # (cycles, nuclei)
    per: dict[str, Buildup] = {}
    for j, label in enumerate(result.nuclei):
        p_sat, k = fit_buildup(curves[:, j])
        n_cycles = cycles_to_fraction(k, fraction)
        per[label] = Buildup(
            saturation=p_sat,
            rate_per_cycle=k,
            cycles=n_cycles,
            extrapolated=n_cycles > result.cycles,
            polarized=bool(curves[:, j].max() >= NO_TRANSFER),
        )
    p_sat, k = fit_buildup(curves.mean(axis=1))
    polarized = [label for label, b in per.items() if b.polarized]
    slowest = max(polarized, key=lambda label: per[label].cycles) if polarized else None
    return Saturation(
        value=float(result.values[point]),
        fraction=fraction,
        per_nucleus=per,
        slowest=slowest,
        cycles=per[slowest].cycles if slowest else None,
        extrapolated=bool(slowest and per[slowest].extrapolated),
        mean_saturation=p_sat,
        mean_rate_per_cycle=k,
        mean_cycles=cycles_to_fraction(k, fraction),
    )


@dataclass(frozen=True)
class Analysis(Record):
    """The physics answers of one engine's sweep: peaks, the best common value and (with
    every cycle from the first) the saturation there."""

    peaks: dict[str, Peak]
    best_common: BestCommon
    saturation: Saturation | None


def analyse(result: SweepResult) -> Analysis:
    """Peaks, best common value and, when the build-up is there, saturation at that value."""
    common = best_common(result)
    sat = saturation(result, common.index) if result.has_buildup else None
    return Analysis(peaks(result), common, sat)


def max_difference(first: SweepResult, second: SweepResult) -> float:
    """Largest |ΔP| between two engines' results over all points, cycles and nuclei."""
    return float(np.max(np.abs(first.polarization - second.polarization)))
