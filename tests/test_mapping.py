"""Mapping onto coupling graphs: graph respected, native gates only, same physics."""

import numpy as np
import pytest

from dnpqc import compile_program, parse_scenario
from dnpqc.compile.budget import gate_budget
from dnpqc.compile.mapping import choose_region, interaction_layout, map_program
from dnpqc.compile.processor import make_processor
from dnpqc.engines.circuit import density_matrix_simulator, run_program

LATTICE = """
[spins]
field_t = 0.03
[spins.lattice]
radius_nm = 1.4
seed = {seed}
abundance = 0.03
min_distance_nm = 0.6
max_nuclei = 3
[drive]
protocol = "spin-lock"
rabi_hz = 330e3
[sweep]
parameter = "rabi_hz"
start = 310e3
stop = 350e3
points = 3
[cycle]
interaction_time_s = 8e-6
count = 2
[trotter]
steps = 6
"""

TOPOLOGIES = ["line:4", "ring:5", "grid:3x3", "heavy-hex:3", "star:4", "full:4"]


def _native(processor):
    return {processor.two_qubit_gate, *processor.one_qubit_gates}


@pytest.mark.parametrize("topology", TOPOLOGIES)
@pytest.mark.parametrize("seed", [1, 2])
def test_mapped_circuit_respects_graph_and_native_gates(topology, seed):
    sc = parse_scenario(LATTICE.format(seed=seed))
    proc = make_processor({"topology": topology})
    mapped = map_program(compile_program(sc).circuit, sc.system, proc)
    edges = {tuple(sorted(e)) for e in proc.edges}
    assert mapped.edges_used() <= edges
    allowed = _native(proc) | {"reset", "barrier", "save_probabilities"}
    assert set(mapped.circuit.count_ops()) <= allowed
    assert _native(proc) == set(proc.native_gates.split("+"))  # cz+rz+sx: no x
    assert len(set(mapped.region)) == sc.system.num_qubits


@pytest.mark.parametrize("topology", ["line:4", "grid:3x3", "heavy-hex:3"])
@pytest.mark.parametrize(("level", "tolerance"), [(1, 1e-9), (2, 2e-4)])
def test_mapped_program_simulates_to_the_same_polarizations(topology, level, tolerance):
    # routing permutes qubits; the saves follow the logical qubits, so the polarizations agree
    # with the unmapped circuit without any manual permutation (this would catch the Aer
    # single-qubit expectation-value bug noted for truncated circuits). Level 2's peephole
    # synthesis drops blocks within 1e-9 of a cheaper form (qiskit issue #16864), hence 2e-4.
    sc = parse_scenario(LATTICE.format(seed=3))
    program = compile_program(sc)
    proc = make_processor({"topology": topology, "native_gates": "cz+rz+sx"})
    mapped = map_program(program.circuit, sc.system, proc, optimization_level=level)
    values = np.asarray(sc.sweep.values)
    sim = density_matrix_simulator()
    a = run_program(program.circuit, values, cycles=2, num_nuclei=3, simulator=sim)
    b = run_program(mapped.circuit, values, cycles=2, num_nuclei=3, simulator=sim)
    assert np.allclose(a, b, atol=tolerance)


@pytest.mark.parametrize("gates", ["cz+r", "rzz+rx+rz", "ecr+rz+sx", "ecr+rz+sx+x", "cz+rz+sx+x"])
def test_other_native_sets_simulate_the_same(gates):
    sc = parse_scenario(LATTICE.format(seed=4))
    program = compile_program(sc)
    proc = make_processor({"topology": "grid:3x3", "native_gates": gates})
    mapped = map_program(program.circuit, sc.system, proc, optimization_level=1)
    values = np.asarray(sc.sweep.values[:1])
    sim = density_matrix_simulator()
    a = run_program(program.circuit, values, cycles=2, num_nuclei=3, simulator=sim)
    b = run_program(mapped.circuit, values, cycles=2, num_nuclei=3, simulator=sim)
    assert np.allclose(a, b, atol=1e-9)
    # a set emits only the gates that its name lists
    assert set(mapped.circuit.count_ops()) <= {
        *gates.split("+"),
        "reset",
        "barrier",
        "save_probabilities",
    }


NV_CENTRIC = """
[spins]
field_t = 0.05
dipolar = false
[[spins.nuclei]]
label = "A"
a_par_hz = 2e4
a_perp_hz = 1e4
[[spins.nuclei]]
label = "B"
a_par_hz = -1e4
a_perp_hz = 8e3
[[spins.nuclei]]
label = "C"
a_par_hz = 5e3
a_perp_hz = 1.2e4
[[spins.nuclei]]
label = "D"
a_par_hz = 3e4
a_perp_hz = 4e3
[drive]
protocol = "spin-lock"
rabi_hz = 5e5
[cycle]
interaction_time_s = 1e-5
count = 2
[trotter]
steps = 5
order = 1
weak_every = 1
"""


def test_no_swaps_on_a_star_for_an_nv_centric_cluster():
    # by construction: every interaction is NV–nucleus and the star couples node 0 to all
    sc = parse_scenario(NV_CENTRIC)
    mapped = map_program(
        compile_program(sc).circuit, sc.system, make_processor({"topology": "star:6"})
    )
    assert sum(mapped.swaps_per_segment) == 0
    assert mapped.initial[0] == 0  # the NV on the hub


def test_two_qubit_count_on_full_graph_equals_term_count():
    # with a native ZZ rotation and no block merging, each interaction term of each first-order
    # step is one two-qubit gate (common practice): 2 per nucleus (ZZ, ZX), 3 per dipolar pair;
    # plus one per nucleus for the CX of the mixed-state preparation
    sc = parse_scenario(
        NV_CENTRIC.replace("dipolar = false\n", "").replace(
            "[drive]", '[[spins.couplings]]\npair = ["A", "B"]\nd_hz = 300.0\n[drive]'
        )
    )
    proc = make_processor({"topology": "full:5", "native_gates": "rzz+rx+rz"})
    mapped = map_program(compile_program(sc).circuit, sc.system, proc, optimization_level=1)
    n, pairs = 4, 1
    expected = (2 * n + 3 * pairs) * sc.trotter.steps * sc.cycles + n
    assert mapped.circuit.count_ops()["rzz"] == expected
    budget = gate_budget(mapped)
    assert budget.per_cycle.two_qubit == (2 * n + 3 * pairs) * sc.trotter.steps
    assert budget.total.swaps == 0


def test_interaction_layout_puts_nv_on_the_hub_and_partners_close():
    sc = parse_scenario(NV_CENTRIC)
    proc = make_processor({"topology": "grid:3x3"})
    region = choose_region(proc.graph(), 5)
    assert region[0] == 4  # centre of the 3×3 grid
    layout = interaction_layout(sc.system, proc.graph(), region)
    # the four nuclei take the NV's four neighbours of the region
    assert layout[0] == 4
    assert all(proc.graph().has_edge(4, v) for v in layout[1:])


def test_mapping_reports_winner_and_layouts():
    sc = parse_scenario(LATTICE.format(seed=5))
    mapped = map_program(
        compile_program(sc).circuit, sc.system, make_processor({"topology": "line:6"})
    )
    assert mapped.layout_method.split("/")[0] in ("interaction", "qiskit")
    assert mapped.candidates[mapped.layout_method] == min(mapped.candidates.values())
    assert sorted(mapped.final) == sorted(mapped.initial)
