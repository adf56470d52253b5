"""The results store: every finished sweep point committed to SQLite as soon as it is done.

One file per output folder (`points.sqlite`), in WAL mode (readers never block the writer and a
crash loses at most the transaction in flight). The store is keyed by the scenario's content
hash and the engine list; a store made for another scenario refuses to be resumed into.
Polarizations are stored as float64 bytes, one row per (engine, point index).
"""

from __future__ import annotations

import fcntl
import os
import sqlite3
from pathlib import Path

import numpy as np

from ..errors import RunError, ScenarioError

STORE_NAME = "points.sqlite"

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS points (
    engine TEXT NOT NULL,
    idx INTEGER NOT NULL,
    value REAL NOT NULL,
    polarization BLOB NOT NULL,
    stderr BLOB,
    PRIMARY KEY (engine, idx)
);
CREATE TABLE IF NOT EXISTS log (engine TEXT NOT NULL, idx INTEGER NOT NULL);
"""


class ResultsStore:
    """Sweep points of one scenario run, committed one by one.

    A store that does not exist yet (or one to be replaced, `replace=True`) is created only at
    the first commit, so a run refused before its first point leaves the folder as it was. An
    existing store is opened at once and checked against this scenario. While open, the file is
    locked (`flock`): a second writer is refused.
    """

    def __init__(
        self,
        path: Path,
        *,
        digest: str,
        engines: tuple[str, ...],
        shape: tuple[int, int],
        replace: bool = False,
        points: int | None = None,
    ):
        self.path = Path(path)
        self.shape = shape  # (cycles, nuclei)
        self.points = points  # recorded, so that another scenario can see the run is unfinished
        self.digest, self.engines, self.replace = digest, engines, replace
        self.db: sqlite3.Connection | None = None
        self._lock_fd: int | None = None
        self._claimed = False
        if self.path.exists() and not replace:
            self._connect()
            self._check_claim()

    @property
    def is_open(self) -> bool:
        return self.db is not None

    def _connect(self) -> None:
        self._lock_fd = _lock(self.path)
        try:
            self.db = sqlite3.connect(self.path)
            self.db.execute("PRAGMA journal_mode=WAL")
        except sqlite3.DatabaseError as exc:
            self.close()
            raise RunError(f"{str(self.path)!r} is not a results store ({exc})") from None

    def _create(self) -> None:
        """The first commit: discard a store being replaced, then create this one."""
        if self.replace:
            discard_store(self.path)
        self.path.parent.mkdir(parents=True, exist_ok=True)
        self._connect()
        self.db.executescript(_SCHEMA)

    def _wanted(self) -> dict[str, str]:
        return {"digest": self.digest, "shape": f"{self.shape[0]}x{self.shape[1]}"}

    def _check_claim(self) -> None:
        try:
            meta = dict(self.db.execute("SELECT key, value FROM meta"))
        except sqlite3.DatabaseError as exc:
            self.close()
            raise RunError(
                f"{str(self.path)!r} is not a results store ({exc}); use another --out or --fresh"
            ) from None
        for key, value in self._wanted().items():
            if meta.get(key) != value:
                self.close()
                raise ScenarioError(
                    f"cannot resume into {str(self.path)!r}: it holds a run of another "
                    f"scenario ({key} {meta.get(key)!r}, this one {value!r}); use another "
                    "--out or --fresh"
                )

    def _claim(self) -> None:
        with self.db:
            for key, value in self._wanted().items():
                self.db.execute("INSERT OR REPLACE INTO meta VALUES (?, ?)", (key, value))
            self.db.execute(
                "INSERT OR REPLACE INTO meta VALUES ('engines', ?)", (",".join(self.engines),)
            )
            if self.points is not None:
                self.db.execute(
                    "INSERT OR REPLACE INTO meta VALUES ('points', ?)", (str(self.points),)
                )
        self._claimed = True

    def done(self, engine: str) -> set[int]:
        if self.db is None:
            return set()
        rows = self.db.execute("SELECT idx FROM points WHERE engine = ?", (engine,))
        return {int(r[0]) for r in rows}

    def put(self, engine: str, indices, values, polarization, stderr=None) -> None:
        """Commit the points of one finished task in one transaction."""
        if self.db is None:
            self._create()
        if not self._claimed:
            self._claim()
        with self.db:
            for k, idx in enumerate(indices):
                err = None if stderr is None else np.asarray(stderr[k], dtype=float).tobytes()
                self.db.execute(
                    "INSERT OR REPLACE INTO points VALUES (?, ?, ?, ?, ?)",
                    (
                        engine,
                        int(idx),
                        float(values[k]),
                        np.asarray(polarization[k], dtype=float).tobytes(),
                        err,
                    ),
                )
                self.db.execute("INSERT INTO log VALUES (?, ?)", (engine, int(idx)))

    def load(self, engine: str, count: int) -> tuple[np.ndarray, np.ndarray | None]:
        """(points, cycles, nuclei) polarizations and standard errors (None if none stored)."""
        pol = np.full((count, *self.shape), np.nan)
        err = np.full((count, *self.shape), np.nan)
        has_err = False
        if self.db is None:
            return pol, None
        rows = self.db.execute(
            "SELECT idx, polarization, stderr FROM points WHERE engine = ?", (engine,)
        )
        for idx, blob, eblob in rows:
            pol[idx] = np.frombuffer(blob).reshape(self.shape)
            if eblob is not None:
                err[idx] = np.frombuffer(eblob).reshape(self.shape)
                has_err = True
        return pol, (err if has_err else None)

    def computations(self) -> list[tuple[str, int]]:
        """Every (engine, point) ever committed, in order: a point computed twice shows twice."""
        if self.db is None:
            return []
        return [(e, int(i)) for e, i in self.db.execute("SELECT engine, idx FROM log")]

    def close(self) -> None:
        if self.db is not None:
            self.db.close()
            self.db = None
        if self._lock_fd is not None:
            os.close(self._lock_fd)
            self._lock_fd = None


def _lock(path: Path) -> int:
    """An exclusive `flock` on the store file (created if absent); RunError if held elsewhere."""
    fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        os.close(fd)
        raise RunError(
            f"another dnpqc run is writing to {str(path)!r}; wait for it or use another --out"
        ) from None
    return fd


def check_unlocked(path: Path) -> None:
    """Refuse at once when a live run holds the store at `path` (checked before any work)."""
    if not path.is_file():
        return
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        raise RunError(
            f"another dnpqc run is writing to {str(path)!r}; wait for it or use another --out"
        ) from None
    finally:
        os.close(fd)


def discard_store(path: Path) -> None:
    """Delete the store at `path` and its WAL files (refused while another run holds it)."""
    check_unlocked(path)
    for suffix in ("", "-wal", "-shm"):
        Path(f"{path}{suffix}").unlink(missing_ok=True)


def _stored_run(path: Path) -> tuple[dict[str, str], dict[str, int]] | None:
    """The meta table and the points per engine of the store at `path` (None if unreadable)."""
    try:
        with sqlite3.connect(f"file:{path}?mode=ro", uri=True) as db:
            meta = dict(db.execute("SELECT key, value FROM meta"))
            counts = dict(db.execute("SELECT engine, COUNT(*) FROM points GROUP BY engine"))
    except sqlite3.Error:
        return None
    return meta, counts


def _misses_points(meta: dict[str, str], counts: dict[str, int], points: int) -> bool:
    engines = [e for e in meta.get("engines", "").split(",") if e]
    return any(counts.get(e, 0) < points for e in engines)


def unfinished_run(path: Path, digest: str, points: int) -> bool:
    """Whether the store at `path` is a run of scenario `digest` that misses some points."""
    stored = _stored_run(path)
    if stored is None or stored[0].get("digest") != digest:
        return False
    return _misses_points(*stored, points)


def unfinished_digest(path: Path) -> str | None:
    """The content hash of the run in the store at `path` if, by the point count it recorded,
    that run is unfinished (None if finished, unreadable or recorded no count)."""
    stored = _stored_run(path)
    if stored is None or not stored[0].get("points", "").isdigit():
        return None
    meta, counts = stored
    return meta.get("digest") if _misses_points(meta, counts, int(meta["points"])) else None
