"""Command line: `dnpqc run`, `sweep`, `budget`, `compile`. User errors: one line, exit code 2."""

from __future__ import annotations

import argparse
import itertools
import json
import os
import sys
from dataclasses import replace
from pathlib import Path

from tqdm import tqdm

from . import codesign, output, qasm, report, verdicts
from .budget import gate_budget
from .counts import read_counts
from .engines import ENGINE_ALIASES, ENGINES, engine_name, simulate_program
from .engines.noisy import BASELINE_ENGINE
from .errors import RunError, ScenarioError
from .folding import BASELINE, BASELINE_KINDS, PROGRAM, check_scale, program_variants
from .job import (
    RunOutcome,
    engine_options,
    run_scenario,
    sampled_counts,
    scenario_processor,
    scenario_programs,
    simulate,
)
from .limits import DEFAULT_MAX_WORK, check_program_size, check_work
from .mitigation import (
    EXTRAPOLATIONS,
    MitigationSettings,
    available,
    check_available,
    parse_mitigations,
)
from .noise import with_nv_flips
from .processor import Processor, make_processor, processor_for_spec
from .program import Program
from .resources import cores, threads_per_worker
from .results import saturation
from .scenario import (
    Scenario,
    check_point,
    demo_scenario,
    load_scenario,
    program_gates,
    sweep_work,
)
from .store import STORE_NAME, ResultsStore, check_unlocked, unfinished_digest, unfinished_run
from .strategy import Programs, approximation_error
from .sweep import Interrupted, check_scheduler_address

EXIT_USAGE = 2
EXIT_INTERRUPTED = 130

#: The files `dnpqc run` writes into its --out folder (besides the results store).
RUN_FILES = ("report.json", "sweep.csv", "spectrum.png", "buildup.png", "engines.png", "budget.png")

#: Runs above this much work (about a minute) print their estimate in the summary.
LONG_RUN_WORK = 10**10


class _Parser(argparse.ArgumentParser):
    """argparse with one-line errors."""

    def error(self, message: str) -> None:  # type: ignore[override]
        raise ScenarioError(message)


