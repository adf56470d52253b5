"""The command line, run in-process end to end."""

import json

import pytest
from conftest import TWO_NUCLEI_SWEEP as SMALL

from dnpqc.cli import main


@pytest.fixture
def small(tmp_path):
    path = tmp_path / "small.toml"
    path.write_text(SMALL)
    return path


def test_run_writes_report_and_summary(small, tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["run", str(small), "--out", str(out)]) == 0
    for name in ("report.json", "sweep.csv", "spectrum.png", "buildup.png", "engines.png"):
        assert (out / name).stat().st_size > 0
    report = json.loads((out / "report.json").read_text())
    assert set(report["engines"]) == {"exact", "trotter"}
    # one Trotter error record, the same shape as `dnpqc budget` writes
    assert set(report["trotter_error"]) == {"value", "method", "points"}
    assert report["trotter_error"]["value"] < 0.05 and report["trotter_error"]["points"] == 8
    assert report["warnings"] == []
    analysis = report["analysis"]["exact"]
    assert list(analysis) == ["peaks", "best_common", "saturation"]  # a fixed interface
    assert set(analysis["peaks"]) == {"C1", "C2"}
    assert set(analysis["peaks"]["C1"]) == {"value", "polarization"}
    assert list(analysis["best_common"]) == [
        "maximises",
        "index",
        "value",
        "mean_polarization",
        "min_polarization",
        "per_nucleus",
        "maximin",
    ]
    assert analysis["saturation"]["slowest"] in ("C1", "C2", None)
    lines = (out / "sweep.csv").read_text().splitlines()
    assert lines[0] == "engine,rabi_hz,cycle,nucleus,polarization,stderr"
    assert len(lines) == 1 + 2 * 8 * 3 * 2
    text = capsys.readouterr().out
    assert "best common rabi_hz" in text and "report:" in text
    assert not list(out.glob(".*.tmp"))


def test_sweep_json_shape(small, tmp_path):
    path = tmp_path / "sweep.json"
    assert main(["sweep", str(small), "--engine", "exact", "--json", str(path)]) == 0
    data = json.loads(path.read_text())
    assert set(data) == {"parameter", "values", "nuclei", "cycles", "engine", "polarization"}
    assert data["parameter"] == "rabi_hz" and data["engine"] == "exact" and data["cycles"] == 3
    assert len(data["polarization"]) == 8
    assert len(data["polarization"][0]) == 3 and len(data["polarization"][0][0]) == 2


