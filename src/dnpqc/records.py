"""Typed results: frozen dataclasses whose JSON form is their fields, in order, nested."""

from __future__ import annotations

from dataclasses import fields


def json_value(value: object) -> object:
    """`value` as JSON-ready data: a result by its own `to_json`, dicts and sequences item by
    item, anything else as it is."""
    if hasattr(value, "to_json"):
        return value.to_json()
    if isinstance(value, dict):
        return {key: json_value(item) for key, item in value.items()}
    if isinstance(value, list | tuple):
        return [json_value(item) for item in value]
    return value


class Record:
    """A frozen dataclass of results; `to_json` gives its fields as JSON-ready data, nested
    results by their own `to_json`. Subclasses whose JSON differs override it."""

    def to_json(self) -> dict[str, object]:
        return {f.name: json_value(getattr(self, f.name)) for f in fields(self)}  # type: ignore[arg-type]