def _max_work(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not value > 0:
        raise argparse.ArgumentTypeError(f"`--max-work` must be a number > 0, got {text!r}")
    return value


def _add_max_work(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--max-work",
        type=_max_work,
        default=DEFAULT_MAX_WORK,
        help=f"refuse runs estimated above this much work (default {DEFAULT_MAX_WORK:g} "
        "state-element updates: points x nodes x gates x state size)",
    )


def _parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="dnpqc", description="NV-centre DNP as quantum-circuit programs")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)
    run = sub.add_parser(
        "run", help="simulate a scenario with the exact and trotter engines, write a report"
    )
    run.add_argument("scenario", nargs="?", help="scenario TOML file (default: the bundled demo)")
    run.add_argument("--out", default=None, help="output folder (default: results/<scenario name>)")
    run.add_argument(
        "--workers",
        type=int,
        default=None,
        help="local worker processes (default 1: measured fastest here, see README Performance)",
    )
    run.add_argument(
        "--scheduler",
        default=None,
        help="address of a Dask scheduler (e.g. tcp://10.0.0.5:8786) to run on",
    )
    run.add_argument(
        "--resume",
        action="store_true",
        help="continue a stopped run in --out, computing only missing points",
    )
    run.add_argument("--fresh", action="store_true", help="discard a previous run in --out")
    run.add_argument(
        "--engines",
        default=None,
        help="comma-separated engines (default: exact,trotter, plus noisy when the "
        "scenario has a [processor] table; noisy brings its zero-transfer baseline "
        "noisy-baseline)",
    )
    run.add_argument(
        "--counts",
        default=None,
        help="measured counts of the exported programs (JSON, see README 'From program to "
        "measured answer'): adds the engine `measured` to the report",
    )
    run.add_argument(
        "--mitigate",
        default="auto",
        help="with --counts: auto (every mitigation the counts allow), none, or a list of "
        "readout,baseline,zne",
    )
    run.add_argument(
        "--extrapolation",
        default="richardson",
        choices=EXTRAPOLATIONS,
        help="zero-noise extrapolation fit (default richardson)",
    )
    budget = sub.add_parser("budget", help="gate budget of the program on a processor")
    budget.add_argument("scenario", help="scenario TOML file")
    budget.add_argument(
        "--processor",
        default=None,
        help="topology (e.g. grid:3x3) or preset; replaces the scenario's topology",
    )
    budget.add_argument("--json", default=None, help="write the budget JSON here")
    budget.add_argument(
        "--compare",
        default=None,
        help="comma-separated topologies to compare, e.g. line:7,grid:3x3,star:7",
    )
    budget.add_argument(
        "--target-error",
        type=float,
        default=None,
        help="advise the fewest Trotter steps with Trotter error below this; with "
        'strategy "auto", choose the fewest two-qubit gates with approximation error below it',
    )
    budget.add_argument(
        "--target-stderr",
        type=float,
        default=0.01,
        help="standard error on P that the shot plan aims at (default 0.01)",
    )
    budget.add_argument(
        "--no-shots",
        action="store_true",
        help="skip the shot plan (it runs the exact and noisy engines)",
    )
    budget.add_argument(
        "--scaling",
        action="store_true",
        help="2q gates per cycle vs number of nuclei (1..12) on each graph kind",
    )
    comp = sub.add_parser("compile", help="OpenQASM 3 of the mapped program for hardware")
    comp.add_argument("scenario", help="scenario TOML file")
    comp.add_argument("--processor", default=None, help="topology or preset (as for budget)")
    comp.add_argument(
        "-o",
        "--output",
        default=None,
        help="write the program here (default: stdout); a per-value strategy (cycle-unitary) "
        "writes one program per sweep value into this folder",
    )
    comp.add_argument(
        "--bind",
        type=float,
        default=None,
        help="a value of the swept quantity: write one fully numeric program",
    )
    comp.add_argument(
        "--measure-each-cycle",
        action="store_true",
        help="measure the nuclei after every cycle into registers cycle_<c>",
    )
    comp.add_argument(
        "--baseline",
        nargs="?",
        const="uncoupled",
        default=None,
        choices=BASELINE_KINDS,
        help="write the baseline program: the same program with every coupling set to zero "
        "(uncoupled, the default), or with `mixed-nv` the 2^C copies of the program with the NV "
        "flipped after its reset in each pattern of cycles (into -o DIR; pool their counts)",
    )
    comp.add_argument(
        "--fold",
        type=_scale,
        default=1,
        help="write the program with each two-qubit gate G folded to G(G†G)^k, scale 2k+1 "
        "(3, 5, ...), for zero-noise extrapolation",
    )
    sweep = sub.add_parser("sweep", help="one engine over the sweep, JSON out")
    sweep.add_argument("scenario", help="scenario TOML file")
    sweep.add_argument("--engine", default="exact", choices=(*ENGINES, *ENGINE_ALIASES))
    sweep.add_argument("--json", default=None, help="write the JSON here (default: stdout)")
    sweep.add_argument(
        "--shots",
        type=int,
        default=None,
        help="with --counts-out: shots per program and sweep value",
    )
    sweep.add_argument(
        "--counts-out",
        default=None,
        help="write sampled counts of the exported programs here (the format of run --counts)",
    )
    sweep.add_argument("--seed", type=int, default=0, help="seed of the sampled counts")
    sweep.add_argument(
        "--measure-each-cycle",
        action="store_true",
        help="with --counts-out: sample the programs that read the nuclei after every cycle",
    )
    sweep.add_argument(
        "--baseline",
        nargs="?",
        const="uncoupled",
        default=None,
        choices=BASELINE_KINDS,
        help="with --counts-out: also sample the baseline program (couplings zero; or "
        "mixed-nv: the pooled programs with the NV mixed)",
    )
    sweep.add_argument(
        "--fold",
        default=None,
        help="with --counts-out: also sample the programs folded to these scales, e.g. 3,5",
    )
    for command in (run, sweep):
        _add_max_work(command)
    return parser


def _scale(text: str) -> int:
    try:
        return check_scale(int(text))
    except (ValueError, ScenarioError):
        raise argparse.ArgumentTypeError(
            f"`--fold` must be an odd whole number >= 1 (3, 5, ...), got {text!r}"
        ) from None


