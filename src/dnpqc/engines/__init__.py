"""Simulation engines: `exact` (dense reference), `trotter` (compiled circuit, noiseless) and
`noisy` (the mapped circuit with processor noise), `noisy-baseline` (the same noisy program
with no transfer: the processor's artefact), `typical` (random states, sparse propagation:
large clusters)."""

from __future__ import annotations

from collections.abc import Callable

from ..errors import ScenarioError
from ..results import SweepResult
from ..scenario import Scenario
from .circuit import simulate_trotter
from .exact import simulate_exact
from .noisy import BASELINE_ENGINE, simulate_noisy, simulate_noisy_baseline
from .typical import simulate_typical

ENGINES: dict[str, Callable[..., SweepResult]] = {
    "exact": simulate_exact,
    "trotter": simulate_trotter,
    "noisy": simulate_noisy,
    BASELINE_ENGINE: simulate_noisy_baseline,
    "typical": simulate_typical,
}


def simulate(
    scenario: Scenario, engine: str = "exact", *, on_point: Callable[[], None] | None = None
) -> SweepResult:
    """Run `engine` over the scenario's sweep; `on_point` is called after each point."""
    if engine not in ENGINES:
        raise ScenarioError(f"`engine` must be one of {', '.join(ENGINES)}; got {engine!r}")
    return ENGINES[engine](scenario, on_point=on_point)
