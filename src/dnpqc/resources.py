"""Machine resources: memory needs of the engines (checked before a run starts) and the threads
each worker may use.

Threads: a pool of W workers on C cores gives each worker max(1, C // W) threads for BLAS
(threadpoolctl) and for qiskit-aer (`THREADS_VARIABLE`, read by the circuit engines), so that
workers × threads ≤ cores: an oversubscribed `eigh` of a 512×512 matrix was measured 100× slower.
"""

from __future__ import annotations

import math
import os

from threadpoolctl import threadpool_limits

from .errors import RunError

#: Environment variable with the threads one process may use (unset: all cores).
THREADS_VARIABLE = "DNPQC_THREADS"


def cores() -> int:
    """Cores this process may run on."""
    try:
        return len(os.sched_getaffinity(0)) or 1
    except (AttributeError, OSError):
        return os.cpu_count() or 1


def threads_per_worker(workers: int) -> int:
    """Threads for each of `workers` processes: workers × threads ≤ cores."""
    return max(1, cores() // max(1, workers))


def process_threads() -> int:
    """Threads this process may use: `THREADS_VARIABLE` if set, else every core."""
    value = os.environ.get(THREADS_VARIABLE, "")
    return int(value) if value.isdigit() and int(value) > 0 else cores()


def limit_threads(threads: int) -> None:
    """Limit this process (a pool worker) to `threads` BLAS/OpenMP and Aer threads."""
    os.environ[THREADS_VARIABLE] = str(threads)
    threadpool_limits(threads)


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
        raise RunError(
            f"the {engine} engine needs about {format_bytes(need_bytes)} for {what}, more than "
            f"half the memory ({format_bytes(have)}); {alternative}"
        )