def _scales(text: str | None) -> tuple[int, ...]:
    if text is None:
        return ()
    parts = [t.strip() for t in text.split(",") if t.strip()]
    try:
        scales = tuple(sorted({check_scale(int(t)) for t in parts}))
    except ValueError:
        scales = ()
    if not scales or len(scales) != len(parts):
        raise ScenarioError(
            f"`--fold` must list distinct odd whole numbers >= 3, e.g. 3,5; got {text!r}"
        )
    return scales


def _read_json(path: str, option: str) -> object:
    """A strict JSON file (no NaN or Infinity), or a one-line refusal."""

    def refuse(constant: str) -> None:
        raise ValueError(f"{constant} is not JSON")

    try:
        with open(path, encoding="utf-8") as handle:
            return json.load(handle, parse_constant=refuse)
    except OSError as exc:
        raise ScenarioError(f"`{option}`: cannot read {path!r}: {exc.strerror}") from None
    except (ValueError, UnicodeDecodeError) as exc:
        raise ScenarioError(f"`{option}`: {path!r} is not valid JSON: {exc}") from None


def _measured(args, scenario: Scenario):
    """The checked counts of `--counts` and the mitigation to apply, or None."""
    if args.counts is None:
        return None
    counts = read_counts(_read_json(args.counts, "--counts"), scenario.workload())
    steps = parse_mitigations(args.mitigate)
    steps = available(counts) if steps is None else steps
    check_available(steps, counts)
    return counts, MitigationSettings(steps, args.extrapolation)


def _scenario(path: str | None) -> Scenario:
    return demo_scenario() if path is None else load_scenario(path)


def _terminal_columns(stream) -> int:
    """The terminal's width, or 80 when it reports none (0 columns, or no size at all)."""
    try:
        columns = os.get_terminal_size(stream.fileno()).columns
    except (OSError, ValueError, AttributeError):
        columns = 0
    return columns if columns > 0 else 80


def _progress(total: int | None, desc: str, stream=None) -> tqdm:
    """A progress bar on a terminal (stderr), nothing otherwise; `total` None: a counter."""
    stream = sys.stderr if stream is None else stream
    if not stream.isatty():
        return tqdm(total=total, disable=True)
    return tqdm(
        total=total, desc=desc, unit="pt", file=stream, ncols=_terminal_columns(stream), leave=False
    )


def _engines(text: str) -> tuple[str, ...]:
    names = tuple(e.strip() for e in text.split(",") if e.strip())
    known = (*ENGINES, *ENGINE_ALIASES)
    bad = [e for e in names if e not in known]
    if bad or not names:
        raise ScenarioError(f"`--engines` must list engines from {', '.join(known)}; got {text!r}")
    return tuple(dict.fromkeys(engine_name(e) for e in names))


def _run_engines(text: str | None, scenario: Scenario) -> tuple[str, ...]:
    """`--engines`, or the default: exact, trotter, and noisy with a `[processor]` table."""
    if text is None:
        return (
            ("exact", "trotter", "noisy")
            if scenario.processor is not None
            else ("exact", "trotter")
        )
    return _engines(text)


def default_processor_note(scenario: Scenario, engines) -> str | None:
    """The line that names the processor of a noisy run without a `[processor]` table."""
    if "noisy" not in engines or scenario.processor is not None:
        return None
    name = make_processor({}).name
    return (
        f"note: no [processor] table, so the noisy engine runs on the default processor {name} "
        "with typical figures; add a [processor] table to choose one"
    )


def _check_run_destination(args, scenario: Scenario) -> Path:
    """The --out folder (default results/<name as one path component>), checked up front."""
    if args.out is not None:
        out = output.check_folder(args.out, "--out")
    else:
        out = output.check_folder(Path("results") / output.safe_component(scenario.name), "--out")
    for name in (*RUN_FILES, STORE_NAME):
        output.check_file(out / name, "--out")
    return out


