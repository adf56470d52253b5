"""Simulation engines, each run on a compiled `Program` (or its `Workload`):

- `exact`: dense propagators of the model (the reference, no circuit);
- `trotter` (alias `noiseless`): the compiled program, whatever its strategy, noiseless on Aer;
- `noisy`: the program mapped onto its processor, with processor noise;
- `noisy-baseline`: the same noisy program with no transfer (the processor's own artefact);
- `typical`: random states and sparse propagation (large clusters, no circuit).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Literal, get_args

from ..compile.noise import NoiseSettings
from ..compile.program import Program, Workload
from ..errors import ScenarioError
from .circuit import simulate_trotter
from .exact import simulate_exact
from .noisy import BASELINE_ENGINE, simulate_noisy, simulate_noisy_baseline
from .results import SweepResult
from .typical import TypicalSettings, simulate_typical

#: The engines, by their canonical names (`noisy-baseline` is `noisy.BASELINE_ENGINE`).
EngineName = Literal["exact", "trotter", "noisy", "noisy-baseline", "typical"]
ENGINES: tuple[EngineName, ...] = get_args(EngineName)
#: Other accepted names: `noiseless` is the compiled program without noise.
ENGINE_ALIASES: dict[str, str] = {"noiseless": "trotter"}
#: Engines that run circuits (and so need a compiled program); the noisy ones need it mapped.
CIRCUIT_ENGINES = frozenset({"trotter", "noisy", BASELINE_ENGINE})
NOISY_ENGINES = frozenset({"noisy", BASELINE_ENGINE})


@dataclass(frozen=True)
class EngineOptions:
    """Settings of the engines that have any: processor noise, typicality."""

    noise: NoiseSettings = field(default_factory=NoiseSettings)
    typical: TypicalSettings = field(default_factory=TypicalSettings)


def engine_name(name: str) -> EngineName:
    """The canonical engine name of `name` (aliases resolved); refuses unknown names."""
    canonical = ENGINE_ALIASES.get(name, name)
    if canonical not in ENGINES:
        known = ", ".join((*ENGINES, *ENGINE_ALIASES))
        raise ScenarioError(f"`engine` must be one of {known}; got {name!r}")
    return canonical


def simulate_program(
    program: Program | Workload,
    engine: str = "exact",
    options: EngineOptions | None = None,
    *,
    on_point: Callable[[], None] | None = None,
) -> SweepResult:
    """Run `engine` over the program's sweep; `on_point` is called after each point.

    `exact` and `typical` need only the physics: a `Workload` will do for them.
    """
    options = options or EngineOptions()
    engine = engine_name(engine)
    work = program.workload if isinstance(program, Program) else program
    if engine == "exact":
        return simulate_exact(work, on_point=on_point)
    if engine == "typical":
        return simulate_typical(work, options.typical, on_point=on_point)
    if not isinstance(program, Program):
        raise ValueError(f"the {engine} engine needs a compiled Program")
    if engine == "trotter":
        return simulate_trotter(program, on_point=on_point)
    if engine == BASELINE_ENGINE:
        return simulate_noisy_baseline(program, options.noise, on_point=on_point)
    return simulate_noisy(program, options.noise, on_point=on_point)
