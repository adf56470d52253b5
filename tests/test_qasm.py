"""OpenQASM 3 export: the reference parser accepts it, and it is the program we simulated."""

import numpy as np
import openqasm3
import pytest
from conftest import THREE_NUCLEI
from openqasm3 import ast
from qiskit import QuantumCircuit, qasm3
from qiskit_aer.library import SaveProbabilities

from dnpqc import compile_program, parse_scenario
from dnpqc.cli import main
from dnpqc.compile.budget import gate_budget
from dnpqc.compile.mapping import map_program
from dnpqc.compile.processor import make_processor
from dnpqc.engines.circuit import density_matrix_simulator, run_program
from dnpqc.io.qasm import dumps, hardware_program, header_lines
from dnpqc.pipeline.export import compile_text

SCENARIO = """
name = "qasm-test"
[spins]
field_t = 0.03
[[spins.nuclei]]
label = "A"
a_par_hz = 25e3
a_perp_hz = 12e3
[[spins.nuclei]]
label = "B"
a_par_hz = -10e3
a_perp_hz = 8e3
[[spins.couplings]]
pair = ["A", "B"]
d_hz = 700.0
[drive]
protocol = "spin-lock"
rabi_hz = 330e3
[sweep]
parameter = "rabi_hz"
start = 320e3
stop = 340e3
points = 3
[cycle]
interaction_time_s = 6e-6
count = 3
[trotter]
steps = 4
"""


def _mapped(gates="cz+rz+sx", topology="grid:3x3"):
    sc = parse_scenario(SCENARIO)
    proc = make_processor({"topology": topology, "native_gates": gates})
    return sc, map_program(compile_program(sc).circuit, sc.system, proc)


def _reimport_with_saves(text: str) -> QuantumCircuit:
    """qiskit.qasm3.loads, then each classical register's measurements become one save."""
    loaded = qasm3.loads(text)
    out = loaded.copy_empty_like()
    pending: dict[str, list] = {}
    saves = 0
    for inst in loaded.data:
        if inst.operation.name != "measure":
            out.append(inst)
            continue
        register, index = loaded.find_bit(inst.clbits[0]).registers[0]
        pending.setdefault(register.name, []).append((index, inst.qubits[0]))
        if len(pending[register.name]) == register.size:
            qubits = [q for _, q in sorted(pending.pop(register.name), key=lambda x: x[0])]
            saves += 1
            out.append(SaveProbabilities(len(qubits), label=f"cycle_{saves}"), qubits)
    return out


@pytest.mark.parametrize(
    "gates", ["cz+rz+sx", "cz+rz+sx+x", "cz+r", "rzz+rx+rz", "ecr+rz+sx", "ecr+rz+sx+x"]
)
def test_parses_with_reference_parser_and_uses_native_gates_on_edges(gates):
    # the OpenQASM 3 reference parser (openqasm3 package of the OpenQASM project)
    sc, mapped = _mapped(gates)
    text = dumps(
        hardware_program(mapped), header_lines(compile_program(sc), mapped, gate_budget(mapped))
    )
    program = openqasm3.parse(text)
    allowed = set(gates.split("+"))  # only the gates that the set's name lists
    edges = {tuple(sorted(e)) for e in mapped.processor.edges}
    calls = [s for s in program.statements if isinstance(s, ast.QuantumGate)]
    assert calls
    for call in calls:
        assert call.name.name in allowed
        qubits = [q.name for q in call.qubits]
        assert all(isinstance(q, str) and q.startswith("$") for q in qubits)
        if len(qubits) == 2:
            assert tuple(sorted(int(q[1:]) for q in qubits)) in edges
    kinds = {type(s).__name__ for s in program.statements}
    assert "QuantumReset" in kinds and "QuantumMeasurementStatement" in kinds
    inputs = [s for s in program.statements if isinstance(s, ast.IODeclaration)]
    assert [i.identifier.name for i in inputs] == ["rabi_hz"]


@pytest.mark.parametrize("gates", ["cz+rz+sx", "rzz+rx+rz", "ecr+rz+sx", "cz+r"])
def test_round_trip_simulates_to_the_same_polarizations(gates):
    # re-import with qiskit's OpenQASM 3 importer (qiskit-qasm3-import), bind, simulate with Aer:
    # every cycle's polarizations equal the in-memory mapped circuit's to 1e-9
    sc, mapped = _mapped(gates)
    text = dumps(hardware_program(mapped, measure_each_cycle=True))
    back = _reimport_with_saves(text)
    values = np.asarray(sc.sweep.values)
    sim = density_matrix_simulator()
    ours = run_program(mapped.circuit, values, cycles=3, num_nuclei=2, simulator=sim)
    theirs = run_program(back, values, cycles=3, num_nuclei=2, simulator=sim)
    assert np.allclose(ours, theirs, atol=1e-9)


