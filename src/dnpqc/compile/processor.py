"""Target processors: coupling graphs, native gate sets, timings and error rates.

A `Processor` is plain data (validated at construction); `build_target` turns it into a qiskit
`Target` with per-gate durations (s) and average gate infidelities, per-qubit T1/T2 (s), reset,
measure and delay, plus the Aer save instructions (duration 0) so that circuits carrying saves
can be transpiled and scheduled.

Defaults are typical figures of present superconducting transmon processors (T1 = T2 = 100 µs,
35 ns single-qubit and 100 ns two-qubit gates, 2e-4 and 5e-3 infidelity, 1 µs reset and
readout, 1 % readout error). They are typical values, not those of any particular device.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field, replace
from typing import Any

import networkx as nx
from qiskit.circuit import Barrier, Delay, Measure, Parameter, Reset
from qiskit.circuit.library import (
    CZGate,
    ECRGate,
    RGate,
    RXGate,
    RZGate,
    RZZGate,
    SXGate,
    XGate,
)
from qiskit.transpiler import CouplingMap, InstructionProperties, QubitProperties, Target
from qiskit_aer.library import SaveDensityMatrix, SaveProbabilities

from ..errors import ScenarioError
from ..limits import MAX_PROCESSOR_QUBITS

#: Native gate sets, named for what they are: (two-qubit gate, single-qubit gates). A set emits
#: only the gates its name lists (`cz+rz+sx` writes X as two SX; `cz+rz+sx+x` has its own X).
NATIVE_GATE_SETS: dict[str, tuple[str, tuple[str, ...]]] = {
    "cz+rz+sx": ("cz", ("rz", "sx")),
    "cz+rz+sx+x": ("cz", ("rz", "sx", "x")),
    "cz+r": ("cz", ("r",)),
    "rzz+rx+rz": ("rzz", ("rx", "rz")),
    "ecr+rz+sx": ("ecr", ("rz", "sx")),
    "ecr+rz+sx+x": ("ecr", ("rz", "sx", "x")),
}

#: Single-qubit gates that are frame changes: zero duration, no error (virtual Z).
VIRTUAL_GATES = frozenset({"rz"})

TOPOLOGY_FORMS = "line:N, ring:N, grid:RxC, heavy-hex:D, star:N, full:N"


@dataclass(frozen=True)
class Processor:
    """A target device: its coupling graph (edges over qubits 0..Q-1) and its figures."""

    name: str
    num_qubits: int
    edges: tuple[tuple[int, int], ...]
    native_gates: str = "cz+rz+sx"
    t1_s: tuple[float, ...] = ()
    t2_s: tuple[float, ...] = ()
    time_1q_s: float = 35e-9
    time_2q_s: float = 100e-9
    error_1q: float = 2e-4
    error_2q: float = 5e-3
    time_reset_s: float = 1e-6
    time_measure_s: float = 1e-6
    error_readout: float = 1e-2
    error_reset: float = 1e-3
    compare: tuple[str, ...] = field(default=())

    def __post_init__(self) -> None:
        if self.native_gates not in NATIVE_GATE_SETS:
            raise ScenarioError(
                f"`processor.native_gates` must be one of {', '.join(NATIVE_GATE_SETS)}; "
                f"got {self.native_gates!r}"
            )
        graph = self.graph()
        for a, b in self.edges:
            if a == b:
                raise ScenarioError(f"`processor.edges` has a self-loop on qubit {a}")
            if not (0 <= a < self.num_qubits and 0 <= b < self.num_qubits):
                raise ScenarioError(
                    f"`processor.edges` names qubit {max(a, b)} outside 0..{self.num_qubits - 1}"
                )
        if self.num_qubits < 1 or not nx.is_connected(graph):
            raise ScenarioError(f"`processor.topology` {self.name!r} must be a connected graph")
        for key in ("time_1q_s", "time_2q_s", "time_reset_s", "time_measure_s"):
            _check_range(key, getattr(self, key), low=0.0, strict=False)
        for key in ("error_1q", "error_2q", "error_readout", "error_reset"):
            _check_range(key, getattr(self, key), low=0.0, high=1.0)
        for key in ("t1_s", "t2_s"):
            values = getattr(self, key)
            if len(values) != self.num_qubits:
                raise ScenarioError(
                    f"`processor.{key}` needs one value or {self.num_qubits} (one per qubit), "
                    f"got {len(values)}"
                )
            for v in values:
                _check_range(key, v, low=0.0, strict=True)
        for q, (t1, t2) in enumerate(zip(self.t1_s, self.t2_s, strict=True)):
            if t2 > 2 * t1:
                # physical bound T2 <= 2·T1 (pure dephasing rate >= 0; Nielsen & Chuang, §8.3)
                raise ScenarioError(
                    f"`processor.t2_s` of qubit {q} ({t2:g} s) exceeds 2·t1_s ({2 * t1:g} s); "
                    "T2 <= 2·T1 always holds"
                )

    def graph(self) -> nx.Graph:
        graph = nx.Graph()
        graph.add_nodes_from(range(self.num_qubits))
        graph.add_edges_from(self.edges)
        return graph

    @property
    def two_qubit_gate(self) -> str:
        return NATIVE_GATE_SETS[self.native_gates][0]

    @property
    def one_qubit_gates(self) -> tuple[str, ...]:
        return NATIVE_GATE_SETS[self.native_gates][1]

    def with_topology(self, spec: str) -> Processor:
        """The same figures on another coupling graph (per-qubit T1/T2 need a uniform value)."""
        n, edges = coupling_graph(spec)
        return replace(
            self,
            name=spec,
            num_qubits=n,
            edges=edges,
            t1_s=_resize(self.t1_s, n, "t1_s"),
            t2_s=_resize(self.t2_s, n, "t2_s"),
        )

    def gate_duration_s(self, name: str) -> float:
        """Duration of a native instruction by name."""
        if name in VIRTUAL_GATES:
            return 0.0
        if name == self.two_qubit_gate or name == "swap":
            return self.time_2q_s
        return {"reset": self.time_reset_s, "measure": self.time_measure_s}.get(
            name, self.time_1q_s
        )

    def instruction_duration_s(self, operation) -> float:
        """Duration of a circuit instruction: a `delay` carries its own (in s, ms, us, ns or
        the device's dt, taken as 1 ns when unknown), the others are native by name."""
        if operation.name != "delay":
            return self.gate_duration_s(operation.name)
        scale = DELAY_UNITS_S.get(operation.unit)
        if scale is None:
            raise ValueError(f"delay unit {operation.unit!r} is not one of {sorted(DELAY_UNITS_S)}")
        return float(operation.duration) * scale

    def gate_error(self, name: str) -> float:
        """Average infidelity of a native instruction by name (readout for measure)."""
        if name in VIRTUAL_GATES:
            return 0.0
        if name == self.two_qubit_gate:
            return self.error_2q
        return {"reset": self.error_reset, "measure": self.error_readout}.get(name, self.error_1q)


#: Seconds per unit of a `delay` instruction (OpenQASM 3 duration units).
DELAY_UNITS_S = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "µs": 1e-6, "ns": 1e-9, "dt": 1e-9}


