"""dnpqc: NV-centre dynamic nuclear polarization compiled into quantum-circuit programs.

The public API, for notebooks and scripts:

>>> from dnpqc import demo_scenario, hamiltonian, compile_program, simulate
>>> sc = demo_scenario()
>>> h = hamiltonian(sc.system, rabi_hz=500e3, detuning_hz=0.0)  # SparsePauliOp, Hz
>>> program = compile_program(sc)             # Program: .strategy, .circuits, .mapped
>>> result = simulate(sc, "exact")          # .polarization[point, cycle, nucleus]
"""

from .compile.program import Program, Workload
from .engines.results import SweepResult
from .errors import RunError, ScenarioError
from .io.scenario import Scenario, demo_scenario, load_scenario, parse_scenario, scenario_from_dict
from .physics.model import Coupling, Nucleus, SpinSystem, hamiltonian
from .pipeline.job import RunOutcome, compile_program, run_scenario, simulate

__all__ = [
    "Coupling",
    "Nucleus",
    "Program",
    "RunError",
    "RunOutcome",
    "Scenario",
    "ScenarioError",
    "SpinSystem",
    "SweepResult",
    "Workload",
    "compile_program",
    "demo_scenario",
    "hamiltonian",
    "load_scenario",
    "parse_scenario",
    "run_scenario",
    "scenario_from_dict",
    "simulate",
]
