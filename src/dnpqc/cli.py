"""Command line: `dnpqc run`, `sweep`, `budget`, `compile`. User errors: one line, exit code 2."""

from __future__ import annotations

import argparse
import json
import os
import sys
from pathlib import Path

from tqdm import tqdm

from . import codesign, qasm, report, verdicts
from .budget import gate_budget
from .engines import ENGINES, simulate
from .engines.circuit import mapped_program
from .engines.noisy import BASELINE_ENGINE
from .errors import ScenarioError
from .job import RunOutcome, run_scenario
from .processor import Processor, make_processor, processor_for_spec
from .results import saturation
from .scenario import Scenario, check_point, demo_scenario, load_scenario
from .store import STORE_NAME, ResultsStore, unfinished_run
from .sweep import Interrupted

EXIT_USAGE = 2
EXIT_INTERRUPTED = 130


class _Parser(argparse.ArgumentParser):
    """argparse with one-line errors."""

    def error(self, message: str) -> None:  # type: ignore[override]
        raise ScenarioError(message)


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
        help="local worker processes (default: the number of cores)",
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
        help="advise the fewest Trotter steps with Trotter error below this",
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
        "-o", "--output", default=None, help="write the program here (default: stdout)"
    )
    comp.add_argument(
        "--bind",
        type=float,
        default=None,
        help="a value of the swept quantity: write a fully numeric program",
    )
    comp.add_argument(
        "--measure-each-cycle",
        action="store_true",
        help="measure the nuclei after every cycle into registers cycle_<c>",
    )
    sweep = sub.add_parser("sweep", help="one engine over the sweep, JSON out")
    sweep.add_argument("scenario", help="scenario TOML file")
    sweep.add_argument("--engine", default="exact", choices=tuple(ENGINES))
    sweep.add_argument("--json", default=None, help="write the JSON here (default: stdout)")
    return parser


def _scenario(path: str | None) -> Scenario:
    return demo_scenario() if path is None else load_scenario(path)


def _progress(total: int | None, desc: str) -> tqdm:
    """A progress bar on a terminal (stderr), nothing otherwise; `total` None: a counter."""
    return tqdm(total=total, desc=desc, unit="pt", disable=not sys.stderr.isatty(), leave=False)


def _engines(text: str) -> tuple[str, ...]:
    names = tuple(e.strip() for e in text.split(",") if e.strip())
    bad = [e for e in names if e not in ENGINES]
    if bad or not names:
        raise ScenarioError(
            f"`--engines` must list engines from {', '.join(ENGINES)}; got {text!r}"
        )
    return names


def _cmd_run(args) -> int:
    scenario = _scenario(args.scenario)
    default = "exact,trotter,noisy" if scenario.processor is not None else "exact,trotter"
    engines = _engines(args.engines or default)
    if "noisy" in engines and BASELINE_ENGINE not in engines:
        engines += (BASELINE_ENGINE,)  # the comparison subtracts the measured artefact
    out = Path(args.out) if args.out else Path("results") / scenario.name
    workers = _workers(args.workers)
    store = _open_store(out, scenario, engines, resume=args.resume, fresh=args.fresh)
    bars = {e: _progress(len(scenario.sweep.values), e) for e in engines}
    try:
        outcome = run_scenario(
            scenario,
            engines,
            store=store,
            workers=workers,
            scheduler=args.scheduler,
            on_point=lambda e, k: bars[e].update(k),
        )
    except Interrupted as stop:
        print(f"dnpqc: {stop}; the rest runs with --resume", file=sys.stderr)
        return EXIT_INTERRUPTED
    finally:
        for bar in bars.values():
            bar.close()
        store.close()
    write_run(outcome, out)
    for line in outcome.summary_lines():
        print(line)
    print(f"report: {out / 'report.json'} (plots and sweep.csv beside it)")
    return 0


def _workers(value: int | None) -> int:
    if value is None:
        return os.cpu_count() or 1
    if value < 1:
        raise ScenarioError(f"`--workers` must be >= 1, got {value}")
    return value


def _open_store(out: Path, scenario: Scenario, engines, *, resume: bool, fresh: bool):
    """The run's results store: new, resumed (`--resume`) or replaced.

    Without `--resume`, a previous store is replaced, except an unfinished run of this same
    scenario, which is kept until the user says `--resume` or `--fresh` (nothing is lost).
    """
    path = out / STORE_NAME
    if resume and not path.exists():
        raise ScenarioError(f"--resume: no run to resume in {str(out)!r} ({STORE_NAME} missing)")
    if path.exists() and not resume:
        count = len(scenario.sweep.values)
        if not fresh and unfinished_run(path, scenario.digest, count):
            raise ScenarioError(
                f"{str(out)!r} holds an unfinished run of this scenario ({STORE_NAME}); continue "
                "it with --resume or discard it with --fresh"
            )
        for suffix in ("", "-wal", "-shm"):
            Path(f"{path}{suffix}").unlink(missing_ok=True)
    shape = (scenario.cycles, scenario.system.num_nuclei)
    return ResultsStore(path, digest=scenario.digest, engines=engines, shape=shape)


