"""How numbers and counted nouns are written in every message: thousands separators and singular or plural."""

from __future__ import annotations

__all__ = ["count", "number"]

_IRREGULAR = {"process": "processes", "is": "are", "was": "were", "has": "have", "belongs": "belong"}


def number(value: float, digits: int = 3) -> str:
    """A whole number with thousands separators ("12,000"); other values to `digits` significant digits."""
    if float(value).is_integer() and abs(value) < 1e15:
        return f"{int(value):,}"
    if abs(value) >= 10 ** (digits - 1):
        return f"{value:,.0f}"
    return f"{value:.{digits}g}"


def count(n: int, noun: str, plural: str | None = None) -> str:
    """'1 trial', '2 trials', '10,000 trials'; `plural` for nouns that do not just take an s."""
    if n == 1:
        return f"1 {noun}"
    return f"{number(n)} {plural or _IRREGULAR.get(noun, noun + 's')}"
