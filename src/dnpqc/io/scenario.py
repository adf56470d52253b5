"""Scenario files (TOML) → a validated, frozen `Scenario`.

Every key is checked: unknown keys, missing fields, wrong types and out-of-range values raise a
`ScenarioError` whose one-line message names the key, the value and what is allowed.
"""

from __future__ import annotations

import hashlib
import math
import tomllib
from dataclasses import asdict, dataclass, field, replace
from importlib import metadata, resources
from pathlib import Path
from typing import Any

import numpy as np

from ..compile.mapping import DEFAULT_OPTIMIZATION_LEVEL, DEFAULT_SEED, MappingSettings
from ..compile.noise import NoiseSettings
from ..compile.processor import (
    NATIVE_GATE_SETS,
    PRESETS,
    Processor,
    check_fits,
    make_processor,
    processor_for_spec,
)
from ..compile.program import (
    MAX_SYNTHESIS_QUBITS,
    STRATEGIES,
    CompileJob,
    CompileSettings,
    TrotterSettings,
    Workload,
    check_synthesis_size,
    synthesis_cost,
)
from ..engines.typical import TypicalSettings
from ..errors import ScenarioError
from ..limits import (
    MAX_BLOCK_ELEMENTS,
    MAX_BLOCKS,
    MAX_CYCLES,
    MAX_DESCRIPTION_CHARS,
    MAX_FIELD_T,
    MAX_FREQUENCY_HZ,
    MAX_LABEL_CHARS,
    MAX_LATTICE_RADIUS_NM,
    MAX_NUCLEI,
    MAX_POINTS,
    MAX_POSITION_NM,
    MAX_PROCESSOR_QUBITS,
    MAX_PULSE_STEPS,
    MAX_QUADRATURE_POINTS,
    MAX_SAMPLES,
    MAX_SEED,
    MAX_STEPS,
    MAX_TEXT_CHARS,
    MAX_TIME_S,
    MAX_TRAJECTORIES,
    MAX_TYPICAL_STATES,
)
from ..physics.imperfections import Imperfections
from ..physics.lattice import (
    dipolar_from_positions,
    hyperfine_from_position,
    random_cluster_nm,
    transverse_azimuth_deg,
)
from ..physics.model import Coupling, Nucleus, SpinSystem, hamiltonian
from ..physics.protocols import (
    AXIS_PHASES_RAD,
    NAMED_BLOCKS,
    BlockWait,
    CycleSchedule,
    Evolve,
    Protocol,
    Pulse,
    PulsedBlock,
    SpinLock,
    cycle_schedule,
    shortest_window_s,
)
from .output import has_control

_MISSING = object()


@dataclass(frozen=True)
class Sweep:
    """The swept drive quantity (a protocol field name) and its grid of values."""

    parameter: str
    values: tuple[float, ...]


@dataclass(frozen=True)
class Scenario:
    """Everything one run needs: the spins, the drive, the sweep, the cycles, the compiler."""

    name: str
    system: SpinSystem
    protocol: Protocol
    sweep: Sweep
    cycles: int
    trotter: TrotterSettings
    digest: str = ""
    processor: Processor | None = None
    mapping: MappingSettings = field(default_factory=MappingSettings)
    imperfections: Imperfections = field(default_factory=Imperfections)
    noise: NoiseSettings = field(default_factory=NoiseSettings)
    typical: TypicalSettings = field(default_factory=TypicalSettings)
    compile: CompileSettings = field(default_factory=CompileSettings)

    def schedule(self) -> CycleSchedule:
        """One cycle's segments with the swept quantity as the variable."""
        return cycle_schedule(
            self.protocol,
            swept=self.sweep.parameter,
            steps=self.trotter.steps,
            pulse_steps=self.trotter.pulse_steps,
        )

    def compile_job(self) -> CompileJob:
        """The compile stage's input: workload and settings."""
        return CompileJob(self.workload(), self.trotter, self.compile, self.mapping)

    def workload(self) -> Workload:
        """The physics the programs compute (the compile stage's input)."""
        return Workload(
            name=self.name,
            digest=self.digest,
            system=self.system,
            protocol=self.protocol,
            parameter=self.sweep.parameter,
            values=self.sweep.values,
            cycles=self.cycles,
            imperfections=self.imperfections,
        )


def scenario_settings(scenario: Scenario) -> dict[str, object]:
    """The whole validated scenario as JSON-ready data (every field of every part, in SI
    units, with the protocol's kind), so that a report can be repeated from its echo."""
    data = asdict(scenario)
    data["protocol"] = {"kind": scenario.protocol.kind, **data["protocol"]}
    return data


def dnpqc_version() -> str:
    """The installed dnpqc version ("unknown" when running from a bare source tree)."""
    try:
        return metadata.version("dnpqc")
    except metadata.PackageNotFoundError:
        return "unknown"


