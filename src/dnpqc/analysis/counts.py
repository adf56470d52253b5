"""Measured counts: the file a hardware run brings back, checked and turned into polarizations,
and counts sampled in the same format from simulated readout distributions.

The file (JSON):

    {"scenario_digest": "<the content hash in the program header>",
     "shots": N,
     "results": [{"value": <swept value, SI units>,
                  "counts": {"<bitstring>": n, ...},
                  "baseline_counts": {...},                   (optional: `compile --baseline`)
                  "folded": [{"scale": 3, "counts": {...},    (optional: `compile --fold 3`)
                              "baseline_counts": {...}}]},    (optional)
                 ...],
     "confusion": [[p(0|0), p(0|1)], [p(1|0), p(1|1)]],       (optional, see below)
     "baseline_kind": "uncoupled" | "mixed-nv"}               (optional: which baseline)

Bitstrings are as qiskit prints them: highest bit first, registers separated by spaces, the
last-declared register first. A program measured at the end has one register `nuclei` (bit j =
nucleus j+1); a `--measure-each-cycle` program has `cycle_1 ... cycle_C`, printed as
"cycle_C ... cycle_1". The registers may also be written joined, without the spaces. Every
value of the sweep has one result, and each program's counts add up to `shots`.

`confusion` is the readout calibration, M[read][prepared] (columns sum to 1): one matrix for
every nucleus, or a list of one per nucleus (in nucleus order).

Per nucleus and register, P = 1 - 2·mean(bit), with the binomial standard error
sqrt((1 - P²)/N) (common practice, no source: the standard error of a mean of N ±1 outcomes).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..compile.folding import BASELINE, BASELINE_KINDS, PROGRAM
from ..compile.program import Workload
from ..errors import ScenarioError

#: Relative tolerance of a value in the file against the sweep's values.
VALUE_TOLERANCE = 1e-9


@dataclass(frozen=True)
class Estimate:
    """Polarizations with their standard errors, (points, registers, nuclei) each."""

    value: np.ndarray
    stderr: np.ndarray


@dataclass(frozen=True)
class MeasuredCounts:
    """A checked counts file, as mean bits per program: `means[(kind, scale)]` is
    (points, registers, nuclei) in sweep order; kind PROGRAM or BASELINE, scale 1 unfolded."""

    digest: str
    shots: int
    registers: int
    means: dict[tuple[str, int], np.ndarray]
    confusion: np.ndarray | None  # (nuclei, 2, 2), M[read, prepared]
    baseline_kind: str | None = None  # "uncoupled" or "mixed-nv", when the file says

    @property
    def scales(self) -> tuple[int, ...]:
        return tuple(sorted({s for kind, s in self.means if kind == PROGRAM}))

    def has_baseline(self, scale: int = 1) -> bool:
        return (BASELINE, scale) in self.means

    def estimate(self, kind: str = PROGRAM, scale: int = 1) -> Estimate:
        """P = 1 - 2·mean(bit) and sqrt((1 - P²)/N) of one program."""
        p = 1.0 - 2.0 * self.means[(kind, scale)]
        return Estimate(p, np.sqrt(np.clip(1.0 - p**2, 0.0, None) / self.shots))


def _fail(where: str, message: str) -> ScenarioError:
    return ScenarioError(f"counts file: `{where}` {message}")


def read_counts(data: object, work: Workload) -> MeasuredCounts:
    """Check the parsed JSON of a counts file against the scenario's workload; one-line errors
    name the field, the value and what is allowed."""
    if not isinstance(data, dict):
        raise _fail("(top level)", f"must be a JSON object, got {type(data).__name__}")
    digest = data.get("scenario_digest")
    if digest != work.digest:
        raise _fail(
            "scenario_digest",
            f"is {digest!r}, but this scenario's content hash is {work.digest!r} (the hash in "
            "the program header): the counts belong to another scenario or another version of it",
        )
    shots = data.get("shots")
    if isinstance(shots, bool) or not isinstance(shots, int) or shots < 1:
        raise _fail("shots", f"must be a whole number >= 1, got {shots!r}")
    results = data.get("results")
    if not isinstance(results, list) or not results:
        raise _fail("results", "must be a non-empty list of {value, counts}")
    n, cycles = work.system.num_nuclei, work.cycles
    rows = _match_values(results, work)
    per_program: dict[tuple[str, int], list] = {}
    registers: set[int] = set()
    for i, (k, result) in enumerate(rows):
        for key, counts, where in _programs(result, f"results[{k}]"):
            means, regs = bit_means(counts, n, cycles, shots, where)
            registers.add(regs)
            per_program.setdefault(key, [None] * len(rows))[i] = means
    if len(registers) > 1:
        raise _fail("results", "mixes programs measured at the end and after every cycle")
    means = {}
    for key, column in per_program.items():
        missing = [work.values[i] for i, m in enumerate(column) if m is None]
        if missing:
            what = "the program" if key == (PROGRAM, 1) else f"{key[0]} at scale {key[1]}"
            raise _fail(
                "results",
                f"has no counts of {what} at {len(missing)} values, first "
                f"{missing[0]!r}; give every program at every value, or none",
            )
        means[key] = np.array(column)
    if (PROGRAM, 1) not in means:
        raise _fail("results[].counts", "is missing")
    kind = data.get("baseline_kind")
    if kind is not None and kind not in BASELINE_KINDS:
        raise _fail("baseline_kind", f"must be one of {', '.join(BASELINE_KINDS)}, got {kind!r}")
    return MeasuredCounts(digest, shots, registers.pop(), means, _confusion(data, n), kind)


def _match_values(results: list, work: Workload) -> list[tuple[int, dict]]:
    """(index in the file, result) in sweep order; every sweep value exactly once."""
    values = np.asarray(work.values, dtype=float)
    found: dict[int, tuple[int, dict]] = {}
    for k, result in enumerate(results):
        where = f"results[{k}]"
        if not isinstance(result, dict):
            raise _fail(where, f"must be an object {{value, counts}}, got {type(result).__name__}")
        value = result.get("value")
        if (
            isinstance(value, bool)
            or not isinstance(value, int | float)
            or not math.isfinite(value)
        ):
            raise _fail(f"{where}.value", f"must be a finite number, got {value!r}")
        close = np.abs(values - value) <= VALUE_TOLERANCE * np.maximum(np.abs(values), 1e-300)
        if not close.any():
            raise _fail(
                f"{where}.value",
                f"= {value!r} is not a value of the sweep ({work.parameter} from "
                f"{values.min():.6g} to {values.max():.6g}, {len(values)} points)",
            )
        i = int(np.argmax(close))
        if i in found:
            raise _fail(
                f"{where}.value",
                f"= {value!r} appears twice (also results[{found[i][0]}]); merge the counts",
            )
        found[i] = (k, result)
    missing = [work.values[i] for i in range(len(values)) if i not in found]
    if missing:
        raise _fail(
            "results",
            f"has no result for {len(missing)} of the {len(values)} sweep values, first "
            f"{missing[0]!r}; measure the whole sweep",
        )
    return [found[i] for i in range(len(values))]


def _programs(result: dict, where: str):
    """(kind, scale), counts, field path of every program in one result."""
    if "counts" not in result:
        raise _fail(f"{where}.counts", "is missing")
    yield (PROGRAM, 1), result["counts"], f"{where}.counts"
    if "baseline_counts" in result:
        yield (BASELINE, 1), result["baseline_counts"], f"{where}.baseline_counts"
    folded = result.get("folded", [])
    if not isinstance(folded, list):
        raise _fail(f"{where}.folded", "must be a list of {scale, counts}")
    seen = set()
    for f, fold in enumerate(folded):
        at = f"{where}.folded[{f}]"
        scale = fold.get("scale") if isinstance(fold, dict) else None
        if isinstance(scale, bool) or not isinstance(scale, int) or scale < 3 or scale % 2 == 0:
            raise _fail(f"{at}.scale", f"must be an odd whole number >= 3, got {scale!r}")
        if scale in seen:
            raise _fail(f"{at}.scale", f"= {scale} appears twice")
        seen.add(scale)
        if "counts" not in fold:
            raise _fail(f"{at}.counts", "is missing")
        yield (PROGRAM, scale), fold["counts"], f"{at}.counts"
        if "baseline_counts" in fold:
            yield (BASELINE, scale), fold["baseline_counts"], f"{at}.baseline_counts"


def bit_means(
    counts: object, num_nuclei: int, cycles: int, shots: int, where: str
) -> tuple[np.ndarray, int]:
    """(registers, n) mean bit of each nucleus per register (cycle order), and the register
    count (1: read at the end; `cycles`: after every cycle)."""
    if not isinstance(counts, dict) or not counts:
        raise _fail(where, "must be a non-empty object {bitstring: count}")
    sums = None
    total = 0
    registers = None
    for key, count in counts.items():
        groups = _registers(key, num_nuclei, cycles, where)
        if registers is not None and len(groups) != registers:
            raise _fail(f'{where}["{key}"]', f"has {len(groups)} registers, other keys {registers}")
        registers = len(groups)
        if isinstance(count, bool) or not isinstance(count, int) or count < 0:
            raise _fail(f'{where}["{key}"]', f"must be a whole number >= 0, got {count!r}")
        bits = np.array([[int(ch) for ch in reversed(g)] for g in reversed(groups)], dtype=float)
        sums = count * bits if sums is None else sums + count * bits
        total += count
    if total != shots:
        raise _fail(where, f"adds up to {total} shots, but `shots` is {shots}")
    return sums / total, registers


def _registers(key: object, num_nuclei: int, cycles: int, where: str) -> list[str]:
    """The registers of one bitstring key, as printed (last-declared first)."""
    if not isinstance(key, str):
        raise _fail(where, f"has a key {key!r} that is not a bitstring")
    groups = key.split()
    if len(groups) == 1 and cycles > 1 and len(key) == num_nuclei * cycles:
        groups = [key[i : i + num_nuclei] for i in range(0, len(key), num_nuclei)]
    allowed = sorted({1, cycles})
    if len(groups) not in allowed or any(len(g) != num_nuclei for g in groups):
        raise _fail(
            f'{where}["{key}"]',
            f"is not {' or '.join(str(a) for a in allowed)} register(s) of {num_nuclei} bits "
            f"(one bit per nucleus; {cycles} cycle(s), highest bit first, registers separated "
            "by spaces)",
        )
    if any(ch not in "01" for g in groups for ch in g):
        raise _fail(f'{where}["{key}"]', "must contain only 0 and 1 (and spaces)")
    return groups


def _confusion(data: dict, num_nuclei: int) -> np.ndarray | None:
    """The file's readout calibration as (n, 2, 2), or None."""
    if "confusion" not in data:
        return None
    try:
        m = np.asarray(data["confusion"], dtype=float)
    except (TypeError, ValueError):
        m = np.empty(0)
    if m.shape == (2, 2):
        m = np.tile(m, (num_nuclei, 1, 1))
    if m.shape != (num_nuclei, 2, 2) or not np.all(np.isfinite(m)):
        raise _fail(
            "confusion",
            f"must be one 2x2 matrix [[p(0|0), p(0|1)], [p(1|0), p(1|1)]] or {num_nuclei} of "
            "them (one per nucleus)",
        )
    if np.any(m < 0) or not np.allclose(m.sum(axis=1), 1.0, atol=1e-6):
        raise _fail(
            "confusion", "columns must be probabilities that add up to 1 (M[read][prepared])"
        )
    if np.any(m[:, 0, 0] + m[:, 1, 1] <= 1.0):
        raise _fail("confusion", "is not invertible as readout: p(0|0) + p(1|1) must exceed 1")
    return m


