"""The typicality engine: large clusters without any 4^n (or dense 2^n × 2^n) matrix.

The maximally mixed nuclear state is replaced by an average over random pure states
(quantum typicality: for a random state |φ>, <φ|A|φ> estimates Tr(A)/2^n with an error of order
2^(-n/2); Popescu, Short & Winter, Nat. Phys. 2, 754, 2006). All states are evolved at once, as
the columns of one block, with the sparse Hamiltonian by a Chebyshev expansion of the propagator
(Tal-Ezer & Kosloff, J. Chem. Phys. 81, 3967, 1984):

    exp(-iτH)·v = e^{-iτc} Σ_k (2 - δ_k0)·(-i)^k·J_k(τr)·T_k(H')·v,   H' = (H - c)/r,

with τ = 2π·t, the spectrum inside [c - r, c + r] by Gershgorin's theorem, and the series cut
where |J_k(τr)| < `CHEBYSHEV_TOLERANCE` (k > τr: the Bessel coefficients then fall faster
than exponentially, and the tail left out is far below the recurrence's rounding). The
recurrence T_{k+1} = 2H'T_k - T_{k-1} runs in single precision (complex64: the sparse
products, which are the cost, run 3.6× faster at 16 qubits) and the sum in double; the
propagated states then differ from a double-precision propagation by about 1e-6 of their norm,
far below the typicality error of ~2^(-n/2) per state. Each step runs on row blocks of H', one
per thread (`resources.process_threads`; scipy's sparse products release the GIL). The
NV reset is unravelled exactly: the NV is measured in Z (outcome a with probability
‖(<a| ⊗ 1)ψ‖²), the nuclear part is kept and renormalised, and the NV is prepared in |0> again;
averaged over outcomes this is the reset channel ρ → |0><0| ⊗ Tr_NV ρ. Polarizations are read
from the reduced nuclear state before the measurement (no sampling there). The reported
standard error is the spread over the trajectories / sqrt(states).
"""

from __future__ import annotations

import itertools
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from contextlib import nullcontext
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.special import jv

from ..compile.program import Workload
from ..physics.model import hamiltonian, z_signs
from ..physics.propagation import nv_rotation
from ..physics.protocols import Evolve, Pulse, perturbed
from ..resources import process_threads, require_memory
from .results import SweepResult


@dataclass(frozen=True)
class TypicalSettings:
    """The typicality engine: random nuclear states per point (and node), and their seed."""

    states: int = 32
    seed: int = 0


