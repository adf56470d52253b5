"""dnpqc benchmarks: each case times two ways of doing one job in the same run and prints ratios.

Run with `make bench`. Machines are noisy: compare the ratios, not the absolute seconds.
"""

from __future__ import annotations

import math
import os
import sys
import time
from dataclasses import replace

import numpy as np
import qutip
from qiskit import transpile
from qiskit_aer import AerSimulator

from dnpqc import compile_program, demo_scenario, parse_scenario, simulate
from dnpqc.compile.folding import BASELINE_KINDS
from dnpqc.compile.noise import noise_model, with_idle_relaxation
from dnpqc.compile.processor import build_target, make_processor
from dnpqc.compile.strategy import applicable, resolved_trotter, strategy_row
from dnpqc.engines.circuit import density_matrix_simulator, run_program
from dnpqc.io.scenario import Sweep
from dnpqc.physics.model import hamiltonian
from dnpqc.physics.propagation import nv_rotation
from dnpqc.pipeline.job import scenario_programs
from dnpqc.resources import cores


def cluster(n: int, *, points: int, cycles: int, steps: int = 10, time_s: float = 12e-6) -> str:
    """An invented NV-centric cluster of n nuclei (benchmark data only)."""
    nuclei = "".join(
        f'[[spins.nuclei]]\nlabel = "N{j}"\na_par_hz = {4e3 * j - 9e3}\n'
        f"a_perp_hz = {3e3 + 1.5e3 * j}\n"
        for j in range(1, n + 1)
    )
    stop = 345e3 if points > 1 else 315e3
    return (
        f"[spins]\nfield_t = 0.03\n{nuclei}"
        '[drive]\nprotocol = "spin-lock"\nrabi_hz = 330e3\n'
        f'[sweep]\nparameter = "rabi_hz"\nstart = 315e3\nstop = {stop}\npoints = {points}\n'
        f"[cycle]\ninteraction_time_s = {time_s}\ncount = {cycles}\n"
        f"[trotter]\nsteps = {steps}\norder = 2\n"
    )


def timed(fn):
    start = time.perf_counter()
    out = fn()
    return out, time.perf_counter() - start


def line(case: str, text: str) -> None:
    print(f"{case:<28} {text}", flush=True)


def qutip_point(sc, rabi: float) -> np.ndarray:
    """The same physics in QuTiP: mesolve each cycle, reset by partial trace and re-tensoring."""
    n = sc.system.num_nuclei
    h = hamiltonian(sc.system, rabi_hz=rabi, detuning_hz=0.0).to_matrix()
    h_q = qutip.Qobj(2 * np.pi * h, dims=[[2] * (n + 1)] * 2).to("CSR")  # sparse Liouvillian
    ry = qutip.Qobj(nv_rotation(math.pi / 2, math.pi / 2))
    nv0 = ry * qutip.basis(2, 0).proj() * ry.dag()
    rho = qutip.tensor([qutip.qeye(2)] * n) / 2**n
    opts = {"atol": 1e-10, "rtol": 1e-8, "nsteps": 10**6}
    zs = [
        qutip.tensor([qutip.sigmaz() if f == n - j else qutip.qeye(2) for f in range(n)])
        for j in range(1, n + 1)
    ]
    out = []
    for _ in range(sc.cycles):
        full = qutip.tensor(rho, nv0)
        rho = (
            qutip.mesolve(h_q, full, [0.0, sc.protocol.interaction_time_s], options=opts)
            .states[-1]
            .ptrace(list(range(n)))
        )
        out.append([qutip.expect(z, rho) for z in zs])
    return np.array(out)


def case_exact_vs_qutip() -> None:
    sc = parse_scenario(cluster(7, points=21, cycles=10))
    result, t_ours = timed(lambda: simulate(sc, "exact"))
    picks = [0, 10]  # QuTiP is timed on two of the 21 points
    refs, t_ref = timed(lambda: [qutip_point(sc, sc.sweep.values[i]) for i in picks])
    diff = max(np.max(np.abs(result.polarization[i] - r)) for i, r in zip(picks, refs, strict=True))
    per_ours, per_ref = t_ours / 21, t_ref / len(picks)
    line(
        "1 exact vs QuTiP mesolve",
        f"NV+7, 10 cycles: {per_ours:.3g} s/point vs {per_ref:.3g} "
        f"s/point -> {per_ref / per_ours:.0f}x faster; max |dP| = {diff:.1e}",
    )


