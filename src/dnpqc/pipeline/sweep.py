"""Running sweeps: points split into tasks, run serially, on a local process pool or on a Dask
cluster, each finished task committed to the results store at once.

Sweep points (with their imperfection nodes) are independent, so a task is a list of point
indices; its result does not depend on how the points were split (trajectory seeds derive from
each point's value), so pool and cluster runs equal a serial run. Ctrl-C stops cleanly: what
finished is in the store and `--resume` computes only the rest.
"""

from __future__ import annotations

import logging
import math
import multiprocessing
import os
import re
import signal
import socket
import threading
import time
from collections.abc import Callable
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool

import numpy as np

from ..compile.program import Program, Workload
from ..engines import EngineOptions, simulate_program
from ..engines.results import SweepResult
from ..errors import RunError, ScenarioError
from ..io.store import ResultsStore
from ..resources import limit_threads, threads_per_worker

Target = Program | Workload

#: Points per task at most, per engine: circuit engines compile once per task.
TASK_POINTS = {"exact": 4, "typical": 2, "trotter": 32, "noisy": 32, "noisy-baseline": 32}


class Interrupted(Exception):
    """Ctrl-C during a sweep; `stored` of `total` points are safe in the store."""

    def __init__(self, stored: int, total: int):
        super().__init__(f"interrupted: {stored} of {total} points stored")
        self.stored, self.total = stored, total


def compute_points(target: Target, engine: str, indices: list[int], options: EngineOptions):
    """Run `engine` on the sweep points `indices` only: (indices, polarization, stderr)."""
    result = simulate_program(target.subset(indices), engine, options)
    return indices, result.polarization, result.stderr


def split_tasks(missing: list[int], engine: str, workers: int) -> list[list[int]]:
    """Contiguous chunks: at most TASK_POINTS[engine], and at least one per worker."""
    if not missing:
        return []
    size = max(1, min(TASK_POINTS.get(engine, 8), math.ceil(len(missing) / max(1, workers))))
    return [missing[i : i + size] for i in range(0, len(missing), size)]


#: Seconds to wait for a Dask scheduler to answer before giving up.
CONNECT_TIMEOUT_S = 10


def check_scheduler_address(address: str) -> str:
    """Refuse a `--scheduler` that is not `tcp://HOST:PORT` (or `tls://`), before any work."""
    match = re.fullmatch(r"(tcp|tls)://([A-Za-z0-9.\-]+|\[[0-9A-Fa-f:.]+\]):(\d{1,5})", address)
    if not match or not 0 < int(match.group(3)) < 65536:
        raise ScenarioError(
            f"`--scheduler` must be an address like tcp://10.0.0.5:8786, got {address[:80]!r}"
        )
    return address


#: Largest plausible first message of a Dask scheduler (its handshake is about a kilobyte).
_MAX_HANDSHAKE_BYTES = 2**24


def probe_scheduler(address: str, timeout_s: float) -> None:
    """Before the Dask client (which can wait without end), check within `timeout_s` that a
    `tcp://` address answers as a Dask scheduler does: it sends a length-prefixed handshake
    (8-byte little-endian length, distributed.comm.tcp) as soon as a client connects."""
    match = re.fullmatch(r"tcp://\[?([^\]]+)\]?:(\d+)", address)
    if match is None:  # tls: the server speaks only after the client's hello
        return
    try:
        with socket.create_connection((match.group(1), int(match.group(2))), timeout_s) as sock:
            sock.settimeout(timeout_s)
            prelude = sock.recv(8, socket.MSG_WAITALL)
    except OSError as exc:
        why = "it did not answer" if isinstance(exc, TimeoutError) else exc.strerror or str(exc)
        raise RunError(
            f"`--scheduler` {address!r}: no Dask scheduler answered there ({why})"
        ) from None
    length = int.from_bytes(prelude, "little") if len(prelude) == 8 else None
    if length is None or not 0 < length < _MAX_HANDSHAKE_BYTES:
        raise RunError(
            f"`--scheduler` {address!r}: something answered, but not a Dask scheduler "
            f"(first bytes {prelude[:8]!r})"
        )


def _executor(workers: int, scheduler: str | None):
    if scheduler is not None:
        check_scheduler_address(scheduler)
        try:
            from distributed import Client
        except ImportError:
            raise ScenarioError(
                "`--scheduler` needs the Dask distributed package: pip install 'dnpqc[cluster]'"
            ) from None
        probe_scheduler(scheduler, CONNECT_TIMEOUT_S)
        _quiet_dask_logs()
        try:
            return _DaskExecutor(Client(scheduler, timeout=CONNECT_TIMEOUT_S))
        except (OSError, TimeoutError, MemoryError, ValueError) as exc:
            raise RunError(
                f"`--scheduler` {scheduler!r}: no Dask scheduler answered there "
                f"({type(exc).__name__}: {str(exc)[:120]})"
            ) from None
    return ProcessPoolExecutor(
        workers,
        mp_context=multiprocessing.get_context("spawn"),
        initializer=_worker_setup,
        initargs=(os.getpid(), threads_per_worker(workers)),
    )


def _worker_setup(parent_pid: int, threads: int) -> None:
    """In each pool worker: at most `threads` threads (workers × threads ≤ cores), leave
    Ctrl-C to the parent (which stops the pool cleanly), and exit when the parent is gone (a
    SIGKILLed run must not leave workers behind)."""
    limit_threads(threads)
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    threading.Thread(target=_exit_with_parent, args=(parent_pid,), daemon=True).start()