def _apply_pulse(states: np.ndarray, pulse: Pulse) -> np.ndarray:
    """R_φ(θ) on the NV (least significant index bit) of every column."""
    r = nv_rotation(pulse.angle_rad, pulse.phase_rad)
    dim, count = states.shape
    view = states.reshape(dim // 2, 2, count)
    return np.einsum("ab,nbk->nak", r, view).reshape(dim, count)


#: The Chebyshev series stops where the Bessel coefficients fall below this.
CHEBYSHEV_TOLERANCE = 1e-10


@dataclass(frozen=True)
class ScaledHamiltonian:
    """H (Hz, sparse) as H' = (H - centre)/radius, its spectrum inside [-1, 1] (Gershgorin),
    stored in single precision for the Chebyshev recurrence, and cut into row blocks, one per
    thread (the sparse products release the GIL)."""

    matrix: sp.csr_matrix
    centre_hz: float
    radius_hz: float
    blocks: tuple[tuple[int, int, sp.csr_matrix], ...]

    @staticmethod
    def of(h: sp.csr_matrix, threads: int = 1) -> ScaledHamiltonian:
        diagonal = h.diagonal().real
        off = np.asarray(abs(h).sum(axis=1)).ravel() - np.abs(diagonal)
        low, high = float((diagonal - off).min()), float((diagonal + off).max())
        centre, radius = (high + low) / 2, max((high - low) / 2, 1e-30)
        shifted = (h - centre * sp.identity(h.shape[0], format="csr")) / radius
        matrix = shifted.tocsr().astype(np.complex64)
        edges = np.linspace(0, h.shape[0], max(1, threads) + 1).astype(int)
        blocks = tuple((a, b, matrix[a:b]) for a, b in itertools.pairwise(edges) if b > a)
        return ScaledHamiltonian(matrix, centre, radius, blocks)


def _recurrence_step(block, current, previous, out, scale: float, coefficient: complex) -> None:
    """On one row block: previous <- scale·H'·current - previous (the next Chebyshev vector,
    in place), and out += coefficient · that vector."""
    start, stop, rows = block
    step = rows @ current
    step *= scale
    mine = previous[start:stop]
    np.subtract(step, mine, out=mine)
    out[start:stop] += coefficient * mine


def chebyshev_propagate(h: ScaledHamiltonian, states: np.ndarray, time_s: float) -> np.ndarray:
    """exp(-2πi·H·t)·states by the Chebyshev series of the module docstring, each step's row
    blocks on threads of their own."""
    tau = 2 * np.pi * time_s
    x = tau * h.radius_hz
    if not np.isfinite(x):
        raise ValueError(f"propagator argument 2π·t·r = {x} is not finite")
    order = int(x) + 8
    while abs(jv(order, x)) > CHEBYSHEV_TOLERANCE:
        order += 8
    k = np.arange(order + 1)
    coefficients = jv(k, x) * (-1j) ** k
    coefficients[1:] *= 2
    current = states.astype(h.matrix.dtype)  # T_0
    previous = np.zeros_like(current)  # T_-1 = 0, so that the first step gives T_1 = H'·T_0
    out = coefficients[0] * states
    with ThreadPoolExecutor(len(h.blocks)) if len(h.blocks) > 1 else nullcontext() as pool:
        for index, c in enumerate(coefficients[1:]):
            scale = 1.0 if index == 0 else 2.0
            if pool is None:  # one block: no hand-off to a thread at every step
                _recurrence_step(h.blocks[0], current, previous, out, scale, c)
            else:
                steps = [
                    pool.submit(_recurrence_step, b, current, previous, out, scale, c)
                    for b in h.blocks
                ]
                for done in steps:
                    done.result()
            current, previous = previous, current
    return np.exp(-1j * tau * h.centre_hz) * out


def _evolve(states, segment: Evolve, x: float, system, cache) -> np.ndarray:
    key = (segment.rabi_hz.at(x), segment.detuning_hz.at(x), segment.phase_rad)
    if key not in cache:
        op = hamiltonian(system, rabi_hz=key[0], detuning_hz=key[1], phase_rad=key[2])
        sparse = op.to_matrix(sparse=True).tocsr()
        cache[key] = ScaledHamiltonian.of(sparse, process_threads())
    return chebyshev_propagate(cache[key], states, segment.duration_s.at(x))


def _reset_nv(states: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Measure the NV in Z, keep the nuclear part (renormalised), re-prepare NV |0>."""
    dim, count = states.shape
    view = states.reshape(dim // 2, 2, count)
    p1 = np.sum(np.abs(view[:, 1, :]) ** 2, axis=0)
    outcome = (rng.random(count) < p1).astype(int)
    nuclear = view[:, outcome, np.arange(count)]
    nuclear /= np.linalg.norm(nuclear, axis=0, keepdims=True)
    out = np.zeros_like(view)
    out[:, 0, :] = nuclear
    return out.reshape(dim, count)


def random_nuclear_states(num_nuclei: int, count: int, rng: np.random.Generator) -> np.ndarray:
    """`count` Haar-random nuclear states (normalised complex Gaussian vectors), NV in |0>."""
    dim = 2**num_nuclei
    phi = rng.normal(size=(dim, count)) + 1j * rng.normal(size=(dim, count))
    phi /= np.linalg.norm(phi, axis=0, keepdims=True)
    full = np.zeros((dim, 2, count), dtype=np.complex128)
    full[:, 0, :] = phi
    return full.reshape(2 * dim, count)


def simulate_typical(
    work: Workload,
    settings: TypicalSettings | None = None,
    *,
    on_point: Callable[[], None] | None = None,
) -> SweepResult:
    """Polarizations from random pure states and an unravelled reset, with standard errors."""
    settings = settings or TypicalSettings()
    system = work.system
    n, cycles = system.num_nuclei, work.cycles
    states_per_node = settings.states
    terms = len(hamiltonian(system, rabi_hz=1.0, detuning_hz=1.0))
    # the state block and the Chebyshev recurrence's work blocks, plus the sparse H (16 B + index)
    need = 6 * 16 * 2**system.num_qubits * states_per_node + 24 * terms * 2**system.num_qubits
    require_memory(
        "typical",
        need,
        f"NV + {n} nuclei and {states_per_node} states",
        "lower [typical] states or the number of nuclei",
    )
    signs = z_signs(n)
    nodes = work.nodes()
    schedules = [
        perturbed(work.schedule(), drive_error=s, detuning_error_hz=d) for _, s, d in nodes
    ]
    weights = work.weights()
    values = np.asarray(work.values)
    mean = np.empty((len(values), cycles, n))
    err = np.empty_like(mean)
    cache: dict = {}
    for i, x in enumerate(values):
        per_node_mean, per_node_var = [], []
        for k, schedule in enumerate(schedules):
            rng = np.random.default_rng([settings.seed, i, k])
            states = random_nuclear_states(n, states_per_node, rng)
            samples = np.empty((cycles, states_per_node, n))
            for c in range(cycles):
                states = _reset_nv(states, rng) if c else states
                for seg in schedule.segments():
                    if isinstance(seg, Pulse):
                        states = _apply_pulse(states, seg)
                    else:
                        states = _evolve(states, seg, x, system, cache)
                # <Z_j> of the nuclear reduced state: both NV components, no sampling needed
                weights_n = np.sum(np.abs(states.reshape(2**n, 2, -1)) ** 2, axis=1)
                samples[c] = weights_n.T @ signs
            per_node_mean.append(samples.mean(axis=1))
            per_node_var.append(samples.var(axis=1, ddof=1) / states_per_node)
        mean[i] = np.tensordot(weights, np.array(per_node_mean), axes=1)
        err[i] = np.sqrt(np.tensordot(weights**2, np.array(per_node_var), axes=1))
        if on_point is not None:
            on_point()
    return SweepResult("typical", work.parameter, values, system.labels, mean, err)
