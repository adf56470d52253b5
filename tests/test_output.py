"""The output module: destinations checked up front, atomic writes, strict JSON, safe text."""

import json
import os
from pathlib import Path

import pytest

from dnpqc.errors import RunError
from dnpqc.io import output


def _a_file(folder: Path) -> Path:
    path = folder / "f"
    path.write_text("x")
    return path


def _no_temps(folder: Path) -> bool:
    return not list(folder.glob(".*.tmp"))


@pytest.mark.parametrize(
    ("make", "match"),
    [
        (lambda d: d, "is a folder"),
        (lambda d: Path("/proc/nope.json"), "/proc is a virtual file system"),
        (lambda d: Path("/dev/null"), "virtual file system"),
        (lambda d: _a_file(d) / "below.json", "is a file, so nothing"),
        (lambda d: d / ("x" * 230), "longer than 200 bytes"),
        (lambda d: d / ("x" * 300) / "a.json", "component is longer than 255 bytes"),
        (lambda d: d / "/".join(["x" * 200] * 25), "path is longer than 4000 bytes"),
        (lambda d: f"{d}/a\0b", "without NUL"),
        (lambda d: "", "non-empty path"),
        (lambda d: d / "..", "must name a file"),
    ],
)
def test_file_destinations_refused(tmp_path, make, match):
    with pytest.raises(RunError, match=match):
        output.check_file(make(tmp_path), "--json")


def test_file_destinations_refused_fifo_and_read_only(tmp_path):
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    with pytest.raises(RunError, match="not a regular file"):
        output.check_file(fifo, "--json")
    if os.geteuid() != 0:  # root may write anywhere
        locked = tmp_path / "locked"
        locked.mkdir()
        locked.chmod(0o500)
        try:
            with pytest.raises(RunError, match="permission denied"):
                output.check_file(locked / "x.json", "--json")
        finally:
            locked.chmod(0o700)


def test_file_destinations_accepted(tmp_path):
    existing = tmp_path / "old.json"
    existing.write_text("{}")
    assert output.check_file(existing, "--json") == existing
    assert output.check_file(tmp_path / "new" / "deeper" / "x.json", "-o").name == "x.json"
    assert not (tmp_path / "new").exists()  # checking creates nothing


@pytest.mark.parametrize(
    ("make", "match"),
    [
        (lambda d: _a_file(d), "exists and is not a folder"),
        (lambda d: _a_file(d) / "sub", "is a file, so nothing"),
        (lambda d: Path("/proc/nope"), "virtual file system"),
        (lambda d: Path("/sys/kernel/x"), "virtual file system"),
    ],
)
def test_folder_destinations_refused(tmp_path, make, match):
    with pytest.raises(RunError, match=match):
        output.check_folder(make(tmp_path), "--out")


def test_atomic_write_keeps_the_old_file_and_no_temp_on_failure(tmp_path):
    path = tmp_path / "report.json"
    output.write_json(path, {"a": 1})

    def broken(fh):
        fh.write('{"half": ')
        raise KeyboardInterrupt  # as if Ctrl-C came mid-write

    with pytest.raises(KeyboardInterrupt):
        output._write_atomic(path, broken, binary=False)
    assert json.loads(path.read_text()) == {"a": 1}
    assert _no_temps(tmp_path)


def test_write_into_a_vanished_folder_is_one_run_error(tmp_path):
    (tmp_path / "f").write_text("x")
    with pytest.raises(RunError, match="cannot write"):
        output.write_text(tmp_path / "f" / "x.txt", "text")


def test_json_is_strict_non_finite_becomes_null():
    # RFC 8259 (JSON) has no NaN or Infinity; Python's json writes them unless allow_nan=False
    text = output.json_text({"a": float("nan"), "b": [1.0, float("inf"), -float("inf")], "c": 2})
    assert json.loads(text, parse_constant=lambda c: pytest.fail(c)) == {
        "a": None,
        "b": [1.0, None, None],
        "c": 2,
    }


@pytest.mark.parametrize(
    ("name", "safe"),
    [
        ("../../etc/x", "etc_x"),
        ("/abs/path", "abs_path"),
        ("..", "scenario"),
        ("", "scenario"),
        (".hidden", "hidden"),
        ("--fresh", "fresh"),
        ("a\nb\x1b[31m", "a_b_31m"),
        ("my-cluster_2.v1", "my-cluster_2.v1"),
        ("x" * 300, "x" * 64),
        ("Kohlenstoff-Ü", "Kohlenstoff-Ü"),
    ],
)
def test_scenario_name_becomes_one_safe_path_component(name, safe):
    component = output.safe_component(name)
    assert component == safe
    assert "/" not in component and component not in (".", "..")
    assert Path(component).name == component


def test_one_line_escapes_line_breaks_and_terminal_escapes():
    text = output.one_line("label\nreset $0;\x1b[2J\u202e")
    assert "\n" not in text and "\x1b" not in text and "\u202e" not in text
    assert "\\n" in text and "\\x1b" in text


@pytest.mark.parametrize("label", ["=1+2", "+1", "-1", "@SUM(A1)", "\tx"])
def test_spreadsheet_cells_never_start_a_formula(label):
    # OWASP "CSV injection" guidance (common practice): prefix = + - @ tab CR with a quote
    assert output.spreadsheet_cell(label) == "'" + label
    assert output.spreadsheet_cell("C1") == "C1"


def test_stale_temps_of_named_files_are_removed(tmp_path):
    (tmp_path / ".report.json.abc123.tmp").write_text("half")
    (tmp_path / ".other.txt.abc.tmp").write_text("not ours")
    output.remove_stale_temps(tmp_path, ("report.json",))
    assert [p.name for p in tmp_path.iterdir()] == [".other.txt.abc.tmp"]
