"""Parallel, distributed and resumable sweeps: the same numbers as a serial run."""

import json
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from conftest import THREE_NUCLEI

from dnpqc import ScenarioError, parse_scenario
from dnpqc.cli import main
from dnpqc.io.store import STORE_NAME, ResultsStore
from dnpqc.pipeline.job import engine_options, engine_targets
from dnpqc.pipeline.sweep import run_engines as run_targets
from dnpqc.pipeline.sweep import split_tasks


def run_engines(sc, engines, **kwargs):
    """The scenario's engines over its sweep, as `run` does (programs compiled once)."""
    return run_targets(engine_targets(sc, engines), engine_options(sc), **kwargs)


SMALL = THREE_NUCLEI.replace("points = 4", "points = 9").replace("steps = 30", "steps = 6")


def test_tasks_cover_every_point_once():
    tasks = split_tasks(list(range(23)), "exact", 2)
    assert sorted(i for t in tasks for i in t) == list(range(23))
    assert max(len(t) for t in tasks) <= 4


def test_process_pool_equals_serial():
    sc = parse_scenario(SMALL)
    serial = run_engines(sc, ("exact", "trotter"), workers=1)
    pooled = run_engines(sc, ("exact", "trotter"), workers=2)
    for engine in ("exact", "trotter"):
        assert np.array_equal(serial[engine].polarization, pooled[engine].polarization)


@pytest.mark.slow
def test_trajectories_do_not_depend_on_the_split():
    text = SMALL.replace("points = 9", "points = 3").replace("steps = 6", "steps = 2") + (
        '[processor]\ntopology = "line:4"\n[noise]\nmethod = "trajectories"\ntrajectories = 20\n'
    )
    sc = parse_scenario(text)
    whole = run_engines(sc, ("noisy",), workers=1)["noisy"]
    split = run_engines(sc, ("noisy",), workers=3)["noisy"]
    assert np.array_equal(whole.polarization, split.polarization)
    assert np.array_equal(whole.stderr, split.stderr)


@pytest.mark.slow
def test_dask_local_cluster_equals_serial():
    distributed = pytest.importorskip("distributed")
    sc = parse_scenario(SMALL)
    serial = run_engines(sc, ("exact",), workers=1)["exact"]
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, host="127.0.0.1", dashboard_address=None, processes=True
    ) as cluster:
        remote = run_engines(sc, ("exact",), scheduler=cluster.scheduler_address)["exact"]
    assert np.array_equal(serial.polarization, remote.polarization)


def test_store_resumes_only_missing_points(tmp_path):
    sc = parse_scenario(SMALL)
    shape = (sc.cycles, sc.system.num_nuclei)
    store = ResultsStore(tmp_path / STORE_NAME, digest=sc.digest, engines=("exact",), shape=shape)
    full = run_engines(sc, ("exact",), workers=1)["exact"]
    store.put("exact", [0, 1, 2], sc.sweep.values[:3], full.polarization[:3])
    resumed = run_engines(sc, ("exact",), store=store, workers=1)["exact"]
    assert np.array_equal(resumed.polarization, full.polarization)
    assert sorted(store.computations()) == [("exact", i) for i in range(9)]
    store.close()
    other = parse_scenario(SMALL.replace("d_hz = 900.0", "d_hz = 901.0"))
    with pytest.raises(ScenarioError, match="holds a run of another scenario"):
        ResultsStore(tmp_path / STORE_NAME, digest=other.digest, engines=("exact",), shape=shape)


