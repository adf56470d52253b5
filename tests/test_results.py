"""Peak finding, best common value and saturation fits against closed forms."""

import math

import numpy as np
import pytest

from dnpqc.engines.results import SweepResult, best_common, cycles_to_fraction, fit_buildup, peaks


def _result(pol, values):
    return SweepResult("exact", "rabi_hz", np.asarray(values), ("A", "B"), np.asarray(pol))


def test_parabolic_peak_refinement_is_exact_on_a_parabola():
    # three-point parabolic interpolation recovers a parabola's vertex exactly (common practice)
    x = np.linspace(0, 10, 11)
    a = 1 - 0.01 * (x - 4.3) ** 2
    b = 0.5 - 0.005 * (x - 7.8) ** 2
    res = _result(np.stack([a, b], axis=-1)[:, None, :], x)
    p = peaks(res)
    assert p["A"].value == pytest.approx(4.3) and p["A"].polarization == pytest.approx(1.0)
    assert p["B"].value == pytest.approx(7.8) and p["B"].polarization == pytest.approx(0.5)


def test_best_common_maximises_mean_magnitude():
    x = np.arange(5.0)
    pol = np.array([[0.9, 0.0], [0.6, -0.5], [0.1, -0.9], [0.0, 0.0], [0.2, 0.2]])[:, None, :]
    best = best_common(_result(pol, x))
    assert best.value == 1.0 and best.min_polarization == pytest.approx(0.5)


def test_geometric_buildup_fit():
    # one nucleus taking a fraction k of the missing polarization per cycle:
    # P_c = P_sat(1 - (1-k)^c) exactly (common practice, no source)
    c = np.arange(1, 9)
    curve = 0.8 * (1 - (1 - 0.3) ** c)
    p_sat, k = fit_buildup(curve)
    assert p_sat == pytest.approx(0.8, rel=1e-3) and k == pytest.approx(0.3, abs=1e-3)
    # cycles to 90 %: smallest c with 1 - 0.7^c >= 0.9 → c = ceil(ln 0.1 / ln 0.7) = 7
    assert cycles_to_fraction(0.3) == math.ceil(math.log(0.1) / math.log(0.7)) == 7


def test_buildup_fit_respects_the_physical_bound():
    # a build-up still linear over the run cannot saturate above |P| = 1
    curve = 0.01 * np.arange(1, 7)
    p_sat, k = fit_buildup(curve)
    assert p_sat <= 1.0
    assert p_sat * (1 - (1 - k) ** 6) == pytest.approx(0.06, rel=0.05)
