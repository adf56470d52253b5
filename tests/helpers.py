"""Independent reference constructions shared by several test files (numpy/scipy only)."""

import numpy as np
import scipy.linalg

from dnpqc.physics.constants import electron_nuclear_dipolar_hz_nm3
from dnpqc.physics.model import Nucleus, SpinSystem

I2 = np.eye(2)
X = np.array([[0, 1], [1, 0]], dtype=complex)
Y = np.array([[0, -1j], [1j, 0]])
Z = np.diag([1.0, -1.0]).astype(complex)


def embed(ops: dict[int, np.ndarray], num_qubits: int) -> np.ndarray:
    """⊗ over qubits, qubit 0 right-most (qiskit order), built with np.kron."""
    out = np.eye(1)
    for q in reversed(range(num_qubits)):
        out = np.kron(out, ops.get(q, I2))
    return out


def hyperfine_row_reference(nucleus: Nucleus) -> np.ndarray:
    """(A_zz, A_zx, A_zy) in Hz. From a position: the z row of the point-dipole tensor
    a·(3·r̂ r̂ᵀ - 1) (textbook dipolar form, from memory); else A⊥ at its azimuth."""
    if nucleus.position_nm is not None:
        r = np.asarray(nucleus.position_nm, dtype=float)
        dist = np.linalg.norm(r)
        unit = r / dist
        tensor = (
            electron_nuclear_dipolar_hz_nm3() / dist**3 * (3 * np.outer(unit, unit) - np.eye(3))
        )
        return tensor[2, [2, 0, 1]]
    alpha = np.deg2rad(nucleus.azimuth_deg)
    return np.array(
        [nucleus.a_par_hz, nucleus.a_perp_hz * np.cos(alpha), nucleus.a_perp_hz * np.sin(alpha)]
    )


def dense_reference(system: SpinSystem, rabi, detuning, phase=0.0) -> np.ndarray:
    """The issue's formula, term by term, from S_z = -|1><1| and I = σ/2 (independent path);
    the whole secular hyperfine row S_z·(A_zz·I_z + A_zx·I_x + A_zy·I_y) is kept."""
    q = system.num_qubits
    sz = embed({0: np.diag([0.0, -1.0])}, q)
    h = detuning * sz + rabi / 2 * embed({0: np.cos(phase) * X + np.sin(phase) * Y}, q)
    for j, n in enumerate(system.nuclei, start=1):
        iz, ix, iy = (embed({j: P / 2}, q) for P in (Z, X, Y))
        a_zz, a_zx, a_zy = hyperfine_row_reference(n)
        h += -system.larmor_hz * iz + sz @ (a_zz * iz + a_zx * ix + a_zy * iy)
    for c in system.couplings:
        j, k = c.first + 1, c.second + 1
        dot = sum(embed({j: P / 2}, q) @ embed({k: P / 2}, q) for P in (X, Y, Z))
        h += c.d_hz * (3 * embed({j: Z / 2}, q) @ embed({k: Z / 2}, q) - dot)
    return h


def nv_rotation_reference(angle, phase):
    """exp(-i·θ/2·(cos φ X + sin φ Y)) by scipy.linalg.expm."""
    return scipy.linalg.expm(-0.5j * angle * (np.cos(phase) * X + np.sin(phase) * Y))


def reset_and_trace(rho_full: np.ndarray) -> np.ndarray:
    """Tr_NV of a full density matrix (NV = qubit 0, least significant index bit)."""
    n = rho_full.shape[0] // 2
    return np.trace(rho_full.reshape(n, 2, n, 2), axis1=1, axis2=3)


def spin_lock_reference(system: SpinSystem, *, rabi, detuning, time_s, cycles):
    """<Z_j> after each spin-lock cycle by full-space density matrices: reset NV to |0>,
    R_y(π/2), evolve by expm(-2πi·H·t), partial trace (independent of the engine's Kraus form)."""
    q = system.num_qubits
    n = system.num_nuclei
    u = scipy.linalg.expm(-2j * np.pi * dense_reference(system, rabi, detuning) * time_s)
    u = u @ embed({0: nv_rotation_reference(np.pi / 2, np.pi / 2)}, q)
    rho_n = np.eye(2**n) / 2**n
    out = []
    for _ in range(cycles):
        full = np.kron(rho_n, np.diag([1.0, 0.0]))
        rho_n = reset_and_trace(u @ full @ u.conj().T)
        out.append([np.trace(embed({j: Z}, n + 1)[::2, ::2] @ rho_n).real for j in range(1, n + 1)])
    return np.array(out)