def write_run(outcome: RunOutcome, out: Path) -> None:
    """All files of a run: figures are drawn first, then every file is written atomically."""
    ref = outcome.reference
    point = outcome.analysis(ref.engine)["best_common"]["index"]
    shown = [
        r for name, r in outcome.results.items() if name != "trotter" or len(outcome.results) < 3
    ]
    fits = {r.engine: saturation(r, point)["per_nucleus"] for r in shown}
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
    for name, fig in figures.items():
        report.save_figure(out / name, fig)
    report.write_text(out / "sweep.csv", csv_text)
    report.write_json(out / "report.json", payload)


def _cmd_sweep(args) -> int:
    scenario = load_scenario(args.scenario)
    bar = _progress(len(scenario.sweep.values), args.engine)
    try:
        result = simulate(scenario, args.engine, on_point=bar.update)
    finally:
        bar.close()
    data = result.to_dict()
    if args.json:
        report.write_json(Path(args.json), data)
    else:
        json.dump(data, sys.stdout)
        sys.stdout.write("\n")
    return 0


def scenario_processor(scenario: Scenario, spec: str | None) -> Processor:
    """The processor of a run: `--processor` over the scenario's `[processor]` over defaults."""
    base = scenario.processor
    if spec is not None:
        return processor_for_spec(spec, base)
    return base if base is not None else make_processor({})


def _cmd_budget(args) -> int:
    scenario = load_scenario(args.scenario)
    processor = scenario_processor(scenario, args.processor)
    specs = [s.strip() for s in args.compare.split(",") if s.strip()] if args.compare else []
    compared = [processor_for_spec(s, processor) for s in specs]
    if args.target_error is not None and not args.target_error > 0:
        raise ScenarioError(f"`--target-error` must be > 0, got {args.target_error:g}")
    data = codesign.program_budget(scenario, processor)
    data["trotter_error"] = codesign.trotter_error(scenario)
    if compared:
        data["compare"] = codesign.compare_processors(scenario, compared)
    if args.target_error is not None:
        with _progress(None, "step advice") as bar:

            def measured(steps: int) -> None:
                bar.set_postfix_str(f"{steps} steps")
                bar.update(1)

            data["steps_advice"] = codesign.steps_advice(
                scenario, processor, args.target_error, on_step=measured
            )
    if args.scaling:
        with _progress(4 * 12, "scaling") as bar:  # the default 4 graphs × 1..12 nuclei
            data["scaling"] = codesign.scaling_table(
                scenario, processor, on_step=lambda: bar.update(1)
            )
    data["warnings"] = verdicts.budget_warnings(data)
    if args.json:
        report.write_json(Path(args.json), data)
    for line in report.budget_lines(data):
        print(line)
    for warning in data["warnings"]:
        print(f"! {warning}")
    return 0


def compile_text(
    scenario: Scenario,
    processor: Processor,
    *,
    bind: float | None = None,
    measure_each_cycle: bool = False,
) -> str:
    """The OpenQASM 3 text of the scenario's program mapped onto `processor`."""
    if bind is not None:
        check_point(scenario, bind)
    mapped = mapped_program(scenario, processor, imperfections=False)
    hardware = qasm.hardware_program(mapped, measure_each_cycle=measure_each_cycle, bind=bind)
    return qasm.dumps(hardware, qasm.header_lines(scenario, mapped, gate_budget(mapped), bind))


def _cmd_compile(args) -> int:
    scenario = load_scenario(args.scenario)
    processor = scenario_processor(scenario, args.processor)
    text = compile_text(
        scenario, processor, bind=args.bind, measure_each_cycle=args.measure_each_cycle
    )
    if args.output:
        report.write_text(Path(args.output), text)
        print(f"program: {args.output}")
    else:
        sys.stdout.write(text)
    return 0


def main(argv: list[str] | None = None) -> int:
    """Entry point; returns the exit code (0 ok, 2 bad input)."""
    try:
        args = _parser().parse_args(argv)
        handler = {
            "run": _cmd_run,
            "sweep": _cmd_sweep,
            "budget": _cmd_budget,
            "compile": _cmd_compile,
        }[args.command]
        return handler(args)
    except ScenarioError as exc:
        print(f"dnpqc: error: {exc}", file=sys.stderr)
        return EXIT_USAGE


if __name__ == "__main__":
    sys.exit(main())
