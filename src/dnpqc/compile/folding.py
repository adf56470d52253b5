"""Unitary folding of two-qubit gates, for zero-noise extrapolation.

Each two-qubit gate G of a mapped program becomes G·(G†·G)^k at the odd scale factor
λ = 2k + 1: the same unitary with λ times the two-qubit noise (Temme, Bravyi & Gambetta,
PRL 119, 180509, 2017; Giurgica-Tiron et al., IEEE QCE 2020, "local folding" of the two-qubit
gates). The native two-qubit gates (cz, cx, ecr, rzz(θ)) have native inverses (rzz(-θ)).

The folds are fenced by barriers on the gate's two qubits (labelled `mapping.FOLD_FENCE`, so
they close no segment), so that a hardware compiler does not cancel G·G†.

Baselines of folded programs (`program_variants`): a baseline has no two-qubit gate and is
padded to the duration of the program it stands for, so at scale λ it is the baseline of the
folded program (padded to its duration).
"""

from __future__ import annotations

from dataclasses import replace

from qiskit import QuantumCircuit
from qiskit.circuit import Barrier

from ..errors import ScenarioError
from .mapping import FOLD_FENCE, MappingSettings
from .program import Program, baseline_program

#: Program kinds: the program itself, its baseline (every coupling zero).
PROGRAM, BASELINE = "counts", "baseline_counts"
#: Baselines: every coupling zero (the default), or the same program with the NV mixed.
BASELINE_KINDS = ("uncoupled", "mixed-nv")

#: Scale factors of the folded programs (the unfolded program is scale 1).
DEFAULT_SCALES = (1, 3, 5)


def check_scale(scale: int, what: str = "--fold") -> int:
    """An odd integer scale factor >= 1, or a one-line refusal."""
    if isinstance(scale, bool) or not isinstance(scale, int) or scale < 1 or scale % 2 == 0:
        raise ScenarioError(
            f"`{what}` must be an odd whole number >= 1 (1, 3, 5, ...: each two-qubit gate G "
            f"becomes G(G†G)^k), got {scale!r}"
        )
    return scale


def fold_two_qubit_gates(circuit: QuantumCircuit, scale: int) -> QuantumCircuit:
    """A copy of `circuit` with every two-qubit gate G replaced by G·(G†·G)^((scale-1)/2),
    a fence (barrier on the gate's qubits) between the folds."""
    check_scale(scale)
    out = circuit.copy_empty_like()
    for inst in circuit.data:
        out.append(inst)
        op = inst.operation
        if scale == 1 or op.num_qubits != 2 or op.name == "barrier" or not _is_gate(op):
            continue
        inverse = op.inverse()
        for _ in range((scale - 1) // 2):
            for gate in (inverse, op):
                out.append(Barrier(2, label=FOLD_FENCE), inst.qubits)
                out.append(gate, inst.qubits)
    return out


def _is_gate(op) -> bool:
    return not op.name.startswith("save") and op.name not in ("measure", "reset", "delay")


def folded_program(program: Program, scale: int) -> Program:
    """The mapped `program` with its two-qubit gates folded to `scale` (logical circuits kept)."""
    if not program.mapped:
        raise ValueError("folding needs a mapped program (program.map_onto)")
    mapped = tuple(
        replace(m, circuit=fold_two_qubit_gates(m.circuit, scale)) for m in program.mapped
    )
    return replace(program, mapped=mapped)


def program_variants(
    program: Program,
    settings: MappingSettings,
    *,
    baseline: str | None,
    scales: tuple[int, ...],
) -> dict[tuple[str, int], Program]:
    """The mapped program, and as asked its baseline and copies of both folded to `scales`:
    {(kind, scale): program}, kind PROGRAM or BASELINE, scale 1 unfolded.

    `baseline` "uncoupled": every coupling zero (`program.baseline_program`); "mixed-nv": the
    program itself, run with the NV mixed after each reset (`noise.with_nv_flips`; the same
    gates, so the entry is the program); None: no baseline.
    """
    if baseline is not None and baseline not in BASELINE_KINDS:
        raise ScenarioError(
            f"`--baseline` must be one of {', '.join(BASELINE_KINDS)}, got {baseline!r}"
        )
    out = {(PROGRAM, 1): program}
    for scale in sorted(set(scales) | {1}):
        if scale > 1:
            out[(PROGRAM, scale)] = folded_program(program, scale)
        if baseline == "uncoupled":
            out[(BASELINE, scale)] = baseline_program(out[(PROGRAM, scale)], settings)
        elif baseline == "mixed-nv":
            out[(BASELINE, scale)] = out[(PROGRAM, scale)]
    return out
