"""Programs for a processor: the OpenQASM 3 files of `dnpqc compile`, planned in full (every
destination checked) before the caller writes any of them.

A trotter program is one file, with the swept quantity as an input unless bound; a per-value
(cycle-unitary) program is one file per sweep value; a mixed-NV baseline is 2^C files per
program, one per pattern of NV flips after the resets.
"""

from __future__ import annotations

import itertools
import os
from dataclasses import dataclass, replace
from pathlib import Path

from ..compile.budget import gate_budget
from ..compile.folding import BASELINE, PROGRAM, program_variants
from ..compile.noise import with_nv_flips
from ..compile.processor import Processor
from ..compile.program import Program
from ..compile.strategy import Programs
from ..errors import ScenarioError
from ..io import output, qasm
from ..io.scenario import Scenario, check_point, program_gates
from ..limits import check_program_size

#: Most cycles of a mixed-NV baseline (2^C programs).
MAX_PATTERN_CYCLES = 8


@dataclass(frozen=True)
class ExportRequest:
    """What `dnpqc compile` was asked for: `output` a file, a folder or None (stdout); `bind`
    one swept value; `baseline` None, "uncoupled" or "mixed-nv"; `fold` the scale factor."""

    output: str | None = None
    bind: float | None = None
    baseline: str | None = None
    fold: int = 1
    measure_each_cycle: bool = False


@dataclass(frozen=True)
class Export:
    """The planned files: (checked path, or None for standard output; OpenQASM 3 text), and
    the folder they go to when there are several."""

    files: tuple[tuple[Path | None, str], ...]
    folder: Path | None


def compile_texts(
    program: Program,
    *,
    bind: float | None = None,
    measure_each_cycle: bool = False,
    variant: list[str] | None = None,
    nv_flips: tuple[int, ...] | None = None,
) -> list[tuple[float | None, str]]:
    """(swept value, OpenQASM 3 text) of each hardware program of a mapped, nominal program.

    A trotter program gives one text (with the swept quantity as an input unless `bind`); a
    per-value program one text per sweep value, each bound to its value; `variant` lines say
    what the program is (a baseline, a folded copy); `nv_flips` flips the NV after the resets
    of those cycles (`noise.with_nv_flips`).
    """
    texts = []
    for value, mapped in zip(_row_values(program, bind), program.mapped, strict=True):
        if nv_flips is not None:
            mapped = replace(mapped, circuit=with_nv_flips(mapped.circuit, nv_flips))
        hardware = qasm.hardware_program(
            mapped, measure_each_cycle=measure_each_cycle, bind=None if program.per_row else value
        )
        header = qasm.header_lines(program, mapped, gate_budget(mapped), value, variant)
        texts.append((value, qasm.dumps(hardware, header)))
    return texts


def variant_lines(program: Program, baseline: str | None, fold: int) -> list[str]:
    """Header lines of a baseline or folded program (empty for the program itself)."""
    lines = []
    if baseline == "uncoupled":
        lines.append(
            f"Variant: {program.choice}; its measured P is the processor's own drift, to "
            "subtract (`run --counts` with `baseline_counts`)."
        )
    if fold > 1:
        lines.append(
            f"Variant: two-qubit gates folded to scale {fold} (G -> G(G†G)^"
            f"{(fold - 1) // 2}, fenced by barriers: submit without further optimization, "
            "or a compiler may cancel the folds)."
        )
    return lines


def _row_values(program: Program, bind: float | None) -> list[float | None]:
    if program.per_row:
        return list(program.workload.values)
    return [bind]


def compile_text(
    scenario: Scenario,
    processor: Processor,
    *,
    bind: float | None = None,
    measure_each_cycle: bool = False,
) -> str:
    """The OpenQASM 3 text of the scenario's single program (per-value strategies need `bind`)."""
    program = hardware_program(scenario, processor, bind)
    if program.per_row and len(program.mapped) != 1:
        raise ScenarioError(
            f"strategy {program.strategy!r} writes one program per sweep value: give `--bind "
            "VALUE` for one program, or `-o DIR` for all of them"
        )
    return compile_texts(program, bind=bind, measure_each_cycle=measure_each_cycle)[0][1]


def hardware_program(scenario: Scenario, processor: Processor, bind: float | None) -> Program:
    """The nominal program mapped onto `processor`; a per-value one at `bind` only."""
    if bind is not None:
        check_point(scenario, bind)
    programs = Programs(scenario.compile_job(), processor)
    if bind is not None and programs.choice().strategy == "cycle-unitary":
        one = replace(scenario.sweep, values=(float(bind),))
        programs = Programs(replace(scenario, sweep=one).compile_job(), processor)
    return programs.mapped(nominal=True)


def program_file_name(name: str, parameter: str, value: float) -> str:
    """File name of the program at one swept value: `<name>_<parameter>_<value>.qasm` (the
    scenario name made one safe path component)."""
    return f"{output.safe_component(name)}_{parameter}_{value:.9g}.qasm"