class _Table:
    """A TOML table being read: typed getters with range checks, and a check for unknown keys."""

    def __init__(self, data: Any, path: str):
        if not isinstance(data, dict):
            raise ScenarioError(f"`{path}` must be a table, got {type(data).__name__}")
        self.data = data
        self.path = path
        self.used: set[str] = set()

    def key(self, name: str) -> str:
        return f"{self.path}.{name}" if self.path else name

    def has(self, name: str) -> bool:
        return name in self.data

    def _get(self, name: str, default: Any) -> Any:
        self.used.add(name)
        if name in self.data:
            return self.data[name]
        if default is _MISSING:
            raise ScenarioError(f"missing key `{self.key(name)}`")
        return default

    def number(
        self,
        name: str,
        default: Any = _MISSING,
        *,
        minimum: float | None = None,
        strict: bool = False,
        maximum: float | None = None,
    ) -> float:
        value = self._get(name, default)
        if value is None:
            return value
        return _check_number(value, self.key(name), minimum=minimum, strict=strict, maximum=maximum)

    def integer(self, name: str, default: Any = _MISSING, *, minimum: int = 1, maximum: int) -> int:
        value = self._get(name, default)
        if value is None:
            return value
        return _check_integer(value, self.key(name), minimum=minimum, maximum=maximum)

    def string(
        self,
        name: str,
        default: Any = _MISSING,
        *,
        choices: tuple[str, ...] = (),
        max_chars: int = MAX_TEXT_CHARS,
    ) -> str:
        value = self._get(name, default)
        if not isinstance(value, str):
            raise ScenarioError(f"`{self.key(name)}` must be a string, got {_brief(value)}")
        if choices and value not in choices:
            raise ScenarioError(
                f"`{self.key(name)}` must be one of {', '.join(choices)}; got {_brief(value)}"
            )
        return check_text(value, self.key(name), max_chars=max_chars)

    def boolean(self, name: str, default: Any = _MISSING) -> bool:
        value = self._get(name, default)
        if not isinstance(value, bool):
            raise ScenarioError(f"`{self.key(name)}` must be true or false, got {_brief(value)}")
        return value

    def table(self, name: str) -> _Table | None:
        value = self._get(name, None)
        return None if value is None else _Table(value, self.key(name))

    def tables(self, name: str) -> list[_Table]:
        value = self._get(name, [])
        if not isinstance(value, list):
            raise ScenarioError(
                f"`{self.key(name)}` must be an array of tables, got {_brief(value)}"
            )
        return [_Table(item, f"{self.key(name)}[{i}]") for i, item in enumerate(value)]

    def raw(self, name: str) -> Any:
        return self._get(name, _MISSING)

    def finish(self, allowed: tuple[str, ...] | None = None) -> None:
        """Refuse keys that were not read (or, with `allowed`, keys outside that list)."""
        permitted = set(allowed) if allowed is not None else self.used
        unknown = sorted(set(self.data) - permitted)
        if unknown:
            where = f"in `{self.path}`" if self.path else "at the top level"
            raise ScenarioError(
                f"unknown key `{unknown[0]}` {where}; allowed: {', '.join(sorted(permitted))}"
            )


def _brief(value: Any) -> str:
    """`repr(value)`, cut to 60 characters for a message."""
    try:
        text = repr(value)
    except ValueError:  # an integer beyond Python's decimal conversion limit (e.g. from hex)
        return f"an integer of {value.bit_length()} bits"
    return text if len(text) <= 60 else f"{text[:57]}..."


def check_text(value: str, key: str, *, max_chars: int = MAX_TEXT_CHARS) -> str:
    """Refuse text that could break a line of output: control characters (line breaks, ESC,
    bidi overrides) and text longer than `max_chars`."""
    if has_control(value):
        raise ScenarioError(
            f"`{key}` must not contain line breaks or control characters, got {_brief(value)}"
        )
    if len(value) > max_chars:
        raise ScenarioError(f"`{key}` must be at most {max_chars} characters, got {len(value)}")
    return value


