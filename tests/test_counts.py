"""Measured counts: the file format, the round trip through sampled counts, every refusal, and
the mitigation formulas against independent references."""

import json
import math

import numpy as np
import pytest
import scipy.linalg
from helpers import Z, dense_reference, embed, nv_rotation_reference, reset_and_trace
from qiskit import ClassicalRegister, QuantumCircuit, QuantumRegister, qasm3
from qiskit.quantum_info import Operator
from qiskit_aer import AerSimulator

from dnpqc.analysis.counts import Estimate, apply_confusion, bit_means, read_counts, sample_counts
from dnpqc.analysis.mitigation import exponential, readout_inverted, richardson, richardson_weights
from dnpqc.cli import main
from dnpqc.compile.budget import segment_durations_s
from dnpqc.compile.folding import (
    BASELINE,
    PROGRAM,
    check_scale,
    fold_two_qubit_gates,
    program_variants,
)
from dnpqc.engines.shots import readout_confusion, readout_distributions
from dnpqc.errors import ScenarioError
from dnpqc.io.scenario import load_scenario
from dnpqc.pipeline.job import scenario_programs
from dnpqc.pipeline.measured import sampled_counts

SCENARIO = """
name = "counts-test"
[spins]
field_t = 0.02
[[spins.nuclei]]
label = "C1"
a_par_hz = 40e3
a_perp_hz = 25e3
[[spins.nuclei]]
label = "C2"
a_par_hz = -22e3
a_perp_hz = 18e3
[drive]
protocol = "spin-lock"
rabi_hz = 214e3
[sweep]
parameter = "rabi_hz"
start = 196e3
stop = 240e3
points = 5
[cycle]
interaction_time_s = 40e-6
count = 2
[compile]
strategy = "{strategy}"
[trotter]
steps = 40
[processor]
topology = "line:3"
"""


@pytest.fixture(scope="module")
def scenario_path(tmp_path_factory):
    path = tmp_path_factory.mktemp("counts") / "scenario.toml"
    path.write_text(SCENARIO.format(strategy="cycle-unitary"))
    return path


@pytest.fixture(scope="module")
def counts_file(scenario_path):
    """Sampled counts of the program, its baseline and the folds 3, 5 (one run per module)."""
    out = scenario_path.parent / "counts.json"
    argv = ["sweep", str(scenario_path), "--engine", "noisy", "--shots", "20000"]
    argv += ["--counts-out", str(out), "--baseline", "--fold", "3,5", "--json", str(out) + ".s"]
    assert main(argv) == 0
    return out


def test_round_trip_noisy_counts_match_the_noisy_engine_within_4_stderr(
    scenario_path, counts_file, tmp_path
):
    # the measured P of sampled counts is an unbiased estimate of the noisy engine's P (binomial
    # sampling; common practice, no source): within 4 standard errors at every value and nucleus
    out = tmp_path / "run"
    argv = ["run", str(scenario_path), "--counts", str(counts_file), "--mitigate", "none"]
    assert main([*argv, "--engines", "exact,noisy", "--out", str(out)]) == 0
    report = json.loads((out / "report.json").read_text())
    measured = report["engines"]["measured"]
    noisy = np.array(report["engines"]["noisy"]["polarization"])[:, -1:, :]
    p, err = np.array(measured["polarization"]), np.array(measured["stderr"])
    assert measured["first_cycle"] == 2 and p.shape == noisy.shape
    assert np.all(np.abs(p - noisy) <= 4 * err)
    assert report["measured"]["applied"] == []
    assert any(c["engine"] == "measured" for c in report["comparison"])
    csv = (out / "sweep.csv").read_text().splitlines()
    rows = [r.split(",") for r in csv if r.startswith("measured,")]
    assert len(rows) == 5 * 2 and all(r[2] == "2" and r[5] for r in rows)
    assert (out / "engines.png").exists() and (out / "buildup.png").exists()


def test_mitigation_shrinks_the_error_and_is_recorded(scenario_path, counts_file, tmp_path):
    out = tmp_path / "run"
    argv = ["run", str(scenario_path), "--counts", str(counts_file), "--engines", "exact"]
    assert main([*argv, "--out", str(out)]) == 0
    report = json.loads((out / "report.json").read_text())
    record = report["measured"]
    assert record["applied"] == ["readout", "baseline", "zne"]
    assert record["zne"]["scales"] == [1, 3, 5] and record["readout"]["source"] == "counts file"
    errors = record["max_abs_error_vs_exact"]
    assert errors["mitigated"] < errors["raw"] / 2