def check_fits(processor: Processor, num_qubits: int) -> None:
    """Refuse a processor with fewer qubits than the program (NV + nuclei) needs."""
    if num_qubits > processor.num_qubits:
        raise ScenarioError(
            f"`processor.topology` {processor.name!r} has {processor.num_qubits} qubits; the "
            f"program needs {num_qubits} (NV + {num_qubits - 1} nuclei)"
        )


def _resize(values: tuple[float, ...], n: int, key: str) -> tuple[float, ...]:
    if len(set(values)) == 1:
        return (values[0],) * n
    if len(values) == n:
        return values
    raise ScenarioError(
        f"`processor.{key}` lists one value per qubit; a new topology needs one value"
    )


def _check_range(
    key: str, value: float, *, low: float, high: float | None = None, strict: bool = False
) -> None:
    bad = not math.isfinite(value) or (value <= low if strict else value < low)
    if high is not None and value > high:
        bad = True
    if bad:
        allowed = (
            f"in [{low:g}, {high:g}]"
            if high is not None
            else (f"> {low:g}" if strict else f">= {low:g}")
        )
        raise ScenarioError(f"`processor.{key}` must be {allowed}, got {value:g}")


def coupling_graph(spec: str) -> tuple[int, tuple[tuple[int, int], ...]]:
    """Qubit count and edge list of a topology spec (see TOPOLOGY_FORMS)."""
    match = re.fullmatch(
        r"(line|ring|star|full|heavy-hex):(\d{1,9})|grid:(\d{1,9})x(\d{1,9})",
        spec.strip(" "),
        flags=re.ASCII,
    )
    if not match:
        raise ScenarioError(
            f"`processor.topology` {spec[:60]!r} is not a topology; use one of {TOPOLOGY_FORMS}"
        )
    _check_size(spec, match)
    if match.group(3):
        rows, cols = int(match.group(3)), int(match.group(4))
        if rows < 1 or cols < 1:
            raise ScenarioError(f"`processor.topology` {spec!r} needs rows and columns >= 1")
        edges = [(r * cols + c, r * cols + c + 1) for r in range(rows) for c in range(cols - 1)]
        edges += [(r * cols + c, (r + 1) * cols + c) for r in range(rows - 1) for c in range(cols)]
        return rows * cols, tuple(edges)
    kind, n = match.group(1), int(match.group(2))
    if kind == "heavy-hex":
        if n < 1 or n % 2 == 0:
            raise ScenarioError(
                f"`processor.topology` {spec!r}: heavy-hex distance must be odd, >= 1"
            )
        cmap = CouplingMap.from_heavy_hex(n)
        edges = sorted({tuple(sorted(e)) for e in cmap.get_edges()})
        return cmap.size(), tuple(edges)
    if n < 1:
        raise ScenarioError(f"`processor.topology` {spec!r} needs at least one qubit")
    if kind == "line":
        edges = [(i, i + 1) for i in range(n - 1)]
    elif kind == "ring":
        edges = (
            [(i, (i + 1) % n) for i in range(n)] if n > 2 else [(i, i + 1) for i in range(n - 1)]
        )
    elif kind == "star":
        edges = [(0, i) for i in range(1, n)]
    else:
        edges = [(i, j) for i in range(n) for j in range(i + 1, n)]
    return n, tuple(sorted({tuple(sorted(e)) for e in edges}))


