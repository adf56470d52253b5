"""Memory needs of the engines, checked before a run starts."""

from __future__ import annotations

import math
import os

from .errors import ScenarioError


def density_matrix_bytes(num_qubits: int) -> int:
    """Memory of one complex128 density matrix: 16·4^q bytes."""
    return 16 * 4**num_qubits


def memory_budget_bytes() -> int:
    """Half of this machine's physical memory (4 GiB if it cannot be read)."""
    try:
        return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES") // 2
    except (OSError, ValueError):
        return 4 * 2**30


def format_bytes(count: float) -> str:
    """Bytes in binary units up to YiB; beyond that as a power of two ("2^98 B")."""
    units = ["B", "KiB", "MiB", "GiB", "TiB", "PiB", "EiB", "ZiB", "YiB"]
    k = int(math.log(max(count, 1), 1024))
    if k >= len(units):
        return f"2^{math.log2(count):.0f} B"
    return f"{count / 1024**k:.3g} {units[k]}"


def require_memory(engine: str, need_bytes: float, what: str, alternative: str) -> None:
    """Refuse a run whose estimate exceeds half the memory, naming the figure and a way out."""
    have = memory_budget_bytes()
    if need_bytes > have:
        raise ScenarioError(
            f"the {engine} engine needs about {format_bytes(need_bytes)} for {what}, more than "
            f"half the memory ({format_bytes(have)}); {alternative}"
        )
