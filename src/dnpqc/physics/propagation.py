"""Dense propagation of the model: cycle unitaries and the exact NV-reset channel.

Per sweep point, a cycle is one unitary U on NV ⊗ nuclei (preparation pulse, then the block
repeated). With the NV reset to |0>, the cycle acts on the nuclear state ρ as
ρ → Σ_a K_a ρ K_a†, K_a = (<a|_NV ⊗ 1)·U·(|0>_NV ⊗ 1), which is the reset channel
ρ → |0><0| ⊗ Tr_NV(ρ) followed by U and the partial trace, without any full-space product.
Evolution windows are exponentiated through `numpy.linalg.eigh`: exp(-2πi·H·t) = V e^{-2πi·w·t} V†.
"""

from __future__ import annotations

from collections import OrderedDict

import numpy as np

from .model import SpinSystem, hamiltonian, z_signs
from .protocols import CycleSchedule, Evolve, Pulse

#: Memory the eigendecomposition cache may hold; the oldest entries go first beyond it.
CACHE_BYTES = 64 * 2**20


class Propagators:
    """Cache of eigendecompositions of H for the drive settings met during a sweep.

    Bounded by CACHE_BYTES (least recently used out): a swept Rabi frequency gives a new H at
    every point, and an unbounded cache grew by one 2^q × 2^q matrix per point.
    """

    def __init__(self, system: SpinSystem):
        self.system = system
        self._eig: OrderedDict[tuple[float, float, float], tuple[np.ndarray, np.ndarray]] = (
            OrderedDict()
        )

    def _decomposition(self, key: tuple[float, float, float]) -> tuple[np.ndarray, np.ndarray]:
        if key in self._eig:
            self._eig.move_to_end(key)
            return self._eig[key]
        h = hamiltonian(self.system, rabi_hz=key[0], detuning_hz=key[1], phase_rad=key[2])
        self._eig[key] = np.linalg.eigh(h.to_matrix())
        held = sum(w.nbytes + v.nbytes for w, v in self._eig.values())
        while len(self._eig) > 1 and held > CACHE_BYTES:
            w, v = self._eig.popitem(last=False)[1]
            held -= w.nbytes + v.nbytes
        return self._eig[key]

    def evolve(self, segment: Evolve, x: float) -> np.ndarray:
        key = (segment.rabi_hz.at(x), segment.detuning_hz.at(x), segment.phase_rad)
        w, v = self._decomposition(key)
        phases = np.exp(-2j * np.pi * w * segment.duration_s.at(x))
        return (v * phases) @ v.conj().T

    def pulse(self, segment: Pulse) -> np.ndarray:
        return np.kron(
            np.eye(2**self.system.num_nuclei), nv_rotation(segment.angle_rad, segment.phase_rad)
        )


def nv_rotation(angle_rad: float, phase_rad: float) -> np.ndarray:
    """R_φ(θ) = exp(-i·θ/2·(cos φ·X + sin φ·Y)) as a 2×2 matrix."""
    c, s = np.cos(angle_rad / 2), np.sin(angle_rad / 2)
    e = np.exp(1j * phase_rad)
    return np.array([[c, -1j * s / e], [-1j * s * e, c]], dtype=np.complex128)


def cycle_unitary(props: Propagators, schedule: CycleSchedule, x: float) -> np.ndarray:
    """U of one cycle at swept value x: prepare, then the block `repeats` times."""

    def product(segments) -> np.ndarray:
        dim = 2**props.system.num_qubits
        u = np.eye(dim, dtype=np.complex128)
        for seg in segments:
            u = (props.pulse(seg) if isinstance(seg, Pulse) else props.evolve(seg, x)) @ u
        return u

    block = np.linalg.matrix_power(product(schedule.block), schedule.repeats)
    return block @ product(schedule.prepare)


def reset_kraus(unitary: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """K_0, K_1 on the nuclei for NV prepared in |0> and discarded after `unitary`."""
    n = unitary.shape[0] // 2
    blocks = unitary.reshape(n, 2, n, 2)
    return blocks[:, 0, :, 0], blocks[:, 1, :, 0]


def polarization_by_cycle(unitary: np.ndarray, cycles: int, num_nuclei: int) -> np.ndarray:
    """(cycles, n) array of <Z_j> after each cycle, nuclei starting maximally mixed."""
    k0, k1 = reset_kraus(unitary)
    dim = 2**num_nuclei
    rho = np.eye(dim, dtype=np.complex128) / dim
    signs = z_signs(num_nuclei)
    out = np.empty((cycles, num_nuclei))
    for c in range(cycles):
        rho = k0 @ rho @ k0.conj().T + k1 @ rho @ k1.conj().T
        out[c] = np.real(np.diag(rho)) @ signs
    return out
