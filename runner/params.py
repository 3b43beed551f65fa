"""Declarative parameter schemas: each registered kind lists its parameters, and values are checked here."""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

__all__ = [
    "FLOAT_CAP",
    "INT_CAP",
    "PLANNING_BUDGET",
    "ROLES",
    "Param",
    "budget_params",
    "check_value",
    "describe_range",
    "resolve_params",
]

INT_CAP = 10**9
"""Largest whole-number parameter when the schema sets no upper bound: counts and budgets stay in memory."""
FLOAT_CAP = 1e12
"""Largest magnitude of a number parameter on a side the schema leaves open: values stay far from overflow."""
PLANNING_BUDGET = "planning budget"
"""Role of a parameter that sets how much planning compute an agent spends per real step (planning updates,
replayed updates, search simulations): the report's budget figures vary it, whatever the parameter's name."""
ROLES: tuple[str, ...] = (PLANNING_BUDGET,)


@dataclass(frozen=True)
class Param:
    """One parameter of a kind: its type, default, allowed range or choices, and a one-line meaning."""

    name: str
    type: str  # "float", "int", "bool" or "choice"
    default: Any
    meaning: str
    low: float | None = None
    high: float | None = None
    low_open: bool = False
    high_open: bool = False
    choices: tuple[str, ...] = ()
    role: str = ""

    def __post_init__(self) -> None:
        """Reject a role that no part of stepmeter reads."""
        if self.role and self.role not in ROLES:
            raise ValueError(f"parameter {self.name!r}: role must be one of {ROLES} or empty, got {self.role!r}")

    def expected(self) -> str:
        """Say in words what a valid value looks like."""
        if self.type == "bool":
            return "true or false"
        if self.type == "choice":
            return "one of " + ", ".join(repr(c) for c in self.choices)
        noun = "a whole number" if self.type == "int" else "a number"
        span = describe_range(self)
        return f"{noun} in {span}" if span else noun


def describe_range(param: Param) -> str:
    """Interval notation for a numeric parameter, e.g. '(0, 1]'; empty when unbounded."""
    if param.low is None and param.high is None:
        return ""
    left = "(" if param.low_open or param.low is None else "["
    right = ")" if param.high_open or param.high is None else "]"
    low = "-inf" if param.low is None else _fmt(param.low)
    high = "inf" if param.high is None else _fmt(param.high)
    return f"{left}{low}, {high}{right}"


def budget_params(schema: tuple[Param, ...]) -> tuple[str, ...]:
    """Names of the parameters a schema declares as planning budgets."""
    return tuple(param.name for param in schema if param.role == PLANNING_BUDGET)


def _fmt(x: float) -> str:
    return str(int(x)) if float(x).is_integer() else repr(float(x))


def check_value(param: Param, value: Any) -> Any:
    """Return the value converted to the parameter's type, or raise ValueError saying what was expected."""
    got = f"got {value!r}"
    if param.type == "bool":
        if isinstance(value, bool):
            return value
        raise ValueError(f"expected {param.expected()}, {got}")
    if param.type == "choice":
        if isinstance(value, str) and value in param.choices:
            return value
        raise ValueError(f"expected {param.expected()}, {got}")
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ValueError(f"expected {param.expected()}, {got}")
    if param.type == "int":
        if isinstance(value, float) and not value.is_integer():
            raise ValueError(f"expected {param.expected()}, {got}")
        value = int(value)
    else:
        value = float(value)
        if not math.isfinite(value):
            raise ValueError(f"expected {param.expected()}, {got}")
    if param.low is not None and (value < param.low or (param.low_open and value == param.low)):
        raise ValueError(f"expected {param.expected()}, {got}")
    if param.high is not None and (value > param.high or (param.high_open and value == param.high)):
        raise ValueError(f"expected {param.expected()}, {got}")
    cap = INT_CAP if param.type == "int" else FLOAT_CAP
    if (param.high is None and value > cap) or (param.low is None and value < -cap):
        raise ValueError(f"expected {param.expected()} of magnitude at most {cap:g}, {got}")
    return value


def resolve_params(schema: tuple[Param, ...], given: Mapping[str, Any]) -> dict[str, Any]:
    """Fill defaults and check every given value; raise KeyError(name) for an unknown name.

    Raises ValueError with the offending name as its first argument's prefix ("name: ...").
    """
    by_name = {p.name: p for p in schema}
    for name in given:
        if name not in by_name:
            raise KeyError(name)
    resolved = {}
    for p in schema:
        if p.name in given:
            try:
                resolved[p.name] = check_value(p, given[p.name])
            except ValueError as err:
                raise ValueError(f"{p.name}: {err}") from None
        else:
            resolved[p.name] = p.default
    return resolved