# --- sampled counts -------------------------------------------------------------------------


def apply_confusion(probabilities: np.ndarray, confusion: np.ndarray) -> np.ndarray:
    """Distribution over n-bit readouts after independent readout errors: M_j on bit j
    (nucleus j = bit j of the index)."""
    n = confusion.shape[0]
    tensor = probabilities.reshape((2,) * n)  # axis 0 is the highest bit, n - 1
    for j in range(n):
        tensor = np.moveaxis(
            np.tensordot(confusion[j], tensor, axes=([1], [n - 1 - j])), 0, n - 1 - j
        )
    return tensor.reshape(-1)


def sample_counts(
    distributions: np.ndarray, shots: int, rng: np.random.Generator, confusion: np.ndarray
) -> dict[str, int]:
    """Counts of `shots` readouts: (registers, 2^n) distributions (cycle order), readout error
    applied, each register sampled independently; keys printed as qiskit does."""
    registers, size = distributions.shape
    n = size.bit_length() - 1
    outcomes = []
    for dist in distributions:
        p = apply_confusion(dist, confusion)
        outcomes.append(rng.choice(size, size=shots, p=p / p.sum()))
    joint = np.zeros(shots, dtype=np.int64)
    for r, outcome in enumerate(outcomes):
        joint += outcome.astype(np.int64) << (n * r)
    keys, tally = np.unique(joint, return_counts=True)
    out = {}
    for key, count in zip(keys, tally, strict=True):
        groups = [format((int(key) >> (n * r)) & (size - 1), f"0{n}b") for r in range(registers)]
        out[" ".join(reversed(groups))] = int(count)
    return out


def counts_json(
    work: Workload,
    shots: int,
    sampled: dict[tuple[str, int], list[dict[str, int]]],
    confusion: np.ndarray,
    baseline_kind: str | None = None,
) -> dict[str, object]:
    """The counts file of sampled programs (`sampled[(kind, scale)]`: counts per value)."""
    results = []
    for i, value in enumerate(work.values):
        result: dict[str, object] = {"value": float(value)}
        for (kind, scale), per_value in sorted(sampled.items(), key=lambda kv: kv[0][1]):
            if scale == 1:
                result[kind] = per_value[i]
        folds = sorted({s for _, s in sampled if s > 1})
        if folds:
            result["folded"] = [
                {
                    "scale": s,
                    **{k: sampled[(k, s)][i] for k in (PROGRAM, BASELINE) if (k, s) in sampled},
                }
                for s in folds
            ]
        results.append(result)
    out = {
        "scenario_digest": work.digest,
        "shots": shots,
        "results": results,
        "confusion": confusion.tolist(),
    }
    if baseline_kind is not None:
        out["baseline_kind"] = baseline_kind
    return out
