"""Drive protocols as plain data: one cycle is a list of segments acting on the NV and nuclei.

A segment is either an ideal (instantaneous) NV rotation `Pulse`, or an `Evolve` window under the
model Hamiltonian with given drive settings. Every time, frequency or duration that depends on the
swept quantity x is a `Linear` a + b·x, so one compiled circuit serves a whole sweep.

A new pulse sequence is a new tuple of `Pulse`/`BlockWait` entries and nothing else.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import ClassVar, Literal

from ..errors import ScenarioError
from .model import SpinSystem, nuclear_frequency_hz


@dataclass(frozen=True)
class Linear:
    """The affine function offset + slope·x of the swept quantity x."""

    offset: float
    slope: float = 0.0

    def at(self, x: float) -> float:
        return self.offset + self.slope * x

    def scaled(self, factor: float) -> Linear:
        return Linear(self.offset * factor, self.slope * factor)

    def __add__(self, other: Linear) -> Linear:
        return Linear(self.offset + other.offset, self.slope + other.slope)


@dataclass(frozen=True)
class Pulse:
    """NV rotation R_φ(θ) = exp(-i·θ/2·(cos φ·X + sin φ·Y)), θ and φ in rad.

    As a segment it is ideal (instantaneous); as an element of a pulsed block it may be played
    as a finite drive window.
    """

    angle_rad: float
    phase_rad: float


@dataclass(frozen=True)
class Evolve:
    """Evolution for `duration_s` under H with drive (Ω, φ) and detuning Δ, in `steps` steps."""

    duration_s: Linear
    rabi_hz: Linear
    phase_rad: float
    detuning_hz: Linear
    steps: int


Segment = Pulse | Evolve


@dataclass(frozen=True)
class CycleSchedule:
    """One cycle after the NV reset: `prepare` once, then `block` `repeats` times."""

    prepare: tuple[Segment, ...]
    block: tuple[Segment, ...]
    repeats: int

    def segments(self) -> tuple[Segment, ...]:
        return self.prepare + self.block * self.repeats


@dataclass(frozen=True)
class BlockWait:
    """A free-evolution window lasting `fraction` of the block length τ."""

    fraction: float


BlockElement = Pulse | BlockWait

_X, _Y, _MINUS_X, _MINUS_Y = 0.0, math.pi / 2, math.pi, 3 * math.pi / 2

#: The PulsePol block (Schwartz et al., Sci. Adv. 4, eaat8978, 2018), period τ:
#: (π/2)_X –τ/4– π_{-Y} –τ/4– (π/2)_X (π/2)_Y –τ/4– π_X –τ/4– (π/2)_Y.
PULSEPOL: tuple[BlockElement, ...] = (
    Pulse(math.pi / 2, _X),
    BlockWait(0.25),
    Pulse(math.pi, _MINUS_Y),
    BlockWait(0.25),
    Pulse(math.pi / 2, _X),
    Pulse(math.pi / 2, _Y),
    BlockWait(0.25),
    Pulse(math.pi, _X),
    BlockWait(0.25),
    Pulse(math.pi / 2, _Y),
)

NAMED_BLOCKS: dict[str, tuple[BlockElement, ...]] = {"pulsepol": PULSEPOL}

AXIS_PHASES_RAD: dict[str, float] = {"x": _X, "y": _Y, "-x": _MINUS_X, "-y": _MINUS_Y}


@dataclass(frozen=True)
class SpinLock:
    """Continuous drive: NV to |+> by R_y(π/2), then Ω along X for `interaction_time_s`."""

    rabi_hz: float
    detuning_hz: float
    interaction_time_s: float

    kind: ClassVar[Literal["spin-lock"]] = "spin-lock"
    sweepable: ClassVar[tuple[str, ...]] = ("rabi_hz", "detuning_hz", "interaction_time_s")


@dataclass(frozen=True)
class PulsedBlock:
    """A periodic block of NV pulses and free windows, block length `tau_s`, `blocks` per cycle.

    `pulse_rabi_hz` None means ideal, instantaneous pulses; otherwise each pulse is a drive window
    of that Rabi frequency, and the block keeps its period τ: each free window is shortened by half
    of the pulses on either side of it (τ counted between pulse centres; the block is cyclic).
    """

    sequence: str
    elements: tuple[BlockElement, ...]
    tau_s: float
    blocks: int
    detuning_hz: float
    pulse_rabi_hz: float | None = None

    kind: ClassVar[Literal["pulsed"]] = "pulsed"
    sweepable: ClassVar[tuple[str, ...]] = ("tau_s", "detuning_hz")


Protocol = SpinLock | PulsedBlock


def _value(protocol: Protocol, name: str, swept: str | None) -> Linear:
    return Linear(0.0, 1.0) if name == swept else Linear(float(getattr(protocol, name)))


def cycle_schedule(
    protocol: Protocol, *, swept: str | None, steps: int, pulse_steps: int
) -> CycleSchedule:
    """The segments of one cycle, with `swept` (a field name of the protocol) as the variable x."""
    if swept is not None and swept not in protocol.sweepable:
        raise ScenarioError(
            f"`sweep.parameter` {swept!r} is not allowed for protocol {protocol.kind!r}; "
            f"allowed: {', '.join(protocol.sweepable)}"
        )
    detuning = _value(protocol, "detuning_hz", swept)
    if isinstance(protocol, SpinLock):
        lock = Evolve(
            duration_s=_value(protocol, "interaction_time_s", swept),
            rabi_hz=_value(protocol, "rabi_hz", swept),
            phase_rad=0.0,
            detuning_hz=detuning,
            steps=steps,
        )
        return CycleSchedule(prepare=(Pulse(math.pi / 2, _Y),), block=(lock,), repeats=1)
    tau = _value(protocol, "tau_s", swept)
    return CycleSchedule(
        prepare=(),
        block=_pulsed_segments(protocol, tau, detuning, steps, pulse_steps),
        repeats=protocol.blocks,
    )


def perturbed(
    schedule: CycleSchedule, *, drive_error: float, detuning_error_hz: float
) -> CycleSchedule:
    """The schedule with Ω → Ω·(1+s), ideal pulse angles θ → θ·(1+s), and Δ → Δ + δ."""

    def one(seg: Segment) -> Segment:
        if isinstance(seg, Pulse):
            return Pulse(seg.angle_rad * (1 + drive_error), seg.phase_rad)
        return Evolve(
            seg.duration_s,
            seg.rabi_hz.scaled(1 + drive_error),
            seg.phase_rad,
            seg.detuning_hz + Linear(detuning_error_hz),
            seg.steps,
        )

    return CycleSchedule(
        tuple(one(s) for s in schedule.prepare),
        tuple(one(s) for s in schedule.block),
        schedule.repeats,
    )


def pulse_duration_s(angle_rad: float, rabi_hz: float) -> float:
    """Time for a drive of Rabi frequency Ω to turn the NV by θ: t = θ/(2π·Ω)."""
    return angle_rad / (2 * math.pi * rabi_hz)


def _pulsed_segments(
    protocol: PulsedBlock, tau: Linear, detuning: Linear, steps: int, pulse_steps: int
) -> tuple[Segment, ...]:
    elements = protocol.elements
    shortening = _window_shortening_s(protocol) if protocol.pulse_rabi_hz else None
    segments: list[Segment] = []
    wait_index = 0
    for element in elements:
        if isinstance(element, BlockWait):
            window = tau.scaled(element.fraction)
            if shortening is not None:
                window = window + Linear(-shortening[wait_index])
            wait_index += 1
            segments.append(Evolve(window, Linear(0.0), 0.0, detuning, steps))
        elif protocol.pulse_rabi_hz is None:
            segments.append(element)
        else:
            duration = pulse_duration_s(element.angle_rad, protocol.pulse_rabi_hz)
            segments.append(
                Evolve(
                    Linear(duration),
                    Linear(protocol.pulse_rabi_hz),
                    element.phase_rad,
                    detuning,
                    pulse_steps,
                )
            )
    return tuple(segments)


def _window_shortening_s(protocol: PulsedBlock) -> list[float]:
    """Per free window: half the duration of the pulse runs before and after it (cyclic block)."""
    runs: list[float] = []  # runs[i]: total pulse time just before wait i
    current = 0.0
    for element in protocol.elements:
        if isinstance(element, BlockWait):
            runs.append(current)
            current = 0.0
        else:
            current += pulse_duration_s(element.angle_rad, protocol.pulse_rabi_hz)
    runs[0] += current  # pulses after the last wait precede the first wait of the next block
    count = len(runs)
    return [(runs[i] + runs[(i + 1) % count]) / 2 for i in range(count)]


def shortest_window_s(protocol: PulsedBlock, tau_s: float) -> float:
    """Length of the shortest free window at block length `tau_s` (negative: pulses overlap)."""
    shortening = _window_shortening_s(protocol) if protocol.pulse_rabi_hz else None
    fractions = [e.fraction for e in protocol.elements if isinstance(e, BlockWait)]
    return min(f * tau_s - (shortening[i] if shortening else 0.0) for i, f in enumerate(fractions))


def expected_resonances(
    system: SpinSystem, protocol: Protocol, parameter: str, lo: float, hi: float
) -> dict[str, list[float]]:
    """A-priori resonances of each nucleus inside [lo, hi] of the swept `parameter`.

    Spin-lock swept in Ω: the Hartmann–Hahn match Ω = ν̃ (Hartmann & Hahn 1962); swept in Δ at
    fixed Ω: the effective field matches, sqrt(Ω² + Δ²) = ν̃, at both Δ = ±sqrt(ν̃² - Ω²). Pulsed
    swept in τ: τ = m/(2ν̃) for odd m (the PulsePol condition of Schwartz et al. 2018; for a
    custom block it is only a guide). Other sweeps: none.
    """
    out: dict[str, list[float]] = {}
    for j, nucleus in enumerate(system.nuclei):
        nu = nuclear_frequency_hz(system, j)
        if isinstance(protocol, SpinLock) and parameter == "rabi_hz":
            found = [nu]
        elif isinstance(protocol, SpinLock) and parameter == "detuning_hz":
            gap = nu**2 - protocol.rabi_hz**2
            found = [-math.sqrt(gap), math.sqrt(gap)] if gap >= 0 else []
        elif isinstance(protocol, PulsedBlock) and parameter == "tau_s":
            m_max = int(2 * nu * hi) + 1
            found = [m / (2 * nu) for m in range(1, m_max + 1, 2)]
        else:
            found = []
        out[nucleus.label] = [v for v in found if lo <= v <= hi]
    return out