def test_final_readout_only_by_default_and_per_cycle_registers_on_request():
    _, mapped = _mapped()
    default = dumps(hardware_program(mapped))
    assert "bit[2] nuclei;" in default and "cycle_1" not in default
    each = dumps(hardware_program(mapped, measure_each_cycle=True))
    assert all(f"bit[2] cycle_{c};" in each for c in (1, 2, 3))
    assert "save" not in default and "save" not in each


def test_bound_program_is_numeric_and_equal():
    sc, mapped = _mapped()
    value = sc.sweep.values[1]
    text = dumps(hardware_program(mapped, measure_each_cycle=True, bind=value))
    assert "input" not in text
    back = _reimport_with_saves(text)
    assert not back.parameters
    sim = density_matrix_simulator()
    ours = run_program(mapped.circuit, np.array([value]), cycles=3, num_nuclei=2, simulator=sim)
    theirs = run_program(back, np.array([value]), cycles=3, num_nuclei=2, simulator=sim)
    assert np.allclose(ours, theirs, atol=1e-9)


def test_header_states_map_convention_and_budget():
    sc, mapped = _mapped()
    text = dumps(
        hardware_program(mapped), header_lines(compile_program(sc), mapped, gate_budget(mapped))
    )
    head = text.split("OPENQASM 3.0;")[0]
    assert "'qasm-test'" in head and "U = exp(-2πi·H·t)" in head
    assert f"NV = ${mapped.initial[0]} at the start, ${mapped.final[0]} at the end" in head
    assert f"A = ${mapped.initial[1]} at the start, ${mapped.final[1]} at the end" in head
    assert "success estimate" in head and "grid:3x3" in head
    openqasm3.parse(text)


def _final_single_qubit_state(circuit, qubit, value):
    bound = circuit.assign_parameters(dict.fromkeys(circuit.parameters, value))
    qc = bound.copy_empty_like()
    for inst in bound.data:
        if not inst.operation.name.startswith("save"):
            qc.append(inst)
    qc.save_density_matrix([qubit])
    return np.asarray(density_matrix_simulator().run(qc).result().data()["density_matrix"])


@pytest.mark.parametrize("topology", ["ring:4", "heavy-hex:3"])
def test_header_gives_where_the_nv_ends(topology):
    # routing moves the NV here; the header's NV at the end holds the logical NV's final state
    # (Aer density matrices of the logical and the mapped program, level 1 so both agree to
    # 1e-9), and no nucleus does
    sc = parse_scenario(
        THREE_NUCLEI.replace("steps = 30", "steps = 2").replace("count = 3", "count = 2")
    )
    program = compile_program(sc)
    proc = make_processor({"topology": topology})
    mapped = map_program(program.circuit, sc.system, proc, optimization_level=1)
    budget = gate_budget(mapped)
    q = budget.qubits
    assert q.nv != q.nv_final
    head = "\n".join(header_lines(program, mapped, budget))
    assert f"NV = ${q.nv} at the start, ${q.nv_final} at the end" in head
    local = {p: i for i, p in enumerate(mapped.region)}
    value = sc.sweep.values[1]
    nv = _final_single_qubit_state(program.circuit, 0, value)
    assert np.allclose(_final_single_qubit_state(mapped.circuit, local[q.nv_final], value), nv)
    for phys in q.nuclei_final:
        assert not np.allclose(_final_single_qubit_state(mapped.circuit, local[phys], value), nv)


def test_compile_cli_writes_atomically_and_rejects_bad_bind(tmp_path, capsys):
    scenario = tmp_path / "s.toml"
    scenario.write_text(SCENARIO)
    out = tmp_path / "p.qasm"
    assert main(["compile", str(scenario), "--processor", "line:3", "-o", str(out)]) == 0
    openqasm3.parse(out.read_text())
    assert not list(tmp_path.glob(".*.tmp"))
    bad = tmp_path / "bad.qasm"
    assert main(["compile", str(scenario), "--bind", "-5", "-o", str(bad)]) == 2
    assert "`--bind` -5" in capsys.readouterr().err and not bad.exists()
    assert main(["compile", str(scenario), "--processor", "line:2", "-o", str(bad)]) == 2
    assert not bad.exists()


def test_compile_text_matches_cli_stdout(tmp_path, capsys):
    scenario = tmp_path / "s.toml"
    scenario.write_text(SCENARIO)
    assert main(["compile", str(scenario), "--processor", "full:3"]) == 0
    printed = capsys.readouterr().out
    sc = parse_scenario(SCENARIO.replace('name = "qasm-test"', 'name = "s"'))
    assert (
        printed.split("OPENQASM")[1]
        == compile_text(sc, make_processor({"topology": "full:3"})).split("OPENQASM")[1]
    )
