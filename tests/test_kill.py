"""`run` and `compile` killed (SIGKILL) at random moments: every file present is complete.

A killed writer may leave a hidden temporary file (`.<name>.*.tmp`); never a half-written
result. The next run into the folder removes those temporary files.
"""

import json
import random
import signal
import sqlite3
import subprocess
import sys
import time

import openqasm3
import pytest
from conftest import TWO_NUCLEI_SWEEP

#: End-to-end robustness runs: `make test-slow` (and CI), not `make test`.
pytestmark = pytest.mark.slow

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
PNG_END = b"IEND\xaeB`\x82"  # the IEND chunk and its CRC close every PNG (PNG spec, ISO 15948)

SCENARIO = TWO_NUCLEI_SWEEP.replace("points = 8", "points = 6").replace("steps = 60", "steps = 10")


def assert_complete(folder) -> None:
    """Every visible file in `folder` is whole: JSON parses, PNG closes, CSV ends a line,
    OpenQASM parses, SQLite passes its integrity check."""
    for path in (p for p in folder.iterdir() if p.is_file()):
        if path.name.startswith("."):
            assert path.name.endswith(".tmp"), path
            continue
        data = path.read_bytes()
        if path.suffix == ".json":
            json.loads(data)
        elif path.suffix == ".png":
            assert data.startswith(PNG_SIGNATURE) and data.endswith(PNG_END), path
        elif path.suffix == ".csv":
            assert data.startswith(b"engine,") and data.endswith(b"\n"), path
        elif path.suffix == ".qasm":
            openqasm3.parse(data.decode())
        elif path.name == "points.sqlite":
            with sqlite3.connect(path) as db:
                assert db.execute("PRAGMA integrity_check").fetchone()[0] == "ok"


def _cli(*args) -> list[str]:
    return [sys.executable, "-m", "dnpqc.cli", *args]


def _timed(argv) -> float:
    start = time.monotonic()
    subprocess.run(argv, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.monotonic() - start


def _killed_at(argv, delay_s: float) -> None:
    proc = subprocess.Popen(argv, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    time.sleep(delay_s)
    proc.send_signal(signal.SIGKILL)
    proc.wait()


def test_killed_run_and_compile_leave_only_complete_files(tmp_path):
    scenario = tmp_path / "s.toml"
    scenario.write_text(SCENARIO)
    out = tmp_path / "out"
    run = _cli("run", str(scenario), "--out", str(out), "--engines", "exact,trotter")
    run += ["--workers", "1", "--fresh"]
    full = _timed(run)
    rng = random.Random(13)
    for _ in range(3):  # late in the run, when the report files are being written
        _killed_at(run, rng.uniform(0.6, 1.0) * full)
        assert_complete(out)
    program = tmp_path / "program.qasm"
    compile_ = _cli("compile", str(scenario), "--processor", "line:3", "-o", str(program))
    full = _timed(compile_)
    for _ in range(2):
        _killed_at(compile_, rng.uniform(0.6, 1.0) * full)
        assert_complete(tmp_path)
    (out / ".report.json.killed.tmp").write_text('{"half')
    subprocess.run(run, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    assert_complete(out)
    assert not list(out.glob(".*.tmp"))
