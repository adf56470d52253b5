"""Imports point one way: each module imports only modules of its own stage or of earlier ones.

The stages are the package's folders, in the order the data flow (README "Architecture"):
base → physics → compile → engines → analysis → io → pipeline → cli. The base is the top-level
modules every stage may use (errors, limits, records, resources, text). Read from the source
text with `ast` (common practice, no source), so a new back-edge fails here, not in review.
"""

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "src" / "dnpqc"

BASE = {"errors", "limits", "records", "resources", "text"}
STAGES = {
    "base": BASE,
    "physics": {"physics"},
    "compile": {"compile"},
    "engines": {"engines"},
    "analysis": {"analysis"},
    "io": {"io"},
    "pipeline": {"pipeline"},
    "cli": {"cli", "__init__"},
}
ORDER = list(STAGES)


def stage_of(module: str) -> int:
    top = module.split(".")[0]
    for index, name in enumerate(ORDER):
        if top in STAGES[name]:
            return index
    raise KeyError(module)


def modules() -> list[tuple[str, Path]]:
    out = []
    for path in sorted(PACKAGE.rglob("*.py")):
        rel = path.relative_to(PACKAGE).with_suffix("")
        out.append((".".join(rel.parts), path))
    return out


def imported(module: str, path: Path) -> set[str]:
    """dnpqc modules that `module` imports (relative imports resolved)."""
    package = module.split(".")[:-1]
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom) and node.level:
            base = package[: len(package) - (node.level - 1)] if node.level > 1 else package
            if node.module:
                found.add(".".join([*base, node.module]))
            else:
                found.update(".".join([*base, alias.name]) for alias in node.names)
    return {m for m in found if m}


def test_every_module_has_a_stage():
    for module, _ in modules():
        stage_of(module)


@pytest.mark.parametrize(("module", "path"), modules(), ids=[m for m, _ in modules()])
def test_imports_point_down_the_pipeline(module, path):
    mine = stage_of(module)
    for other in imported(module, path):
        assert stage_of(other) <= mine, f"{module} ({ORDER[mine]}) imports {other}"


def test_the_top_level_holds_only_the_base_and_the_entry_points():
    """A newcomer sees the pipeline: stage folders, the base modules and the CLI, nothing else."""
    top = {p.stem for p in PACKAGE.glob("*.py")}
    assert top == BASE | {"cli", "__init__"}
    folders = {p.name for p in PACKAGE.iterdir() if (p / "__init__.py").is_file()}
    assert folders == set(STAGES) - {"base", "cli"}


def test_nothing_below_the_pipeline_imports_the_scenario_module():
    """The scenario module parses TOML into each stage's settings; the stages never read it."""
    for module, path in modules():
        if "io.scenario" in imported(module, path):
            assert stage_of(module) >= ORDER.index("pipeline"), module
