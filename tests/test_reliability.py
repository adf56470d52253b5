"""The reliability promises, end to end: every failure is one line with exit code 2, nothing is
left half-written, nothing lands outside the out folder, no work starts before the checks."""

import json
import os
import sqlite3
import sys

import numpy as np
import openqasm3
import pytest
from conftest import TWO_NUCLEI_SWEEP

from dnpqc import cli, parse_scenario
from dnpqc.cli import main
from dnpqc.io import output, qasm
from dnpqc.io.store import STORE_NAME, ResultsStore
from dnpqc.pipeline import export, plan
from dnpqc.resources import format_bytes

C2 = '[[spins.nuclei]]\nlabel = "C2"\na_par_hz = -30e3\na_perp_hz = 10e3\n'
#: One nucleus, 3 points, 2 cycles of 8 steps: runs in a fraction of a second.
TINY = (
    TWO_NUCLEI_SWEEP.replace('name = "small"', 'name = "tiny"')
    .replace(C2, "")
    .replace("points = 8", "points = 3")
    .replace("count = 3", "count = 2")
    .replace("steps = 60", "steps = 8")
)


@pytest.fixture
def tiny(tmp_path):
    path = tmp_path / "tiny.toml"
    path.write_text(TINY)
    return path


@pytest.fixture
def no_work(monkeypatch):
    """Any simulation or compilation fails the test: the refusal must come before work."""

    def forbidden(*args, **kwargs):
        pytest.fail("work started before the destination was checked")

    monkeypatch.setattr(cli, "simulate", forbidden)
    monkeypatch.setattr(cli, "run_scenario", forbidden)
    monkeypatch.setattr(export, "Programs", forbidden)
    monkeypatch.setattr(plan, "scenario_programs", forbidden)


def one_line_exit_2(argv, capsys, match=""):
    code = main(argv)
    err = capsys.readouterr().err
    assert code == 2, err
    assert err.count("\n") == 1 and err.startswith("dnpqc: error: "), err
    assert match in err, err
    return err


def files_in(folder):
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*"))


# --- item 1, 8: every destination is checked before any work --------------------------------


@pytest.mark.parametrize(
    ("argv", "match"),
    [
        (["run", "{s}", "--out", "/proc/nope"], "/proc is a virtual file system"),
        (["run", "{s}", "--out", "{s}"], "exists and is not a folder"),
        (["run", "{s}", "--out", "{s}/below"], "is a file, so nothing can be created"),
        (["sweep", "{s}", "--json", "{d}"], "is a folder"),
        (["sweep", "{s}", "--json", "/proc/x.json"], "virtual file system"),
        (["sweep", "{s}", "--json", "/dev/null"], "virtual file system"),
        (["compile", "{s}", "-o", "{d}"], "is a folder"),
        (["budget", "{s}", "--json", "/proc/b.json"], "virtual file system"),
        (["budget", "{s}", "--json", "{s}/b.json"], "is a file, so nothing"),
    ],
)
def test_bad_destinations_refused_before_any_work(tiny, tmp_path, capsys, no_work, argv, match):
    argv = [a.format(s=tiny, d=tmp_path) for a in argv]
    before = files_in(tmp_path)
    one_line_exit_2(argv, capsys, match)
    assert files_in(tmp_path) == before


def test_a_report_file_that_is_a_folder_is_refused_up_front(tiny, tmp_path, capsys, no_work):
    out = tmp_path / "out"
    (out / "report.json").mkdir(parents=True)
    one_line_exit_2(["run", str(tiny), "--out", str(out)], capsys, "report.json")


def test_a_character_device_is_never_replaced(tiny, tmp_path, capsys, no_work):
    one_line_exit_2(["sweep", str(tiny), "--json", "/dev/null"], capsys)
    assert os.path.exists("/dev/null") and not os.path.isfile("/dev/null")


# --- item 2: a refused run leaves the out folder as it was -----------------------------------


