"""Fuzzing the command line in-process: mutated scenarios and hostile output paths.

Every case must end in exit code 0, or in exit code 2 with exactly one line on stderr and no
file left behind. The scenarios start from the bundled examples and the demo, shrunk so that a
case that runs finishes in milliseconds, and a small `--max-work` refuses mutations that would
ask for much work. `make fuzz` runs many more cases (DNPQC_FUZZ_EXAMPLES).
"""

import contextlib
import copy
import io
import json
import math
import os
import tempfile
import tomllib
from pathlib import Path
from unittest import mock

import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from dnpqc.cli import main

#: End-to-end robustness runs: `make test-slow` (and CI), not `make test`.
pytestmark = pytest.mark.slow

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "src" / "dnpqc" / "scenarios" / "demo.toml"
SOURCES = [*sorted((ROOT / "examples").glob("*.toml")), DEMO]
EXAMPLES = int(os.environ.get("DNPQC_FUZZ_EXAMPLES", "0")) or None


def fuzz_settings(suite_examples: int) -> settings:
    """`suite_examples` cases in the test suite (reproducible); DNPQC_FUZZ_EXAMPLES random
    cases under `make fuzz`."""
    return settings(
        max_examples=EXAMPLES or suite_examples,
        deadline=None,
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
        derandomize=EXAMPLES is None,
        database=None,
    )


MAX_WORK = "1e6"  # state-element updates: a few milliseconds


def _small(data: dict) -> dict:
    """The scenario with little work: <= 3 points, <= 2 cycles, few steps, <= 3 nuclei."""
    sweep = data.get("sweep")
    if sweep:
        sweep["points"] = min(sweep["points"], 3)
    cycle = data.setdefault("cycle", {})
    cycle["count"] = min(cycle.get("count", 1), 2)
    if "blocks" in cycle:
        cycle["blocks"] = min(cycle["blocks"], 2)
    trotter = data.setdefault("trotter", {})
    trotter["steps"] = min(trotter.get("steps", 4), 4)
    spins = data["spins"]
    if "nuclei" in spins:
        spins["nuclei"] = spins["nuclei"][:3]
        kept = {n["label"] for n in spins["nuclei"]}
        couplings = [c for c in spins.get("couplings", []) if set(c["pair"]) <= kept]
        spins["couplings"] = couplings
    if "lattice" in spins:
        spins["lattice"]["max_nuclei"] = min(spins["lattice"].get("max_nuclei", 3), 3)
    return data


BASES = [_small(tomllib.loads(p.read_text())) for p in SOURCES]


def _key(name: str) -> str:
    bare = name and all(c.isascii() and (c.isalnum() or c in "-_") for c in name)
    return name if bare else json.dumps(name)


