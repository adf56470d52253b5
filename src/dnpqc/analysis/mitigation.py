"""Error mitigation of measured polarizations: readout inversion, baseline subtraction and
zero-noise extrapolation, each with its propagated standard error.

Applied in this order, program by program (every scale, and the baseline program too):

1. **readout**: a readout error with p(1|0) = e0 and p(0|1) = e1 turns the true probability q
   of reading 1 into m = e0 + (1 - e0 - e1)·q, so P = 1 - 2q = (P_read - (e1 - e0))/(1 - e0 - e1),
   and the standard error divides by 1 - e0 - e1 (per nucleus: independent readout errors
   leave each bit's marginal a 2x2 problem; Bravyi et al., PRA 103, 042605, 2021, tensored
   mitigation). The confusion matrix's own uncertainty is not propagated.
2. **baseline**: P - P_baseline, the baseline program (every coupling zero) at the same scale;
   errors add in quadrature.
3. **zne**: the values at scale factors λ = 1, 3, 5... (two-qubit gates folded) extrapolated to
   λ = 0 (Temme, Bravyi & Gambetta, PRL 119, 180509, 2017):
   - ``richardson``: the polynomial through all points, P(0) = Σ_k γ_k·P(λ_k) with the
     Lagrange weights γ_k = Π_{m≠k} λ_m/(λ_m - λ_k); the error is sqrt(Σ γ_k²·σ_k²);
   - ``exponential``: P(λ) = b·exp(-c·λ), the decay of a signal whose noise floor is 0
     (so: after the baseline; Endo, Benjamin & Li, PRX 8, 031027, 2018), fitted as a weighted
     line in ln|P| (weights P²/σ²); error from the fit's covariance. Where the points are not
     all of one sign and at least 2σ from 0, Richardson is used instead (counted).

A mitigated value is an estimate with an error bar, not a measurement: it can leave [-1, 1].
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import ScenarioError
from .counts import BASELINE, PROGRAM, Estimate, MeasuredCounts

MITIGATIONS = ("readout", "baseline", "zne")
EXTRAPOLATIONS = ("richardson", "exponential")


@dataclass(frozen=True)
class MitigationSettings:
    """Which mitigations to apply (a subset of MITIGATIONS, in that order) and the ZNE fit."""

    steps: tuple[str, ...] = ()
    extrapolation: str = "richardson"


@dataclass(frozen=True)
class Mitigated:
    """The final estimate, the raw one, and what was done (JSON-ready notes)."""

    estimate: Estimate
    raw: Estimate
    applied: tuple[str, ...]
    notes: dict[str, object] = field(default_factory=dict)

    def to_json(self) -> dict[str, object]:
        return {
            "applied": list(self.applied),
            **self.notes,
            "raw_polarization": self.raw.value.tolist(),
            "raw_stderr": self.raw.stderr.tolist(),
        }


def parse_mitigations(text: str) -> tuple[str, ...] | None:
    """`--mitigate`: "auto" (None: whatever the counts allow), "none", or a list of names."""
    text = text.strip()
    if text == "auto":
        return None
    if text == "none":
        return ()
    names = tuple(dict.fromkeys(t.strip() for t in text.split(",") if t.strip()))
    bad = [t for t in names if t not in MITIGATIONS]
    if bad or not names:
        raise ScenarioError(
            f"`--mitigate` must be auto, none, or a comma-separated list of "
            f"{', '.join(MITIGATIONS)}; got {text!r}"
        )
    return tuple(m for m in MITIGATIONS if m in names)


def available(counts: MeasuredCounts) -> tuple[str, ...]:
    """The mitigations a counts file allows: readout always, baseline with baseline counts at
    every scale, zne with folded counts."""
    out = ["readout"]
    if all(counts.has_baseline(s) for s in counts.scales):
        out.append("baseline")
    if len(counts.scales) > 1:
        out.append("zne")
    return tuple(out)


def check_available(steps: tuple[str, ...], counts: MeasuredCounts) -> None:
    """Refuse a mitigation the counts file has no data for, in one line."""
    have = available(counts)
    if "baseline" in steps and "baseline" not in have:
        raise ScenarioError(
            "`--mitigate baseline` needs `baseline_counts` (of `dnpqc compile --baseline`) in "
            "every result of the counts file, at every folding scale given"
        )
    if "zne" in steps and "zne" not in have:
        raise ScenarioError(
            "`--mitigate zne` needs `folded` counts (of `dnpqc compile --fold 3`, and 5) in the "
            "counts file"
        )


def readout_inverted(est: Estimate, confusion: np.ndarray) -> Estimate:
    """Per nucleus: (P - (e1 - e0))/(1 - e0 - e1); confusion (n, 2, 2) as M[read, prepared]."""
    e0, e1 = confusion[:, 1, 0], confusion[:, 0, 1]
    gain = 1.0 - e0 - e1
    return Estimate((est.value - (e1 - e0)) / gain, est.stderr / gain)


def baseline_subtracted(est: Estimate, baseline: Estimate) -> Estimate:
    return Estimate(est.value - baseline.value, np.hypot(est.stderr, baseline.stderr))


def richardson_weights(scales) -> np.ndarray:
    """Lagrange weights γ_k of the polynomial through (λ_k, y_k) evaluated at λ = 0."""
    lam = [float(s) for s in scales]
    return np.array([math.prod(m / (m - k) for m in lam if m != k) for k in lam])


def richardson(scales, values: np.ndarray, errors: np.ndarray) -> Estimate:
    """P(0) from values (scales, ...) by Richardson extrapolation, with its error."""
    g = richardson_weights(scales)
    return Estimate(np.tensordot(g, values, axes=1), np.sqrt(np.tensordot(g**2, errors**2, axes=1)))


def exponential(scales, values: np.ndarray, errors: np.ndarray) -> tuple[Estimate, int]:
    """P(0) of P(λ) = b·exp(-cλ) fitted per element (weighted line in ln|P|); elements that
    cannot be fitted (mixed signs or a point within 2σ of 0) fall back to Richardson.
    Returns the estimate and the number of fallbacks."""
    lam = np.asarray(scales, dtype=float)
    out = richardson(scales, values, errors)
    value, stderr = out.value.copy(), out.stderr.copy()
    sigma = np.maximum(errors, 1e-12)
    sign = np.sign(values[0])
    fits = np.all(np.sign(values) == sign, axis=0) & np.all(np.abs(values) >= 2 * sigma, axis=0)
    design = np.stack([np.ones_like(lam), lam], axis=1)  # ln|P| = a - c·λ
    for idx in zip(*np.nonzero(fits), strict=True):
        y = np.abs(values[(slice(None), *idx)])
        w = (y / sigma[(slice(None), *idx)]) ** 2
        normal = design.T @ (w[:, None] * design)
        cov = np.linalg.inv(normal)
        a = (cov @ (design.T @ (w * np.log(y))))[0]
        value[idx] = sign[idx] * np.exp(a)
        stderr[idx] = np.exp(a) * np.sqrt(cov[0, 0])
    return Estimate(value, stderr), int(fits.size - fits.sum())


def mitigate(
    counts: MeasuredCounts, settings: MitigationSettings, confusion: np.ndarray
) -> Mitigated:
    """Apply `settings.steps` to the counts (see the module docstring); `confusion` is the
    readout calibration to invert (the file's, else the processor's figure)."""
    steps = settings.steps
    check_available(steps, counts)
    scales = counts.scales if "zne" in steps else (1,)
    notes: dict[str, object] = {}
    per_scale = []
    for scale in scales:
        est = counts.estimate(PROGRAM, scale)
        if "baseline" in steps:
            base = counts.estimate(BASELINE, scale)
        if "readout" in steps:
            est = readout_inverted(est, confusion)
            if "baseline" in steps:
                base = readout_inverted(base, confusion)
        if "baseline" in steps:
            est = baseline_subtracted(est, base)
        per_scale.append(est)
    if "baseline" in steps:
        notes["baseline_kind"] = counts.baseline_kind or "not given"
    if "readout" in steps:
        notes["readout"] = {
            "confusion": confusion.tolist(),
            "source": "counts file" if counts.confusion is not None else "processor figure",
        }
    if "zne" in steps:
        values = np.stack([e.value for e in per_scale])
        errors = np.stack([e.stderr for e in per_scale])
        if settings.extrapolation == "exponential":
            final, fallbacks = exponential(scales, values, errors)
        else:
            final, fallbacks = richardson(scales, values, errors), 0
        notes["zne"] = {
            "scales": list(scales),
            "extrapolation": settings.extrapolation,
            "richardson_fallbacks": fallbacks,
            "per_scale_polarization": values.tolist(),
        }
    else:
        final = per_scale[0]
    return Mitigated(final, counts.estimate(PROGRAM, 1), steps, notes)
