"""Mapping a logical program onto a processor: region, initial layout, routing, translation.

The program runs on a connected region of exactly NV + n physical qubits: every extra qubit
would make a density-matrix simulation 4× larger, and hardware gains nothing from it. The region
grows from a hub (the node of highest degree, then closeness) for the NV: first the hub's
neighbours (the NV interacts with every nucleus), then the nodes with most edges into the region.

Two regions are tried (hub-first and compact, see `choose_region`), and on each two initial
layouts compete; the candidate with fewest two-qubit gates wins (named layout/region):
``interaction``, ours, puts the NV on the hub and places each nucleus (most strongly coupled
first) on the free node that minimises Σ_partners (gates per step)·(distance - 1), so dipolar
partners sit near each other; ``qiskit``, the transpiler's own layout (VF2Layout, then
SabreLayout). Routing and translation to the native gates use qiskit's preset pass manager with a
fixed seed and `approximation_degree=1.0` (without it, synthesis approximates blocks against the
target's error rates). Parameters stay unbound, so one mapped circuit serves the whole sweep.

Exactness: level 1 reproduces the logical program to rounding (1e-13). At levels 2 and 3,
qiskit's two-qubit peephole synthesis still drops blocks within 1e-9 of a cheaper form even at
approximation_degree=1.0 (an open upstream issue, qiskit #16864); over thousands of blocks this
moved polarizations by up to ~5e-5 in our tests, and it saves many two-qubit gates for tiny
couplings. Every engine simulates the mapped circuit itself, so what runs is what is reported.
"""

from __future__ import annotations

from dataclasses import dataclass

import networkx as nx
from qiskit import QuantumCircuit
from qiskit.converters import dag_to_circuit
from qiskit.transpiler import generate_preset_pass_manager

from ..physics.model import SpinSystem
from .processor import Processor, build_target, check_fits

DEFAULT_SEED = 1234
DEFAULT_OPTIMIZATION_LEVEL = 2


@dataclass(frozen=True)
class MappingSettings:
    """Transpiler settings for mapping onto a processor."""

    optimization_level: int = DEFAULT_OPTIMIZATION_LEVEL
    seed: int = DEFAULT_SEED


@dataclass(frozen=True)
class MappedProgram:
    """A program routed and translated onto `region` of `processor`.

    Circuit qubit i is physical qubit region[i]. `initial` and `final` map each logical qubit
    (0 = NV, j = nucleus j) to its physical qubit before and after the program (routing moves
    them with SWAPs). `swaps_per_segment` counts SWAPs per barrier-delimited segment
    (preparation, then each cycle).
    """

    processor: Processor
    region: tuple[int, ...]
    circuit: QuantumCircuit
    initial: tuple[int, ...]
    final: tuple[int, ...]
    layout_method: str
    candidates: dict[str, int]
    swaps_per_segment: tuple[int, ...]

    def edges_used(self) -> set[tuple[int, int]]:
        """Physical qubit pairs of every two-qubit instruction."""
        pairs = set()
        for inst in self.circuit.data:
            if inst.operation.num_qubits == 2 and inst.operation.name != "barrier":
                a, b = (self.region[self.circuit.find_bit(q).index] for q in inst.qubits)
                pairs.add((min(a, b), max(a, b)))
        return pairs


def interaction_weights(system: SpinSystem) -> dict[tuple[int, int], float]:
    """Two-qubit gates per Trotter step between logical qubits (0 = NV, j = nucleus j)."""
    weights: dict[tuple[int, int], float] = {}
    for j, n in enumerate(system.nuclei, start=1):
        weights[(0, j)] = float(sum(a != 0 for a in (n.a_par_hz, n.a_zx_hz, n.a_zy_hz)))
    for c in system.couplings:
        weights[(c.first + 1, c.second + 1)] = 3.0
    return weights


def choose_region(graph: nx.Graph, size: int, *, hub_first: bool = True) -> list[int]:
    """A connected set of `size` nodes grown from the hub (first in the list).

    `hub_first`: the hub's neighbours first (suits NV-centric clusters); otherwise the frontier
    node with most edges into the region (compact regions suit dipolar networks); then nearest.
    """
    if size > graph.number_of_nodes():
        raise ValueError("region larger than the graph")
    closeness = nx.closeness_centrality(graph)
    hub = max(graph.nodes, key=lambda v: (graph.degree[v], closeness[v], -v))
    region = [hub]
    dist = nx.single_source_shortest_path_length(graph, hub)
    while len(region) < size:
        inside = set(region)
        frontier = {u for v in region for u in graph.neighbors(v)} - inside
        best = max(
            frontier,
            key=lambda u: (
                hub_first and graph.has_edge(u, hub),
                sum(w in inside for w in graph.neighbors(u)),
                -dist[u],
                graph.degree[u],
                -u,
            ),
        )
        region.append(best)
    return region


