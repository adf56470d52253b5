"""The compile stage: Program, strategies (trotter with weak terms, cycle-unitary, auto)."""

import math
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from conftest import THREE_NUCLEI
from qiskit.quantum_info import Operator

from dnpqc import demo_scenario, load_scenario, parse_scenario, simulate
from dnpqc.analysis.codesign import trotter_error
from dnpqc.compile.budget import gate_budget
from dnpqc.compile.processor import make_processor
from dnpqc.compile.program import (
    TrotterSettings,
    choose_weak_every,
    compile_workload,
    map_onto,
    synthesis_cost,
    trotter_plan,
)
from dnpqc.compile.trotter import (
    cycle_circuit,
    pauli_terms,
    plan_unitary,
    program_parameters,
    weak_keys,
)
from dnpqc.engines.circuit import density_matrix_simulator, simulate_circuits
from dnpqc.engines.results import max_difference
from dnpqc.pipeline.job import scenario_programs

ROOT = Path(__file__).resolve().parents[1]
HARDWARE = ROOT / "examples" / "hardware-two-nuclei.toml"
#: error of the demo's product formula before weak-term scheduling (150 steps, order 2)
DEMO_TROTTER_ERROR = 0.0295


def _strategy(sc, strategy):
    return replace(sc, compile=replace(sc.compile, strategy=strategy))


def _points(sc, indices):
    return replace(sc, sweep=replace(sc.sweep, values=tuple(sc.sweep.values[i] for i in indices)))


def test_plan_unitary_equals_the_qiskit_operator(three_nuclei):
    # the dense plan evaluator against qiskit's own Operator of the built cycle circuit
    # (independent implementation: qiskit.quantum_info)
    plan = trotter_plan(three_nuclei.workload(), TrotterSettings(steps=3, order=2, weak_every=2))
    circuit = cycle_circuit(plan, program_parameters(plan))
    x = 322e3
    expected = Operator(circuit.assign_parameters(dict.fromkeys(circuit.parameters, x))).data
    assert np.allclose(plan_unitary(plan, {"rabi_hz": x}), expected, atol=1e-12)


def test_synthesis_cost_formula():
    # quantum Shannon decomposition CX counts (Shende, Bullock & Markov, IEEE TCAD 25, 2006):
    # 3 for two qubits (optimal, Vatan & Williams 2004), 20 for three
    assert synthesis_cost(2) == 3 and synthesis_cost(3) == 20


def test_cycle_unitary_program_equals_exact(three_nuclei):
    # no Trotter error: the synthesized program, logical and mapped, reproduces the exact engine
    sc = _strategy(three_nuclei, "cycle-unitary")
    exact = simulate(sc, "exact")
    noiseless = simulate(sc, "noiseless")
    assert noiseless.engine == "trotter"
    assert max_difference(exact, noiseless) < 1e-6
    program = scenario_programs(sc).mapped(make_processor({"topology": "line:4"}))
    assert len(program.mapped) == len(sc.sweep.values)
    assert len({m.region for m in program.mapped}) == 1  # every value on the same qubits
    circuits = [m.circuit for m in program.mapped]
    mapped = simulate_circuits(program, circuits, "mapped", density_matrix_simulator())
    assert max_difference(exact, mapped) < 1e-6


def test_cycle_unitary_covers_imperfection_nodes(three_nuclei):
    text = THREE_NUCLEI + "[imperfections]\ndrive_sigma_rel = 0.05\npoints = 2\n"
    sc = _strategy(_points(parse_scenario(text), [0, 2]), "cycle-unitary")
    program = scenario_programs(sc).logical()
    assert len(program.circuits) == 2 * 2  # values × nodes
    assert max_difference(simulate(sc, "exact"), simulate(sc, "trotter")) < 1e-6
    one = program.subset([1])
    assert one.workload.values == (sc.sweep.values[1],) and one.circuits == program.circuits[2:]


@pytest.mark.slow
def test_demo_cycle_unitary_on_the_grid():
    # issue target: <= 800 two-qubit gates per cycle on grid:3x3, noiseless program = exact
    sc = _strategy(_points(demo_scenario(), [8, 16]), "cycle-unitary")
    program = scenario_programs(sc).mapped(nominal=True)
    per_cycle = [gate_budget(m).per_cycle.two_qubit for m in program.mapped]
    assert max(per_cycle) <= 800
    circuits = [m.circuit for m in program.mapped]
    mapped = simulate_circuits(program, circuits, "mapped", density_matrix_simulator())
    assert max_difference(simulate(sc, "exact"), mapped) < 1e-6


