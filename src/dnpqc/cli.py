"""Command line: `dnpqc run`, `sweep`, `budget`, `compile`. User errors: one line, exit code 2."""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from tqdm import tqdm

from .analysis.mitigation import EXTRAPOLATIONS
from .compile.folding import BASELINE_KINDS, check_scale
from .engines import ENGINE_ALIASES, ENGINES, engine_name
from .engines.noisy import BASELINE_ENGINE
from .errors import RunError, ScenarioError
from .io import output, report
from .io.scenario import Scenario, demo_scenario, load_scenario
from .limits import DEFAULT_MAX_WORK
from .pipeline.export import ExportRequest, export_programs
from .pipeline.job import (
    check_engines_work,
    default_processor_note,
    run_scenario,
    scenario_processor,
    simulate,
)
from .pipeline.measured import measured_counts, sampled_counts
from .pipeline.plan import BudgetRequest, budget_report
from .pipeline.run_files import check_run_destination, open_store, write_run
from .pipeline.sweep import Interrupted, check_scheduler_address
from .resources import cores, threads_per_worker

EXIT_USAGE = 2
EXIT_INTERRUPTED = 130

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
        help="local worker processes (default 1: as fast as 2 on the demo; README Performance)",
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


def _cmd_run(args) -> int:
    if args.resume and args.fresh:
        raise ScenarioError("`--resume` and `--fresh` contradict each other; give one of them")
    scenario = _scenario(args.scenario)
    engines = _run_engines(args.engines, scenario)
    if "noisy" in engines and BASELINE_ENGINE not in engines:
        engines += (BASELINE_ENGINE,)  # the comparison subtracts the measured artefact
    out = check_run_destination(args.out, scenario)
    measured = None
    if args.counts is not None:
        measured = measured_counts(args.counts, scenario, args.mitigate, args.extrapolation)
    workers = _workers(args.workers)
    if args.scheduler is not None:
        check_scheduler_address(args.scheduler)
    work = check_engines_work(scenario, engines, args.max_work, f"this run ({', '.join(engines)})")
    store = open_store(out, scenario, engines, resume=args.resume, fresh=args.fresh)
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


def _cmd_sweep(args) -> int:
    scenario = load_scenario(args.scenario)
    engine = engine_name(args.engine)
    destination = output.check_file(args.json, "--json") if args.json is not None else None
    counts_out = _check_counts_out(args, engine)
    check_engines_work(scenario, (engine,), args.max_work, f"the {engine} sweep")
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
    specs = [s.strip() for s in args.compare.split(",") if s.strip()] if args.compare else []
    request = BudgetRequest(
        processor=args.processor,
        compare=tuple(specs),
        target_error=args.target_error,
        scaling=args.scaling,
        shots=not args.no_shots,
        target_stderr=args.target_stderr,
    )
    plan = budget_report(scenario, request, _progress)
    if destination is not None:
        output.write_json(destination, plan.to_json())
    for line in report.budget_lines(plan):
        print(output.one_line(line))
    for line in report.shot_lines(plan.shots) if plan.shots is not None else []:
        print(output.one_line(line))
    for warning in plan.warnings:
        print(output.one_line(f"! {warning}"))
    return 0


def _cmd_compile(args) -> int:
    scenario = load_scenario(args.scenario)
    processor = scenario_processor(scenario, args.processor)
    request = ExportRequest(
        output=args.output,
        bind=args.bind,
        baseline=args.baseline,
        fold=args.fold,
        measure_each_cycle=args.measure_each_cycle,
    )
    planned = export_programs(scenario, processor, request)
    for target, text in planned.files:
        if target is None:
            sys.stdout.write(text)
        else:
            output.write_text(target, text)
    if planned.folder is not None:
        where = output.one_line(str(planned.folder))
        print(f"programs: {len(planned.files)} files in {where}")
    elif planned.files[0][0] is not None:
        print(f"program: {output.one_line(str(planned.files[0][0]))}")
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
