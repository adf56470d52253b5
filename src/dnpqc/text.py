"""Words and numbers for people: a swept value in a readable unit, a count with its noun."""

from __future__ import annotations

#: Units a single value is written in, largest first: (suffix, threshold, unit, scale).
_VALUE_UNITS = {
    "_hz": ((1e6, "MHz", 1e-6), (0.0, "kHz", 1e-3)),
    "_s": ((1.0, "s", 1.0), (1e-3, "ms", 1e3), (0.0, "µs", 1e6)),
}


def format_value(parameter: str, value: float) -> str:
    """One value of a swept key in a readable unit: kHz or MHz, µs, ms or s."""
    for suffix, units in _VALUE_UNITS.items():
        if parameter.endswith(suffix):
            for threshold, unit, scale in units:
                if abs(value) >= threshold:
                    return f"{value * scale:.4g} {unit}"
    return f"{value:.4g}"


def count_of(count: int, noun: str, plural: str | None = None) -> str:
    """ "1 nucleus", "3 nuclei": a count with its noun in the right number."""
    return f"{count} {noun if count == 1 else plural or noun + 's'}"
