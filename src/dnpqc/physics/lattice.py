"""13C sites of the diamond lattice around an NV centre, and point-dipole couplings.

Frame: the vacancy (where the NV electron spin density is centred) is the origin; z points along
the NV axis ([111] of the cubic lattice) towards the nitrogen; positions are in nm. B0 is along z.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import ScenarioError
from .constants import (
    C13_NATURAL_ABUNDANCE,
    DIAMOND_LATTICE_NM,
    electron_nuclear_dipolar_hz_nm3,
    nuclear_dipolar_hz_nm3,
)

# Rows: unit vectors of the NV frame (x, y, z) in cubic-lattice coordinates; z = [111]/√3.
_NV_FRAME = np.array(
    [
        [1.0, -1.0, 0.0],
        [1.0, 1.0, -2.0],
        [1.0, 1.0, 1.0],
    ]
) / np.array([[math.sqrt(2.0)], [math.sqrt(6.0)], [math.sqrt(3.0)]])

_FCC = np.array([[0, 0, 0], [0, 0.5, 0.5], [0.5, 0, 0.5], [0.5, 0.5, 0]])
_BASIS = np.array([[0, 0, 0], [0.25, 0.25, 0.25]])


def hyperfine_from_position(position_nm: tuple[float, float, float]) -> tuple[float, float]:
    """Secular point-dipole hyperfine pair (A∥, A⊥) in Hz for a 13C at `position_nm`.

    A∥ = a(3cos²θ - 1), A⊥ = 3a·sinθ·cosθ, a = (μ0/4π)·γ_e·γ_C·ħ/(2π·r³), θ the angle to the NV
    axis. A⊥ points at the azimuth of the position (`transverse_azimuth_deg`):
    A_zx = A⊥·cos α, A_zy = A⊥·sin α.
    """
    r_vec = np.asarray(position_nm, dtype=float)
    r = float(np.linalg.norm(r_vec))
    if not r > 0:
        raise ScenarioError(f"`position_nm` must not be the NV site, got {tuple(position_nm)}")
    a = electron_nuclear_dipolar_hz_nm3() / r**3
    cos_t = r_vec[2] / r
    sin_t = math.hypot(r_vec[0], r_vec[1]) / r
    return float(a * (3 * cos_t**2 - 1)), float(3 * a * sin_t * cos_t)


def transverse_azimuth_deg(position_nm: tuple[float, float, float]) -> float:
    """Azimuth α (degrees) of a position about the NV axis, from x; 0 on the axis itself."""
    return math.degrees(math.atan2(position_nm[1], position_nm[0]))


def dipolar_from_positions(first_nm, second_nm) -> float:
    """Secular homonuclear coupling D = b·(1 - 3cos²θ)/2 in Hz, b = (μ0/4π)·γ_C²·ħ/(2π·r³)."""
    d_vec = np.asarray(second_nm, dtype=float) - np.asarray(first_nm, dtype=float)
    r = float(np.linalg.norm(d_vec))
    if not r > 0:
        raise ScenarioError("two nuclei share one position")
    b = nuclear_dipolar_hz_nm3() / r**3
    cos_t = d_vec[2] / r
    return float(b * (1 - 3 * cos_t**2) / 2)


def diamond_sites_nm(radius_nm: float) -> np.ndarray:
    """Carbon sites within `radius_nm` of the vacancy, in the NV frame, shape (m, 3).

    The vacancy (origin) and the nitrogen (nearest neighbour along +z) are excluded. Sorted by
    distance, then by coordinates, so the order is deterministic.
    """
    a = DIAMOND_LATTICE_NM
    cells = math.ceil(radius_nm / a) + 1
    rng = np.arange(-cells, cells + 1)
    grid = np.stack(np.meshgrid(rng, rng, rng, indexing="ij"), axis=-1).reshape(-1, 3)
    sites = (grid[:, None, None, :] + _FCC[None, :, None, :] + _BASIS[None, None, :, :]).reshape(
        -1, 3
    )
    nitrogen = np.array([0.25, 0.25, 0.25])
    keep = ~(np.all(sites == 0, axis=1) | np.all(np.isclose(sites, nitrogen), axis=1))
    frame = (sites[keep] * a) @ _NV_FRAME.T
    frame = frame[np.linalg.norm(frame, axis=1) <= radius_nm + 1e-12]
    dist = np.round(np.linalg.norm(frame, axis=1), 9)
    order = np.lexsort((frame[:, 0], frame[:, 1], frame[:, 2], dist))
    return frame[order]


def random_cluster_nm(
    *,
    radius_nm: float,
    seed: int,
    abundance: float = C13_NATURAL_ABUNDANCE,
    min_distance_nm: float = 0.0,
    max_nuclei: int | None = None,
) -> list[tuple[float, float, float]]:
    """Positions of randomly occupied 13C sites (each with probability `abundance`), seeded.

    Sites closer than `min_distance_nm` to the vacancy are skipped (the point-dipole form fails
    there). With `max_nuclei`, only the most strongly coupled sites (largest |A|) are kept.
    Returned in order of decreasing hyperfine strength.
    """
    if not radius_nm > 0:
        raise ScenarioError(f"`spins.lattice.radius_nm` must be > 0, got {radius_nm}")
    if not 0 < abundance <= 1:
        raise ScenarioError(f"`spins.lattice.abundance` must be in (0, 1], got {abundance}")
    if min_distance_nm < 0:
        raise ScenarioError(f"`spins.lattice.min_distance_nm` must be >= 0, got {min_distance_nm}")
    sites = diamond_sites_nm(radius_nm)
    occupied = np.random.default_rng(seed).random(len(sites)) < abundance
    chosen = [s for s in sites[occupied] if np.linalg.norm(s) >= min_distance_nm]
    chosen.sort(key=lambda s: -math.hypot(*hyperfine_from_position(tuple(s))))
    if max_nuclei is not None:
        chosen = chosen[:max_nuclei]
    return [tuple(float(x) for x in s) for s in chosen]
