"""The exact engine: dense propagators of the model and the exact NV-reset channel
(`propagation.py`), at every sweep point and imperfection node. No Trotter error: the reference.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from ..compile.program import Workload, row_unitaries
from ..physics.imperfections import average_nodes
from ..physics.propagation import Propagators, polarization_by_cycle
from ..resources import require_memory
from .results import SweepResult


def simulate_exact(work: Workload, *, on_point: Callable[[], None] | None = None) -> SweepResult:
    """Exact polarizations over the sweep of `work`, averaged over the imperfection nodes."""
    system = work.system
    # eigh of the dense H (2^(n+1) square) holds about four such matrices at once
    require_memory(
        "exact",
        4 * 16 * 4**system.num_qubits,
        f"NV + {system.num_nuclei} nuclei",
        "use the typical engine (`--engines typical` for run, `--engine typical` for sweep)",
    )
    shape = (work.cycles, system.num_nuclei)
    props = Propagators(system)
    rows = []
    for i in range(len(work.values)):
        for u in row_unitaries(work.subset([i]), props):
            rows.append(polarization_by_cycle(u, work.cycles, system.num_nuclei))
        if on_point is not None:
            on_point()
    weights = work.weights()
    pol, err = average_nodes(np.array(rows).reshape(-1, *shape), weights, work.sampled)
    values = np.asarray(work.values)
    return SweepResult("exact", work.parameter, values, system.labels, pol, err)
