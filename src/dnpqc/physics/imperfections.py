"""Quasi-static system imperfections: NV detuning and drive-amplitude error.

Within one run both are constant (quasi-static) and Gaussian: Δ → Δ + δ with δ ~ N(0, σ_Δ), and
Ω → Ω·(1 + s) with s ~ N(0, σ_Ω) (ideal pulse angles scale by the same 1 + s). Results are
averaged over a deterministic Gauss–Hermite grid or over seeded samples. Both engines use the
same nodes, so exact and circuit results stay comparable like for like.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np

#: Circuit/program variable names of the two imperfections.
DRIVE_ERROR = "drive_scale_error"
DETUNING_ERROR = "detuning_error_hz"


@dataclass(frozen=True)
class Imperfections:
    """σ of the detuning error (Hz) and of the relative drive error, and how to average."""

    detuning_sigma_hz: float = 0.0
    drive_sigma_rel: float = 0.0
    method: Literal["quadrature", "sampling"] = "quadrature"
    points: int = 3
    samples: int = 16
    seed: int = 0

    @property
    def active(self) -> bool:
        return self.detuning_sigma_hz > 0 or self.drive_sigma_rel > 0

    def nodes(self) -> list[tuple[float, float, float]]:
        """(weight, drive error s, detuning error δ in Hz) nodes; weights sum to 1."""
        if not self.active:
            return [(1.0, 0.0, 0.0)]
        if self.method == "sampling":
            rng = np.random.default_rng(self.seed)
            s = rng.normal(0.0, self.drive_sigma_rel, self.samples)
            d = rng.normal(0.0, self.detuning_sigma_hz, self.samples)
            return [(1.0 / self.samples, float(a), float(b)) for a, b in zip(s, d, strict=True)]
        drive = _gauss_hermite(self.drive_sigma_rel, self.points)
        detuning = _gauss_hermite(self.detuning_sigma_hz, self.points)
        return [(wa * wb, a, b) for wa, a in drive for wb, b in detuning]


def _gauss_hermite(sigma: float, points: int) -> list[tuple[float, float]]:
    """(weight, value) nodes of N(0, σ²): probabilists' Gauss–Hermite, weights normalised."""
    if sigma == 0:
        return [(1.0, 0.0)]
    x, w = np.polynomial.hermite_e.hermegauss(points)
    w = w / w.sum()
    return [(float(wi), float(sigma * xi)) for xi, wi in zip(x, w, strict=True)]


def average_nodes(
    per_experiment: np.ndarray, weights: np.ndarray, sampled: bool
) -> tuple[np.ndarray, np.ndarray | None]:
    """Weighted mean over the imperfection nodes, and its standard error when sampled."""
    shaped = per_experiment.reshape(-1, len(weights), *per_experiment.shape[1:])
    mean = np.tensordot(weights, shaped, axes=([0], [1]))
    if not sampled or len(weights) < 2:
        return mean, None
    err = shaped.std(axis=1, ddof=1) / np.sqrt(len(weights))
    return mean, err