def case_compile_once() -> None:
    sc = parse_scenario(cluster(6, points=21, cycles=10, steps=10))
    values = np.asarray(sc.sweep.values)
    sim = density_matrix_simulator()

    def compiled():
        program = compile_program(sc)
        circuit = transpile(program.circuit, sim, optimization_level=1, seed_transpiler=1)
        return circuit

    circuit, t_compile = timed(compiled)
    _, t_run = timed(lambda: run_program(circuit, values, cycles=10, num_nuclei=6, simulator=sim))

    def per_point():
        for v in values:
            one = replace(sc, sweep=Sweep(sc.sweep.parameter, (float(v),)))
            c = transpile(
                compile_program(one).circuit, sim, optimization_level=1, seed_transpiler=1
            )
            run_program(c, np.array([v]), cycles=10, num_nuclei=6, simulator=sim)

    _, t_rebuild = timed(per_point)
    total = t_compile + t_run
    line(
        "2 compile once + bind",
        f"NV+6, 21 pts, 10x10 steps: {total:.3g} s vs rebuild per point "
        f"{t_rebuild:.3g} s -> {t_rebuild / total:.2f}x; compile {t_compile:.3g} s "
        f"({100 * t_compile / total:.0f} % of the sweep), {t_run / 21:.3g} s/point after",
    )


def memory_bandwidth_bytes_per_s() -> float:
    a = np.ones(2**26)  # 512 MiB
    b = np.ones_like(a)  # touched, so the timing sees no page faults
    np.copyto(b, a)
    _, t = timed(lambda: np.copyto(b, a))
    return 2 * a.nbytes / t  # read + write


