"""Every bundled example shows what it is for: a small Trotter error and a peak in its sweep."""

from pathlib import Path

import numpy as np
import pytest

from dnpqc import load_scenario, simulate
from dnpqc.analysis.codesign import trotter_error
from dnpqc.analysis.verdicts import run_warnings, signed_peaks
from dnpqc.pipeline.job import scenario_programs

EXAMPLES = sorted(Path(__file__).parent.parent.joinpath("examples").glob("*.toml"))


@pytest.mark.slow
@pytest.mark.parametrize("path", EXAMPLES, ids=[p.stem for p in EXAMPLES])
def test_example_transfers_inside_its_sweep_with_a_small_trotter_error(path):
    sc = load_scenario(path)
    # the product formula as the example compiles it, against the exact engine on 5 points
    error = trotter_error(sc.compile_job(), scenario_programs(sc).trotter()[0])
    assert error.value < 0.05
    exact = simulate(sc, "exact")
    assert np.max(np.abs(exact.polarization)) > 0.1
    for label, peak in signed_peaks(exact).items():
        assert not peak.at_edge, f"{label} peaks on the sweep edge"
        assert peak.magnitude > 0.1
    # two nuclei with resonances apart may have no good common value: that warning is the
    # point of such an example; any other warning is not
    warnings = run_warnings(sc.workload(), exact, trotter_error=error.value)
    assert [w for w in warnings if "best common value" not in w] == []