def test_per_cycle_registers_give_every_cycle(scenario_path, tmp_path):
    counts = tmp_path / "each.json"
    argv = ["sweep", str(scenario_path), "--engine", "noisy", "--shots", "4000"]
    assert main([*argv, "--counts-out", str(counts), "--measure-each-cycle"]) == 0
    data = json.loads(counts.read_text())
    key = next(iter(data["results"][0]["counts"]))
    assert len(key.split(" ")) == 2 and all(len(g) == 2 for g in key.split(" "))
    out = tmp_path / "run"
    argv = ["run", str(scenario_path), "--counts", str(counts), "--engines", "exact"]
    assert main([*argv, "--out", str(out), "--mitigate", "none"]) == 0
    report = json.loads((out / "report.json").read_text())
    assert report["measured"]["cycles_measured"] == [1, 2]
    assert "first_cycle" not in report["engines"]["measured"]


def test_measure_each_cycle_distributions_match_a_dense_reference_with_dephasing(scenario_path):
    # independent reference: kron + scipy expm of the model Hamiltonian, NV reset and R_y(π/2)
    # per cycle, and a non-selective Z measurement of the nuclei (dephasing) after each cycle
    # (Nielsen & Chuang §8.3.6); the program is cycle-unitary (no Trotter error)
    sc = load_scenario(scenario_path)
    program = scenario_programs(sc).logical()
    dists = readout_distributions(program, None, measure_each_cycle=True)
    system, n, q = sc.system, sc.system.num_nuclei, sc.system.num_qubits
    for i, rabi in enumerate(sc.sweep.values):
        u = scipy.linalg.expm(-2j * np.pi * dense_reference(system, rabi, 0.0) * 40e-6)
        u = u @ embed({0: nv_rotation_reference(np.pi / 2, np.pi / 2)}, q)
        rho = np.eye(2**n) / 2**n
        for c in range(2):
            rho = reset_and_trace(u @ np.kron(rho, np.diag([1.0, 0.0])) @ u.conj().T)
            rho = np.diag(np.diag(rho))
            assert np.allclose(dists[i, c], np.diag(rho).real, atol=1e-9)
    _ = Z  # helpers' Pauli kept for the reader: nucleus j is bit j of the index


def test_bitstrings_read_as_qiskit_prints_them():
    # outside check: qiskit-aer's own counts of a circuit with two registers (cycle_1 declared
    # first): nucleus 1 in |1> read into cycle_1, nucleus 2 in |1> read into cycle_2
    nuclei = QuantumRegister(2)
    first, second = ClassicalRegister(2, "cycle_1"), ClassicalRegister(2, "cycle_2")
    circuit = QuantumCircuit(nuclei, first, second)
    circuit.x(0)
    circuit.measure([0, 1], first)
    circuit.x(1)
    circuit.measure([0, 1], second)
    counts = AerSimulator().run(circuit, shots=10, seed_simulator=1).result().get_counts()
    assert counts == {"11 01": 10}
    means, registers = bit_means(counts, 2, 2, 10, "test")
    assert registers == 2
    np.testing.assert_array_equal(means, [[1, 0], [1, 1]])  # cycle 1: only nucleus 1 reads 1
    joined, _ = bit_means({"1101": 10}, 2, 2, 10, "test")
    np.testing.assert_array_equal(joined, means)


def test_sampled_keys_follow_the_same_order():
    rng = np.random.default_rng(0)
    dist = np.zeros((2, 4))
    dist[0, 0b01] = 1.0  # cycle 1: nucleus 1 reads 1
    dist[1, 0b11] = 1.0
    counts = sample_counts(dist, 7, rng, readout_confusion(0.0, 2))
    assert counts == {"11 01": 7}


def _valid(sc):
    work = sc.workload()
    results = [{"value": v, "counts": {"00": 6, "11": 4}} for v in work.values]
    return {"scenario_digest": work.digest, "shots": 10, "results": results}


