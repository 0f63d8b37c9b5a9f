"""Input validation shared by the statistics functions: one clear ValueError per problem."""

from __future__ import annotations

import math
from collections.abc import Sequence
from numbers import Integral, Real

ALTERNATIVES: tuple[str, ...] = ("two-sided", "greater", "less")


def count(name: str, value: object) -> int:
    """Return ``value`` as an ``int`` if it is a non-negative integer, else raise ValueError."""
    if isinstance(value, bool) or not isinstance(value, Integral):
        raise ValueError(f"{name} must be an integer, got {value!r}")  # noqa: TRY004 (the interface raises ValueError)
    number = int(value)
    if number < 0:
        raise ValueError(f"{name} must be >= 0, got {number}")
    return number


def events_of_total(x_name: str, x: object, n_name: str, n: object) -> tuple[int, int]:
    """Validate one group's events and total: integers with 0 <= x <= n and n >= 1."""
    events = count(x_name, x)
    total = count(n_name, n)
    if total < 1:
        raise ValueError(f"{n_name} must be >= 1, got {total}")
    if events > total:
        raise ValueError(f"{x_name} ({events}) must not exceed {n_name} ({total})")
    return events, total


def table(events: Sequence[object], totals: Sequence[object]) -> tuple[list[int], list[int]]:
    """Validate a k×2 table given as parallel lists of events and totals, k >= 2."""
    if isinstance(events, (str, bytes)) or isinstance(totals, (str, bytes)):
        raise ValueError("events and totals must be sequences of integers")  # noqa: TRY004 (the interface raises ValueError)
    try:
        ev = list(events)
        tot = list(totals)
    except TypeError:
        raise ValueError("events and totals must be sequences of integers") from None
    if len(ev) != len(tot):
        raise ValueError(
            f"events ({len(ev)} groups) and totals ({len(tot)} groups) differ in length"
        )
    if len(ev) < 2:
        raise ValueError(f"a comparison needs at least 2 groups, got {len(ev)}")
    checked = [
        events_of_total(f"events[{i}]", x, f"totals[{i}]", n)
        for i, (x, n) in enumerate(zip(ev, tot))
    ]
    return [x for x, _ in checked], [n for _, n in checked]


def alternative(value: object) -> str:
    """Validate the alternative hypothesis name."""
    if value not in ALTERNATIVES:
        raise ValueError(f"alternative must be one of {', '.join(ALTERNATIVES)}; got {value!r}")
    return str(value)


def level(value: object) -> float:
    """Validate a confidence level strictly between 0 and 1."""
    if isinstance(value, bool) or not isinstance(value, Real):
        raise ValueError(f"level must be a number, got {value!r}")  # noqa: TRY004 (the interface raises ValueError)
    number = float(value)
    if not (math.isfinite(number) and 0.0 < number < 1.0):
        raise ValueError(f"level must be strictly between 0 and 1, got {number!r}")
    return number
