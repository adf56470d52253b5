"""Co-design views: Trotter error measured and bounded, step advice, comparison, scaling."""

from dataclasses import replace

import numpy as np
import pytest
from conftest import THREE_NUCLEI

from dnpqc import parse_scenario, simulate
from dnpqc.analysis.codesign import compare_processors, scaling_table, steps_advice, trotter_error
from dnpqc.compile.processor import make_processor
from dnpqc.compile.strategy import commutator_bound
from dnpqc.engines.results import max_difference
from dnpqc.pipeline.job import scenario_programs


def _with(sc, **trotter):
    return replace(sc, trotter=replace(sc.trotter, **trotter))


@pytest.mark.parametrize("order", [1, 2])
def test_commutator_bound_holds(three_nuclei, order):
    # a rigorous bound (Childs et al., PRX 11, 011020, 2021) must not be below the measured error
    sc = _with(three_nuclei, order=order, steps=20, weak_every=1)
    measured = trotter_error(sc.compile_job()).value
    assert commutator_bound(sc.workload(), sc.trotter) >= measured > 0


def test_measured_error_equals_the_circuit_engine(three_nuclei):
    # the dense plan evaluation must give what the Aer circuit gives against the exact engine
    # (independent paths: qiskit-aer density matrix vs numpy); 4 points = every sweep point
    sc = _with(three_nuclei, steps=12, weak_every=1)
    on_circuit = max_difference(simulate(sc, "exact"), simulate(sc, "trotter"))
    measured = trotter_error(sc.compile_job())
    assert measured.method == "measured" and measured.points == 4
    assert measured.value == pytest.approx(on_circuit, rel=1e-6)


def test_bound_shrinks_at_the_order_rate(three_nuclei):
    work = three_nuclei.workload()
    for order, rate in ((1, 2), (2, 4)):
        sc = _with(three_nuclei, order=order)
        b1 = commutator_bound(work, replace(sc.trotter, steps=400))
        b2 = commutator_bound(work, replace(sc.trotter, steps=800))
        assert b1 / b2 == pytest.approx(rate, rel=1e-6)


def test_steps_advice_meets_target():
    sc = parse_scenario(THREE_NUCLEI.replace("count = 3", "count = 1"))
    seen = []
    processor = make_processor({"topology": "grid:3x3"})
    advice = steps_advice(sc.compile_job(), processor, 0.01, on_step=seen.append)
    assert {r.steps for r in advice.ladder} <= set(seen)  # progress of every measurement
    best = advice.smallest
    assert best.trotter_error <= 0.01
    assert best.steps <= advice.ladder[-1].steps
    assert advice.optimum.steps in [r.steps for r in advice.ladder]
    assert all(r.two_qubit_per_cycle > 0 for r in advice.ladder)


def test_compare_rows():
    sc = parse_scenario(THREE_NUCLEI)
    procs = [make_processor({"topology": t}) for t in ("line:4", "full:4")]
    rows = compare_processors(scenario_programs(sc), procs)
    assert [r.processor for r in rows] == ["line:4", "full:4"]
    assert rows[1].per_cycle.swaps == 0
    assert rows[0].per_cycle.two_qubit >= rows[1].per_cycle.two_qubit


def test_scaling_is_linear_on_a_star():
    # NV-centric cluster on a star: no SWAPs, a fixed number of two-qubit gates per nucleus
    sc = parse_scenario(THREE_NUCLEI)
    table = scaling_table(
        sc.compile_job(), make_processor({}), kinds=("star", "line"), max_nuclei=5
    )
    star = np.array(table.two_qubit_per_cycle["star"])
    assert np.all(np.diff(star, 2) == 0) and np.all(np.diff(star) > 0)  # exactly linear in n
    assert table.growth_exponent["star"] < 1.3
    assert table.per_added_nucleus["star"] == pytest.approx(star[-1] - star[-2])
    assert table.two_qubit_per_cycle["line"][-1] > star[-1]