@pytest.mark.parametrize(
    ("change", "message"),
    [
        (lambda d: d.update(scenario_digest="0" * 16), "another scenario"),
        (lambda d: d["results"][1].update(value=1.0), "not a value of the sweep"),
        (lambda d: d["results"][1].update(counts={"000": 10}), "register(s) of 2 bits"),
        (lambda d: d["results"][1].update(counts={"0a": 10}), "only 0 and 1"),
        (lambda d: d["results"][1].update(counts={"00": 9}), "adds up to 9 shots"),
        (lambda d: d["results"][1].update(counts={"00": -1, "01": 11}), "whole number >= 0"),
        (lambda d: d["results"].append(dict(d["results"][0])), "appears twice"),
        (lambda d: d["results"].pop(), "has no result for 1 of the 5"),
        (lambda d: d.update(shots=0), "`shots` must be a whole number"),
        (lambda d: d.update(confusion=[[0.4, 0.6], [0.6, 0.4]]), "not invertible"),
        (lambda d: d.update(confusion=[[0.9, 0.1]]), "one 2x2 matrix"),
        (lambda d: d["results"][0].update(folded=[{"scale": 2, "counts": {}}]), "odd whole"),
        (lambda d: d["results"][0].update(baseline_counts={"00": 10}), "baseline_counts at"),
    ],
)
def test_every_refusal_is_one_line_with_exit_2(scenario_path, tmp_path, capsys, change, message):
    sc = load_scenario(scenario_path)
    data = _valid(sc)
    change(data)
    path = tmp_path / "bad.json"
    path.write_text(json.dumps(data))
    out = tmp_path / "run"
    code = main(["run", str(scenario_path), "--counts", str(path), "--out", str(out)])
    err = capsys.readouterr().err
    assert code == 2 and message in err and err.count("\n") == 1
    assert not out.exists()


@pytest.mark.parametrize(
    ("argv", "message"),
    [
        (["run", "{s}", "--counts", "{d}/none.json"], "cannot read"),
        (["run", "{s}", "--counts", "{d}/nan.json"], "not valid JSON"),
        (["run", "{s}", "--counts", "{d}/ok.json", "--mitigate", "zne"], "needs `folded`"),
        (["run", "{s}", "--counts", "{d}/ok.json", "--mitigate", "baseline"], "baseline_counts"),
        (["run", "{s}", "--counts", "{d}/ok.json", "--mitigate", "magic"], "--mitigate"),
        (["sweep", "{s}", "--engine", "noisy", "--shots", "10"], "give `--counts-out"),
        (["sweep", "{s}", "--engine", "noisy", "--counts-out", "{d}/c.json"], "needs `--shots"),
        (["sweep", "{s}", "--engine", "exact", "--shots", "9", "--counts-out", "{d}/c"], "noisy"),
        (
            [
                "sweep",
                "{s}",
                "--engine",
                "noisy",
                "--shots",
                "9",
                "--counts-out",
                "{d}/c",
                "--fold",
                "2",
            ],
            "odd whole",
        ),
        (
            [
                "sweep",
                "{s}",
                "--engine",
                "trotter",
                "--shots",
                "9",
                "--counts-out",
                "{d}/c",
                "--fold",
                "3",
            ],
            "amplify processor noise",
        ),
        (["compile", "{s}", "--fold", "4", "-o", "{d}/p"], "odd whole"),
        (["budget", "{s}", "--target-stderr", "0"], "--target-stderr"),
    ],
)
def test_option_refusals(scenario_path, tmp_path, capsys, argv, message):
    sc = load_scenario(scenario_path)
    (tmp_path / "nan.json").write_text('{"shots": NaN}')
    (tmp_path / "ok.json").write_text(json.dumps(_valid(sc)))
    argv = [a.format(s=scenario_path, d=tmp_path) for a in argv]
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert message in err and err.count("\n") == 1
    assert not (tmp_path / "c.json").exists() and not (tmp_path / "c").exists()


# --- mitigation formulas ----------------------------------------------------------------------


def test_readout_inversion_recovers_the_polarization():
    # a product state with known P through independent asymmetric readout errors (the forward
    # model of tensored readout mitigation; Bravyi et al., PRA 103, 042605, 2021), inverted
    p_true = np.array([0.6, -0.3])
    q1 = (1 - p_true) / 2  # probability of reading 1 without error
    dist = np.kron([1 - q1[1], q1[1]], [1 - q1[0], q1[0]])  # index bit j = nucleus j
    confusion = np.array([[[0.97, 0.05], [0.03, 0.95]], [[0.9, 0.02], [0.1, 0.98]]])
    read = apply_confusion(dist, confusion)
    bits = (np.arange(4)[:, None] >> np.arange(2)[None, :]) & 1
    p_read = 1 - 2 * (read @ bits)
    est = readout_inverted(Estimate(p_read, np.full(2, 0.01)), confusion)
    np.testing.assert_allclose(est.value, p_true, atol=1e-12)
    np.testing.assert_allclose(est.stderr, 0.01 / np.array([0.92, 0.88]))