def _exit_with_parent(parent_pid: int, period_s: float = 0.5) -> None:
    while os.getppid() == parent_pid:
        time.sleep(period_s)
    os._exit(1)


class _DaskExecutor:
    """A Dask client behind the concurrent.futures interface used here."""

    def __init__(self, client):
        self.client = client

    def submit(self, fn, *args):
        return self.client.submit(fn, *args, pure=False)

    def shutdown(self, cancel_futures: bool = False) -> None:
        if cancel_futures:
            self.client.cancel(list(self.client.futures.values()))
        self.client.close()


def _wait_any(futures: set):
    if futures and hasattr(next(iter(futures)), "key"):  # Dask futures
        from distributed import wait as dask_wait

        try:
            done = dask_wait(futures, return_when="FIRST_COMPLETED").done
        except Exception as exc:  # the cluster went away: its futures were cancelled
            raise _cluster_failed(exc) from None
        return done, futures - done
    return wait(futures, return_when=FIRST_COMPLETED)


def _quiet_dask_logs() -> None:
    """A lost scheduler is reported once, as one line (`_cluster_failed`), not also by the
    Dask client's own multi-line error logs (its loggers set their own levels)."""
    for name in list(logging.root.manager.loggerDict):
        if name == "distributed" or name.startswith("distributed."):
            logging.getLogger(name).setLevel(logging.CRITICAL + 1)


def _cluster_failed(exc: Exception) -> RunError:
    first = str(exc).strip().splitlines()[0][:120] if str(exc).strip() else ""
    return RunError(
        f"the Dask cluster failed ({type(exc).__name__}: {first}); the finished points are "
        "stored: continue with --resume"
    )


def run_engines(
    targets: dict[str, Target],
    options: EngineOptions | None = None,
    *,
    store: ResultsStore | None = None,
    workers: int = 1,
    scheduler: str | None = None,
    on_point: Callable[[str, int], None] | None = None,
) -> dict[str, SweepResult]:
    """Every engine over the sweep of its program (or workload); only points missing from
    `store` are computed."""
    options = options or EngineOptions()
    engines = tuple(targets)
    work = _workload(next(iter(targets.values())))
    count = len(work.values)
    shape = (work.cycles, work.system.num_nuclei)
    memory = {e: (np.full((count, *shape), np.nan), None) for e in engines}
    tasks = []
    for engine in engines:
        done = store.done(engine) if store is not None else set()
        if on_point is not None and done:
            on_point(engine, len(done))
        missing = [i for i in range(count) if i not in done]
        tasks += [(engine, chunk) for chunk in split_tasks(missing, engine, workers)]
    total = count * len(engines)
    stored = total - sum(len(chunk) for _, chunk in tasks)

    def finish(engine: str, indices, pol, err) -> None:
        nonlocal stored
        if store is not None:
            store.put(engine, indices, [work.values[i] for i in indices], pol, err)
        _keep(memory, engine, indices, pol, err)
        stored += len(indices)
        if on_point is not None:
            on_point(engine, len(indices))

    try:
        if scheduler is None and (workers <= 1 or len(tasks) <= 1):
            for engine, chunk in tasks:
                finish(engine, *compute_points(targets[engine], engine, chunk, options))
        else:
            _run_parallel(targets, options, tasks, _executor(workers, scheduler), finish)
    except KeyboardInterrupt:
        raise Interrupted(stored, total) from None
    return {e: _result(work, e, store, memory) for e in engines}


def _workload(target: Target) -> Workload:
    return target.workload if isinstance(target, Program) else target


def _run_parallel(targets, options, tasks, executor, finish) -> None:
    """Submit every task, then commit each as it completes (in completion order)."""
    try:
        pending = {
            executor.submit(compute_points, targets[e], e, chunk, options): e for e, chunk in tasks
        }
        remaining = set(pending)
        while remaining:
            finished, remaining = _wait_any(remaining)
            for future in finished:
                finish(pending[future], *_task_result(future))
    finally:
        executor.shutdown(cancel_futures=True)


def _task_result(future):
    """A finished task's result; a dead worker or a lost cluster becomes one RunError (what
    finished is in the store), while user errors raised by the task pass through."""
    try:
        return future.result()
    except (ScenarioError, RunError, KeyboardInterrupt):
        raise
    except BrokenProcessPool:
        raise RunError(
            "a worker process died (out of memory?); the finished points are stored: "
            "continue with --resume"
        ) from None
    except Exception as exc:
        if not hasattr(future, "key"):  # a local task: a genuine error, shown in full
            raise
        raise _cluster_failed(exc) from None


def _keep(memory, engine, indices, pol, err) -> None:
    full_pol, full_err = memory[engine]
    full_pol[indices] = pol
    if err is not None:
        if full_err is None:
            full_err = np.full_like(full_pol, np.nan)
        full_err[indices] = err
    memory[engine] = (full_pol, full_err)


def _result(work: Workload, engine, store, memory) -> SweepResult:
    count = len(work.values)
    stored = store is not None and store.is_open
    pol, err = store.load(engine, count) if stored else memory[engine]
    return SweepResult(
        engine, work.parameter, np.asarray(work.values), work.system.labels, pol, err
    )
