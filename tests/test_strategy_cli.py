"""Strategies through the command line: budget side by side, per-value export, refusals."""

import json

import numpy as np
import openqasm3
import pytest
from test_qasm import _reimport_with_saves

from dnpqc import parse_scenario, simulate
from dnpqc.cli import main
from dnpqc.engines.circuit import density_matrix_simulator, run_program

SMALL = """
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
start = 200e3
stop = 230e3
points = 3
[cycle]
interaction_time_s = 40e-6
count = 2
[trotter]
steps = 20
[processor]
topology = "line:3"
"""


def _write(tmp_path, text, name="s.toml"):
    path = tmp_path / name
    path.write_text(text)
    return path


def _with_strategy(strategy):
    return SMALL + f'[compile]\nstrategy = "{strategy}"\n'


def test_budget_lists_every_strategy(tmp_path, capsys):
    path = _write(tmp_path, _with_strategy("auto"))
    out = tmp_path / "b.json"
    assert main(["budget", str(path), "--json", str(out)]) == 0
    data = json.loads(out.read_text())
    assert data["strategy"] == "cycle-unitary"
    rows = {r["strategy"]: r for r in data["strategies"]}
    assert set(rows) == {"trotter", "cycle-unitary"}
    for row in rows.values():
        assert {"strategy", "steps", "two_qubit_per_cycle", "approximation_error"} <= set(row)
        assert 0 < row["success_estimate"] <= 1
    assert rows["cycle-unitary"]["steps"] is None and rows["trotter"]["steps"] == 20
    assert rows["cycle-unitary"]["approximation_error"] < 1e-9
    assert data["program"]["strategy"] == "cycle-unitary" and data["program"]["programs"] == 3
    text = capsys.readouterr().out
    assert "strategy: cycle-unitary" in text and "approx err" in text


def test_per_value_export_round_trips_to_the_exact_engine(tmp_path, capsys):
    # each program parses with the reference parser (openqasm3) and, re-imported with qiskit's
    # importer (qiskit-qasm3-import) and simulated with Aer, equals the exact engine
    path = _write(tmp_path, _with_strategy("cycle-unitary"))
    folder = tmp_path / "programs"
    argv = ["compile", str(path), "-o", str(folder), "--measure-each-cycle"]
    assert main(argv) == 0
    files = sorted(folder.glob("*.qasm"))
    assert len(files) == 3 and "3 files" in capsys.readouterr().out
    sc = parse_scenario(_with_strategy("cycle-unitary"))
    exact = simulate(sc, "exact").polarization
    sim = density_matrix_simulator()
    for i, value in enumerate(sc.sweep.values):
        name = f"s_rabi_hz_{value:.9g}.qasm"
        text = (folder / name).read_text()
        assert "strategy cycle-unitary" in text and f"rabi_hz = {value!r}" in text
        openqasm3.parse(text)
        back = _reimport_with_saves(text)
        assert not back.parameters
        got = run_program(back, [value], cycles=2, num_nuclei=2, simulator=sim)[0]
        assert np.allclose(got, exact[i], atol=1e-6)


def test_per_value_export_of_one_bound_value(tmp_path, capsys):
    path = _write(tmp_path, _with_strategy("cycle-unitary"))
    assert main(["compile", str(path), "--bind", "215e3"]) == 0
    text = capsys.readouterr().out
    assert "rabi_hz = 215000.0" in text and "input" not in text
    openqasm3.parse(text)


@pytest.mark.parametrize(
    ("text", "argv_tail", "match"),
    [
        (SMALL + '[compile]\nstrategy = "magic"\n', [], "`compile.strategy` must be one of"),
        (SMALL.replace("steps = 20", "steps = 20\nweak_every = 0"), [], "weak_every` must be >= 1"),
        (_with_strategy("cycle-unitary"), [], "writes one program per sweep value"),
    ],
)
def test_refusals_are_one_line(tmp_path, capsys, text, argv_tail, match):
    path = _write(tmp_path, text)
    assert main(["compile", str(path), *argv_tail]) == 2
    err = capsys.readouterr().err
    assert match in err and err.count("\n") == 1


def test_a_cluster_too_big_for_synthesis_is_refused_with_its_cost(tmp_path, capsys):
    nuclei = "".join(
        f'[[spins.nuclei]]\nlabel = "N{j}"\na_par_hz = {10e3 * j}\na_perp_hz = 5e3\n'
        for j in range(1, 7)
    )
    text = _with_strategy("cycle-unitary").replace(
        '[[spins.nuclei]]\nlabel = "C1"', nuclei + '[[spins.nuclei]]\nlabel = "C1"'
    )
    text = text.replace('topology = "line:3"', 'topology = "grid:3x3"')
    path = _write(tmp_path, text)
    assert main(["budget", str(path)]) == 2
    err = capsys.readouterr().err
    # (23/48)·4^9 - (3/2)·2^9 + 4/3 = 124 844 (Shende, Bullock & Markov 2006)
    assert "has 9" in err and "124,844 two-qubit gates" in err and err.count("\n") == 1


def test_run_says_when_another_strategy_is_cheaper(tmp_path, capsys):
    path = _write(tmp_path, SMALL)
    out = tmp_path / "run"
    assert main(["run", str(path), "--out", str(out), "--engines", "exact,noiseless"]) == 0
    text = capsys.readouterr().out
    assert "program: trotter (20 steps, order 1)" in text
    assert "strategy 'cycle-unitary' would be cheaper here" in text
    report = json.loads((out / "report.json").read_text())
    assert report["compiler"]["strategy"] == "trotter"
    assert report["budget"]["strategy"] == "trotter" and len(report["budget"]["strategies"]) == 2
