"""The folder of `dnpqc run`: its files and results store, checked before any work and written
atomically once the run is done."""

from __future__ import annotations

from pathlib import Path

from ..engines.results import saturation
from ..errors import ScenarioError
from ..io import output, report
from ..io.scenario import Scenario
from ..io.store import STORE_NAME, ResultsStore, check_unlocked, unfinished_digest, unfinished_run
from .job import RunOutcome

#: The files `dnpqc run` writes into its --out folder (besides the results store).
RUN_FILES = ("report.json", "sweep.csv", "spectrum.png", "buildup.png", "engines.png", "budget.png")


def check_run_destination(out: str | None, scenario: Scenario) -> Path:
    """The --out folder (default results/<name as one path component>), checked up front."""
    if out is not None:
        folder = output.check_folder(out, "--out")
    else:
        folder = output.check_folder(
            Path("results") / output.safe_component(scenario.name), "--out"
        )
    for name in (*RUN_FILES, STORE_NAME):
        output.check_file(folder / name, "--out")
    return folder


def open_store(out: Path, scenario: Scenario, engines, *, resume: bool, fresh: bool):
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
    point = outcome.analysis(ref.engine).best_common.index
    shown = [
        r for name, r in outcome.results.items() if name != "trotter" or len(outcome.results) < 3
    ]
    fits = {r.engine: saturation(r, point).per_nucleus for r in shown if r.has_buildup}
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
