"""Processor noise and system imperfections."""

import functools
import itertools
import math
from dataclasses import replace

import numpy as np
import pytest
from conftest import THREE_NUCLEI, one_nucleus, pulsed_text
from helpers import embed
from qiskit import QuantumCircuit
from qiskit.quantum_info import DensityMatrix, Kraus, Operator, SuperOp, average_gate_fidelity
from qiskit_aer import AerSimulator
from qiskit_aer.noise import depolarizing_error

from dnpqc import parse_scenario, simulate
from dnpqc.compile.noise import (
    depolarizing_parameter,
    gate_error,
    noise_model,
    relaxation,
    with_idle_relaxation,
)
from dnpqc.compile.processor import make_processor
from dnpqc.engines.noisy import choose_method
from dnpqc.errors import RunError
from dnpqc.physics.imperfections import Imperfections
from dnpqc.physics.model import nuclear_frequency_hz
from dnpqc.pipeline.job import scenario_programs

PROC = make_processor(
    {
        "topology": "line:2",
        "native_gates": "cz+rz+sx+x",  # the idle test prepares |1> with a native X
        "t1_s": 20e-6,
        "t2_s": 30e-6,
        "error_1q": 0.0,
        "error_2q": 0.0,
        "error_reset": 0.0,
        "error_readout": 0.0,
    }
)


@pytest.mark.parametrize("k", [1, 2])
def test_depolarizing_parameter_gives_the_rated_average_infidelity(k):
    # E(ρ) = (1-λ)ρ + λI/d has average gate fidelity 1 - λ(d-1)/d (Nielsen & Chuang 2000,
    # §9.3; Horodecki et al., PRA 60, 1888, 1999); checked with qiskit's average_gate_fidelity
    lam = depolarizing_parameter(3e-3, k)
    assert 1 - average_gate_fidelity(depolarizing_error(lam, k)) == pytest.approx(3e-3)


@pytest.mark.parametrize(("name", "qubits"), [("sx", [0]), ("cz", [0, 1])])
def test_gate_channel_has_the_rated_infidelity_including_relaxation(name, qubits):
    proc = make_processor({"topology": "line:2", "t1_s": 500e-6, "t2_s": 600e-6})
    error = gate_error(proc, name, qubits, 1.0)
    assert Kraus(error.to_quantumchannel()).is_cptp()
    assert 1 - average_gate_fidelity(error) == pytest.approx(proc.gate_error(name), rel=1e-6)
    # when relaxation during the gate alone exceeds the rated error, it is all that is applied
    short = make_processor({"topology": "line:2", "t1_s": 20e-6, "t2_s": 20e-6})
    only = gate_error(short, name, qubits, 1.0)
    relax = [relaxation(short, q, short.gate_duration_s(name), 1.0) for q in qubits]
    expected = relax[0] if len(relax) == 1 else relax[1].tensor(relax[0])
    assert 1 - average_gate_fidelity(only) == pytest.approx(1 - average_gate_fidelity(expected))


def test_relaxation_matches_kraus_forms():
    # amplitude damping γ = 1 - exp(-t/T1) and dephasing to exp(-t/T2) of the coherence
    # (Nielsen & Chuang 2000, §8.3.5-8.3.6)
    t, t1, t2 = 7e-6, 20e-6, 30e-6
    channel = SuperOp(relaxation(PROC, 0, t, 1.0).to_quantumchannel())
    assert Kraus(channel).is_cptp()
    excited = DensityMatrix(np.diag([0.0, 1.0])).evolve(channel).data
    assert excited[1, 1].real == pytest.approx(math.exp(-t / t1))
    plus = DensityMatrix(np.full((2, 2), 0.5)).evolve(channel).data
    assert 2 * abs(plus[0, 1]) == pytest.approx(math.exp(-t / t2))


def _idle_circuit(prepare: str) -> QuantumCircuit:
    qc = QuantumCircuit(2)
    getattr(qc, prepare)(0)
    for _ in range(200):
        qc.sx(1)
    qc.barrier()  # a save synchronises nothing; the program's barrier does
    qc.save_density_matrix([0])
    return qc