@pytest.mark.slow
def test_cli_keeps_unfinished_runs_and_resumes(tmp_path):
    path = tmp_path / "s.toml"
    path.write_text(SMALL)
    out = tmp_path / "out"
    run = ["run", str(path), "--out", str(out), "--engines", "exact", "--workers", "1"]
    assert main(run) == 0
    assert main(run) == 0  # a finished run is simply replaced
    assert main([*run, "--resume"]) == 0
    # an unfinished run of the same scenario is kept: --resume or --fresh must be said
    sc = parse_scenario(SMALL)
    for suffix in ("", "-wal", "-shm"):
        (out / f"{STORE_NAME}{suffix}").unlink(missing_ok=True)
    store = ResultsStore(out / STORE_NAME, digest=sc.digest, engines=("exact",), shape=(3, 3))
    store.put("exact", [0], sc.sweep.values[:1], np.zeros((1, 3, 3)))
    store.close()
    assert main(run) == 2
    assert main([*run, "--fresh"]) == 0
    assert main(["run", str(path), "--out", str(tmp_path / "none"), "--resume"]) == 2
    path.write_text(SMALL.replace("count = 3", "count = 2"))
    assert main([*run, "--resume"]) == 2  # another scenario refuses to resume


# eight nuclei: the exact engine takes ~0.1 s per point (eigh of 512×512)
KILLABLE = (
    "[spins]\nfield_t = 0.03\n"
    + "".join(
        f'[[spins.nuclei]]\nlabel = "N{j}"\na_par_hz = {5e3 * j}\na_perp_hz = {3e3 + 1e3 * j}\n'
        for j in range(1, 9)
    )
    + '[drive]\nprotocol = "spin-lock"\nrabi_hz = 330e3\n'
    + '[sweep]\nparameter = "rabi_hz"\nstart = 320e3\nstop = 345e3\npoints = 30\n'
    + "[cycle]\ninteraction_time_s = 10e-6\ncount = 2\n"
)


def _rows(db_path) -> int:
    if not db_path.exists():
        return 0  # (connecting would create the file)
    try:
        with sqlite3.connect(f"file:{db_path}?mode=ro", uri=True) as db:
            return db.execute("SELECT COUNT(*) FROM points").fetchone()[0]
    except sqlite3.Error:
        return 0


@pytest.mark.slow
def test_killed_run_resumes_to_the_uninterrupted_numbers(tmp_path):
    # a run is killed (SIGKILL, no clean-up) mid-way, then resumed
    path = tmp_path / "k.toml"
    path.write_text(KILLABLE)
    out = tmp_path / "killed"
    args = ["run", str(path), "--out", str(out), "--engines", "exact", "--workers", "1"]
    cmd = [sys.executable, "-m", "dnpqc.cli", *args]
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.time() + 60
    while _rows(out / STORE_NAME) < 8 and time.time() < deadline and proc.poll() is None:
        time.sleep(0.05)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    partial = _rows(out / STORE_NAME)
    assert 0 < partial < 30
    assert main([*args, "--resume"]) == 0
    clean = tmp_path / "clean"
    assert (
        main(["run", str(path), "--out", str(clean), "--engines", "exact", "--workers", "1"]) == 0
    )
    a = json.loads((out / "report.json").read_text())["engines"]["exact"]["polarization"]
    b = json.loads((clean / "report.json").read_text())["engines"]["exact"]["polarization"]
    # the same numbers to rounding (LAPACK's last bits may differ between processes)
    assert np.allclose(a, b, rtol=0, atol=1e-12)
    store = ResultsStore(
        out / STORE_NAME, digest=parse_scenario(KILLABLE).digest, engines=("exact",), shape=(2, 8)
    )
    done = store.computations()
    store.close()
    assert len(done) == len(set(done)) == 30  # no point computed twice


ORPHAN_SCRIPT = """
import sys, time
from dnpqc.pipeline.sweep import _executor
pool = _executor(2, None)
futures = [pool.submit(time.sleep, 60) for _ in range(2)]
time.sleep(1.0)
print(" ".join(str(pid) for pid in pool._processes), flush=True)
time.sleep(60)
"""


def _alive(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/status") as fh:
            state = next(line for line in fh if line.startswith("State:"))
    except (FileNotFoundError, StopIteration):
        return False
    return "Z" not in state.split()[1]  # a zombie has exited


def _session_members(session: int) -> list[int]:
    """Live processes of a session (Linux /proc; the 6th field of stat is the session id)."""
    members = []
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[3]) == session and fields[0] != "Z":
            members.append(int(stat.parent.name))
    return members


