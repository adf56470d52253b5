"""Polynomials in a program's variables: the angles of a compiled circuit.

An angle depends on the swept quantity and, when system imperfections are simulated, on a
relative drive-amplitude error and a detuning error. `Poly` holds such a polynomial as
{monomial: coefficient}, a monomial being a sorted tuple of variable names. It evaluates to a
number for the exact engine and to a qiskit `ParameterExpression` for the circuit.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

from qiskit.circuit import Parameter, ParameterExpression

from ..errors import ScenarioError
from .protocols import Linear

Monomial = tuple[str, ...]

#: Smallest coefficient of a variable that a qiskit ParameterExpression keeps faithfully.
#: Measured with qiskit 2.6: `1e-15 * Parameter("x")` binds to 1e-15 whatever x is (the
#: variable is lost), while 1e-14 still binds right; 1e-13 leaves a margin of 100.
MIN_PARAMETER_COEFFICIENT = 1e-13


@dataclass(frozen=True)
class Poly:
    """Σ coefficient·Π variables, with canonical (sorted, non-zero) terms."""

    terms: tuple[tuple[Monomial, float], ...] = ()

    @staticmethod
    def _make(items: Mapping[Monomial, float]) -> Poly:
        return Poly(tuple(sorted((m, c) for m, c in items.items() if c != 0.0)))

    @staticmethod
    def constant(value: float) -> Poly:
        return Poly._make({(): float(value)})

    @staticmethod
    def variable(name: str, coefficient: float = 1.0) -> Poly:
        return Poly._make({(name,): float(coefficient)})

    @staticmethod
    def from_linear(value: Linear, name: str) -> Poly:
        """offset + slope·name."""
        return Poly._make({(): value.offset, (name,): value.slope})

    def __add__(self, other: Poly) -> Poly:
        out = dict(self.terms)
        for m, c in other.terms:
            out[m] = out.get(m, 0.0) + c
        return Poly._make(out)

    def __mul__(self, other: Poly | float) -> Poly:
        if not isinstance(other, Poly):
            return Poly._make({m: c * float(other) for m, c in self.terms})
        out: dict[Monomial, float] = {}
        for m1, c1 in self.terms:
            for m2, c2 in other.terms:
                m = tuple(sorted(m1 + m2))
                out[m] = out.get(m, 0.0) + c1 * c2
        return Poly._make(out)

    __rmul__ = __mul__

    @property
    def variables(self) -> set[str]:
        return {v for m, _ in self.terms for v in m}

    def at(self, values: Mapping[str, float]) -> float:
        """The value with every variable set from `values`."""
        total = 0.0
        for m, c in self.terms:
            term = c
            for v in m:
                term *= values[v]
            total += term
        return total

    def expression(self, parameters: Mapping[str, Parameter]) -> float | ParameterExpression:
        """A float when constant, else a ParameterExpression of `parameters`."""
        total: float | ParameterExpression = 0.0
        for m, c in self.terms:
            if m and abs(c) < MIN_PARAMETER_COEFFICIENT:
                raise ScenarioError(
                    f"a gate angle is {c:.3g}·{'·'.join(m)}, a coefficient below "
                    f"{MIN_PARAMETER_COEFFICIENT:g} that qiskit's parameter expressions do not "
                    "keep; a frequency or time in the scenario is too small for the circuit "
                    "engines"
                )
            term: float | ParameterExpression = c
            for v in m:
                term = term * parameters[v]
            total = total + term
        return total