def _big_cluster(n: int) -> str:
    nuclei = "".join(
        f'[[spins.nuclei]]\nlabel = "N{j}"\na_par_hz = {1e3 * j}\na_perp_hz = 2e3\n'
        for j in range(n)
    )
    return (
        f"[spins]\nfield_t = 0.03\ndipolar = false\n{nuclei}"
        '[drive]\nprotocol = "spin-lock"\nrabi_hz = 330e3\n'
        "[cycle]\ninteraction_time_s = 1e-6\ncount = 1\n[trotter]\nsteps = 1\n"
    )


def test_memory_guard_refusal_leaves_no_store_and_no_folder(tmp_path, capsys):
    path = tmp_path / "big.toml"
    path.write_text(_big_cluster(24))
    out = tmp_path / "out"
    argv = ["run", str(path), "--out", str(out), "--engines", "exact", "--workers", "1"]
    one_line_exit_2([*argv, "--max-work", "1e40"], capsys, "the exact engine needs about")
    assert not out.exists()


def test_refused_run_keeps_a_previous_finished_run(tiny, tmp_path, capsys):
    out = tmp_path / "out"
    run = ["run", str(tiny), "--out", str(out), "--engines", "exact", "--workers", "1"]
    assert main(run) == 0
    before = {p: (out / p).read_bytes() for p in files_in(out) if not p.endswith("-shm")}
    big = tmp_path / "big.toml"
    big.write_text(_big_cluster(24))
    one_line_exit_2(["run", str(big), *run[2:], "--max-work", "1e40"], capsys, "needs about")
    assert {p: (out / p).read_bytes() for p in before} == before


def test_bad_scheduler_leaves_nothing(tiny, tmp_path, capsys, monkeypatch):
    pytest.importorskip("distributed")
    monkeypatch.setattr("dnpqc.pipeline.sweep.CONNECT_TIMEOUT_S", 1)
    out = tmp_path / "out"
    argv = ["run", str(tiny), "--out", str(out), "--engines", "exact"]
    one_line_exit_2([*argv, "--scheduler", "tcp://127.0.0.1:1"], capsys, "no Dask scheduler")
    assert not out.exists()


@pytest.mark.parametrize("address", ["", "foo://bar", "tcp://host", "tcp://h:99999", "h:1"])
def test_scheduler_address_form_is_checked(tiny, tmp_path, capsys, no_work, address):
    argv = ["run", str(tiny), "--out", str(tmp_path / "o"), "--scheduler", address]
    one_line_exit_2(argv, capsys, "`--scheduler` must be an address like tcp://")


# --- item 3, 7, 15: user text in paths, programs, CSV and the terminal -----------------------


def test_scenario_name_cannot_leave_the_results_folder(tiny, tmp_path, monkeypatch):
    work = tmp_path / "work"
    work.mkdir()
    monkeypatch.chdir(work)
    tiny.write_text(TINY.replace('name = "tiny"', 'name = "../../escaped"'))
    assert main(["run", str(tiny), "--engines", "exact", "--workers", "1"]) == 0
    assert (work / "results" / "escaped" / "report.json").is_file()
    assert not (tmp_path / "escaped").exists()


@pytest.mark.parametrize("label", ["C1\nreset $0;", "C1\x1b[2J", "C1\u202e", "C1\r"])
def test_labels_with_line_breaks_or_escapes_are_refused(tiny, capsys, label):
    tiny.write_text(TINY.replace('label = "C1"', f"label = {json.dumps(label)}"))
    one_line_exit_2(["sweep", str(tiny)], capsys, "must not contain line breaks")


def test_very_long_labels_are_refused(tiny, capsys):
    tiny.write_text(TINY.replace('label = "C1"', f'label = "{"x" * 65}"'))
    one_line_exit_2(["sweep", str(tiny)], capsys, "at most 64 characters")


def test_qasm_header_line_cannot_add_a_statement():
    # parsed with the OpenQASM 3 reference parser (openqasm3): the header stays comments
    from qiskit import QuantumCircuit

    circuit = QuantumCircuit(1)
    circuit.x(0)
    plain = openqasm3.parse(qasm.dumps(circuit, ["scenario"]))
    hostile = openqasm3.parse(qasm.dumps(circuit, ["scenario\nreset $0;\r\nx $0;"]))
    assert len(hostile.statements) == len(plain.statements)


