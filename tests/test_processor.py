"""Processor descriptions: topologies, validation, qiskit Targets."""

import networkx as nx
import pytest
from qiskit.transpiler import CouplingMap

from dnpqc import ScenarioError, parse_scenario
from dnpqc.compile.processor import (
    PRESETS,
    build_target,
    coupling_graph,
    make_processor,
    processor_for_spec,
)


@pytest.mark.parametrize(
    ("spec", "nodes", "edges"),
    [
        ("line:7", 7, 6),
        ("ring:6", 6, 6),
        ("grid:3x4", 12, 3 * 3 + 4 * 2),  # R(C-1) + C(R-1)
        ("star:7", 7, 6),
        ("full:5", 5, 10),  # N(N-1)/2
        # heavy-hex, distance d: (5d² - 2d - 1)/2 qubits (Chamberland et al., PRX 10, 011022, 2020)
        ("heavy-hex:3", 19, None),
        ("heavy-hex:5", 57, None),
    ],
)
def test_topology_sizes(spec, nodes, edges):
    n, e = coupling_graph(spec)
    assert n == nodes
    if edges is not None:
        assert len(e) == edges
    graph = nx.Graph(e)
    assert nx.is_connected(graph) and all(a != b for a, b in e)


def test_heavy_hex_matches_qiskit_numbering():
    _, edges = coupling_graph("heavy-hex:3")
    qiskit_edges = {tuple(sorted(x)) for x in CouplingMap.from_heavy_hex(3).get_edges()}
    assert set(edges) == qiskit_edges
    assert max(dict(nx.Graph(edges).degree).values()) == 3


def test_grid_numbering_is_row_major():
    _, edges = coupling_graph("grid:2x3")
    assert (0, 1) in edges and (0, 3) in edges and (2, 5) in edges and (2, 3) not in edges


@pytest.mark.parametrize(
    ("settings", "match"),
    [
        ({"topology": "hex:3"}, "is not a topology"),
        ({"topology": "grid:0x3"}, "rows and columns >= 1"),
        ({"topology": "heavy-hex:4"}, "heavy-hex distance must be odd"),
        ({"edges": [[0, 1], [2, 3]]}, "must be a connected graph"),
        ({"edges": [[0, 0], [0, 1]]}, "self-loop"),
        ({"t1_s": 50e-6, "t2_s": 120e-6}, r"exceeds 2·t1_s"),
        ({"t1_s": [1e-4, 1e-4]}, "needs one value or 9"),
        ({"t1_s": -1e-6}, "`processor.t1_s` must be > 0"),
        ({"error_2q": 1.5}, r"`processor.error_2q` must be in \[0, 1\]"),
        ({"native_gates": "cx+u"}, "`processor.native_gates` must be one of"),
        ({"preset": "quantum-toaster"}, "`processor.preset` must be one of"),
    ],
)
def test_bad_processor(settings, match):
    with pytest.raises(ScenarioError, match=match) as info:
        make_processor(settings)
    assert "\n" not in str(info.value)


def test_scenario_processor_table_and_errors():
    base = """
[spins]
field_t = 0.05
[[spins.nuclei]]
label = "C1"
a_par_hz = 1e4
a_perp_hz = 1e4
[[spins.nuclei]]
label = "C2"
a_par_hz = -1e4
a_perp_hz = 5e3
[drive]
protocol = "spin-lock"
rabi_hz = 5e5
[cycle]
interaction_time_s = 1e-5
[processor]
"""
    sc = parse_scenario(base + 'topology = "line:5"\nt1_s = [1e-4, 2e-4, 1e-4, 1e-4, 1e-4]\n')
    assert sc.processor.num_qubits == 5 and sc.processor.t1_s[1] == 2e-4
    for extra, match in [
        ('topology = "line:2"', "has 2 qubits; the program needs 3"),
        ('topology = "line:5"\nedges = [[0, 1]]', "`topology` or `edges`, not both"),
        ("edges = [[0, 1], [1]]", "must be a list of qubit pairs"),
        ('topology = "line:5"\ncolour = "red"', "unknown key `colour` in `processor`"),
        ('compare = ["line:5", "moon:3"]', "is not a topology"),
        ("optimization_level = 4", "must be 0..3"),
    ]:
        with pytest.raises(ScenarioError, match=match):
            parse_scenario(base + extra + "\n")


def test_target_durations_errors_and_coherence():
    proc = make_processor({"topology": "line:3", "t1_s": [1e-4, 2e-4, 3e-4], "t2_s": 5e-5})
    target = build_target(proc, [2, 1])
    assert target.num_qubits == 2
    assert target.qubit_properties[0].t1 == 3e-4 and target.qubit_properties[1].t2 == 5e-5
    cz = target["cz"]
    assert set(cz) == {(0, 1), (1, 0)}
    assert cz[(0, 1)].duration == 100e-9 and cz[(0, 1)].error == 5e-3
    assert target["rz"][(0,)].duration == 0.0  # virtual Z
    assert target["sx"][(0,)].error == 2e-4
    assert target["measure"][(1,)].duration == 1e-6


def test_presets_and_spec_override():
    for name in PRESETS:
        assert make_processor({"preset": name}).num_qubits >= 9
    ion = processor_for_spec("ion-chain-12")
    assert ion.native_gates == "rzz+rx+rz" and ion.num_qubits == 12
    moved = processor_for_spec("ring:6", ion)
    assert moved.num_qubits == 6 and moved.time_2q_s == ion.time_2q_s