def test_sweep_to_stdout(small, capsys):
    assert main(["sweep", str(small), "--engine", "trotter"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["engine"] == "trotter"


@pytest.mark.slow
def test_demo_runs_with_no_scenario(tmp_path, capsys):
    assert main(["run", "--out", str(tmp_path / "demo"), "--engines", "exact"]) == 0
    assert "scenario 'demo'" in capsys.readouterr().out
    assert (tmp_path / "demo" / "report.json").exists()


@pytest.mark.parametrize(
    ("argv_tail", "text", "match"),
    [
        ([], SMALL.replace("field_t = 0.05", "field_t = -1"), "`spins.field_t` must be > 0"),
        ([], SMALL.replace("count = 3", "count = 0"), "`cycle.count` must be >= 1"),
        (["--engines", "exact,magic"], SMALL, "`--engines` must list engines"),
        (["--bogus"], SMALL, "unrecognized arguments"),
    ],
)
def test_bad_input_one_line_exit_2_no_files(tmp_path, capsys, argv_tail, text, match):
    path = tmp_path / "bad.toml"
    path.write_text(text)
    out = tmp_path / "out"
    assert main(["run", str(path), "--out", str(out), *argv_tail]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and match in err and "Traceback" not in err
    assert not out.exists()


def test_missing_scenario_file(tmp_path, capsys):
    assert main(["sweep", str(tmp_path / "missing.toml")]) == 2
    assert "cannot read scenario file" in capsys.readouterr().err


def test_budget_json_and_table(small, tmp_path, capsys):
    path = tmp_path / "budget.json"
    argv = [
        "budget",
        str(small),
        "--processor",
        "line:4",
        "--json",
        str(path),
        "--compare",
        "grid:2x2,full:3",
    ]
    assert main(argv) == 0
    data = json.loads(path.read_text())
    # the JSON keys are a fixed interface (scripts read them): every key, in its order
    assert list(data) == [
        "processor",
        "qubits",
        "layout",
        "preparation",
        "per_cycle",
        "cycles",
        "readout",
        "total",
        "program",
        "strategy",
        "strategy_reason",
        "strategies",
        "approximation_error",
        "trotter_error",
        "compare",
        "shots",
        "warnings",
    ]
    assert set(data["trotter_error"]) == {"value", "method", "points"}
    assert set(data["qubits"]) == {"region", "nv", "nuclei_initial", "nv_final", "nuclei_final"}
    for part in ("per_cycle", "total"):
        assert {
            "one_qubit",
            "two_qubit",
            "swaps",
            "resets",
            "measurements",
            "depth",
            "two_qubit_depth",
            "duration_s",
            "success_estimate",
        } <= set(data[part])
    assert data["processor"]["name"] == "line:4"
    assert data["total"]["measurements"] == 2 and data["total"]["resets"] == 2 + 3
    assert 0 < data["total"]["success_estimate"] < 1
    assert [r["processor"] for r in data["compare"]] == ["grid:2x2", "full:3"]
    out = capsys.readouterr().out
    assert "per cycle" in out and "success estimate" in out and "Trotter error" in out


@pytest.mark.parametrize(
    ("argv_tail", "match"),
    [
        (["--processor", "line:2"], "has 2 qubits; the program needs 3"),
        (["--processor", "blob:5"], "is not a topology"),
        (["--target-error", "-1"], "`--target-error` must be > 0"),
        (["--compare", "line:4,ring:x"], "is not a topology"),
    ],
)
def test_budget_bad_input(small, capsys, argv_tail, match):
    assert main(["budget", str(small), *argv_tail]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and match in err


def test_run_with_processor_writes_budget(tmp_path):
    path = tmp_path / "p.toml"
    path.write_text(SMALL + '[processor]\ntopology = "line:3"\ncompare = ["full:3"]\n')
    out = tmp_path / "out"
    assert main(["run", str(path), "--out", str(out), "--engines", "exact"]) == 0
    report = json.loads((out / "report.json").read_text())
    assert report["budget"]["processor"]["name"] == "line:3"
    assert [r["processor"] for r in report["compare"]] == ["line:3", "full:3"]
    assert (out / "budget.png").stat().st_size > 0


def test_run_with_processor_compares_noisy_to_exact(tmp_path, capsys):
    path = tmp_path / "n.toml"
    path.write_text(
        SMALL.replace("steps = 60", "steps = 12") + '[processor]\ntopology = "line:3"\n'
    )
    out = tmp_path / "out"
    assert main(["run", str(path), "--out", str(out)]) == 0
    report = json.loads((out / "report.json").read_text())
    assert set(report["engines"]) == {"exact", "trotter", "noisy", "noisy-baseline"}
    noisy = next(c for c in report["comparison"] if c["engine"] == "noisy")
    assert [c["engine"] for c in report["comparison"]] == ["trotter", "noisy"]
    assert {"peak", "shift", "contrast_ratio", "found", "signs_agree", "at_edge"} <= set(
        noisy["per_nucleus"]["C1"]
    )
    assert "peaks found within the sweep resolution" in noisy["verdict"]
    assert "noisy-baseline" in noisy["baseline"]
    text = capsys.readouterr().out
    assert noisy["verdict"] in text
    # the Trotter error of this coarse program (12 steps) is flagged, in both places
    assert any("Trotter error" in w for w in report["warnings"])
    assert report["budget"]["trotter_error"] == report["trotter_error"]
    # the report echoes the whole validated scenario, every processor figure included
    settings = report["scenario"]["settings"]
    assert settings["processor"]["error_reset"] == 1e-3
    assert settings["processor"]["error_readout"] == 1e-2
    assert settings["protocol"]["kind"] == "spin-lock" and settings["trotter"]["steps"] == 12
    assert {"noise", "imperfections", "mapping", "typical", "sweep", "system"} <= set(settings)
    assert report["scenario"]["dnpqc_version"]
    assert "warnings (" in text and report["warnings"][0] in text


def test_sweep_noisy_engine(small, tmp_path):
    path = tmp_path / "noisy.json"
    text = small.read_text().replace("steps = 60", "steps = 6")
    small.write_text(text + '[noise]\nmethod = "trajectories"\ntrajectories = 20\n')
    assert main(["sweep", str(small), "--engine", "noisy", "--json", str(path)]) == 0
    data = json.loads(path.read_text())
    assert data["engine"] == "noisy" and len(data["stderr"]) == 8
