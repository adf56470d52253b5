"""Every file dnpqc writes: each destination is checked before any work, then written atomically.

A destination must be a regular file or absent, in a folder that exists (or can be created) and
is writable, and not on a virtual file system (/proc, /sys, /dev). A folder given as `--out`
must be a folder or creatable. A file is written as a temporary file in its own folder and then
moved over the destination with `os.replace`, so a reader (or a run killed at any moment) sees
the old file or the new one, never half of one; the temporary file is removed on failure.

Text that came from the user is made harmless here: one path component for a file name, one line
without terminal escapes for messages and comments, and no formula for a spreadsheet cell. JSON
is strict: a non-finite number (NaN, ±inf) is written as `null`.
"""

from __future__ import annotations

import glob
import json
import math
import os
import re
import stat
import tempfile
from collections.abc import Callable
from pathlib import Path
from typing import IO

from ..errors import RunError, ScenarioError

#: Roots of virtual file systems: results never go there (/dev/shm is ordinary memory).
VIRTUAL_ROOTS = ("/proc", "/sys", "/dev")
_ALLOWED_UNDER_VIRTUAL = ("/dev/shm",)

#: Longest destination file name, in bytes: room for the temporary name's prefix and suffix.
MAX_NAME_BYTES = 200

#: File-system limits of Linux (NAME_MAX, PATH_MAX): beyond them every call fails.
MAX_COMPONENT_BYTES = 255
MAX_PATH_BYTES = 4000

_TEMP_SUFFIX = ".tmp"


def _refuse(option: str, path: str | Path, why: str) -> RunError:
    return RunError(f"{option} {one_line(repr(str(path)))}: {why}")


def _on_virtual_fs(path: Path) -> str | None:
    real = os.path.realpath(path)
    for root in VIRTUAL_ROOTS:
        if (real == root or real.startswith(root + "/")) and not any(
            real == ok or real.startswith(ok + "/") for ok in _ALLOWED_UNDER_VIRTUAL
        ):
            return root
    return None


def _nearest_existing(path: Path) -> Path:
    """`path` itself or its closest ancestor that exists (the folder new files go below)."""
    here = path.absolute()
    while not os.path.lexists(here) and here != here.parent:
        here = here.parent
    return here


def _check_creatable_below(option: str, path: Path, target: Path) -> None:
    """The nearest existing ancestor of `target` must be a writable folder."""
    base = _nearest_existing(target)
    if not base.is_dir():
        raise _refuse(option, path, f"{str(base)!r} is a file, so nothing can be created below it")
    if not os.access(base, os.W_OK | os.X_OK):
        raise _refuse(option, path, f"cannot create files in {str(base)!r} (permission denied)")


def _check_common(option: str, path: str | Path) -> Path:
    text = str(path)
    if not text or "\0" in text:
        raise _refuse(option, path, "must be a non-empty path without NUL characters")
    p = Path(text)
    if any(len(os.fsencode(part)) > MAX_COMPONENT_BYTES for part in p.parts):
        raise _refuse(option, path, f"a path component is longer than {MAX_COMPONENT_BYTES} bytes")
    if len(os.fsencode(text)) > MAX_PATH_BYTES:
        raise _refuse(option, path, f"the path is longer than {MAX_PATH_BYTES} bytes")
    root = _on_virtual_fs(p)
    if root is not None:
        raise _refuse(option, path, f"{root} is a virtual file system, not a place for results")
    return p


def check_file(path: str | Path, option: str) -> Path:
    """Check before any work that `path` can receive a results file; returns it as a Path.

    Allowed: an absent file in a creatable folder, or an existing writable regular file.
    Refused: folders, devices, pipes, sockets, paths below a file, unwritable places.
    """
    p = _check_common(option, path)
    if len(os.fsencode(p.name)) > MAX_NAME_BYTES:
        raise _refuse(option, path, f"the file name is longer than {MAX_NAME_BYTES} bytes")
    if not p.name or p.name in (".", ".."):
        raise _refuse(option, path, "must name a file, not a folder")
    if os.path.lexists(p):
        try:
            mode = os.stat(p).st_mode
        except OSError as exc:
            raise _refuse(option, path, f"cannot be used ({exc.strerror})") from None
        if stat.S_ISDIR(mode):
            raise _refuse(option, path, "is a folder; give a file name")
        if not stat.S_ISREG(mode):
            raise _refuse(option, path, "is not a regular file (a device, pipe or socket)")
        if not os.access(p, os.W_OK):
            raise _refuse(option, path, "is not writable (permission denied)")
    _check_creatable_below(option, path, p.parent)
    return p


