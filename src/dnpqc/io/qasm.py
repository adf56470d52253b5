"""OpenQASM 3 programs for hardware submission (`dumps`/`dump`, like the standard json module).

The hardware program is the mapped circuit on the device's physical qubits (`$k`), with the
simulator's save instructions replaced by readout: the nuclear qubits are measured at the end
into `bit[n] nuclei` (nucleus j → nuclei[j-1]), or, with `measure_each_cycle`, after every cycle
into `bit[n] cycle_<c>`. The swept quantity stays an `input float[64] <parameter>;` unless bound.

Exporter pitfalls handled here: Aer save instructions cannot be exported (they are replaced);
gates outside stdgates.inc (rzz, r, ecr) are written by qiskit as `gate` definitions, which
`qiskit.qasm3.loads` re-imports (the top-level calls stay native); parameter expressions of the
input are written as expressions; the program carries no `basis_gates` hint, which would make
qiskit write opaque calls that cannot be re-imported.
"""

from __future__ import annotations

from pathlib import Path

from qiskit import ClassicalRegister, QuantumCircuit, qasm3, transpile

from ..compile.budget import GateBudget
from ..compile.mapping import MappedProgram
from ..compile.processor import build_target
from ..compile.program import Program
from ..compile.trotter import cycle_label
from ..text import count_of
from .output import one_line, write_text

READOUT = "nuclei"


def hardware_program(
    mapped: MappedProgram, *, measure_each_cycle: bool = False, bind: float | None = None
) -> QuantumCircuit:
    """The submitted circuit: physical qubits of the whole device, saves replaced by readout."""
    source = mapped.circuit
    saves = [inst for inst in source.data if inst.operation.name == "save_probabilities"]
    n = saves[0].operation.num_qubits if saves else 0
    local = QuantumCircuit(source.num_qubits, global_phase=source.global_phase)
    registers = {}
    for c in range(1, len(saves) + 1):
        if measure_each_cycle or c == len(saves):
            name = cycle_label(c) if measure_each_cycle else READOUT
            registers[c] = ClassicalRegister(n, name)
            local.add_register(registers[c])
    cycle = 0
    for inst in source.data:
        if inst.operation.name == "save_probabilities":
            cycle += 1
            if cycle in registers:
                for j, qubit in enumerate(inst.qubits):
                    local.measure(source.find_bit(qubit).index, registers[cycle][j])
                if cycle < len(saves):
                    local.barrier()  # this cycle's readout completes before the next cycle
        else:
            local.append(inst.operation, [source.find_bit(q).index for q in inst.qubits])
    if bind is not None:
        local = local.assign_parameters(dict.fromkeys(local.parameters, bind))
    # place the region's circuit on the device's physical qubits: trivial layout, no routing
    target = build_target(mapped.processor)
    return transpile(
        local,
        target=target,
        initial_layout=list(mapped.region),
        optimization_level=0,
        seed_transpiler=0,
    )


def header_lines(
    program: Program,
    mapped: MappedProgram,
    budget: GateBudget,
    bound: float | None = None,
    variant: list[str] | None = None,
) -> list[str]:
    """Comment lines: scenario, strategy, convention, processor, qubit map and budget summary."""
    work = program.workload
    proc, q = budget.processor, budget.qubits
    per, total = budget.per_cycle, budget.total
    parameter = work.parameter
    lines = [
        f"dnpqc program for scenario {work.name!r} (content hash {work.digest}):",
        f"  {work.protocol.kind}, {count_of(work.system.num_nuclei, 'nucleus', 'nuclei')}, "
        f"{count_of(work.cycles, 'cycle')}; strategy {program.describe()}.",
        "Model: H/h in Hz, U = exp(-2πi·H·t); NV qubit {|0> = m_s 0, |1> = m_s -1}, nuclei",
        "  |0> = spin up along B0; the nuclei start maximally mixed (H, CX to the NV, NV reset).",
        "  Readout bit j = nucleus j+1; its polarization is P = 1 - 2·mean(bit).",
        f"Processor: {proc.name} ({proc.num_qubits} qubits, native {proc.native_gates}),",
        f"  layout {mapped.layout_method}.",
        f"Qubit map (physical): NV = ${q.nv} at the start, ${q.nv_final} at the end",
    ]
    for label, first, last in zip(
        work.system.labels, q.nuclei_initial, q.nuclei_final, strict=True
    ):
        lines.append(f"  {label} = ${first} at the start, ${last} at the end")
    lines += [
        f"Per cycle: {per.two_qubit:.0f} two-qubit gates, {per.one_qubit:.0f} one-qubit "
        f"gates, {per.swaps:.0f} SWAPs, {per.duration_s * 1e6:.4g} µs.",
        f"Whole program: {total.two_qubit} two-qubit gates, {total.duration_s * 1e6:.4g} "
        f"µs, success estimate {total.success_estimate:.3g}.",
    ]
    if bound is None:
        lines.append(f"Input `{parameter}`: the swept quantity in SI units (Hz or s).")
    else:
        lines.append(f"Bound: {parameter} = {bound!r} (SI units).")
    return lines + list(variant or [])


def dumps(program: QuantumCircuit, header: list[str] | None = None) -> str:
    """OpenQASM 3 text of `program`, with `header` as leading `//` comment lines.

    Each header line stays one comment line: a line break (or any control character) in it is
    written escaped, so scenario text can never add a statement to the program.
    """
    text = qasm3.dumps(program)
    comments = "".join(f"// {one_line(line)}\n" for line in (header or []))
    return comments + text


def dump(program: QuantumCircuit, path: str | Path, header: list[str] | None = None) -> None:
    """Write `dumps(program, header)` to `path` atomically."""
    write_text(Path(path), dumps(program, header))