def _check_size(spec: str, match: re.Match) -> None:
    """Refuse a graph beyond MAX_PROCESSOR_QUBITS before building its edge list."""
    if match.group(3):
        qubits = int(match.group(3)) * int(match.group(4))
    elif match.group(1) == "heavy-hex":
        d = int(match.group(2))
        qubits = (5 * d * d - 2 * d - 1) // 2  # qiskit CouplingMap.from_heavy_hex size
    else:
        qubits = int(match.group(2))
    if qubits > MAX_PROCESSOR_QUBITS:
        raise ScenarioError(
            f"`processor.topology` {spec!r} has {qubits} qubits; at most "
            f"{MAX_PROCESSOR_QUBITS} are allowed"
        )


#: Named presets: a topology and typical figures of a device class (typical values, not a device).
PRESETS: dict[str, dict[str, Any]] = {
    "transmon-grid-9": {"topology": "grid:3x3", "native_gates": "cz+rz+sx"},
    "transmon-heavy-hex-3": {
        "topology": "heavy-hex:3",
        "native_gates": "ecr+rz+sx",
        "time_2q_s": 500e-9,
        "error_2q": 7e-3,
    },
    # trapped ions: all-to-all, slow gates, long coherence (typical orders of magnitude)
    "ion-chain-12": {
        "topology": "full:12",
        "native_gates": "rzz+rx+rz",
        "t1_s": 10.0,
        "t2_s": 1.0,
        "time_1q_s": 10e-6,
        "time_2q_s": 200e-6,
        "error_1q": 1e-4,
        "error_2q": 3e-3,
        "time_reset_s": 20e-6,
        "time_measure_s": 100e-6,
        "error_readout": 3e-3,
    },
}

