"""Typed results: frozen dataclasses whose JSON form is their fields, in order, nested."""

from __future__ import annotations

from dataclasses import asdict


class Record:
    """A frozen dataclass of results; `to_json` gives its fields as JSON-ready data (nested
    records and dicts of records included). Subclasses whose JSON differs override it."""

    def to_json(self) -> dict[str, object]:
        return asdict(self)  # type: ignore[call-overload]