def _compile_folder(path: str | None, strategy: str, bind: float | None) -> Path | None:
    """The `-o` folder of a per-value program (checked now), or None for a single file.

    cycle-unitary without `--bind` needs a folder; `auto` takes `-o` as a folder when it names
    an existing folder or ends with a separator (checked again once the strategy is chosen).
    """
    if bind is not None or strategy == "trotter":
        return None
    if strategy == "cycle-unitary" and path is None:
        raise ScenarioError(
            "strategy 'cycle-unitary' writes one program per sweep value: give `-o DIR` for all "
            "of them, or `--bind VALUE` for one"
        )
    if path is None:
        return None
    folder_like = Path(path).is_dir() or path.endswith(("/", os.sep))
    if strategy == "cycle-unitary" or folder_like:
        return output.check_folder(path, "-o")
    return None


def _check_patterns(cycles: int) -> None:
    if cycles > MAX_PATTERN_CYCLES:
        raise ScenarioError(
            f"`--baseline mixed-nv` writes 2^C programs; {cycles} cycles would be "
            f"{2**cycles:,} (at most {MAX_PATTERN_CYCLES} cycles); use `--baseline` (uncoupled)"
        )


def _mixed_nv_files(
    scenario: Scenario, program: Program, request: ExportRequest, folder: Path
) -> list[tuple[Path | None, str]]:
    """The 2^C programs of a mixed-NV baseline, `<name>[_<parameter>_<value>]_nv<bits>.qasm`
    (bit c = 1: the NV flipped after the reset of cycle c+1), every file checked."""
    cycles = scenario.cycles
    files: list[tuple[Path | None, str]] = []
    for pattern in itertools.product((0, 1), repeat=cycles):
        bits = "".join(map(str, pattern))
        note = (
            f"Variant: mixed-NV baseline, pattern {bits} of {2**cycles} (cycle 1 first; 1 = X "
            "on the NV after its reset): run all of them with equal shots and pool the counts "
            "as `baseline_counts`; the NV is then maximally mixed and no polarization moves."
        )
        texts = compile_texts(
            program,
            bind=request.bind,
            measure_each_cycle=request.measure_each_cycle,
            variant=[*variant_lines(program, request.baseline, request.fold), note],
            nv_flips=pattern,
        )
        for value, text in texts:
            if program.per_row:
                stem = program_file_name(scenario.name, scenario.sweep.parameter, value)[:-5]
            else:
                stem = output.safe_component(scenario.name)
            files.append((output.check_file(folder / f"{stem}_nv{bits}.qasm", "-o"), text))
    return files


def _destinations(scenario: Scenario, request: ExportRequest) -> tuple[Path | None, Path | None]:
    """(folder, file) of `-o`, checked before any compiling; both None: standard output."""
    if request.baseline == "mixed-nv":
        _check_patterns(scenario.cycles)
        if request.output is None:
            raise ScenarioError(
                "`--baseline mixed-nv` writes one program per pattern of NV flips: give `-o DIR`"
            )
        return output.check_folder(request.output, "-o"), None
    folder = _compile_folder(request.output, scenario.compile.strategy, request.bind)
    if folder is None and request.output is not None:
        return None, output.check_file(request.output, "-o")
    return folder, None


def export_programs(scenario: Scenario, processor: Processor, request: ExportRequest) -> Export:
    """Every file `dnpqc compile` writes for `request`, compiled and checked, none written."""
    folder, destination = _destinations(scenario, request)
    check_program_size(program_gates(scenario) * request.fold)
    program = hardware_program(scenario, processor, request.bind)
    variants = program_variants(
        program, scenario.compile_job().mapping, baseline=request.baseline, scales=(request.fold,)
    )
    program = variants[(BASELINE if request.baseline else PROGRAM, request.fold)]
    if request.baseline == "mixed-nv":
        return Export(tuple(_mixed_nv_files(scenario, program, request, folder)), folder)
    texts = compile_texts(
        program,
        bind=request.bind,
        measure_each_cycle=request.measure_each_cycle,
        variant=variant_lines(program, request.baseline, request.fold),
    )
    strategy = scenario.compile.strategy
    if program.per_row and request.bind is None:
        if folder is None:
            raise ScenarioError(
                f"strategy {strategy!r} chose cycle-unitary, which writes one program per sweep "
                "value: give `-o DIR` (a folder) for all of them, or `--bind VALUE` for one"
            )
        names = [program_file_name(scenario.name, scenario.sweep.parameter, v) for v, _ in texts]
        files = tuple(
            (output.check_file(folder / name, "-o"), text)
            for name, (_, text) in zip(names, texts, strict=True)
        )
        return Export(files, folder)
    if folder is not None:
        raise ScenarioError(
            f"strategy {strategy!r} chose {program.strategy}, which writes one program: give "
            "`-o FILE` rather than a folder"
        )
    return Export(((destination, texts[0][1]),), None)
