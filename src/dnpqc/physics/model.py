"""The NV–13C spin model and its Hamiltonian.

Conventions (stated once, used everywhere in dnpqc)
---------------------------------------------------
* Units: frequencies are cyclic, in Hz; times in s; fields in T. A Hamiltonian is H/h in Hz and
  evolves states as U(t) = exp(-2πi·H·t).
* Qubits: qubit 0 is the NV electron spin restricted to {|0> = m_s 0, |1> = m_s -1}; qubits
  1..n are the 13C nuclei, |0> = spin up along B0. Qiskit order: qubit 0 is the right-most
  character of a Pauli label and the least significant bit of a matrix index.
* Spin operators: S_z = (Z_0 - 1)/2 = -|1><1| for the NV; I = σ/2 for each nucleus.
* Rotating frame of the microwave drive, rotating-wave and secular approximations:

      H = Δ·S_z + (Ω/2)·(cos φ·X_0 + sin φ·Y_0)
          + Σ_j [ -ν_L·I_z^j + S_z·(A_zz,j·I_z^j + A_zx,j·I_x^j + A_zy,j·I_y^j) ]
          + Σ_{j<k} D_jk·(3·I_z^j·I_z^k - I^j·I^k)

  with ν_L = γ_C·B0 the 13C Larmor frequency, Δ the NV detuning, Ω the Rabi frequency and φ the
  drive phase (φ = 0 drives about X). The secular hyperfine row of nucleus j is
  (A_zz, A_zx, A_zy) = (A∥, A⊥·cos α, A⊥·sin α), α the azimuth of its transverse coupling
  about the NV axis (for a nucleus at a position, the azimuth of that position).
* A rotation of the NV by angle θ about the XY-plane axis at phase φ is
  R_φ(θ) = exp(-i·θ/2·(cos φ·X + sin φ·Y)) (qiskit's ``r`` gate); a drive of Rabi frequency Ω
  turns the NV by θ = 2π·Ω·t in time t.
* Polarization of nucleus j is P_j = <Z_j> (+1: fully up along B0).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from qiskit.quantum_info import SparsePauliOp

from ..errors import ScenarioError
from .constants import larmor_hz


@dataclass(frozen=True)
class Nucleus:
    """A 13C nucleus: its secular hyperfine coupling in Hz and, if known, position in nm.

    A∥ = `a_par_hz` = A_zz; the transverse coupling A⊥ = `a_perp_hz` points at the azimuth
    `azimuth_deg` (degrees, about the NV axis from x): A_zx = A⊥·cos α, A_zy = A⊥·sin α.
    """

    label: str
    a_par_hz: float
    a_perp_hz: float
    position_nm: tuple[float, float, float] | None = None
    azimuth_deg: float = 0.0

    def __post_init__(self) -> None:
        if not self.label:
            raise ScenarioError("nucleus `label` must be a non-empty string")
        for name in ("a_par_hz", "a_perp_hz", "azimuth_deg"):
            value = getattr(self, name)
            if not math.isfinite(value):
                raise ScenarioError(f"nucleus {self.label!r}: `{name}` must be finite, got {value}")

    @property
    def a_zx_hz(self) -> float:
        return self.a_perp_hz * _cos_sin_deg(self.azimuth_deg)[0]

    @property
    def a_zy_hz(self) -> float:
        return self.a_perp_hz * _cos_sin_deg(self.azimuth_deg)[1]


def _cos_sin_deg(angle_deg: float) -> tuple[float, float]:
    """(cos, sin) of an angle in degrees, exact at multiples of 90° (no 6e-17 leftover terms)."""
    quarter, rest = divmod(angle_deg, 90.0)
    if rest == 0.0:
        return ((1.0, 0.0), (0.0, 1.0), (-1.0, 0.0), (0.0, -1.0))[int(quarter) % 4]
    rad = math.radians(angle_deg)
    return math.cos(rad), math.sin(rad)


@dataclass(frozen=True)
class Coupling:
    """Secular dipolar coupling D_jk (Hz) between nuclei with indices j < k (0-based)."""

    first: int
    second: int
    d_hz: float


@dataclass(frozen=True)
class SpinSystem:
    """An NV centre with n 13C nuclei in a static field along the NV axis."""

    field_t: float
    nuclei: tuple[Nucleus, ...]
    couplings: tuple[Coupling, ...] = field(default=())

    def __post_init__(self) -> None:
        if not (math.isfinite(self.field_t) and self.field_t > 0):
            raise ScenarioError(f"`spins.field_t` must be a number > 0 (tesla), got {self.field_t}")
        if not self.nuclei:
            raise ScenarioError("the spin system needs at least one nucleus")
        labels = [n.label for n in self.nuclei]
        if len(set(labels)) != len(labels):
            raise ScenarioError(f"nucleus labels must be unique, got {labels}")
        n = len(self.nuclei)
        for c in self.couplings:
            if not (0 <= c.first < c.second < n):
                raise ScenarioError(f"coupling indices must satisfy 0 <= j < k < {n}, got {c}")

    @property
    def num_nuclei(self) -> int:
        return len(self.nuclei)

    @property
    def num_qubits(self) -> int:
        """NV qubit plus one qubit per nucleus."""
        return len(self.nuclei) + 1

    @property
    def labels(self) -> tuple[str, ...]:
        return tuple(n.label for n in self.nuclei)

    @property
    def larmor_hz(self) -> float:
        return larmor_hz(self.field_t)

    def without_couplings(self) -> SpinSystem:
        """The same spins with every hyperfine and dipolar coupling set to zero (labels,
        positions and field kept): no polarization can move between them."""
        nuclei = tuple(
            Nucleus(n.label, 0.0, 0.0, n.position_nm, n.azimuth_deg) for n in self.nuclei
        )
        return SpinSystem(self.field_t, nuclei)


def pauli_label(num_qubits: int, paulis: dict[int, str]) -> str:
    """Qiskit Pauli label with the given single-qubit Paulis (qubit 0 right-most)."""
    chars = ["I"] * num_qubits
    for qubit, p in paulis.items():
        chars[num_qubits - 1 - qubit] = p
    return "".join(chars)


def hamiltonian(
    system: SpinSystem, *, rabi_hz: float, detuning_hz: float, phase_rad: float = 0.0
) -> SparsePauliOp:
    """H/h in Hz of the module-docstring model, as a SparsePauliOp on NV + n nuclei.

    The identity term (a global phase) is kept so the operator is exactly the formula.
    """
    q = system.num_qubits
    terms: list[tuple[str, float]] = []

    def add(paulis: dict[int, str], coeff: float) -> None:
        terms.append((pauli_label(q, paulis), coeff))

    # Δ·S_z = Δ/2·Z_0 - Δ/2
    add({0: "Z"}, detuning_hz / 2)
    add({}, -detuning_hz / 2)
    add({0: "X"}, rabi_hz / 2 * math.cos(phase_rad))
    add({0: "Y"}, rabi_hz / 2 * math.sin(phase_rad))
    nu_l = system.larmor_hz
    for j, nucleus in enumerate(system.nuclei, start=1):
        # -ν_L·I_z + S_z·(A_zz·I_z + A_zx·I_x + A_zy·I_y), with S_z = (Z_0 - 1)/2 and I = σ/2
        add({j: "Z"}, -nu_l / 2 - nucleus.a_par_hz / 4)
        add({j: "X"}, -nucleus.a_zx_hz / 4)
        add({j: "Y"}, -nucleus.a_zy_hz / 4)
        add({0: "Z", j: "Z"}, nucleus.a_par_hz / 4)
        add({0: "Z", j: "X"}, nucleus.a_zx_hz / 4)
        add({0: "Z", j: "Y"}, nucleus.a_zy_hz / 4)
    for c in system.couplings:
        j, k = c.first + 1, c.second + 1
        # D·(3·I_z I_z - I·I) = D/4·(2·ZZ - XX - YY)
        add({j: "Z", k: "Z"}, c.d_hz / 2)
        add({j: "X", k: "X"}, -c.d_hz / 4)
        add({j: "Y", k: "Y"}, -c.d_hz / 4)
    op = SparsePauliOp.from_list(terms).simplify(atol=0.0)
    return op


def nuclear_frequency_hz(system: SpinSystem, index: int) -> float:
    """Precession frequency ν̃ = sqrt((ν_L + A∥/2)² + (A⊥/2)²) of nucleus `index` (0-based).

    It does not depend on the azimuth of A⊥ (a rotation of the nucleus about z).

    This is the nuclear frequency with the NV spin-locked (or on the equator), i.e. the
    Hartmann–Hahn match Ω = ν̃ of the continuous drive.
    """
    n = system.nuclei[index]
    return math.hypot(system.larmor_hz + n.a_par_hz / 2, n.a_perp_hz / 2)


def effective_perp_hz(system: SpinSystem, index: int) -> float:
    """Flip-flop part of the hyperfine coupling, A⊥,eff = A⊥·ν_L/ν̃, in Hz."""
    n = system.nuclei[index]
    return abs(n.a_perp_hz) * system.larmor_hz / nuclear_frequency_hz(system, index)


def z_signs(num_nuclei: int) -> np.ndarray:
    """(2^n, n) array: eigenvalue of Z_j on each nuclear basis state (nucleus j is bit j)."""
    bits = (np.arange(2**num_nuclei)[:, None] >> np.arange(num_nuclei)[None, :]) & 1
    return 1.0 - 2.0 * bits