@pytest.mark.parametrize("prepare", ["x", "h"])
def test_idle_qubit_decays_only_with_inserted_relaxation(prepare):
    # the density-matrix method applies no noise to idle qubits by itself; with the inserted
    # relaxation a lone |1> decays as exp(-t/T1) and |+> coherence as exp(-t/T2)
    sim = AerSimulator(method="density_matrix", noise_model=noise_model(PROC, (0, 1)))
    circuit = _idle_circuit(prepare if prepare == "x" else "sx")
    bare = np.asarray(sim.run(circuit).result().data()["density_matrix"])
    noisy = np.asarray(
        sim.run(with_idle_relaxation(circuit, (0, 1), PROC)).result().data()["density_matrix"]
    )
    t = 200 * 35e-9  # the preparing gate (relaxing during its 35 ns) runs beside the first sx
    if prepare == "x":
        assert bare[1, 1].real == pytest.approx(math.exp(-35e-9 / 20e-6), abs=1e-9)
        assert noisy[1, 1].real == pytest.approx(math.exp(-t / 20e-6), rel=1e-9)
    else:
        assert 2 * abs(bare[0, 1]) == pytest.approx(math.exp(-35e-9 / 30e-6), abs=1e-9)
        assert 2 * abs(noisy[0, 1]) == pytest.approx(math.exp(-t / 30e-6), rel=1e-9)


NOISY = (
    THREE_NUCLEI.replace("points = 4", "points = 5").replace("steps = 30", "steps = 8")
    + """
[processor]
topology = "grid:3x3"
optimization_level = 1
"""
)


def test_noisy_with_zero_noise_equals_trotter():
    sc = parse_scenario(NOISY + "[noise]\nscale = 0.0\n")
    noisy, trotter = simulate(sc, "noisy"), simulate(sc, "trotter")
    assert np.max(np.abs(noisy.polarization - trotter.polarization)) < 1e-9


def test_more_noise_never_raises_the_contrast():
    # contrast: the range of the final-cycle polarization along the sweep, per nucleus
    contrasts = []
    for scale in (0.0, 0.5, 1.0, 2.0):
        sc = parse_scenario(NOISY + f"[noise]\nscale = {scale}\n")
        pol = simulate(sc, "noisy").polarization[:, -1, :]
        contrasts.append(pol.max(axis=0) - pol.min(axis=0))
    contrasts = np.array(contrasts)
    assert np.all(np.diff(contrasts, axis=0) <= 1e-12)
    assert np.all(contrasts[-1] < contrasts[0])


def test_trajectories_agree_with_the_density_matrix():
    small = NOISY.replace("points = 5", "points = 2").replace("steps = 8", "steps = 3")
    dm = simulate(parse_scenario(small), "noisy")
    text = small + '[noise]\nmethod = "trajectories"\ntrajectories = 300\nseed = 5\n'
    traj = simulate(parse_scenario(text), "noisy")
    assert traj.stderr is not None and np.all(traj.stderr > 0)
    z = np.abs(traj.polarization - dm.polarization) / traj.stderr
    assert np.mean(z) < 1.5 and np.max(z) < 5


def test_density_matrix_memory_guard():
    sc = parse_scenario(NOISY + '[noise]\nmethod = "density_matrix"\n')
    with pytest.raises(RunError, match=r"needs 16 EiB for 30 qubits .* use \"trajectories\""):
        choose_method(sc.noise, 30)
    assert choose_method(replace(sc.noise, method="auto"), 30) == "trajectories"


def test_fixed_detuning_shifts_the_spin_lock_match():
    # a detuned spin lock rotates the dressed splitting to sqrt(Ω² + Δ²), so the match moves
    # to Ω = sqrt(ν̃² - Δ²) (Hartmann–Hahn condition with an effective field; common practice)
    sweep = '[sweep]\nparameter = "rabi_hz"\nstart = 500e3\nstop = 560e3\npoints = 121\n'
    base = one_nucleus(a_par=20e3, a_perp=6e3, time_s=80e-6, sweep=sweep)
    nu = nuclear_frequency_hz(base.system, 0)
    step = base.sweep.values[1] - base.sweep.values[0]
    for delta in (0.0, 150e3):
        sc = replace(base, protocol=replace(base.protocol, detuning_hz=delta))
        result = simulate(sc, "exact")
        peak = result.values[np.argmax(np.abs(result.polarization[:, 0, 0]))]
        assert abs(peak - math.sqrt(nu**2 - delta**2)) <= step, delta


