"""The results store: every finished sweep point committed to SQLite as soon as it is done.

One file per output folder (`points.sqlite`), in WAL mode (readers never block the writer and a
crash loses at most the transaction in flight). The store is keyed by the scenario's content
hash and the engine list; a store made for another scenario refuses to be resumed into.
Polarizations are stored as float64 bytes, one row per (engine, point index).
"""

from __future__ import annotations

import sqlite3
from pathlib import Path

import numpy as np

from .errors import ScenarioError

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
    """Sweep points of one scenario run, committed one by one."""

    def __init__(
        self, path: Path, *, digest: str, engines: tuple[str, ...], shape: tuple[int, int]
    ):
        self.path = Path(path)
        self.shape = shape  # (cycles, nuclei)
        self.path.parent.mkdir(parents=True, exist_ok=True)
        self.db = sqlite3.connect(self.path)
        self.db.execute("PRAGMA journal_mode=WAL")
        self.db.executescript(_SCHEMA)
        self._claim(digest, engines)

    def _claim(self, digest: str, engines: tuple[str, ...]) -> None:
        meta = dict(self.db.execute("SELECT key, value FROM meta"))
        wanted = {"digest": digest, "shape": f"{self.shape[0]}x{self.shape[1]}"}
        if meta:
            for key, value in wanted.items():
                if meta.get(key) != value:
                    raise ScenarioError(
                        f"cannot resume into {str(self.path)!r}: it holds a run of another "
                        f"scenario ({key} {meta.get(key)!r}, this one {value!r}); use another "
                        "--out or --fresh"
                    )
        with self.db:
            for key, value in wanted.items():
                self.db.execute("INSERT OR REPLACE INTO meta VALUES (?, ?)", (key, value))
            self.db.execute(
                "INSERT OR REPLACE INTO meta VALUES ('engines', ?)", (",".join(engines),)
            )

    def done(self, engine: str) -> set[int]:
        rows = self.db.execute("SELECT idx FROM points WHERE engine = ?", (engine,))
        return {int(r[0]) for r in rows}

    def put(self, engine: str, indices, values, polarization, stderr=None) -> None:
        """Commit the points of one finished task in one transaction."""
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
        return [(e, int(i)) for e, i in self.db.execute("SELECT engine, idx FROM log")]

    def close(self) -> None:
        self.db.close()


def unfinished_run(path: Path, digest: str, points: int) -> bool:
    """Whether the store at `path` is a run of scenario `digest` that misses some points."""
    try:
        with sqlite3.connect(f"file:{path}?mode=ro", uri=True) as db:
            meta = dict(db.execute("SELECT key, value FROM meta"))
            if meta.get("digest") != digest:
                return False
            engines = [e for e in meta.get("engines", "").split(",") if e]
            counts = dict(db.execute("SELECT engine, COUNT(*) FROM points GROUP BY engine"))
    except sqlite3.Error:
        return False
    return any(counts.get(e, 0) < points for e in engines)
