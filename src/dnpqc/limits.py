"""Bounds on every size and magnitude a scenario can ask for, and the work limit of a run.

Each bound is checked while the scenario is read, before anything is allocated, so a value
that would exhaust memory (a lattice of 50 nm, 10^9 sweep points, a qubit index of 10^9) is
refused in one line that gives the figure. The bounds are far above any useful run; the work of
a whole run is bounded separately by `--max-work` (see `sweep_work`).
"""

from __future__ import annotations

from .errors import RunError

MAX_NUCLEI = 30  # NV + 30 qubits: beyond every engine's memory on one machine
MAX_POINTS = 10_000  # sweep points
MAX_CYCLES = 10_000  # NV re-initialisation cycles
MAX_BLOCKS = 100_000  # pulse-block repetitions per cycle
MAX_BLOCK_ELEMENTS = 1_000  # pulses and waits in a custom block
MAX_STEPS = 100_000  # Trotter steps per cycle (per free window when pulsed)
MAX_PULSE_STEPS = 1_000  # Trotter steps per finite pulse
MAX_QUADRATURE_POINTS = 20  # Gauss–Hermite nodes per dimension (squared for two dimensions)
MAX_SAMPLES = 10_000  # sampled imperfection nodes
MAX_TYPICAL_STATES = 100_000  # random states of the typicality engine
MAX_TRAJECTORIES = 1_000_000  # noisy-engine shots per point
MAX_PROCESSOR_QUBITS = 1_000  # qubits of a coupling graph (line:N, edges, ...)
MAX_LATTICE_RADIUS_NM = 5.0  # about 92 000 diamond sites
MAX_SEED = 2**32 - 1
MAX_FIELD_T = 100.0  # tesla; the strongest static laboratory fields are about 45 T
MAX_FREQUENCY_HZ = 1e12  # any frequency: hyperfine, dipolar, Rabi, detuning
MAX_TIME_S = 1.0  # an interaction time or block length
MAX_POSITION_NM = 1e3
MAX_LABEL_CHARS = 64
MAX_TEXT_CHARS = 1_000
MAX_DESCRIPTION_CHARS = 10_000

MAX_PROGRAM_GATES = 5_000_000  # gates of a compiled program (qiskit holds each one)

#: Default of `--max-work`, in state-element updates (see `scenario.sweep_work`): about ten
#: minutes of the trotter engine on this kind of machine, 60 times the bundled demo.
DEFAULT_MAX_WORK = 10**11


def check_work(work: int, limit: float, what: str) -> None:
    """Refuse work beyond `limit` (`--max-work`), giving the estimate and how to lower it."""
    if work > limit:
        raise RunError(
            f"{what} needs about {work:.3g} units of work (points x nodes x gates x state size), "
            f"more than --max-work {limit:.3g}; lower sweep.points, cycle.count, trotter.steps "
            "or the nuclei, or raise --max-work"
        )


def check_program_size(gates: int) -> None:
    """Refuse a compiled program beyond MAX_PROGRAM_GATES, before it is built."""
    if gates > MAX_PROGRAM_GATES:
        raise RunError(
            f"the program would have about {gates:.3g} gates (cycles x steps per cycle x gates "
            f"per step), more than {MAX_PROGRAM_GATES:.3g}; lower cycle.count or trotter.steps"
        )