def _check_engines_work(scenario: Scenario, engines, limit: float, what: str) -> int:
    """The work of `engines` over the sweep, refused beyond `limit`; circuit engines also
    need a program of bounded size."""
    if {"trotter", "noisy"} & set(engines):
        check_program_size(program_gates(scenario))
    work = sum(sweep_work(scenario, e) for e in engines)
    check_work(work, limit, what)
    return work


def _cmd_run(args) -> int:
    if args.resume and args.fresh:
        raise ScenarioError("`--resume` and `--fresh` contradict each other; give one of them")
    scenario = _scenario(args.scenario)
    engines = _run_engines(args.engines, scenario)
    if "noisy" in engines and BASELINE_ENGINE not in engines:
        engines += (BASELINE_ENGINE,)  # the comparison subtracts the measured artefact
    out = _check_run_destination(args, scenario)
    measured = _measured(args, scenario)
    workers = _workers(args.workers)
    if args.scheduler is not None:
        check_scheduler_address(args.scheduler)
    work = _check_engines_work(scenario, engines, args.max_work, f"this run ({', '.join(engines)})")
    store = _open_store(out, scenario, engines, resume=args.resume, fresh=args.fresh)
    bars = {e: _progress(len(scenario.sweep.values), e) for e in engines}
    try:
        try:
            outcome = run_scenario(
                scenario,
                engines,
                store=store,
                workers=workers,
                scheduler=args.scheduler,
                on_point=lambda e, k: bars[e].update(k),
                measured=measured,
            )
        finally:
            for bar in bars.values():
                bar.close()
        write_run(outcome, out)
    except Interrupted as stop:
        kept = "; the rest runs with --resume" if store.is_open else "; nothing was written"
        print(f"dnpqc: {stop}{kept}", file=sys.stderr)
        return EXIT_INTERRUPTED
    finally:
        store.close()
    for line in outcome.summary_lines():
        print(output.one_line(line))
    note = default_processor_note(scenario, engines)
    if note:
        print(f"  {note}")
    if work > LONG_RUN_WORK:
        print(f"  work: about {work:.3g} units (limit --max-work {args.max_work:.3g})")
    print(f"  workers: {_workers_line(workers, args.scheduler)}")
    print(f"report: {output.one_line(str(out / 'report.json'))} (plots and sweep.csv beside it)")
    return 0


#: Default worker processes: on the 2-core machines here one process (Aer spreading its
#: experiments over the cores) ran the demo 1.5× faster than two workers (`make bench` case 7).
DEFAULT_WORKERS = 1


def _workers(value: int | None) -> int:
    if value is None:
        return DEFAULT_WORKERS
    if value < 1:
        raise ScenarioError(f"`--workers` must be >= 1, got {value}")
    return value


def _workers_line(workers: int, scheduler: str | None) -> str:
    if scheduler is not None:
        return f"the Dask cluster at {output.one_line(scheduler)}"
    threads = threads_per_worker(workers)
    return f"{workers} process{'es' if workers > 1 else ''} × {threads} threads ({cores()} cores)"


def _open_store(out: Path, scenario: Scenario, engines, *, resume: bool, fresh: bool):
    """The run's results store: new, resumed (`--resume`) or replaced. Nothing is created or
    deleted here: a new or replacing store is made at its first commit.

    Without `--resume`, a previous store is replaced, except an unfinished run of this same
    scenario, which is kept until the user says `--resume` or `--fresh` (nothing is lost); an
    unfinished run of another scenario (say, after an edit) is kept until `--fresh`. A store
    that another live run holds is refused.
    """
    path = out / STORE_NAME
    if resume and not path.exists():
        raise ScenarioError(f"--resume: no run to resume in {str(out)!r} ({STORE_NAME} missing)")
    check_unlocked(path)
    replace = path.exists() and not resume
    if replace and not fresh and unfinished_run(path, scenario.digest, len(scenario.sweep.values)):
        raise ScenarioError(
            f"{str(out)!r} holds an unfinished run of this scenario ({STORE_NAME}); continue "
            "it with --resume or discard it with --fresh"
        )
    other = unfinished_digest(path) if replace and not fresh else None
    if other is not None and other != scenario.digest:
        raise ScenarioError(
            f"{str(out)!r} holds an unfinished run of another version of the scenario "
            f"(content hash {other}, this one {scenario.digest}); discard it with --fresh or "
            "use another --out"
        )
    shape = (scenario.cycles, scenario.system.num_nuclei)
    return ResultsStore(
        path,
        digest=scenario.digest,
        engines=engines,
        shape=shape,
        replace=replace,
        points=len(scenario.sweep.values),
    )