def _check_integer(value: Any, key: str, *, minimum: int, maximum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise ScenarioError(f"`{key}` must be an integer, got {_brief(value)}")
    if value < minimum:
        raise ScenarioError(f"`{key}` must be >= {minimum}, got {_brief(value)}")
    if value > maximum:
        raise ScenarioError(f"`{key}` must be <= {maximum}, got {_brief(value)}")
    return value


def _check_number(
    value: Any,
    key: str,
    *,
    minimum: float | None,
    strict: bool,
    maximum: float | None = None,
) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ScenarioError(f"`{key}` must be a number, got {_brief(value)}")
    try:
        value = float(value)
    except OverflowError:
        raise ScenarioError(
            f"`{key}` must be finite, got an integer of {value.bit_length()} bits"
        ) from None
    if not math.isfinite(value):
        raise ScenarioError(f"`{key}` must be finite, got {value}")
    if minimum is not None and (value <= minimum if strict else value < minimum):
        relation = ">" if strict else ">="
        raise ScenarioError(f"`{key}` must be {relation} {minimum:g}, got {value:g}")
    if maximum is not None and abs(value) > maximum:
        raise ScenarioError(f"`{key}` must be at most {maximum:g} in magnitude, got {value:g}")
    return value


_TOP_KEYS = (
    "name",
    "description",
    "spins",
    "drive",
    "sweep",
    "cycle",
    "trotter",
    "processor",
    "imperfections",
    "noise",
    "typical",
    "compile",
)


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario file."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise ScenarioError(f"cannot read scenario file {str(path)!r}: {exc.strerror}") from None
    except UnicodeDecodeError as exc:
        raise ScenarioError(
            f"scenario file {str(path)!r} is not UTF-8 text (byte {exc.start}); a scenario is "
            "a TOML text file"
        ) from None
    return parse_scenario(text, default_name=path.stem)


def demo_scenario() -> Scenario:
    """The bundled demo: an invented cluster of four 13C nuclei (see scenarios/demo.toml)."""
    text = resources.files("dnpqc").joinpath("scenarios/demo.toml").read_text(encoding="utf-8")
    return parse_scenario(text, default_name="demo")


def parse_scenario(text: str, *, default_name: str = "scenario") -> Scenario:
    """Validate TOML text into a `Scenario`."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ScenarioError(f"scenario is not valid TOML: {exc}") from None
    except ValueError as exc:  # e.g. an integer beyond Python's 4300-digit conversion limit
        raise ScenarioError(f"scenario is not valid TOML: {exc}") from None
    except RecursionError:
        raise ScenarioError(
            "scenario is not valid TOML: arrays or tables nested too deep"
        ) from None
    return scenario_from_dict(data, default_name=default_name, digest=_digest(text))


def _digest(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]


def scenario_from_dict(
    data: dict[str, Any], *, default_name: str = "scenario", digest: str = ""
) -> Scenario:
    """Validate an already-parsed scenario mapping (same keys as the TOML file)."""
    top = _Table(data, "")
    top.finish(_TOP_KEYS)
    name = top.string("name", default_name)
    if not name.strip():
        raise ScenarioError("`name` must not be empty")
    top.string("description", "", max_chars=MAX_DESCRIPTION_CHARS)
    system = _read_spins(_required_table(top, "spins"))
    drive = _required_table(top, "drive")
    sweep_table = top.table("sweep")
    swept = _swept_parameter(sweep_table, drive)
    cycle = top.table("cycle") or _Table({}, "cycle")
    protocol = _read_protocol(drive, cycle, swept)
    count = cycle.integer("count", 1, maximum=MAX_CYCLES)
    cycle.finish()
    trotter = _read_trotter(top.table("trotter") or _Table({}, "trotter"))
    sweep = _read_sweep(sweep_table, protocol, swept or _DEFAULT_SWEPT[protocol.kind])
    _check_sweep_values(protocol, sweep)
    if math.isnan(getattr(protocol, sweep.parameter)):
        # a swept key left out of [drive]/[cycle]: record the first grid value
        protocol = replace(protocol, **{sweep.parameter: sweep.values[0]})
    processor, mapping = _read_processor(top.table("processor"))
    if processor is not None:
        check_fits(processor, system.num_qubits)
    imperfections = _read_imperfections(top.table("imperfections"))
    noise = _read_noise(top.table("noise"))
    typical_table = top.table("typical") or _Table({}, "typical")
    d = TypicalSettings()
    typical = TypicalSettings(
        states=typical_table.integer("states", d.states, minimum=2, maximum=MAX_TYPICAL_STATES),
        seed=typical_table.integer("seed", d.seed, minimum=0, maximum=MAX_SEED),
    )
    typical_table.finish()
    compile_settings = _read_compile(top.table("compile") or _Table({}, "compile"))
    if compile_settings.strategy == "cycle-unitary":
        check_synthesis_size(system.num_qubits)
    if not digest:
        digest = _digest(repr(sorted(data.items())))
    return Scenario(
        name,
        system,
        protocol,
        sweep,
        count,
        trotter,
        digest,
        processor,
        mapping,
        imperfections,
        noise,
        typical,
        compile_settings,
    )


def _read_compile(t: _Table) -> CompileSettings:
    """`[compile]`: strategy (trotter | cycle-unitary | auto) and, for auto, `target_error`."""
    out = CompileSettings(
        strategy=t.string("strategy", "trotter", choices=STRATEGIES),
        target_error=t.number("target_error", None, minimum=0.0, strict=True),
    )
    t.finish()
    return out


def _read_imperfections(t: _Table | None) -> Imperfections:
    """`[imperfections]`: Gaussian σ of the NV detuning (Hz) and of the relative drive error."""
    if t is None:
        return Imperfections()
    d = Imperfections()
    out = Imperfections(
        detuning_sigma_hz=t.number(
            "detuning_sigma_hz", d.detuning_sigma_hz, minimum=0.0, maximum=MAX_FREQUENCY_HZ
        ),
        drive_sigma_rel=t.number("drive_sigma_rel", d.drive_sigma_rel, minimum=0.0),
        method=t.string("method", d.method, choices=("quadrature", "sampling")),
        points=t.integer("points", d.points, minimum=1, maximum=MAX_QUADRATURE_POINTS),
        samples=t.integer("samples", d.samples, minimum=2, maximum=MAX_SAMPLES),
        seed=t.integer("seed", d.seed, minimum=0, maximum=MAX_SEED),
    )
    if out.drive_sigma_rel >= 0.5:
        raise ScenarioError(
            "`imperfections.drive_sigma_rel` must be < 0.5 (a relative error), "
            f"got {out.drive_sigma_rel:g}"
        )
    t.finish()
    return out


def _read_noise(t: _Table | None) -> NoiseSettings:
    """`[noise]`: error scale, simulation method, trajectories, seed, idle noise."""
    if t is None:
        return NoiseSettings()
    d = NoiseSettings()
    out = NoiseSettings(
        scale=t.number("scale", d.scale, minimum=0.0, maximum=1e6),
        method=t.string("method", d.method, choices=("auto", "density_matrix", "trajectories")),
        trajectories=t.integer("trajectories", d.trajectories, minimum=2, maximum=MAX_TRAJECTORIES),
        seed=t.integer("seed", d.seed, minimum=0, maximum=MAX_SEED),
        idle=t.boolean("idle", d.idle),
    )
    t.finish()
    return out


def _required_table(parent: _Table, name: str) -> _Table:
    table = parent.table(name)
    if table is None:
        raise ScenarioError(f"missing table `[{parent.key(name)}]`")
    return table


def _read_spins(spins: _Table) -> SpinSystem:
    field_t = spins.number("field_t", minimum=0.0, strict=True, maximum=MAX_FIELD_T)
    tables = spins.tables("nuclei")
    if len(tables) > MAX_NUCLEI:
        raise ScenarioError(
            f"`spins.nuclei` lists {len(tables)} nuclei; at most {MAX_NUCLEI} are allowed"
        )
    nuclei = [_read_nucleus(t) for t in tables]
    lattice = spins.table("lattice")
    if lattice is not None:
        nuclei += _read_lattice(lattice, taken={n.label for n in nuclei})
    if not nuclei:
        raise ScenarioError(
            "`spins` needs at least one nucleus: `[[spins.nuclei]]` or `[spins.lattice]`"
        )
    if len(nuclei) > MAX_NUCLEI:
        raise ScenarioError(
            f"`spins` has {len(nuclei)} nuclei (with the lattice's); at most {MAX_NUCLEI} are "
            "allowed: set `spins.lattice.max_nuclei` or a smaller radius"
        )
    labels = [n.label for n in nuclei]
    duplicates = sorted({x for x in labels if labels.count(x) > 1})
    if duplicates:
        raise ScenarioError(f"`spins.nuclei.label` must be unique; {duplicates[0]!r} repeats")
    dipolar = spins.boolean("dipolar", True)
    couplings = _position_couplings(nuclei) if dipolar else {}
    couplings.update(_read_couplings(spins.tables("couplings"), labels))
    for (j, k), d_hz in couplings.items():
        if not abs(d_hz) <= MAX_FREQUENCY_HZ:
            raise ScenarioError(
                f"the coupling of {labels[j]!r} and {labels[k]!r} is {d_hz:g} Hz, beyond "
                f"{MAX_FREQUENCY_HZ:g} Hz: the two positions are too close"
            )
    spins.finish()
    return SpinSystem(
        field_t=field_t,
        nuclei=tuple(nuclei),
        couplings=tuple(Coupling(j, k, d) for (j, k), d in sorted(couplings.items()) if d != 0.0),
    )


def _read_nucleus(t: _Table) -> Nucleus:
    label = t.string("label", max_chars=MAX_LABEL_CHARS)
    if not label.strip():
        raise ScenarioError(f"`{t.key('label')}` must not be empty")
    has_hf = t.has("a_par_hz") or t.has("a_perp_hz")
    has_pos = t.has("position_nm")
    if has_hf == has_pos:
        which = "both" if has_hf else "neither"
        raise ScenarioError(
            f"`{t.path}` ({label!r}) has {which} of `a_par_hz`+`a_perp_hz` and `position_nm`; "
            "give exactly one of them"
        )
    if has_pos:
        if t.has("azimuth_deg"):
            raise ScenarioError(
                f"`{t.key('azimuth_deg')}` ({label!r}) goes with `a_par_hz`+`a_perp_hz`; "
                "a nucleus at `position_nm` takes the azimuth of its position"
            )
        position = _read_vector(t.raw("position_nm"), t.key("position_nm"))
        nucleus = _nucleus_at(label, position)
        if max(abs(nucleus.a_par_hz), abs(nucleus.a_perp_hz)) > MAX_FREQUENCY_HZ:
            raise ScenarioError(
                f"`{t.key('position_nm')}` {list(position)} lies so close to the NV that the "
                f"hyperfine coupling exceeds {MAX_FREQUENCY_HZ:g} Hz"
            )
    else:
        nucleus = Nucleus(
            label,
            t.number("a_par_hz", maximum=MAX_FREQUENCY_HZ),
            t.number("a_perp_hz", maximum=MAX_FREQUENCY_HZ),
            azimuth_deg=t.number("azimuth_deg", 0.0),
        )
    t.finish()
    return nucleus


def _nucleus_at(label: str, position_nm: tuple[float, float, float]) -> Nucleus:
    """A nucleus with the point-dipole hyperfine coupling of its position (full secular row)."""
    a_par, a_perp = hyperfine_from_position(position_nm)
    return Nucleus(label, a_par, a_perp, position_nm, transverse_azimuth_deg(position_nm))


def _read_vector(value: Any, key: str) -> tuple[float, float, float]:
    if not isinstance(value, list) or len(value) != 3:
        raise ScenarioError(
            f"`{key}` must be a list of three numbers [x, y, z] in nm, got {_brief(value)}"
        )
    vec = tuple(
        _check_number(v, key, minimum=None, strict=False, maximum=MAX_POSITION_NM) for v in value
    )
    if not any(vec):
        raise ScenarioError(f"`{key}` must not be the NV site [0, 0, 0]")
    return vec


def _read_lattice(t: _Table, taken: set[str]) -> list[Nucleus]:
    positions = random_cluster_nm(
        radius_nm=t.number("radius_nm", minimum=0.0, strict=True, maximum=MAX_LATTICE_RADIUS_NM),
        seed=t.integer("seed", minimum=0, maximum=MAX_SEED),
        abundance=t.number("abundance", 0.0107, minimum=0.0, strict=True),
        min_distance_nm=t.number("min_distance_nm", 0.0, minimum=0.0),
        max_nuclei=t.integer("max_nuclei", None, minimum=1, maximum=MAX_NUCLEI),
    )
    prefix = t.string("label_prefix", "L", max_chars=MAX_LABEL_CHARS - 6)
    t.finish()
    if not positions:
        raise ScenarioError(
            f"`{t.path}` produced no 13C site; raise `radius_nm` or `abundance`, or change `seed`"
        )
    nuclei = []
    for i, pos in enumerate(positions, start=1):
        label = f"{prefix}{i}"
        if label in taken:
            raise ScenarioError(f"`{t.key('label_prefix')}` label {label!r} clashes with a nucleus")
        nuclei.append(_nucleus_at(label, pos))
    return nuclei


def _position_couplings(nuclei: list[Nucleus]) -> dict[tuple[int, int], float]:
    placed = [(i, n.position_nm) for i, n in enumerate(nuclei) if n.position_nm is not None]
    return {
        (i, j): dipolar_from_positions(p, q)
        for a, (i, p) in enumerate(placed)
        for (j, q) in placed[a + 1 :]
    }


def _read_couplings(tables: list[_Table], labels: list[str]) -> dict[tuple[int, int], float]:
    couplings: dict[tuple[int, int], float] = {}
    for t in tables:
        pair = t.raw("pair")
        if not (
            isinstance(pair, list) and len(pair) == 2 and all(isinstance(p, str) for p in pair)
        ):
            raise ScenarioError(f"`{t.key('pair')}` must be two nucleus labels, got {_brief(pair)}")
        for p in pair:
            if p not in labels:
                raise ScenarioError(
                    f"`{t.key('pair')}` names unknown nucleus {p!r}; known: {', '.join(labels)}"
                )
        if pair[0] == pair[1]:
            raise ScenarioError(f"`{t.key('pair')}` must name two different nuclei, got {pair!r}")
        key = tuple(sorted((labels.index(pair[0]), labels.index(pair[1]))))
        d_hz = t.number("d_hz", maximum=MAX_FREQUENCY_HZ)
        t.finish()
        couplings[key] = d_hz
    return couplings


_SWEEPABLE = {"spin-lock": SpinLock.sweepable, "pulsed": PulsedBlock.sweepable}
#: Largest magnitude of each drive quantity (also of its sweep start and stop).
_MAGNITUDES = {
    "rabi_hz": MAX_FREQUENCY_HZ,
    "detuning_hz": MAX_FREQUENCY_HZ,
    "interaction_time_s": MAX_TIME_S,
    "tau_s": MAX_TIME_S,
}
_DEFAULT_SWEPT = {"spin-lock": "rabi_hz", "pulsed": "tau_s"}


def _swept_parameter(sweep: _Table | None, drive: _Table) -> str | None:
    """The swept key named in `[sweep]`, or None without a sweep table."""
    kind = drive.string("protocol", choices=tuple(_SWEEPABLE))
    if sweep is None:
        return None
    return sweep.string("parameter", choices=_SWEEPABLE[kind])


def _read_protocol(drive: _Table, cycle: _Table, swept: str | None) -> Protocol:
    """The drive protocol; a key that `[sweep]` sweeps may be left out of `[drive]`/`[cycle]`."""
    kind = drive.string("protocol")

    def drive_value(name: str, default: Any = _MISSING, **limits: Any) -> float:
        if name == swept and not drive.has(name):
            drive.used.add(name)
            return math.nan  # filled in per sweep point
        return drive.number(name, default, maximum=_MAGNITUDES[name], **limits)

    detuning = drive_value("detuning_hz", 0.0)
    if kind == "spin-lock":
        rabi = drive_value("rabi_hz", minimum=0.0)
        if swept == "interaction_time_s" and not cycle.has("interaction_time_s"):
            cycle.used.add("interaction_time_s")
            time_s = math.nan
        else:
            time_s = cycle.number(
                "interaction_time_s", minimum=0.0, strict=True, maximum=MAX_TIME_S
            )
        drive.finish(("protocol", "rabi_hz", "detuning_hz"))
        cycle.finish(("count", "interaction_time_s"))
        return SpinLock(rabi_hz=rabi, detuning_hz=detuning, interaction_time_s=time_s)
    sequence = drive.string("sequence", "pulsepol", choices=(*NAMED_BLOCKS, "custom"))
    if sequence == "custom":
        elements = _read_block(drive.tables("block"))
    elif drive.has("block"):
        raise ScenarioError('`drive.block` needs `drive.sequence = "custom"`')
    else:
        elements = NAMED_BLOCKS[sequence]
    tau = drive_value("tau_s", minimum=0.0, strict=True)
    pulse_rabi = drive.number(
        "pulse_rabi_hz", None, minimum=0.0, strict=True, maximum=MAX_FREQUENCY_HZ
    )
    blocks = cycle.integer("blocks", minimum=1, maximum=MAX_BLOCKS)
    drive.finish(("protocol", "sequence", "block", "tau_s", "pulse_rabi_hz", "detuning_hz"))
    cycle.finish(("count", "blocks"))
    return PulsedBlock(sequence, elements, tau, blocks, detuning, pulse_rabi)


def _read_block(tables: list[_Table]) -> tuple[Pulse | BlockWait, ...]:
    if len(tables) > MAX_BLOCK_ELEMENTS:
        raise ScenarioError(
            f"`drive.block` has {len(tables)} elements; at most {MAX_BLOCK_ELEMENTS} are allowed"
        )
    elements: list[Pulse | BlockWait] = []
    for t in tables:
        if t.has("wait"):
            elements.append(BlockWait(t.number("wait", minimum=0.0, strict=True, maximum=1e6)))
            t.finish(("wait",))
            continue
        angle = math.radians(t.number("angle_deg", minimum=0.0, strict=True, maximum=1e6))
        if t.has("axis") == t.has("phase_deg"):
            raise ScenarioError(
                f"`{t.path}` needs exactly one of `axis` (x, y, -x, -y) and `phase_deg`, "
                "or `wait` for a free window"
            )
        if t.has("axis"):
            phase = AXIS_PHASES_RAD[t.string("axis", choices=tuple(AXIS_PHASES_RAD))]
        else:
            phase = math.radians(t.number("phase_deg", maximum=1e6))
        t.finish(("angle_deg", "axis", "phase_deg"))
        elements.append(Pulse(angle, phase))
    if not any(isinstance(e, BlockWait) for e in elements) or not any(
        isinstance(e, Pulse) for e in elements
    ):
        raise ScenarioError("`drive.block` needs at least one pulse and at least one `wait`")
    total = sum(e.fraction for e in elements if isinstance(e, BlockWait))
    if not math.isclose(total, 1.0, rel_tol=1e-9):
        raise ScenarioError(
            f"`drive.block` waits are fractions of the block length `drive.tau_s` and must sum "
            f"to 1, got {total:g}"
        )
    return tuple(elements)


def _read_trotter(t: _Table) -> TrotterSettings:
    defaults = TrotterSettings()
    settings = TrotterSettings(
        steps=t.integer("steps", defaults.steps, maximum=MAX_STEPS),
        order=t.integer("order", defaults.order, maximum=MAX_STEPS),
        pulse_steps=t.integer("pulse_steps", defaults.pulse_steps, maximum=MAX_PULSE_STEPS),
        weak_every=t.integer("weak_every", defaults.weak_every, minimum=1, maximum=MAX_STEPS),
    )
    if settings.order not in (1, 2):
        raise ScenarioError(f"`trotter.order` must be 1 or 2, got {settings.order}")
    t.finish()
    return settings


_PROCESSOR_NUMBERS = (
    "time_1q_s",
    "time_2q_s",
    "error_1q",
    "error_2q",
    "time_reset_s",
    "time_measure_s",
    "error_readout",
    "error_reset",
)


def _read_processor(t: _Table | None) -> tuple[Processor | None, MappingSettings]:
    """The `[processor]` table: topology or edges (or a preset), figures, mapping settings."""
    if t is None:
        return None, MappingSettings()
    settings: dict[str, Any] = {}
    if t.has("preset"):
        settings["preset"] = t.string("preset", choices=tuple(PRESETS))
    if t.has("topology") and t.has("edges"):
        raise ScenarioError("`processor` takes `topology` or `edges`, not both")
    if t.has("preset") and (t.has("topology") or t.has("edges")):
        graph = "topology" if t.has("topology") else "edges"
        raise ScenarioError(
            f"`processor` takes `preset` or `{graph}`, not both: a preset has its own graph "
            "(to use its figures on another graph, give `--processor TOPOLOGY`)"
        )
    if t.has("topology"):
        settings["topology"] = t.string("topology")
    if t.has("edges"):
        settings["edges"] = _read_edges(t.raw("edges"), t.key("edges"))
    if t.has("native_gates"):
        settings["native_gates"] = t.string("native_gates", choices=tuple(NATIVE_GATE_SETS))
    for key in _PROCESSOR_NUMBERS:
        if t.has(key):
            settings[key] = t.number(key, minimum=0.0, maximum=MAX_TIME_S)
    for key in ("t1_s", "t2_s"):
        if t.has(key):
            value = t.raw(key)
            items = value if isinstance(value, list) else [value]
            t.used.add(key)
            if len(items) > MAX_PROCESSOR_QUBITS:
                raise ScenarioError(
                    f"`{t.key(key)}` lists {len(items)} values; at most {MAX_PROCESSOR_QUBITS}"
                )
            settings[key] = [
                _check_number(v, t.key(key), minimum=0.0, strict=True, maximum=1e6) for v in items
            ]
            if not isinstance(value, list):
                settings[key] = settings[key][0]
    compare = t.raw("compare") if t.has("compare") else []
    if not (
        isinstance(compare, list)
        and len(compare) <= 20
        and all(isinstance(c, str) for c in compare)
    ):
        raise ScenarioError(
            f"`processor.compare` must be a list of at most 20 topology strings, got "
            f"{_brief(compare)}"
        )
    level = t.integer("optimization_level", DEFAULT_OPTIMIZATION_LEVEL, minimum=0, maximum=MAX_SEED)
    if level > 3:
        raise ScenarioError(f"`processor.optimization_level` must be 0..3, got {level}")
    seed = t.integer("seed", DEFAULT_SEED, minimum=0, maximum=MAX_SEED)
    t.finish()
    processor = make_processor(settings)
    if compare:
        processor = replace(processor, compare=tuple(compare))
        for spec in compare:
            processor_for_spec(spec, processor)  # validate now, not halfway through a run
    return processor, MappingSettings(level, seed)


def _read_edges(value: Any, key: str) -> list[tuple[int, int]]:
    ok = (
        isinstance(value, list)
        and value
        and all(
            isinstance(e, list)
            and len(e) == 2
            and all(isinstance(q, int) and not isinstance(q, bool) and q >= 0 for q in e)
            for e in value
        )
    )
    if not ok:
        raise ScenarioError(
            f"`{key}` must be a list of qubit pairs [[0, 1], [1, 2], ...], got {_brief(value)}"
        )
    largest = max(max(e) for e in value)
    if largest >= MAX_PROCESSOR_QUBITS or len(value) > MAX_PROCESSOR_QUBITS**2:
        raise ScenarioError(
            f"`{key}` names qubit {_brief(largest)}; a processor has at most "
            f"{MAX_PROCESSOR_QUBITS} qubits (0..{MAX_PROCESSOR_QUBITS - 1})"
        )
    return [tuple(e) for e in value]


def _read_sweep(t: _Table | None, protocol: Protocol, swept: str) -> Sweep:
    if t is None:
        return Sweep(swept, (float(getattr(protocol, swept)),))
    start = t.number("start", maximum=_MAGNITUDES[swept])
    stop = t.number("stop", maximum=_MAGNITUDES[swept])
    points = t.integer("points", minimum=1, maximum=MAX_POINTS)
    t.finish()
    if points == 1 and start != stop:
        raise ScenarioError(
            f"`sweep.points` = 1 needs `sweep.start` == `sweep.stop`, got {start:g}, {stop:g}"
        )
    return Sweep(swept, tuple(float(v) for v in np.linspace(start, stop, points)))


def check_point(scenario: Scenario, value: float, key: str = "--bind") -> float:
    """Validate one value of the swept quantity (e.g. for `--bind`); returns it."""
    limit = _MAGNITUDES[scenario.sweep.parameter]
    if not abs(value) <= limit:  # also refuses NaN
        raise ScenarioError(
            f"`{key}` must be a finite value of `{scenario.sweep.parameter}` of magnitude at most "
            f"{limit:g}, got {value:g}"
        )
    try:
        _check_sweep_values(scenario.protocol, Sweep(scenario.sweep.parameter, (value,)))
    except ScenarioError as exc:
        raise ScenarioError(f"`{key}` {value:g}: {exc}") from None
    return value


def _check_sweep_values(protocol: Protocol, sweep: Sweep) -> None:
    values = np.asarray(sweep.values)
    name = sweep.parameter
    if name == "rabi_hz" and values.min() < 0:
        raise ScenarioError(f"swept `rabi_hz` must be >= 0, got {values.min():g}")
    if name in ("tau_s", "interaction_time_s") and values.min() <= 0:
        raise ScenarioError(f"swept `{name}` must be > 0, got {values.min():g}")
    if isinstance(protocol, PulsedBlock) and protocol.pulse_rabi_hz:
        tau_min = values.min() if name == "tau_s" else protocol.tau_s
        window = shortest_window_s(protocol, tau_min)
        if window < 0:
            raise ScenarioError(
                f"`drive.tau_s` = {tau_min:g} s is too short for finite pulses at "
                f"`drive.pulse_rabi_hz` = {protocol.pulse_rabi_hz:g}: a free window would last "
                f"{window:g} s; raise tau_s or pulse_rabi_hz"
            )


def steps_per_cycle(scenario: Scenario) -> int:
    """Trotter steps of one cycle: the block's steps times its repeats (a pulse counts one)."""
    schedule = scenario.schedule()

    def count(segments) -> int:
        return sum(getattr(seg, "steps", 1) for seg in segments)

    return count(schedule.prepare) + schedule.repeats * count(schedule.block)


def gates_per_step(system: SpinSystem) -> int:
    """About the rotations of one Trotter step: drive and detuning, 3 per nucleus, 4 per pair."""
    return 3 + 3 * system.num_nuclei + 4 * len(system.couplings)


def program_gates(scenario: Scenario) -> int:
    """Gates of the compiled program, about: cycles × steps per cycle × gates per step (the
    product formula), or cycles × 3 × the synthesized cycle's CX count (cycle-unitary); the
    larger of the two for `auto`."""
    trotter = scenario.cycles * steps_per_cycle(scenario) * gates_per_step(scenario.system)
    synthesized = scenario.cycles * 3 * synthesis_cost(scenario.system.num_qubits)
    strategy = scenario.compile.strategy
    if strategy == "trotter":
        return trotter
    if strategy == "cycle-unitary":
        return synthesized
    fits = scenario.system.num_qubits <= MAX_SYNTHESIS_QUBITS
    return max(trotter, synthesized) if fits else trotter


def typical_products_per_cycle(scenario: Scenario) -> float:
    """Sparse matrix-vector products of one cycle in the typical engine, at the worse end of
    the sweep. Its Chebyshev series needs about 2π·t·r + 8 of them per window, with r the
    Gershgorin radius of H, at most Σ|Pauli coeff.| (Tal-Ezer & Kosloff 1984). Unlike the
    Trotter steps, this grows with the window's length."""
    schedule = scenario.schedule()

    def products(segments, x: float) -> float:
        total = 0.0
        for seg in segments:
            total += 1.0
            if isinstance(seg, Evolve):
                h = hamiltonian(
                    scenario.system, rabi_hz=seg.rabi_hz.at(x), detuning_hz=seg.detuning_hz.at(x)
                )
                total += 2 * math.pi * abs(seg.duration_s.at(x)) * np.abs(h.coeffs).sum() + 8
        return total

    ends = (scenario.sweep.values[0], scenario.sweep.values[-1])
    return max(
        products(schedule.prepare, x) + schedule.repeats * products(schedule.block, x) for x in ends
    )


def sweep_work(scenario: Scenario, engine: str) -> int:
    """Work of one engine over the sweep, in state-element updates: points × imperfection
    nodes × program gates × the state's size (4^q for a density matrix); for the typical
    engine, its sparse products × terms × states × 2^q instead."""
    q = scenario.system.num_qubits
    points = len(scenario.sweep.values) * len(scenario.imperfections.nodes())
    if engine == "typical":
        per_point = (
            scenario.cycles
            * typical_products_per_cycle(scenario)
            * gates_per_step(scenario.system)
            * scenario.typical.states
            * 2**q
        )
        return int(points * per_point)
    return points * program_gates(scenario) * 4**q