def toml_value(value) -> str:
    """TOML text of a value, inline (tables as inline tables), NaN/inf as TOML writes them."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return hex(value) if value > 10**4000 else str(value)  # hex: no decimal digit limit
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value)  # JSON string escapes are TOML basic-string escapes
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    return "{" + ", ".join(f"{_key(k)} = {toml_value(v)}" for k, v in value.items()) + "}"


def toml_text(data: dict) -> str:
    return "".join(f"{_key(k)} = {toml_value(v)}\n" for k, v in data.items())


def _paths(value, prefix=()):
    """Every key path into nested tables and arrays (leaves and containers)."""
    out = [prefix] if prefix else []
    if isinstance(value, dict):
        for k, v in value.items():
            out += _paths(v, (*prefix, k))
    elif isinstance(value, list):
        for i, v in enumerate(value):
            out += _paths(v, (*prefix, i))
    return out


def _copy(value):
    return copy.deepcopy(value)


HOSTILE = st.one_of(
    st.sampled_from(
        [
            math.nan,
            math.inf,
            -math.inf,
            0,
            -1,
            0.0,
            -0.0,
            1e308,
            -1e308,
            5e-324,
            10**30,
            2**63 - 1,
            -(2**63),
            2**20000,
            int("9" * 4300),
            True,
            "",
            " ",
            "x",
            "../../etc/x",
            "$$",
            "=1+1",
            "C1\n",
            "\x1b[31m",
            "Ĉ₁🧲",
            "x" * 5000,
            [],
            {},
            [1, 2],
            [[0, 1000000000]],
            {"a": 1},
            "line:1000000000",
            "grid:3x3",
        ]
    ),
    st.integers(min_value=-(10**6), max_value=10**6),
    st.floats(allow_nan=True, allow_infinity=True),
    st.text(max_size=40),
    st.lists(st.floats(allow_nan=True, allow_infinity=True), max_size=4),
)


def _nudged(value, factor: float):
    """A plausible neighbour of a leaf: numbers scaled, strings kept or emptied, lists cut."""
    if isinstance(value, bool):
        return not value
    if isinstance(value, int):
        return int(value * factor) if abs(value) < 2**53 else -value
    if isinstance(value, float):
        return value * factor
    if isinstance(value, str):
        return value if factor > 0 else ""
    if isinstance(value, list):
        return value[: max(0, int(len(value) * factor))]
    return value


@st.composite
def mutated_scenario(draw, keep_processor: bool = True) -> bytes:
    """The TOML bytes of one example with up to three mutations of its values (dropped,
    replaced by a hostile value, nudged, wrapped in a list), then maybe one textual mutation
    (a duplicate key, a cut, a stray byte)."""
    data = _copy(draw(st.sampled_from(BASES)))
    if not keep_processor:
        data.pop("processor", None)
    for _ in range(draw(st.integers(0, 3))):
        paths = _paths(data)
        if not paths:
            break
        path = draw(st.sampled_from(paths))
        parent = data
        for step in path[:-1]:
            parent = parent[step]
        action = draw(st.sampled_from(["drop", "hostile", "hostile", "nudge", "nudge", "wrap"]))
        if action == "drop":
            del parent[path[-1]]
        elif action == "wrap":
            parent[path[-1]] = [parent[path[-1]]]
        elif action == "nudge":
            factor = draw(st.sampled_from([0.0, 0.5, 0.9, 1.1, 2.0, 10.0, -1.0]))
            parent[path[-1]] = _nudged(parent[path[-1]], factor)
        else:
            parent[path[-1]] = _copy(draw(HOSTILE))  # the strategy's lists must stay as they are
    text = toml_text(data)
    textual = draw(st.sampled_from(["none"] * 9 + ["duplicate", "cut", "byte"]))
    if textual == "duplicate":
        first = text.splitlines()[0] if text else "name = 1"
        text += first + "\n"
    elif textual == "cut":
        text = text[: draw(st.integers(0, len(text)))]
    raw = text.encode("utf-8", "surrogatepass")
    if textual == "byte":
        at = draw(st.integers(0, len(raw)))
        raw = raw[:at] + bytes([draw(st.integers(0, 255))]) + raw[at:]
    return raw


#: Commands, and whether the scenario keeps its [processor] table (a run with one also maps
#: the program onto it and adds the noisy engine: seconds, so those runs drop it).
COMMANDS = st.sampled_from(
    [
        (["sweep", "{s}", "--engine", "exact", "--json", "{d}/out.json"], True),
        (["sweep", "{s}", "--engine", "exact", "--json", "{d}/out.json"], True),
        (["sweep", "{s}", "--engine", "typical", "--json", "{d}/out.json"], True),
        (["sweep", "{s}", "--engine", "trotter", "--json", "{d}/out.json"], False),
        (["run", "{s}", "--out", "{d}/out", "--engines", "exact", "--workers", "1"], False),
        (["budget", "{s}", "--json", "{d}/budget.json"], True),
        (["compile", "{s}", "-o", "{d}/program.qasm"], True),
    ]
)


class WorkStarted(Exception):
    """Raised in place of mapping a program: every check before it had passed."""


def _no_mapping(*args, **kwargs):
    raise WorkStarted


@contextlib.contextmanager
def stop_at_mapping():
    """budget and compile map the program (seconds): stop them where that work would start."""
    with (
        mock.patch("dnpqc.pipeline.export.Programs", _no_mapping),
        mock.patch("dnpqc.pipeline.plan.scenario_programs", _no_mapping),
        contextlib.suppress(WorkStarted),
    ):
        yield


def check_case(argv: list[str], folder: Path, before: set[str]) -> int:
    """Run the CLI; assert the promise: exit 0, or exit 2 with one line and no new file."""
    err = io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
        code = main(argv)
    text = err.getvalue()
    event(f"exit {code}")
    assert code in (0, 2), (code, text)
    if code == 2:
        assert text.count("\n") == 1 and text.startswith("dnpqc: error: "), text
        assert {p.name for p in folder.iterdir()} == before, text
    else:
        for path in (p for p in folder.rglob("*.json") if p.is_file()):
            json.loads(path.read_text(), parse_constant=lambda c: (_ for _ in ()).throw(c))
    return code


@fuzz_settings(250)
@given(data=st.data(), command=COMMANDS)
def test_mutated_scenarios_end_in_exit_0_or_one_line(data, command):
    argv, keep_processor = command
    raw = data.draw(mutated_scenario(keep_processor))
    with tempfile.TemporaryDirectory() as tmp, stop_at_mapping():
        folder = Path(tmp)
        scenario = folder / "s.toml"
        scenario.write_bytes(raw)
        argv = [a.format(s=scenario, d=folder) for a in argv]
        if argv[0] in ("run", "sweep"):
            argv += ["--max-work", MAX_WORK]
        check_case(argv, folder, {"s.toml"})


PATH_PARTS = st.sampled_from(
    [
        "out.json",
        "sub",
        "..",
        ".",
        "",
        "s.toml",
        "x" * 300,
        "a\0b",
        "/proc",
        "/proc/self/x",
        "/dev/null",
        "/sys",
        "/dev",
        "ü",
        "-",
        " ",
        "\n",
    ]
)


@fuzz_settings(100)
@given(parts=st.lists(PATH_PARTS, min_size=1, max_size=4), command=st.integers(0, 3))
def test_hostile_output_paths_end_in_exit_0_or_one_line(parts, command):
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        scenario = folder / "s.toml"
        scenario.write_text(toml_text({k: v for k, v in BASES[-1].items() if k != "processor"}))
        (folder / "sub").mkdir()
        target = os.path.join(*parts) if parts[0].startswith("/") else os.path.join(tmp, *parts)
        argv = [
            ["sweep", str(scenario), "--json", target, "--max-work", MAX_WORK],
            ["run", str(scenario), "--out", target, "--engines", "exact", "--workers", "1"],
            ["budget", str(scenario), "--json", target, "--processor", "line:5"],
            ["compile", str(scenario), "-o", target, "--processor", "line:5"],
        ][command]
        with stop_at_mapping():
            check_case(argv, folder, {"s.toml", "sub"})