def check_folder(path: str | Path, option: str) -> Path:
    """Check before any work that `path` is a writable folder or can be created as one."""
    p = _check_common(option, path)
    if os.path.lexists(p):
        if not p.is_dir():
            raise _refuse(option, path, "exists and is not a folder")
        if not os.access(p, os.W_OK | os.X_OK):
            raise _refuse(option, path, "is not writable (permission denied)")
        return p
    _check_creatable_below(option, path, p)
    return p


def _write_atomic(path: Path, write: Callable[[IO], None], *, binary: bool) -> None:
    """Write through a temporary file in the destination's folder, then `os.replace`."""
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=_TEMP_SUFFIX)
    except OSError as exc:
        raise RunError(f"cannot write {str(path)!r}: {exc.strerror}") from None
    try:
        with os.fdopen(fd, "wb" if binary else "w", encoding=None if binary else "utf-8") as fh:
            write(fh)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o644)  # mkstemp creates 0600; results are meant to be shared
        os.replace(tmp, path)
    except OSError as exc:
        Path(tmp).unlink(missing_ok=True)
        raise RunError(f"cannot write {str(path)!r}: {exc.strerror}") from None
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def write_text(path: str | Path, text: str) -> None:
    """Write `text` (UTF-8) to `path` atomically."""
    _write_atomic(Path(path), lambda fh: fh.write(text), binary=False)


def finite_json(data: object) -> object:
    """`data` with every non-finite float (NaN, ±inf) replaced by None (JSON `null`)."""
    if isinstance(data, float):
        return data if math.isfinite(data) else None
    if isinstance(data, dict):
        return {k: finite_json(v) for k, v in data.items()}
    if isinstance(data, list | tuple):
        return [finite_json(v) for v in data]
    return data


def json_text(data: object, *, indent: int | None = 2) -> str:
    """Strict JSON text (no bare NaN/Infinity: they become null), with a final newline."""
    return json.dumps(finite_json(data), indent=indent, allow_nan=False) + "\n"


def write_json(path: str | Path, data: object) -> None:
    """Write `data` as strict JSON to `path` atomically."""
    write_text(path, json_text(data))


def write_figure(path: str | Path, fig) -> None:
    """Save a matplotlib figure as PNG to `path` atomically, then close it."""
    import matplotlib.pyplot as plt

    try:
        _write_atomic(Path(path), lambda fh: fig.savefig(fh, format="png", dpi=120), binary=True)
    finally:
        plt.close(fig)


def remove_stale_temps(folder: Path, names: tuple[str, ...]) -> None:
    """Remove temporary files of `names` left in `folder` by a killed writer."""
    for name in names:
        for tmp in Path(folder).glob(f".{glob.escape(name)}.*{_TEMP_SUFFIX}"):
            tmp.unlink(missing_ok=True)


def safe_component(text: str, fallback: str = "scenario") -> str:
    """One safe path component from user text: letters, digits, `.`, `_`, `-`; at most 64
    characters; never empty, hidden, `..` or option-like."""
    cleaned = re.sub(r"[^\w.-]+", "_", text).lstrip(".-_")[:64].rstrip(".")
    return cleaned or fallback


_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f\u2028\u2029\u200e\u200f\u202a-\u202e\u2066-\u2069]")


def has_control(text: str) -> bool:
    """Whether `text` holds a line break, a terminal control (ESC) or a bidi override."""
    return _CONTROL.search(text) is not None


def one_line(text: str) -> str:
    """`text` as one line for a terminal or a comment: control characters shown escaped."""
    return _CONTROL.sub(lambda m: m.group().encode("unicode_escape").decode("ascii"), text)


def spreadsheet_cell(text: str) -> str:
    """A CSV text cell that a spreadsheet never reads as a formula (leading = + - @ quoted)."""
    return f"'{text}" if text[:1] in ("=", "+", "-", "@", "\t", "\r") else text


def read_json(path: str, option: str) -> object:
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