@pytest.mark.slow
def test_demo_weak_terms_cut_the_gates_at_equal_error():
    # issue target: <= 2600 two-qubit gates per cycle, Trotter error within 10 % of 0.0295
    sc = demo_scenario()
    programs = scenario_programs(sc)  # k is chosen on the whole sweep
    program = programs.mapped(nominal=True)
    assert program.plan.weak_every > 1
    assert gate_budget(program.mapped[0]).per_cycle.two_qubit <= 2600
    error = trotter_error(sc.compile_job(), programs.trotter()[0])
    assert error.value <= 1.1 * DEMO_TROTTER_ERROR


def _rotations(plan, keys):
    return [r for ly in plan.cycle.layers() for r in ly.rotations if (r.pauli, r.qubits) in keys]


def _angle_sum(rotations, key):
    return sum(r.angle.at({"rabi_hz": 0.0}) for r in rotations if (r.pauli, r.qubits) == key)


def test_weak_terms_once_per_group_with_the_whole_angle(three_nuclei):
    # each weak (dipolar) rotation appears once per group of k steps with k·dt of phase, so
    # its angles over a cycle add up to those of the every-step formula (common practice)
    work = three_nuclei.workload()
    segment = work.schedule(TrotterSettings(steps=10)).block[0]
    slow = weak_keys(pauli_terms(work.system, segment, work.parameter))
    assert {k[1] for k in slow} == {(1, 3), (2, 3)}  # below 1/4 of the weakest NV term
    for order in (1, 2):
        every = trotter_plan(work, TrotterSettings(steps=10, order=order, weak_every=1))
        grouped = trotter_plan(work, TrotterSettings(steps=10, order=order, weak_every=4))
        per_key = len(_rotations(grouped, slow)) / len(slow)
        assert per_key == 3  # once per group: ceil(10/4) groups
        for key in slow:
            whole = _angle_sum(_rotations(every, slow), key)
            assert _angle_sum(_rotations(grouped, slow), key) == pytest.approx(whole, rel=1e-12)


def test_chosen_weak_interval_keeps_the_error(three_nuclei):
    # measured against the exact engine (dense eigh propagators, checked against kron+expm in
    # test_exact): the chosen k raises the Trotter error by at most 10 %
    sc = replace(three_nuclei, trotter=replace(three_nuclei.trotter, order=1))
    k, note = choose_weak_every(sc.workload(), sc.trotter)
    assert k > 1 and f"every {k} steps" in note
    exact = simulate(sc, "exact")

    def error(weak_every):
        forced = replace(sc, trotter=replace(sc.trotter, weak_every=weak_every))
        return max_difference(exact, simulate(forced, "trotter"))

    assert error(k) <= 1.1 * error(1)


def test_auto_picks_synthesis_for_a_small_experiment():
    # issue target: NV + 2, two cycles, line:3, default figures: synthesis chosen, S >= 0.35
    sc = load_scenario(HARDWARE)
    assert sc.processor.error_2q == 5e-3  # the module defaults (typical figures)
    programs = scenario_programs(_points(sc, [12]))
    assert programs.choice().strategy == "cycle-unitary"
    program = programs.mapped(nominal=True)
    assert gate_budget(program.mapped[0]).total.success_estimate >= 0.35
    rows = {r.strategy: r for r in programs.rows()}
    assert set(rows) == {"trotter", "cycle-unitary"}
    assert rows["cycle-unitary"].two_qubit_per_cycle < rows["trotter"].two_qubit_per_cycle


def test_auto_with_a_target_error_takes_the_fewest_gates():
    sc = _points(load_scenario(HARDWARE), [12])
    sc = replace(sc, compile=replace(sc.compile, target_error=0.2))
    choice = scenario_programs(sc).choice()
    passing = [r for r in choice.rows if r.approximation_error.value <= 0.2]
    chosen = next(
        r
        for r in choice.rows
        if r.strategy == choice.strategy and (r.steps is None or r.steps == choice.trotter.steps)
    )
    assert chosen.approximation_error.value <= 0.2
    assert chosen.two_qubit_per_cycle == min(r.two_qubit_per_cycle for r in passing)


def test_one_mapping_per_processor(three_nuclei):
    programs = scenario_programs(three_nuclei)
    proc = make_processor({"topology": "line:4"})
    assert programs.mapped(proc) is programs.mapped(proc)
    assert programs.mapped(proc).circuits[0] is programs.logical(proc).circuits[0]


def test_trotter_program_subset_keeps_the_circuit(three_nuclei):
    program = compile_workload(three_nuclei.workload(), "trotter", TrotterSettings(steps=4))
    sub = program.subset([1, 3])
    assert sub.circuit is program.circuit and len(sub.workload.values) == 2
    mapped = map_onto(program, make_processor({"topology": "full:4"}), three_nuclei.mapping)
    assert math.isclose(len(mapped.mapped), 1)
