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


def peaks(result: SweepResult, cycle: int = -1) -> dict[str, dict[str, float]]:
    """Per nucleus: the swept value of largest |P| after `cycle` (index), and that |P|."""
    mags = np.abs(result.polarization[:, cycle, :])
    out = {}
    for j, label in enumerate(result.nuclei):
        value, height = refined_peak(result.values, mags[:, j])
        out[label] = {"value": value, "polarization": height}
    return out


def best_common(result: SweepResult, cycle: int = -1) -> dict[str, object]:
    """The grid value that maximises the mean |P| over all nuclei after `cycle`, and the
    worst-nucleus choice `maximin` (the grid value that maximises the smallest |P|)."""
    mags = np.abs(result.polarization[:, cycle, :])
    i = int(np.argmax(mags.mean(axis=1)))
    k = int(np.argmax(mags.min(axis=1)))
    return {
        "maximises": "mean |P| over the nuclei",
        "index": i,
        "value": float(result.values[i]),
        "mean_polarization": float(mags[i].mean()),
        "min_polarization": float(mags[i].min()),
        "per_nucleus": {label: float(mags[i, j]) for j, label in enumerate(result.nuclei)},
        "maximin": {
            "maximises": "the smallest |P| of any nucleus",
            "index": k,
            "value": float(result.values[k]),
            "mean_polarization": float(mags[k].mean()),
            "min_polarization": float(mags[k].min()),
        },
    }


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


def saturation(result: SweepResult, point: int, fraction: float = 0.9) -> dict[str, object]:
    """Build-up at sweep point `point`: the fitted saturation level of each nucleus and the
    cycles it needs to reach `fraction` of it (``extrapolated`` when beyond the run).

    The headline `cycles` is that of the slowest polarized nucleus (`slowest`); a fit to the
    mean |P| hides a slow nucleus behind fast ones, so it is kept only as `mean_*`.
    """
    curves = np.abs(result.polarization[point])  # (cycles, nuclei)
    out: dict[str, object] = {"value": float(result.values[point]), "fraction": fraction}
    per: dict[str, dict[str, object]] = {}
    for j, label in enumerate(result.nuclei):
        p_sat, k = fit_buildup(curves[:, j])
        n_cycles = cycles_to_fraction(k, fraction)
        per[label] = {
            "saturation": p_sat,
            "rate_per_cycle": k,
            "cycles": n_cycles,
            "extrapolated": n_cycles > result.cycles,
            "polarized": bool(curves[:, j].max() >= NO_TRANSFER),
        }
    p_sat, k = fit_buildup(curves.mean(axis=1))
    polarized = [label for label, p in per.items() if p["polarized"]]
    slowest = max(polarized, key=lambda label: per[label]["cycles"]) if polarized else None
    n_cycles = per[slowest]["cycles"] if slowest else None
    out.update(
        per_nucleus=per,
        slowest=slowest,
        cycles=n_cycles,
        extrapolated=bool(slowest and per[slowest]["extrapolated"]),
        mean_saturation=p_sat,
        mean_rate_per_cycle=k,
        mean_cycles=cycles_to_fraction(k, fraction),
    )
    return out


def max_difference(first: SweepResult, second: SweepResult) -> float:
    """Largest |ΔP| between two engines' results over all points, cycles and nuclei."""
    return float(np.max(np.abs(first.polarization - second.polarization)))