def write_run(outcome: RunOutcome, out: Path) -> None:
    """All files of a run: figures are drawn first, then every file is written atomically."""
    ref = outcome.reference
    point = outcome.analysis(ref.engine)["best_common"]["index"]
    shown = [
        r for name, r in outcome.results.items() if name != "trotter" or len(outcome.results) < 3
    ]
    fits = {r.engine: saturation(r, point)["per_nucleus"] for r in shown if r.has_buildup}
    figures = {
        "spectrum.png": report.spectrum_figure(ref, outcome.resonances()),
        "buildup.png": report.buildup_figure(shown, point, fits),
    }
    if len(outcome.results) > 1:
        figures["engines.png"] = report.comparison_figure(list(outcome.results.values()))
    if outcome.compare:
        figures["budget.png"] = report.budget_figure(outcome.compare)
    payload = outcome.to_json()
    csv_text = report.sweep_csv(list(outcome.results.values()))
    output.remove_stale_temps(out, RUN_FILES)
    for name, fig in figures.items():
        output.write_figure(out / name, fig)
    output.write_text(out / "sweep.csv", csv_text)
    output.write_json(out / "report.json", payload)


def _cmd_sweep(args) -> int:
    scenario = load_scenario(args.scenario)
    engine = engine_name(args.engine)
    destination = output.check_file(args.json, "--json") if args.json is not None else None
    counts_out = _check_counts_out(args, engine)
    _check_engines_work(scenario, (engine,), args.max_work, f"the {engine} sweep")
    note = default_processor_note(scenario, (engine,))
    if note:
        print(f"dnpqc: {note}", file=sys.stderr)
    bar = _progress(len(scenario.sweep.values), engine)
    try:
        result = simulate(scenario, engine, on_point=bar.update)
    finally:
        bar.close()
    data = result.to_dict()
    counts = None
    if counts_out is not None:
        scales = _scales(args.fold)
        programs = (1 + (args.baseline is not None)) * (1 + len(scales))
        bar = _progress(programs * len(scenario.sweep.values), "counts")
        try:
            counts = sampled_counts(
                scenario,
                engine,
                args.shots,
                seed=args.seed,
                measure_each_cycle=args.measure_each_cycle,
                baseline=args.baseline,
                scales=scales,
                on_point=bar.update,
            )
        finally:
            bar.close()
        output.write_json(counts_out, counts)
    if destination is not None:
        output.write_json(destination, data)
    else:
        sys.stdout.write(output.json_text(data, indent=None))
    return 0


def _check_counts_out(args, engine: str) -> Path | None:
    """The `--counts-out` file (checked now), with its options checked; None without it."""
    extras = args.measure_each_cycle or args.baseline is not None or args.fold is not None
    if args.counts_out is None:
        if args.shots is not None or extras:
            raise ScenarioError(
                "`--shots`, `--measure-each-cycle`, `--baseline` and `--fold` of `sweep` "
                "shape sampled counts: give `--counts-out FILE`"
            )
        return None
    if engine not in ("noisy", "trotter"):
        raise ScenarioError(
            f"`--counts-out` samples a run of the exported programs: use --engine noisy (or "
            f"trotter, noiseless), not {engine}"
        )
    if args.shots is None or args.shots < 1:
        raise ScenarioError(f"`--counts-out` needs `--shots N` with N >= 1, got {args.shots}")
    _scales(args.fold)
    return output.check_file(args.counts_out, "--counts-out")