def in_cache_cmac_per_s(length: int, threads: int) -> float:
    """Complex multiply-adds per second of BLAS zaxpy (y += a·x) on vectors of `length` that
    stay in cache, one pair per thread, all threads at once (zaxpy releases the GIL)."""
    from concurrent.futures import ThreadPoolExecutor

    from scipy.linalg.blas import zaxpy

    pairs = [(np.ones(length, complex), np.ones(length, complex)) for _ in range(threads)]
    reps = max(10, 2 * 10**8 // length)

    def work(pair) -> None:
        x, y = pair
        for _ in range(reps):
            zaxpy(x, y, a=1e-9)

    with ThreadPoolExecutor(threads) as pool:
        _, t = timed(lambda: list(pool.map(work, pairs)))
    return threads * reps * length / t


def case_noisy_throughput() -> None:
    text = cluster(6, points=21, cycles=10, steps=10) + '[processor]\ntopology = "grid:3x3"\n'
    sc = parse_scenario(text)
    result, t_ours = timed(lambda: simulate(sc, "noisy"))
    proc = sc.processor
    # baseline: level-1 transpile to the whole grid, all binds in one Aer run, no other tuning
    base_points = 3
    sub = replace(sc, sweep=Sweep(sc.sweep.parameter, sc.sweep.values[:base_points]))
    logical = compile_program(sub).circuit
    target = build_target(proc)
    full = transpile(logical, target=target, optimization_level=1, seed_transpiler=1)
    region = tuple(range(proc.num_qubits))
    noisy_full = with_idle_relaxation(full, region, proc)
    base_sim = AerSimulator(method="density_matrix", noise_model=noise_model(proc, region))
    _, t_base = timed(
        lambda: run_program(
            noisy_full, np.asarray(sub.sweep.values), cycles=10, num_nuclei=6, simulator=base_sim
        )
    )
    ours, base = t_ours / 21, t_base / base_points
    mapped = scenario_programs(sc).mapped().mapped[0]
    gates = len(mapped.circuit.data)
    q = mapped.circuit.num_qubits
    bound = gates * 4**q * 16 / memory_bandwidth_bytes_per_s()
    # the compute bound: one complex multiply-add per density-matrix element and instruction,
    # at the in-cache rate of BLAS on every core (a 7-qubit density matrix fits in cache)
    rate = in_cache_cmac_per_s(4**q, cores())
    compute = gates * 4**q / rate
    line(
        "3 noisy sweep throughput",
        f"NV+6, grid 3x3, idle noise: {ours:.3g} s/point vs baseline "
        f"{base:.3g} s/point -> {base / ours:.1f}x; {ours / compute:.2g}x the compute bound "
        f"({compute:.2g} s/point: {gates} instructions x 4^{q} at {rate:.3g} complex "
        f"multiply-adds/s), {ours / bound:.2g}x the memory-traffic bound ({bound:.2g} s/point)",
    )
    del result


def case_scaling() -> None:
    sizes, times = [], []
    for n in range(2, 12):
        points = 2 if n < 10 else 1
        sc = parse_scenario(cluster(n, points=points, cycles=3))
        _, t = timed(lambda sc=sc: simulate(sc, "exact"))
        sizes.append(n)
        times.append(t / points)
    slope = np.polyfit(sizes[3:], np.log2(times[3:]), 1)[0]
    table = ", ".join(f"{n}:{t:.2g}" for n, t in zip(sizes, times, strict=True))
    line("4a exact engine scaling", f"s/point by nuclei {table}; growth 2^({slope:.2f} n)")
    qubits, per_k = [], []
    for n in (7, 9, 11, 13, 15):
        sc = parse_scenario(cluster(n, points=1, cycles=2) + "[typical]\nstates = 8\n")
        _, t = timed(lambda sc=sc: simulate(sc, "typical"))
        qubits.append(n + 1)
        per_k.append(t / 8 * 1000)
    slope = np.polyfit(qubits, np.log2(per_k), 1)[0]
    table = ", ".join(f"{q}:{t:.3g}" for q, t in zip(qubits, per_k, strict=True))
    line(
        "4b typical engine scaling",
        f"s per 1000 trajectories by qubits {table}; growth 2^({slope:.2f} q)",
    )


def _strategy_rows(sc, processor) -> str:
    job = sc.compile_job()
    trotter, _ = resolved_trotter(job)
    cells = []
    for strategy in applicable(job.workload):
        row = strategy_row(job, strategy, trotter, processor)
        steps = f" {row.steps} steps" if row.steps else ""
        cells.append(
            f"{strategy}{steps}: {row.two_qubit_per_cycle:.0f} 2q/cycle, "
            f"err {row.approximation_error.value:.2g}, S {row.success_estimate:.2g}"
        )
    return "; ".join(cells)


def case_strategies() -> None:
    """Two-qubit gates per cycle and approximation error per strategy (costs from two-cycle
    probes, default figures), for the demo and for NV + 1 … NV + 5 clusters."""
    demo = demo_scenario()
    line("5 strategies, demo", f"grid:3x3: {_strategy_rows(demo, demo.processor)}")
    for n in range(1, 6):
        text = cluster(n, points=9, cycles=2, steps=40, time_s=24e-6).replace("order = 2\n", "")
        sc = parse_scenario(text)
        for topology in ("grid:3x3", f"line:{n + 1}", "heavy-hex:3"):
            processor = make_processor({"topology": topology})
            line(f"5 strategies, NV+{n}", f"{topology}: {_strategy_rows(sc, processor)}")


def _window_ratio(n: int) -> str:
    """One 12 µs window of NV + n, 32 states: Chebyshev propagator vs scipy's expm_multiply."""
    import scipy.sparse.linalg

    from dnpqc.engines.typical import ScaledHamiltonian, chebyshev_propagate
    from dnpqc.resources import process_threads

    sc = parse_scenario(cluster(n, points=1, cycles=1))
    h = hamiltonian(sc.system, rabi_hz=330e3, detuning_hz=0.0).to_matrix(sparse=True).tocsr()
    rng = np.random.default_rng(0)
    states = rng.normal(size=(h.shape[0], 32)) + 1j * rng.normal(size=(h.shape[0], 32))
    states /= np.linalg.norm(states, axis=0)
    ref, t_ref = timed(lambda: scipy.sparse.linalg.expm_multiply(-2j * np.pi * 12e-6 * h, states))
    scaled = ScaledHamiltonian.of(h, process_threads())
    got, t_ours = timed(lambda: chebyshev_propagate(scaled, states, 12e-6))
    diff = np.max(np.abs(got - ref))
    return (
        f"NV+{n} window: {t_ours:.3g} s vs expm_multiply {t_ref:.3g} s -> "
        f"{t_ref / t_ours:.1f}x (max diff {diff:.1e})"
    )


def case_typical_at_scale() -> None:
    """The typical engine at NV + 15 (16 qubits): 32 states, 2 cycles, one point, on one thread
    and on every core (row blocks of the sparse H); and one window against scipy's
    expm_multiply at NV + 12."""
    from dnpqc.resources import THREADS_VARIABLE

    line("6 typical propagator", _window_ratio(12))
    sc = parse_scenario(cluster(15, points=1, cycles=2))
    before = os.environ.get(THREADS_VARIABLE)
    os.environ[THREADS_VARIABLE] = "1"
    try:
        serial, t_serial = timed(lambda: simulate(sc, "typical"))
    finally:
        if before is None:
            del os.environ[THREADS_VARIABLE]
        else:
            os.environ[THREADS_VARIABLE] = before
    result, t_ours = timed(lambda: simulate(sc, "typical"))
    same = np.array_equal(serial.polarization, result.polarization)
    line(
        "6 typical engine NV+15",
        f"32 states, 2 cycles: {t_ours:.3g} s/point on {cores()} threads vs {t_serial:.3g} s on "
        f"one -> {t_serial / t_ours:.2f}x (identical: {same}); P(N1) = "
        f"{result.polarization[0, -1, 0]:.3f} ± {result.stderr[0, -1, 0]:.3f}, max stderr "
        f"{np.max(result.stderr):.3f}",
    )


def case_serial_vs_pool() -> None:
    """`dnpqc run` of the demo's engines in one process and on a pool of two workers (each
    limited to cores // workers threads)."""
    from dnpqc.pipeline.job import run_scenario

    sc = demo_scenario()
    engines = ("exact", "trotter", "noisy")
    _, t_serial = timed(lambda: run_scenario(sc, engines, workers=1))
    _, t_pool = timed(lambda: run_scenario(sc, engines, workers=2))
    line(
        "7 demo run, serial vs pool",
        f"exact+trotter+noisy, 33 points: serial {t_serial:.3g} s, 2 workers {t_pool:.3g} s "
        f"-> pool {t_serial / t_pool:.2f}x",
    )


#: Mitigation rows of case 8: (label, steps, extrapolation).
MITIGATION_ROWS = (
    ("raw", (), "richardson"),
    ("readout", ("readout",), "richardson"),
    ("baseline", ("baseline",), "richardson"),
    ("zne richardson", ("zne",), "richardson"),
    ("readout+baseline+zne richardson", ("readout", "baseline", "zne"), "richardson"),
    ("readout+baseline+zne exponential", ("readout", "baseline", "zne"), "exponential"),
)


def _mitigation_errors(sc, shots: int, baseline: str) -> dict[str, dict[str, float]]:
    """max |P_measured - P_reference| (last cycle, every value and nucleus; reference exact
    and the noiseless program) of sampled counts of the program, its `baseline` and the folds
    3 and 5, raw and after each mitigation."""
    from dnpqc.analysis.counts import read_counts
    from dnpqc.analysis.mitigation import MitigationSettings, mitigate
    from dnpqc.pipeline.measured import sampled_counts

    data = sampled_counts(sc, "noisy", shots, seed=1, baseline=baseline, scales=(3, 5))
    counts = read_counts(data, sc.workload())
    references = {
        "exact": simulate(sc, "exact").polarization[:, -1:, :],
        "program": simulate(sc, "trotter").polarization[:, -1:, :],
    }
    confusion = np.array(data["confusion"])
    out: dict[str, dict[str, float]] = {name: {} for name in references}
    for label, steps, fit in MITIGATION_ROWS:
        done = mitigate(counts, MitigationSettings(steps, fit), confusion)
        for name, ref in references.items():
            out[name][label] = float(np.max(np.abs(done.estimate.value - ref)))
    return out


def case_mitigation() -> None:
    """Simulated counts (100,000 shots per program and value) of the demo on its hypothetical
    processor (every 4th sweep value) and of the NV + 2 example on the default figures."""
    from pathlib import Path

    from dnpqc.io.scenario import load_scenario

    demo = demo_scenario()
    values = demo.sweep.values[::4]
    cases = {
        "demo (9 values)": replace(demo, sweep=replace(demo.sweep, values=values)),
        "NV+2 line:3 default figures": load_scenario(
            Path(__file__).resolve().parents[1] / "examples" / "hardware-two-nuclei.toml"
        ),
    }
    for name, sc in cases.items():
        for kind in BASELINE_KINDS:
            both, seconds = timed(lambda sc=sc, kind=kind: _mitigation_errors(sc, 100_000, kind))
            for reference, errors in both.items():
                cells = ", ".join(f"{k} {v:.4f}" for k, v in errors.items())
                ratio = errors["raw"] / errors["readout+baseline+zne richardson"]
                line(
                    f"8 mitigation {name}",
                    f"{kind} baseline, max |P - P_{reference}|: {cells}; all three shrink it "
                    f"{ratio:.2f}x ({seconds:.3g} s)",
                )


CASES = {
    "1": case_exact_vs_qutip,
    "2": case_compile_once,
    "3": case_noisy_throughput,
    "4": case_scaling,
    "5": case_strategies,
    "6": case_typical_at_scale,
    "7": case_serial_vs_pool,
    "8": case_mitigation,
}

if __name__ == "__main__":
    for key in sys.argv[1:] or CASES:
        CASES[key]()