def test_richardson_weights_and_exactness():
    # Lagrange weights at 0 for λ = 1, 3, 5: (15/8, -10/8, 3/8) (worked by hand, from memory:
    # Temme, Bravyi & Gambetta 2017 give the general form); exact for a quadratic in λ
    np.testing.assert_allclose(richardson_weights((1, 3, 5)), [15 / 8, -10 / 8, 3 / 8])
    np.testing.assert_allclose(richardson_weights((1, 3)), [1.5, -0.5])
    lam = np.array([1.0, 3.0, 5.0])
    y = 0.7 - 0.11 * lam + 0.004 * lam**2
    est = richardson(lam, y, np.full(3, 0.01))
    assert est.value == pytest.approx(0.7)
    assert est.stderr == pytest.approx(0.01 * math.sqrt((225 + 100 + 9) / 64))


def test_exponential_is_exact_for_a_decay_and_falls_back_near_zero():
    lam = np.array([1.0, 3.0, 5.0])
    values = np.stack([0.8 * np.exp(-0.35 * lam), [0.01, -0.02, 0.015]], axis=1)
    errors = np.full_like(values, 0.005)
    est, fallbacks = exponential(lam, values, errors)
    assert est.value[0] == pytest.approx(0.8)
    assert fallbacks == 1
    assert est.value[1] == pytest.approx(richardson(lam, values[:, 1], errors[:, 1]).value)


def test_folding_keeps_the_unitary_and_multiplies_two_qubit_gates():
    # qiskit's Operator as the independent check of G(G†G) = G
    circuit = QuantumCircuit(3)
    circuit.h(0)
    circuit.cx(0, 1)
    circuit.rzz(0.3, 1, 2)
    circuit.ecr(2, 0)
    folded = fold_two_qubit_gates(circuit, 5)
    assert Operator(folded).equiv(Operator(circuit))
    two = sum(
        1 for i in folded.data if i.operation.num_qubits == 2 and i.operation.name != "barrier"
    )
    assert two == 5 * 3
    with pytest.raises(ScenarioError, match="odd whole"):
        check_scale(2)


@pytest.mark.parametrize("strategy", ["trotter", "cycle-unitary"])
def test_baseline_moves_no_polarization_and_keeps_the_layout(tmp_path, strategy):
    path = tmp_path / "s.toml"
    path.write_text(SCENARIO.format(strategy=strategy))
    sc = load_scenario(path)
    program = scenario_programs(sc).mapped()
    variants = program_variants(
        program, sc.compile_job().mapping, baseline="uncoupled", scales=(3,)
    )
    base = variants[(BASELINE, 1)]
    assert base.mapped[0].region == program.mapped[0].region
    assert base.mapped[0].initial == program.mapped[0].initial
    # no coupling: the nuclei stay maximally mixed, every readout distribution is uniform
    dists = readout_distributions(base, None)
    np.testing.assert_allclose(dists, 0.25, atol=1e-9)
    # each cycle lasts as long as the program's (the baseline at scale 3: the folded program's)
    for kind, scale in ((PROGRAM, 1), (PROGRAM, 3)):
        want = segment_durations_s(variants[(kind, scale)].mapped[0])
        got = segment_durations_s(variants[(BASELINE, scale)].mapped[0])
        np.testing.assert_allclose(got[1:3], want[1:3], rtol=1e-12)


def test_compile_baseline_and_fold_write_reimportable_programs(scenario_path, tmp_path, capsys):
    paths = {}
    for name, extra in (("plain", []), ("baseline", ["--baseline"]), ("fold", ["--fold", "3"])):
        paths[name] = tmp_path / name
        assert main(["compile", str(scenario_path), "-o", str(paths[name]), *extra]) == 0
    capsys.readouterr()
    texts = {k: sorted(p.iterdir())[0].read_text() for k, p in paths.items()}
    assert "Variant: baseline" in texts["baseline"] and "delay" in texts["baseline"]
    assert "folded to scale 3" in texts["fold"]
    circuits = {k: qasm3.loads(t) for k, t in texts.items()}  # qiskit's importer
    two = {k: c.count_ops().get("cz", 0) for k, c in circuits.items()}
    assert two["fold"] == 3 * two["plain"] and two["baseline"] < two["plain"]