def _cmd_budget(args) -> int:
    scenario = load_scenario(args.scenario)
    destination = output.check_file(args.json, "--json") if args.json is not None else None
    if not 0 < args.target_stderr < 1:
        raise ScenarioError(f"`--target-stderr` must be > 0 and < 1, got {args.target_stderr:g}")
    if args.target_error is not None and not 0 < args.target_error < float("inf"):
        raise ScenarioError(f"`--target-error` must be > 0 and finite, got {args.target_error:g}")
    if args.target_error is not None and scenario.compile.strategy == "auto":
        settings = replace(scenario.compile, target_error=args.target_error)
        scenario = replace(scenario, compile=settings)
    processor = scenario_processor(scenario, args.processor)
    specs = [s.strip() for s in args.compare.split(",") if s.strip()] if args.compare else []
    compared = [processor_for_spec(s, processor) for s in specs]
    check_program_size(program_gates(scenario))
    programs = scenario_programs(scenario, args.processor)
    job = programs.job
    program = programs.mapped(processor, nominal=True)
    data = codesign.program_budget(program)
    choice = programs.choice(processor)
    data["strategy"] = choice.strategy
    data["strategy_reason"] = choice.reason
    data["strategies"] = [r.to_json() for r in programs.rows(processor)]
    data["approximation_error"] = approximation_error(program).to_json()
    data["trotter_error"] = codesign.trotter_error(job, programs.trotter()[0])
    if compared:
        data["compare"] = codesign.compare_processors(programs, compared)
    if args.target_error is not None:
        with _progress(None, "step advice") as bar:

            def measured(steps: int) -> None:
                bar.set_postfix_str(f"{steps} steps")
                bar.update(1)

            data["steps_advice"] = codesign.steps_advice(
                job, processor, args.target_error, on_step=measured
            )
    if args.scaling:
        with _progress(4 * 12, "scaling") as bar:  # the default 4 graphs × 1..12 nuclei
            data["scaling"] = codesign.scaling_table(job, processor, on_step=lambda: bar.update(1))
    if not args.no_shots:
        data["shots"] = _shot_plan(scenario, programs, processor, data, args.target_stderr)
    data["warnings"] = verdicts.budget_warnings(data)
    if destination is not None:
        output.write_json(destination, data)
    for line in report.budget_lines(data):
        print(output.one_line(line))
    for line in report.shot_lines(data["shots"]) if "shots" in data else []:
        print(output.one_line(line))
    for warning in data["warnings"]:
        print(output.one_line(f"! {warning}"))
    return 0


def _shot_plan(scenario: Scenario, programs: Programs, processor, budget: dict, stderr: float):
    """The shot plan of the budget, from the exact engine and the noisy program with its
    zero-transfer baseline on `processor`."""
    options = engine_options(scenario)
    with _progress(None, "shot plan") as bar:
        exact = simulate_program(programs.job.workload, "exact", options, on_point=bar.update)
        noisy_program = programs.mapped(processor)
        noisy = simulate_program(noisy_program, "noisy", options, on_point=bar.update)
        base = simulate_program(noisy_program, BASELINE_ENGINE, options, on_point=bar.update)
    return codesign.shot_plan(exact, noisy, base, budget, processor, stderr)


def compile_texts(
    program: Program,
    *,
    bind: float | None = None,
    measure_each_cycle: bool = False,
    variant: list[str] | None = None,
    nv_flips: tuple[int, ...] | None = None,
) -> list[tuple[float | None, str]]:
    """(swept value, OpenQASM 3 text) of each hardware program of a mapped, nominal program.

    A trotter program gives one text (with the swept quantity as an input unless `bind`); a
    per-value program one text per sweep value, each bound to its value; `variant` lines say
    what the program is (a baseline, a folded copy); `nv_flips` flips the NV after the resets
    of those cycles (`noise.with_nv_flips`).
    """
    texts = []
    for value, mapped in zip(_row_values(program, bind), program.mapped, strict=True):
        if nv_flips is not None:
            mapped = replace(mapped, circuit=with_nv_flips(mapped.circuit, nv_flips))
        hardware = qasm.hardware_program(
            mapped, measure_each_cycle=measure_each_cycle, bind=None if program.per_row else value
        )
        header = qasm.header_lines(program, mapped, gate_budget(mapped), value, variant)
        texts.append((value, qasm.dumps(hardware, header)))
    return texts