def interaction_layout(system: SpinSystem, graph: nx.Graph, region: list[int]) -> list[int]:
    """Physical node of each logical qubit: NV on region[0], nuclei greedily by coupling."""
    sub = graph.subgraph(region)
    dist = dict(nx.all_pairs_shortest_path_length(sub))
    weights = interaction_weights(system)
    placed = {0: region[0]}
    order = sorted(
        range(1, system.num_qubits),
        key=lambda j: -abs(complex(system.nuclei[j - 1].a_par_hz, system.nuclei[j - 1].a_perp_hz)),
    )
    for j in order:
        free = [v for v in region if v not in placed.values()]

        def cost(v: int, j: int = j) -> tuple[float, int]:
            total = 0.0
            for (a, b), w in weights.items():
                other = b if a == j else a if b == j else None
                if other is not None and other in placed:
                    total += w * (dist[v][placed[other]] - 1)
            return total, dist[v][region[0]]

        placed[j] = min(free, key=cost)
    return [placed[j] for j in range(system.num_qubits)]


def _two_qubit_count(circuit: QuantumCircuit) -> int:
    return sum(
        1
        for inst in circuit.data
        if inst.operation.num_qubits == 2 and inst.operation.name != "barrier"
    )


#: Instructions that take no part in a segment's work: barriers and simulator saves.
SKIPPED = frozenset({"barrier", "save_probabilities", "save_density_matrix"})


#: Label of the barriers that fence folded gates (`folding.py`): they close no segment.
FOLD_FENCE = "fold"


def closes_segment(inst, circuit: QuantumCircuit) -> bool:
    """Whether `inst` is a full-width barrier (the end of the preparation or of a cycle)."""
    op = inst.operation
    return op.name == "barrier" and op.num_qubits == circuit.num_qubits and op.label != FOLD_FENCE


def split_segments(circuit: QuantumCircuit) -> list[list]:
    """Instructions between full-width barriers (saves and barriers dropped): the
    preparation, then each cycle."""
    segments: list[list] = [[]]
    for inst in circuit.data:
        name = inst.operation.name
        if closes_segment(inst, circuit):
            segments.append([])
        elif name not in SKIPPED:
            segments[-1].append(inst)
    return segments


def _segment_counts(circuit: QuantumCircuit, name: str) -> list[int]:
    """Count of `name` per segment between full-width barriers."""
    return [sum(inst.operation.name == name for inst in seg) for seg in split_segments(circuit)]


def _transpile(circuit, target, layout, level, seed):
    """Transpile, recording the SWAPs per segment at the routing stage."""
    pm = generate_preset_pass_manager(
        optimization_level=level,
        target=target,
        initial_layout=layout,
        seed_transpiler=seed,
        approximation_degree=1.0,
    )
    seen: dict[str, list[int]] = {"swaps": []}

    def watch(pass_, dag, time, property_set, count):
        ops = dag.count_ops(recurse=False)
        if ops.get("swap", 0) > sum(seen["swaps"]):
            seen["swaps"] = _segment_counts(dag_to_circuit(dag), "swap")

    out = pm.run(circuit, callback=watch)
    return out, seen["swaps"]


def map_program(
    logical: QuantumCircuit,
    system: SpinSystem,
    processor: Processor,
    *,
    optimization_level: int = DEFAULT_OPTIMIZATION_LEVEL,
    seed: int = DEFAULT_SEED,
    fixed: MappedProgram | None = None,
) -> MappedProgram:
    """Route and translate `logical` (qubit 0 NV, 1..n nuclei) onto `processor`.

    With `fixed`, the region and initial layout of that mapping are kept (no competition), so
    programs of one sweep share their physical qubits.
    """
    size = logical.num_qubits
    check_fits(processor, size)
    if fixed is not None:
        region = list(fixed.region)
        local = {v: i for i, v in enumerate(region)}
        layout = [local[v] for v in fixed.initial]
        circuit, swaps = _transpile(
            logical, build_target(processor, region), layout, optimization_level, seed
        )
        results = {fixed.layout_method: (circuit, swaps, region)}
    else:
        results = _candidates(logical, system, processor, optimization_level, seed)
    counts = {name: _two_qubit_count(c) for name, (c, _, _) in results.items()}
    winner = min(counts, key=lambda k: (counts[k], not k.startswith("interaction")))
    circuit, swaps, region = results[winner]
    layout = circuit.layout
    initial = tuple(region[i] for i in layout.initial_index_layout(filter_ancillas=True))
    final = tuple(region[i] for i in layout.final_index_layout(filter_ancillas=True))
    segments = len(split_segments(circuit))
    swaps = tuple(swaps + [0] * (segments - len(swaps))) if swaps else (0,) * segments
    return MappedProgram(processor, tuple(region), circuit, initial, final, winner, counts, swaps)


def _candidates(logical, system, processor, level, seed) -> dict[str, tuple]:
    """Both layouts on both regions (hub-first and compact): name → (circuit, swaps, region)."""
    graph = processor.graph()
    size = logical.num_qubits
    regions = {"hub": choose_region(graph, size, hub_first=True)}
    compact = choose_region(graph, size, hub_first=False)
    if sorted(compact) != sorted(regions["hub"]):
        regions["compact"] = compact
    results = {}
    for region_name, region in regions.items():
        target = build_target(processor, region)
        local = {v: i for i, v in enumerate(region)}
        ours = [local[v] for v in interaction_layout(system, graph, region)]
        for layout_name, layout in (("interaction", ours), ("qiskit", None)):
            circuit, swaps = _transpile(logical, target, layout, level, seed)
            results[f"{layout_name}/{region_name}"] = (circuit, swaps, region)
    return results