def test_budget_plans_shots_and_time(scenario_path, tmp_path, capsys):
    out = tmp_path / "b.json"
    assert main(["budget", str(scenario_path), "--json", str(out), "--target-stderr", "0.02"]) == 0
    assert "shots for a standard error 0.02" in capsys.readouterr().out
    data = json.loads(out.read_text())
    plan = data["shots"]
    sc = load_scenario(scenario_path)
    from dnpqc.pipeline.job import simulate

    noisy = simulate(sc, "noisy").polarization
    # N = ceil(max (1 - P²)/σ²): the binomial standard error solved for N (common practice)
    expect = np.ceil((1 - noisy**2).max(axis=(1, 2)) / 0.02**2)
    assert [r["shots"] for r in plan["per_value"]] == [int(x) for x in expect]
    per_shot = data["total"]["duration_s"] + 1e-6  # the default reset time
    assert plan["per_shot_s"] == pytest.approx(per_shot)
    assert plan["total_time_s"] == pytest.approx(expect.sum() * per_shot)
    assert {p["nucleus"] for p in plan["peaks"]} == {"C1", "C2"}


def test_read_counts_rejects_mixed_registers(scenario_path):
    sc = load_scenario(scenario_path)
    data = _valid(sc)
    data["results"][2]["counts"] = {"00 00": 10}
    with pytest.raises(ScenarioError, match="mixes programs"):
        read_counts(data, sc.workload())


def test_sampled_counts_are_seeded(scenario_path):
    sc = load_scenario(scenario_path)
    first = sampled_counts(sc, "trotter", 100, seed=3)
    assert first == sampled_counts(sc, "trotter", 100, seed=3)
    assert first != sampled_counts(sc, "trotter", 100, seed=4)


def test_mixed_nv_patterns_pool_to_the_mixed_nv(scenario_path):
    # the 2^C programs with the NV flipped after its reset, pooled with equal shots, give the
    # program with the NV maximally mixed after every reset (each cycle's map is affine in the
    # NV's initial ±Z; averaging every sign pattern zeroes them; common practice, no source),
    # under the processor's noise too
    from dataclasses import replace

    from dnpqc.compile.noise import with_nv_flips

    sc = load_scenario(scenario_path)
    program = scenario_programs(sc).mapped()
    for noise, tolerance in ((replace(sc.noise, scale=0.0), 1e-12), (sc.noise, 1e-4)):
        mixed = readout_distributions(program, noise, mixed_nv=True)
        pooled = np.zeros_like(mixed)
        for pattern in ((0, 0), (0, 1), (1, 0), (1, 1)):
            flipped = tuple(
                replace(m, circuit=with_nv_flips(m.circuit, pattern)) for m in program.mapped
            )
            pooled += readout_distributions(replace(program, mapped=flipped), noise) / 4
        # with noise, the X gates' own errors and time are the only difference
        np.testing.assert_allclose(pooled, mixed, atol=tolerance)
    plain = readout_distributions(program, sc.noise)
    assert np.max(np.abs(plain - mixed)) > 0.05  # the pattern 00 alone is the program


def test_compile_mixed_nv_baseline_writes_every_pattern(scenario_path, tmp_path, capsys):
    out = tmp_path / "mixed"
    assert main(["compile", str(scenario_path), "--baseline", "mixed-nv", "-o", str(out)]) == 0
    files = sorted(p.name for p in out.iterdir())
    assert len(files) == 5 * 4 and {f[-10:] for f in files} == {
        "_nv00.qasm",
        "_nv01.qasm",
        "_nv10.qasm",
        "_nv11.qasm",
    }
    text = next(p for p in out.iterdir() if p.name.endswith("_nv11.qasm")).read_text()
    assert "mixed-NV baseline, pattern 11 of 4" in text
    qasm3.loads(text)
    assert main(["compile", str(scenario_path), "--baseline", "other", "-o", str(out)]) == 2
    assert "invalid choice" in capsys.readouterr().err