def test_spreadsheet_formula_labels_and_math_labels_in_a_run(tiny, tmp_path, capsys):
    text = TINY.replace('label = "C1"', 'label = "=HYPERLINK(1)"')
    text += '[[spins.nuclei]]\nlabel = "$$"\na_par_hz = -30e3\na_perp_hz = 10e3\n'
    tiny.write_text(text)
    out = tmp_path / "out"
    assert main(["run", str(tiny), "--out", str(out), "--engines", "exact", "--workers", "1"]) == 0
    rows = (out / "sweep.csv").read_text().splitlines()[1:]
    assert all(not r.split(",")[3].startswith(("=", "+", "-", "@")) for r in rows)
    assert any(r.split(",")[3] == "'=HYPERLINK(1)" for r in rows)
    assert (out / "spectrum.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


# --- item 4, 11, 12: bounds before any allocation, a work limit, no tracebacks ----------------


@pytest.mark.parametrize(
    ("old", "new", "match"),
    [
        ("points = 3", "points = 1000000000", "`sweep.points` must be <= 10000, got 1000000000"),
        ("points = 3", "points = 10000000000000000000", "`sweep.points` must be <= 10000"),
        ("points = 3", "points = 1e19", "`sweep.points` must be an integer"),
        ("count = 2", "count = 100000000", "`cycle.count` must be <= 10000"),
        ("steps = 8", "steps = 100000000", "`trotter.steps` must be <= 100000"),
        ("field_t = 0.05", "field_t = 1e308", "`spins.field_t` must be at most 100"),
        ("a_perp_hz = 20e3", "a_perp_hz = 1e308", "`spins.nuclei[0].a_perp_hz` must be at most"),
        ("points = 3", "points = " + "9" * 4300, "`sweep.points` must be <= 10000, got 999"),
        ("points = 3", "points = " + "9" * 5000, "scenario is not valid TOML"),
        ("points = 3", "points = 0x" + "f" * 5000, "must be <= 10000, got an integer of 20000"),
        ("steps = 8", "steps = 8\n[imperfections]\npoints = 500", "`imperfections.points` must"),
        ("steps = 8", "steps = 8\n[typical]\nstates = 10000000", "`typical.states` must be <="),
        ("steps = 8", "steps = 8\n[noise]\ntrajectories = 10000000", "`noise.trajectories`"),
        (
            "steps = 8",
            "steps = 8\n[processor]\nedges = [[0, 1000000000]]",
            "names qubit 1000000000; a processor has at most 1000",
        ),
        ("steps = 8", 'steps = 8\n[processor]\ntopology = "line:1000000"', "has 1000000 qubits"),
        (
            "steps = 8",
            'steps = 8\n[processor]\ntopology = "line:3"\npreset = "transmon-grid-9"',
            "takes `preset` or `topology`, not both",
        ),
    ],
)
def test_sizes_are_bounded_in_one_line(tiny, capsys, old, new, match):
    tiny.write_text(TINY.replace(old, new))
    one_line_exit_2(["sweep", str(tiny)], capsys, match)


def test_lattice_radius_and_full_abundance_are_bounded(tiny, capsys):
    spins = "[spins]\nfield_t = 0.05\n"
    lattice = "[spins.lattice]\nseed = 1\n"
    base = TINY.split("[drive]")[1]
    tiny.write_text(spins + lattice + "radius_nm = 50\n[drive]" + base)
    one_line_exit_2(["sweep", str(tiny)], capsys, "`spins.lattice.radius_nm` must be at most 5")
    tiny.write_text(spins + lattice + "radius_nm = 1.6\nabundance = 1.0\n[drive]" + base)
    one_line_exit_2(["sweep", str(tiny)], capsys, "at most 30 are allowed")


def test_memory_message_survives_astronomic_figures():
    assert format_bytes(16 * 4**1000) == "2^2004 B"
    assert format_bytes(2**60) == "1 EiB"


@pytest.mark.parametrize(
    "text",
    [
        "a = " + "[" * 500 + "]" * 500,
        "a = " + "{b = " * 500 + "1" + "}" * 500,
        'name = "x"\nname = "y"',
        "[spins\n",
    ],
)
def test_hostile_toml_is_one_line(tmp_path, capsys, text):
    path = tmp_path / "s.toml"
    path.write_text(text)
    one_line_exit_2(["sweep", str(path)], capsys, "scenario is not valid TOML")


def test_binary_garbage_is_one_line(tmp_path, capsys):
    path = tmp_path / "garbage.toml"
    path.write_bytes(bytes(range(256)) * 4)
    one_line_exit_2(["sweep", str(path)], capsys, "is not UTF-8 text")


@pytest.mark.parametrize("value", ["nan", "inf", "-inf", "1e300"])
def test_compile_bind_must_be_finite(tiny, capsys, no_work, value):
    one_line_exit_2(["compile", str(tiny), f"--bind={value}"], capsys, "`--bind` must be a finite")


def test_work_limit_refuses_with_the_estimate_and_a_flag_raises_it(tiny, tmp_path, capsys):
    # 10000 points x 1 node x (2 cycles x 601 steps x 6 gates) x 4^2 = 1.15e9
    tiny.write_text(
        TINY.replace("points = 3", "points = 10000").replace("steps = 8", "steps = 600")
    )
    err = one_line_exit_2(["sweep", str(tiny), "--max-work", "1e9"], capsys, "more than --max-work")
    assert "needs about 1.15e+09 units of work" in err
    tiny.write_text(TINY)
    path = tmp_path / "s.json"
    one_line_exit_2(["sweep", str(tiny), "--max-work", "10", "--json", str(path)], capsys)
    assert not path.exists()
    assert main(["sweep", str(tiny), "--max-work", "1e5", "--json", str(path)]) == 0
    one_line_exit_2(["run", str(tiny), "--max-work", "-1"], capsys, "`--max-work` must be a number")


def test_program_size_is_bounded_before_it_is_built(tiny, capsys, no_work):
    tiny.write_text(TINY.replace("count = 2", "count = 10000").replace("steps = 8", "steps = 1000"))
    for argv in (["compile", str(tiny)], ["budget", str(tiny)], ["run", str(tiny)]):
        one_line_exit_2(argv, capsys, "the program would have about 6.01e+07 gates")
    one_line_exit_2(["sweep", str(tiny), "--engine", "trotter"], capsys, "more than 5e+06")


def test_ctrl_c_during_sweep_is_one_line_and_exit_130(tiny, tmp_path, capsys, monkeypatch):
    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(cli, "simulate", interrupted)
    path = tmp_path / "s.json"
    assert main(["sweep", str(tiny), "--json", str(path)]) == 130
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "interrupted" in err
    assert files_in(tmp_path) == ["tiny.toml"]


def test_json_is_strict_even_with_undefined_numbers(tiny, tmp_path, capsys):
    # a contrast ratio of a zero exact peak is undefined (NaN): it is written as null
    tiny.write_text(TINY.replace("a_perp_hz = 20e3", "a_perp_hz = 0.0"))
    out = tmp_path / "out"
    argv = ["run", str(tiny), "--out", str(out), "--engines", "exact,trotter", "--workers", "1"]
    assert main(argv) == 0
    text = (out / "report.json").read_text()
    assert "NaN" not in text and "Infinity" not in text
    json.loads(text, parse_constant=lambda c: pytest.fail(c))


# --- item 5, 6: conflicting options, messages ------------------------------------------------


@pytest.mark.parametrize(
    ("tail", "match"),
    [
        (["--resume", "--fresh"], "`--resume` and `--fresh` contradict each other"),
        (["--engines", ""], "`--engines` must list engines"),
        (["--engines", " , "], "`--engines` must list engines"),
    ],
)
def test_conflicting_options_refused(tiny, tmp_path, capsys, no_work, tail, match):
    one_line_exit_2(["run", str(tiny), "--out", str(tmp_path / "o"), *tail], capsys, match)


def test_noisy_without_processor_names_the_default_processor(tiny, tmp_path, capsys):
    tiny.write_text(TINY + '[noise]\nmethod = "trajectories"\ntrajectories = 4\n')
    out = tmp_path / "out"
    argv = ["run", str(tiny), "--out", str(out), "--engines", "exact,noisy", "--workers", "1"]
    assert main(argv) == 0
    assert "the noisy engine runs on the default processor grid:3x3" in capsys.readouterr().out


def test_memory_message_of_run_names_runs_flag(tmp_path, capsys):
    path = tmp_path / "big.toml"
    path.write_text(_big_cluster(24))
    argv = ["run", str(path), "--out", str(tmp_path / "o"), "--engines", "exact"]
    one_line_exit_2([*argv, "--max-work", "1e40"], capsys, "`--engines typical` for run")


class _Terminal:
    """A terminal that reports no size (as some consoles and CI terminals do)."""

    def __init__(self):
        self.text = ""

    def isatty(self):
        return True

    def fileno(self):
        raise OSError("no size")

    def write(self, text):
        self.text += text

    def flush(self):
        pass


def test_progress_bar_shows_on_a_terminal_without_width():
    term = _Terminal()
    bar = cli._progress(4, "exact", term)
    bar.update(2)
    bar.refresh()
    assert "2/4" in term.text
    bar.close()


# --- item 14: one writer per store, stale temporary files ------------------------------------


def test_second_writer_is_refused_and_stale_temps_are_cleaned(tiny, tmp_path, capsys):
    out = tmp_path / "out"
    run = ["run", str(tiny), "--out", str(out), "--engines", "exact", "--workers", "1"]
    assert main(run) == 0
    sc = parse_scenario(TINY)
    live = ResultsStore(out / STORE_NAME, digest=sc.digest, engines=("exact",), shape=(2, 1))
    try:
        one_line_exit_2([*run, "--resume"], capsys, "another dnpqc run is writing")
        one_line_exit_2([*run, "--fresh"], capsys, "another dnpqc run is writing")
    finally:
        live.close()
    with sqlite3.connect(out / STORE_NAME) as db:
        assert db.execute("SELECT COUNT(*) FROM points").fetchone()[0] == 3
    (out / ".report.json.k1ll3d.tmp").write_text('{"half')
    assert main([*run, "--fresh"]) == 0
    assert not list(out.glob(".*.tmp"))


def test_store_is_created_at_the_first_commit(tmp_path):
    sc = parse_scenario(TINY)
    path = tmp_path / "sub" / STORE_NAME
    store = ResultsStore(path, digest=sc.digest, engines=("exact",), shape=(2, 1))
    assert store.done("exact") == set() and not path.parent.exists()
    store.put("exact", [0], [sc.sweep.values[0]], np.zeros((1, 2, 1)))
    assert path.exists() and store.done("exact") == {0}
    store.close()


def test_one_line_guard_in_main_escapes_control_characters(capsys, tmp_path):
    # a message that carries user text can never print two lines
    one_line_exit_2(["sweep", str(tmp_path / "a\nb.toml")], capsys, "cannot read scenario")
    assert output.one_line("a\nb") == "a\\nb"


def test_tiny_angle_coefficients_are_refused_not_lost(tmp_path, capsys):
    # qiskit 2.6 drops the variable of `1e-15 * Parameter("x")` (measured); a frequency of
    # 1e-15 Hz under a swept tau would silently give wrong angles
    from qiskit.circuit import Parameter

    from dnpqc.errors import ScenarioError
    from dnpqc.physics.expr import Poly

    x = Parameter("x")
    assert float(Poly.variable("x", 1e-12).expression({"x": x}).bind({x: 2.0})) == 2e-12
    with pytest.raises(ScenarioError, match="coefficient below 1e-13"):
        Poly.variable("x", 1e-15).expression({"x": x})
    path = tmp_path / "p.toml"
    pulsed = TINY.replace('protocol = "spin-lock"\nrabi_hz = 530e3', 'protocol = "pulsed"')
    pulsed = pulsed.replace('parameter = "rabi_hz"\nstart = 515e3\nstop = 550e3', "")
    pulsed = pulsed.replace("[sweep]", '[sweep]\nparameter = "tau_s"\nstart = 2e-6\nstop = 3e-6')
    pulsed = pulsed.replace("interaction_time_s = 20e-6", "blocks = 2")
    path.write_text(pulsed.replace("a_perp_hz = 20e3", "a_perp_hz = 1e-15"))
    one_line_exit_2(["sweep", str(path), "--engine", "trotter"], capsys, "coefficient below")
    path.write_text(pulsed)
    assert main(["sweep", str(path), "--engine", "trotter"]) == 0


def test_an_edit_never_silently_discards_an_unfinished_run(tiny, tmp_path, capsys):
    out = tmp_path / "out"
    sc = parse_scenario(TINY)
    store = ResultsStore(
        out / STORE_NAME, digest=sc.digest, engines=("exact",), shape=(2, 1), points=3
    )
    store.put("exact", [0], sc.sweep.values[:1], np.zeros((1, 2, 1)))  # as if killed here
    store.close()
    tiny.write_text(TINY + "# a comment-only edit\n")
    run = ["run", str(tiny), "--out", str(out), "--engines", "exact", "--workers", "1"]
    one_line_exit_2(run, capsys, "holds an unfinished run of another version of the scenario")
    assert main([*run, "--fresh"]) == 0


@pytest.mark.parametrize(
    ("answer", "match"),
    [(None, "it did not answer"), (b"HTTP/1.1 400 Bad Request\r\n\r\n", "not a Dask scheduler")],
)
def test_a_listener_that_is_not_a_scheduler_ends_in_one_line(
    tiny, tmp_path, capsys, monkeypatch, answer, match
):
    pytest.importorskip("distributed")
    import socket
    import threading
    import time

    monkeypatch.setattr("dnpqc.pipeline.sweep.CONNECT_TIMEOUT_S", 1)
    server = socket.create_server(("127.0.0.1", 0))
    held = []

    def serve():
        conn, _ = server.accept()
        held.append(conn)
        if answer:
            conn.sendall(answer)

    threading.Thread(target=serve, daemon=True).start()
    address = f"tcp://127.0.0.1:{server.getsockname()[1]}"
    out = tmp_path / "out"
    start = time.monotonic()
    argv = ["run", str(tiny), "--out", str(out), "--engines", "exact", "--scheduler", address]
    one_line_exit_2(argv, capsys, match)
    assert time.monotonic() - start < 10 and not out.exists()
    server.close()


def test_typical_work_grows_with_the_window_not_the_steps(tiny, capsys, no_work):
    # a Chebyshev propagator takes about 2π·t·r products (Tal-Ezer & Kosloff 1984): a 1 s window
    # at ~1 MHz of Pauli weight is ~5e6 products per cycle, whatever trotter.steps says (a fuzz
    # case hung here)
    from dnpqc.io.scenario import sweep_work

    long = TINY.replace("interaction_time_s = 20e-6", "interaction_time_s = 1.0")
    long = long.replace("points = 3", "points = 40")
    sc = parse_scenario(long)
    assert sweep_work(sc, "typical") > 1e11 > 1e6 > sweep_work(sc, "exact")
    tiny.write_text(long)
    one_line_exit_2(["sweep", str(tiny), "--engine", "typical"], capsys, "more than --max-work")


def test_a_closed_standard_output_is_one_line(tiny, tmp_path, capsys, monkeypatch):
    # `dnpqc compile ... | head -c 10`: the reader went away, so writing stdout raises
    # BrokenPipeError; the command ends in one line on stderr and exit code 2, and stdout is
    # pointed at /dev/null so the final flush cannot fail again (Python docs, "Note on SIGPIPE")
    sink = (tmp_path / "stdout").open("w")

    class ClosedPipe:
        def write(self, text):
            raise BrokenPipeError(32, "Broken pipe")

        def flush(self):
            pass

        def fileno(self):
            return sink.fileno()

    monkeypatch.setattr(sys, "stdout", ClosedPipe())
    assert main(["compile", str(tiny)]) == 2
    err = capsys.readouterr().err
    assert err == "dnpqc: error: standard output was closed before the end\n", err
    sink.close()