DEFAULTS: dict[str, Any] = {"topology": "grid:3x3", "t1_s": 100e-6, "t2_s": 100e-6}


def make_processor(settings: dict[str, Any]) -> Processor:
    """A Processor from scenario-style settings (`topology` or `edges`, figures, `preset`)."""
    merged = dict(DEFAULTS)
    preset = settings.get("preset")
    if preset is not None:
        if preset not in PRESETS:
            raise ScenarioError(
                f"`processor.preset` must be one of {', '.join(PRESETS)}; got {preset!r}"
            )
        merged.update(PRESETS[preset])
    merged.update({k: v for k, v in settings.items() if k != "preset"})
    if "edges" in settings:
        edges = tuple(tuple(e) for e in merged.pop("edges"))
        merged.pop("topology", None)
        n = 1 + max((max(e) for e in edges), default=0)
        name = f"edges:{len(edges)}"
    else:
        spec = merged.pop("topology")
        n, edges = coupling_graph(spec)
        name = spec if preset is None or "topology" in settings else preset
    for key in ("t1_s", "t2_s"):
        value = merged[key]
        merged[key] = tuple(value) if isinstance(value, list | tuple) else (value,) * n
    return Processor(name=name, num_qubits=n, edges=edges, **merged)


def processor_for_spec(spec: str, base: Processor | None = None) -> Processor:
    """`--processor SPEC`: a preset name, or a topology that replaces the base's graph."""
    if spec in PRESETS:
        return make_processor({"preset": spec})
    return (base or make_processor({})).with_topology(spec)


def build_target(processor: Processor, qubits: list[int] | None = None) -> Target:
    """qiskit Target on `qubits` (default: all), relabelled 0..k-1 in the given order."""
    qubits = list(range(processor.num_qubits)) if qubits is None else list(qubits)
    index = {q: i for i, q in enumerate(qubits)}
    target = Target(
        num_qubits=len(qubits),
        qubit_properties=[
            QubitProperties(t1=processor.t1_s[q], t2=processor.t2_s[q]) for q in qubits
        ],
    )
    theta, phi = Parameter("θ"), Parameter("φ")
    one_q = {
        "rz": RZGate(theta),
        "sx": SXGate(),
        "x": XGate(),
        "r": RGate(theta, phi),
        "rx": RXGate(theta),
    }
    for name in processor.one_qubit_gates:
        props = {
            (i,): InstructionProperties(
                duration=processor.gate_duration_s(name), error=processor.gate_error(name)
            )
            for i in range(len(qubits))
        }
        target.add_instruction(one_q[name], props)
    two = {"cz": CZGate(), "rzz": RZZGate(theta), "ecr": ECRGate()}[processor.two_qubit_gate]
    props = {}
    for a, b in processor.edges:
        if a in index and b in index:
            for pair in ((index[a], index[b]), (index[b], index[a])):
                props[pair] = InstructionProperties(
                    duration=processor.time_2q_s, error=processor.error_2q
                )
    target.add_instruction(two, props)
    for inst, name in ((Reset(), "reset"), (Measure(), "measure")):
        target.add_instruction(
            inst,
            {
                (i,): InstructionProperties(
                    duration=processor.gate_duration_s(name), error=processor.gate_error(name)
                )
                for i in range(len(qubits))
            },
        )
    target.add_instruction(Delay(Parameter("t")), {(i,): None for i in range(len(qubits))})
    target.add_instruction(Barrier, name="barrier")
    target.add_instruction(SaveProbabilities, name="save_probabilities")
    target.add_instruction(SaveDensityMatrix, name="save_density_matrix")
    return target