def _variant_lines(program: Program, args) -> list[str]:
    """Header lines of a baseline or folded program (empty for the program itself)."""
    lines = []
    if args.baseline == "uncoupled":
        lines.append(
            f"Variant: {program.choice}; its measured P is the processor's own drift, to "
            "subtract (`run --counts` with `baseline_counts`)."
        )
    if args.fold > 1:
        lines.append(
            f"Variant: two-qubit gates folded to scale {args.fold} (G -> G(G†G)^"
            f"{(args.fold - 1) // 2}, fenced by barriers: submit without further optimization, "
            "or a compiler may cancel the folds)."
        )
    return lines


def _row_values(program: Program, bind: float | None) -> list[float | None]:
    if program.per_row:
        return list(program.workload.values)
    return [bind]


def compile_text(
    scenario: Scenario,
    processor: Processor,
    *,
    bind: float | None = None,
    measure_each_cycle: bool = False,
) -> str:
    """The OpenQASM 3 text of the scenario's single program (per-value strategies need `bind`)."""
    program = _hardware_program(scenario, processor, bind)
    if program.per_row and len(program.mapped) != 1:
        raise ScenarioError(
            f"strategy {program.strategy!r} writes one program per sweep value: give `--bind "
            "VALUE` for one program, or `-o DIR` for all of them"
        )
    return compile_texts(program, bind=bind, measure_each_cycle=measure_each_cycle)[0][1]


def _hardware_program(scenario: Scenario, processor: Processor, bind: float | None) -> Program:
    """The nominal program mapped onto `processor`; a per-value one at `bind` only."""
    if bind is not None:
        check_point(scenario, bind)
    programs = Programs(scenario.compile_job(), processor)
    if bind is not None and programs.choice().strategy == "cycle-unitary":
        one = replace(scenario.sweep, values=(float(bind),))
        programs = Programs(replace(scenario, sweep=one).compile_job(), processor)
    return programs.mapped(nominal=True)


def program_file_name(name: str, parameter: str, value: float) -> str:
    """File name of the program at one swept value: `<name>_<parameter>_<value>.qasm` (the
    scenario name made one safe path component)."""
    return f"{output.safe_component(name)}_{parameter}_{value:.9g}.qasm"


def _compile_folder(path: str | None, strategy: str, bind: float | None) -> Path | None:
    """The `-o` folder of a per-value program (checked now), or None for a single file.

    cycle-unitary without `--bind` needs a folder; `auto` takes `-o` as a folder when it names
    an existing folder or ends with a separator (checked again once the strategy is chosen).
    """
    if bind is not None or strategy == "trotter":
        return None
    if strategy == "cycle-unitary" and path is None:
        raise ScenarioError(
            "strategy 'cycle-unitary' writes one program per sweep value: give `-o DIR` for all "
            "of them, or `--bind VALUE` for one"
        )
    if path is None:
        return None
    folder_like = Path(path).is_dir() or path.endswith(("/", os.sep))
    if strategy == "cycle-unitary" or folder_like:
        return output.check_folder(path, "-o")
    return None


#: Most cycles of a mixed-NV baseline (2^C programs).
MAX_PATTERN_CYCLES = 8


def _check_patterns(cycles: int) -> None:
    if cycles > MAX_PATTERN_CYCLES:
        raise ScenarioError(
            f"`--baseline mixed-nv` writes 2^C programs; {cycles} cycles would be "
            f"{2**cycles:,} (at most {MAX_PATTERN_CYCLES} cycles); use `--baseline` (uncoupled)"
        )


def _write_mixed_nv(scenario: Scenario, program: Program, args, folder: Path) -> int:
    """The 2^C programs of a mixed-NV baseline, `<name>[_<parameter>_<value>]_nv<bits>.qasm`
    (bit c = 1: the NV flipped after the reset of cycle c+1), every file checked first."""
    cycles = scenario.cycles
    patterns = list(itertools.product((0, 1), repeat=cycles))
    files = []
    for pattern in patterns:
        bits = "".join(map(str, pattern))
        note = (
            f"Variant: mixed-NV baseline, pattern {bits} of {2**cycles} (cycle 1 first; 1 = X "
            "on the NV after its reset): run all of them with equal shots and pool the counts "
            "as `baseline_counts`; the NV is then maximally mixed and no polarization moves."
        )
        texts = compile_texts(
            program,
            bind=args.bind,
            measure_each_cycle=args.measure_each_cycle,
            variant=[*_variant_lines(program, args), note],
            nv_flips=pattern,
        )
        for value, text in texts:
            if program.per_row:
                stem = program_file_name(scenario.name, scenario.sweep.parameter, value)[:-5]
            else:
                stem = output.safe_component(scenario.name)
            files.append((output.check_file(folder / f"{stem}_nv{bits}.qasm", "-o"), text))
    for target, text in files:
        output.write_text(target, text)
    print(f"programs: {len(files)} files in {output.one_line(str(folder))}")
    return 0