def test_pulsed_resonance_does_not_move_with_detuning():
    # PulsePol is robust to detuning (dynamical decoupling; Schwartz et al. 2018)
    probe = parse_scenario(pulsed_text())
    nu = nuclear_frequency_hz(probe.system, 0)
    tau3 = 3 / (2 * nu)
    sweep = (
        f'[sweep]\nparameter = "tau_s"\nstart = {0.97 * tau3}\nstop = {1.03 * tau3}\npoints = 61\n'
    )
    peaks = []
    for delta in (0.0, 2e6):
        sc = parse_scenario(
            pulsed_text(tau=tau3, blocks=20, extra=f"detuning_hz = {delta}") + sweep
        )
        result = simulate(sc, "exact")
        peaks.append(result.values[np.argmax(np.abs(result.polarization[:, 0, 0]))])
    assert peaks[0] == peaks[1]


def test_gauss_hermite_nodes_reproduce_gaussian_moments():
    # probabilists' Gauss–Hermite with n nodes integrates polynomials to degree 2n-1 exactly
    # (Abramowitz & Stegun 25.4.46): E[s²] = σ², E[s⁴] = 3σ⁴
    nodes = Imperfections(drive_sigma_rel=0.02, detuning_sigma_hz=1e3, points=3).nodes()
    w = np.array([n[0] for n in nodes])
    s = np.array([n[1] for n in nodes])
    d = np.array([n[2] for n in nodes])
    assert w.sum() == pytest.approx(1.0)
    assert w @ s**2 == pytest.approx(0.02**2) and w @ s**4 == pytest.approx(3 * 0.02**4)
    assert w @ d**2 == pytest.approx(1e6) and w @ (s * d) == pytest.approx(0.0, abs=1e-12)


def test_imperfections_exact_and_trotter_agree():
    text = THREE_NUCLEI + "[imperfections]\ndetuning_sigma_hz = 20e3\ndrive_sigma_rel = 0.03\n"
    sc = parse_scenario(text.replace("steps = 30", "steps = 80"))
    exact, trotter = simulate(sc, "exact"), simulate(sc, "trotter")
    assert np.max(np.abs(exact.polarization - trotter.polarization)) < 2e-3
    nominal = simulate(parse_scenario(THREE_NUCLEI), "exact")
    assert np.max(np.abs(exact.polarization - nominal.polarization)) > 1e-3
    sampled = parse_scenario(text + 'method = "sampling"\nsamples = 8\nseed = 3\n')
    result = simulate(sampled, "exact")
    assert result.stderr is not None and result.stderr.shape == result.polarization.shape


# A hand-built noisy reference, written from the README's noise description with numpy only
# (Kraus forms from Nielsen & Chuang 2000, §8.3; average fidelity (Σ|Tr K|² + d)/(d(d+1)) from
# Nielsen, Phys. Lett. A 303, 249, 2002), scheduling the hardware program (no saves) ASAP.
def _relax_kraus(t, t1, t2):
    gamma = 1 - math.exp(-t / t1)
    f = math.exp(-t / t2 + t / (2 * t1))  # dephasing left after amplitude damping
    damp = [
        np.array([[1, 0], [0, math.sqrt(1 - gamma)]]),
        np.array([[0, math.sqrt(gamma)], [0, 0]]),
    ]
    dephase = [math.sqrt((1 + f) / 2) * np.eye(2), math.sqrt((1 - f) / 2) * np.diag([1.0, -1.0])]
    return [p @ a for a in damp for p in dephase]


def _apply(rho, kraus, qubits, nq):
    """Σ K ρ K† with K on `qubits` (a product of single-qubit Kraus lists, one per qubit)."""
    out = np.zeros_like(rho)
    for combo in itertools.product(*kraus):
        k = embed(dict(zip(qubits, combo, strict=True)), nq)
        out += k @ rho @ k.conj().T
    return out


def _average_infidelity(kraus_lists):
    d = 2 ** len(kraus_lists)
    total = sum(
        abs(np.trace(functools.reduce(np.kron, combo))) ** 2
        for combo in itertools.product(*kraus_lists)
    )
    return 1 - (total + d) / (d * (d + 1))