def test_pool_workers_exit_when_the_run_is_killed():
    # the run in a session of its own: after its SIGKILL no process of that session may remain,
    # neither the pool workers nor multiprocessing's resource tracker
    proc = subprocess.Popen(
        [sys.executable, "-c", ORPHAN_SCRIPT],
        stdout=subprocess.PIPE,
        text=True,
        start_new_session=True,
    )
    workers = [int(pid) for pid in proc.stdout.readline().split()]
    assert len(workers) == 2 and all(_alive(pid) for pid in workers)
    assert len(_session_members(proc.pid)) >= 3
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    deadline = time.time() + 10
    while _session_members(proc.pid) and time.time() < deadline:
        time.sleep(0.1)
    assert not any(_alive(pid) for pid in workers)
    assert _session_members(proc.pid) == []


@pytest.mark.slow
def test_ctrl_c_of_a_pooled_run_is_one_line(tmp_path):
    # Ctrl-C in a terminal signals the whole process group: parent and pool workers
    path = tmp_path / "k.toml"
    path.write_text(KILLABLE)
    out = tmp_path / "out"
    args = ["run", str(path), "--out", str(out), "--engines", "exact", "--workers", "2"]
    proc = subprocess.Popen(
        [sys.executable, "-m", "dnpqc.cli", *args],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        text=True,
        start_new_session=True,
    )
    deadline = time.time() + 60
    while _rows(out / STORE_NAME) < 1 and time.time() < deadline and proc.poll() is None:
        time.sleep(0.05)
    os.killpg(proc.pid, signal.SIGINT)
    err = proc.communicate(timeout=60)[1]
    assert proc.returncode == 130, err
    assert err.count("\n") == 1 and "points stored; the rest runs with --resume" in err, err


CLUSTER_SCRIPT = """
import time
from distributed import LocalCluster
if __name__ == "__main__":
    cluster = LocalCluster(n_workers=1, threads_per_worker=1, host="127.0.0.1",
                           dashboard_address=None, processes=True)
    print(cluster.scheduler_address, flush=True)
    time.sleep(600)
"""


@pytest.mark.slow
def test_a_scheduler_killed_mid_run_ends_in_one_line(tmp_path):
    # a loopback Dask cluster in a session of its own is SIGKILLed once the run has stored its
    # first points: the run ends with exit code 2, one line, and keeps what finished
    pytest.importorskip("distributed")
    script = tmp_path / "cluster.py"
    script.write_text(CLUSTER_SCRIPT)
    cluster = subprocess.Popen(
        [sys.executable, str(script)],
        stdout=subprocess.PIPE,
        stderr=subprocess.DEVNULL,
        text=True,
        start_new_session=True,
    )
    try:
        address = cluster.stdout.readline().strip()
        assert address.startswith("tcp://127.0.0.1:"), address
        path = tmp_path / "k.toml"
        path.write_text(KILLABLE.replace("points = 30", "points = 150"))
        out = tmp_path / "out"
        args = ["run", str(path), "--out", str(out), "--engines", "exact", "--scheduler", address]
        run = subprocess.Popen(
            [sys.executable, "-m", "dnpqc.cli", *args],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.PIPE,
            text=True,
        )
        deadline = time.time() + 120
        while _rows(out / STORE_NAME) < 1 and time.time() < deadline and run.poll() is None:
            time.sleep(0.1)
        assert _rows(out / STORE_NAME) >= 1, run.poll() is None or run.communicate()[1]
    finally:
        os.killpg(cluster.pid, signal.SIGKILL)
        cluster.wait()
    err = run.communicate(timeout=120)[1]
    assert run.returncode == 2, err
    assert err.count("\n") == 1 and "the Dask cluster failed" in err, err
    assert "continue with --resume" in err
    assert _rows(out / STORE_NAME) >= 1