def _cmd_compile(args) -> int:
    scenario = load_scenario(args.scenario)
    processor = scenario_processor(scenario, args.processor)
    strategy = scenario.compile.strategy
    mixed = args.baseline == "mixed-nv"
    if mixed:
        _check_patterns(scenario.cycles)
        if args.output is None:
            raise ScenarioError(
                "`--baseline mixed-nv` writes one program per pattern of NV flips: give `-o DIR`"
            )
        folder = output.check_folder(args.output, "-o")
    else:
        folder = _compile_folder(args.output, strategy, args.bind)
    destination = None
    if folder is None and args.output is not None:
        destination = output.check_file(args.output, "-o")
    check_program_size(program_gates(scenario) * args.fold)
    program = _hardware_program(scenario, processor, args.bind)
    variants = program_variants(
        program, scenario.compile_job().mapping, baseline=args.baseline, scales=(args.fold,)
    )
    program = variants[(BASELINE if args.baseline else PROGRAM, args.fold)]
    if mixed:
        return _write_mixed_nv(scenario, program, args, folder)
    texts = compile_texts(
        program,
        bind=args.bind,
        measure_each_cycle=args.measure_each_cycle,
        variant=_variant_lines(program, args),
    )
    if program.per_row and args.bind is None:
        if folder is None:
            raise ScenarioError(
                f"strategy {strategy!r} chose cycle-unitary, which writes one program per sweep "
                "value: give `-o DIR` (a folder) for all of them, or `--bind VALUE` for one"
            )
        names = [program_file_name(scenario.name, scenario.sweep.parameter, v) for v, _ in texts]
        targets = [output.check_file(folder / name, "-o") for name in names]
        for target, (_, text) in zip(targets, texts, strict=True):
            output.write_text(target, text)
        print(f"programs: {len(texts)} files in {output.one_line(str(folder))}")
        return 0
    if folder is not None:
        raise ScenarioError(
            f"strategy {strategy!r} chose {program.strategy}, which writes one program: give "
            "`-o FILE` rather than a folder"
        )
    text = texts[0][1]
    if destination is not None:
        output.write_text(destination, text)
        print(f"program: {output.one_line(str(destination))}")
    else:
        sys.stdout.write(text)
    return 0


def main(argv: list[str] | None = None) -> int:
    """Entry point; returns the exit code (0 ok, 2 bad input or refused run, 130 Ctrl-C)."""
    try:
        args = _parser().parse_args(argv)
        handler = {
            "run": _cmd_run,
            "sweep": _cmd_sweep,
            "budget": _cmd_budget,
            "compile": _cmd_compile,
        }[args.command]
        return handler(args)
    except (ScenarioError, RunError) as exc:
        print(f"dnpqc: error: {output.one_line(str(exc))}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print("dnpqc: interrupted; nothing was written", file=sys.stderr)
        return EXIT_INTERRUPTED
    except MemoryError:
        print(
            "dnpqc: error: out of memory; lower the sweep, cycles, steps or nuclei "
            "(see --max-work)",
            file=sys.stderr,
        )
        return EXIT_USAGE
    except BrokenPipeError:
        # the reader of stdout went away (e.g. `| head`); point stdout at /dev/null so that the
        # final flush at exit cannot fail again (Python docs, signal module, "Note on SIGPIPE")
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        print("dnpqc: error: standard output was closed before the end", file=sys.stderr)
        return EXIT_USAGE


if __name__ == "__main__":
    sys.exit(main())