def _depolarize(rho, lam, qubits, nq):
    """(1-λ)ρ + λ·Tr_q(ρ)⊗I/d, as the Pauli twirl (1/d²)·Σ_P PρP over the gate's qubits."""
    paulis = [
        np.eye(2),
        np.array([[0, 1], [1, 0]]),
        np.array([[0, -1j], [1j, 0]]),
        np.diag([1, -1]),
    ]
    twirl = np.zeros_like(rho)
    for combo in itertools.product(paulis, repeat=len(qubits)):
        p = embed(dict(zip(qubits, combo, strict=True)), nq)
        twirl += p @ rho @ p.conj().T
    return (1 - lam) * rho + lam * twirl / 4 ** len(qubits)


def _hand_built_noisy(mapped, value):
    proc, region = mapped.processor, mapped.region
    circuit = mapped.circuit.assign_parameters(dict.fromkeys(mapped.circuit.parameters, value))
    nq = circuit.num_qubits
    rho = np.zeros((2**nq, 2**nq), dtype=complex)
    rho[0, 0] = 1.0
    free = [0.0] * nq
    t1 = [proc.t1_s[region[i]] for i in range(nq)]
    t2 = [proc.t2_s[region[i]] for i in range(nq)]

    def wait(rho, qubits, start):
        for q in qubits:
            if start > free[q]:
                rho = _apply(rho, [_relax_kraus(start - free[q], t1[q], t2[q])], [q], nq)
            free[q] = start
        return rho

    at_barrier, saves = [], []
    for inst in circuit.data:
        name = inst.operation.name
        qs = [circuit.find_bit(q).index for q in inst.qubits]
        if name == "save_probabilities":
            saves.append(qs)
            continue
        if name == "barrier":
            rho = wait(rho, qs, max(free[q] for q in qs))
            at_barrier.append(rho)
            continue
        start = max(free[q] for q in qs)
        rho = wait(rho, qs, start)
        duration = proc.gate_duration_s(name)
        if name == "reset":
            (q,) = qs
            p1 = proc.error_reset
            ket0 = embed({q: np.array([[1, 0], [0, 0]])}, nq)
            ket1 = embed({q: np.array([[0, 0], [1, 0]])}, nq)
            rho = ket0 @ rho @ ket0.T + ket1.T @ rho @ ket1  # |0><0| ⊗ Tr_q ρ
            x = embed({q: np.array([[0, 1], [1, 0]])}, nq)
            rho = (1 - p1) * rho + p1 * x @ rho @ x
            rho = _apply(rho, [_relax_kraus(duration, t1[q], t2[q])], [q], nq)
        else:
            single = QuantumCircuit(nq)
            single.append(inst.operation, qs)
            u = Operator(single).data
            rho = u @ rho @ u.conj().T
            if duration > 0:
                relax = [_relax_kraus(duration, t1[q], t2[q]) for q in qs]
                rho = _apply(rho, relax, qs, nq)
                eps_r = _average_infidelity(relax)
                d = 2 ** len(qs)
                eps = proc.gate_error(name)
                lam = max(0.0, (eps - eps_r) / ((d - 1) / d - eps_r))
                rho = _depolarize(rho, lam, qs, nq)
        for q in qs:
            free[q] = start + duration
    factor = 1 - 2 * proc.error_readout
    return np.array(
        [
            [factor * np.trace(embed({q: np.diag([1.0, -1.0])}, nq) @ r).real for q in qubits]
            for r, qubits in zip(at_barrier[1:], saves, strict=True)
        ]
    )


def test_noisy_engine_against_a_hand_built_noise_reference():
    # saves are no sync points: each cycle's values are read at its closing barrier, and the
    # nuclei wait for the next NV reset after that (as on hardware)
    text = (
        THREE_NUCLEI.replace("points = 4", "points = 2").replace("steps = 30", "steps = 2")
        + '[processor]\ntopology = "line:4"\nt1_s = 20e-6\nt2_s = 30e-6\noptimization_level = 1\n'
    )
    sc = parse_scenario(text)
    result = simulate(sc, "noisy")
    mapped = scenario_programs(sc).mapped().mapped[0]
    for i, value in enumerate(sc.sweep.values):
        expected = _hand_built_noisy(mapped, value)
        assert np.allclose(result.polarization[i], expected, atol=1e-9, rtol=0)
