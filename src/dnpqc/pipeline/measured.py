"""Counts of the exported programs: read back from a hardware run (`run --counts`), or
sampled from a simulation in the same format (`sweep --counts-out`)."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from ..analysis.counts import MeasuredCounts, counts_json, read_counts, sample_counts
from ..analysis.mitigation import MitigationSettings, available, check_available, parse_mitigations
from ..compile.folding import BASELINE, program_variants
from ..engines import engine_name
from ..engines.shots import readout_confusion, readout_distributions
from ..errors import ScenarioError
from ..io import output
from ..io.scenario import Scenario
from .job import scenario_programs


def measured_counts(
    path: str, scenario: Scenario, mitigate: str = "auto", extrapolation: str = "richardson"
) -> tuple[MeasuredCounts, MitigationSettings]:
    """The checked counts file at `path` (`--counts`) and the mitigation to apply: `mitigate`
    as `--mitigate` spells it (`auto`: whatever the file allows)."""
    counts = read_counts(output.read_json(path, "--counts"), scenario.workload())
    steps = parse_mitigations(mitigate)
    steps = available(counts) if steps is None else steps
    check_available(steps, counts)
    return counts, MitigationSettings(steps, extrapolation)


def sampled_counts(
    scenario: Scenario,
    engine: str,
    shots: int,
    *,
    seed: int = 0,
    measure_each_cycle: bool = False,
    baseline: str | None = None,
    scales: tuple[int, ...] = (),
    on_point: Callable[[], None] | None = None,
) -> dict[str, object]:
    """The counts file (`counts.py` format) that a run of the scenario's programs would give:
    `shots` per program and value, sampled with `seed` from the readout distributions of the
    noisy engine (readout error included, its confusion matrix written in the file) or, for
    `trotter`, of the noiseless program (perfect readout). `baseline`: None, "uncoupled" or
    "mixed-nv" (`folding.program_variants`); a mixed-NV baseline's counts are those of its
    2^C programs pooled with equal shots."""
    programs = scenario_programs(scenario)
    work = scenario.workload()
    noisy = engine_name(engine) == "noisy"
    if scales and not noisy:
        raise ScenarioError("folded programs (--fold) amplify processor noise: use --engine noisy")
    program = programs.mapped() if noisy else programs.logical()
    noise = scenario.noise if noisy else None
    error = program.processor.error_readout * scenario.noise.scale if noisy else 0.0
    confusion = readout_confusion(error, work.system.num_nuclei)
    variants = program_variants(
        program, scenario.compile_job().mapping, baseline=baseline, scales=scales
    )
    rng = np.random.default_rng(seed)
    sampled = {}
    for key, variant in variants.items():
        dists = readout_distributions(
            variant,
            noise,
            measure_each_cycle=measure_each_cycle,
            mixed_nv=key[0] == BASELINE and baseline == "mixed-nv",
            on_point=on_point,
        )
        sampled[key] = [sample_counts(d, shots, rng, confusion) for d in dists]
    return counts_json(work, shots, sampled, confusion, baseline)
