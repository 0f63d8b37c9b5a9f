"""Frozen result objects returned by the statistics functions.

They hold plain Python numbers (``float``, ``int``, ``None``) so that the caller can write them
to JSON without conversion; ``nan`` marks a value that is undefined for the data.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class TestResult:
    """The outcome of one test of equal proportions.

    ``statistic`` is X² for chi-square tests, the signed z (first group minus second) for z
    tests and ``None`` for Fisher's exact test. ``p_value`` is ``nan`` where the test is
    undefined for the table (for example a zero column margin in a chi-square test).
    """

    __test__ = False  # not a pytest test class, despite the name

    method: str
    statistic: float | None
    df: int | None
    p_value: float
    alternative: str


@dataclass(frozen=True)
class Estimate:
    """A point estimate with its confidence interval ``[low, high]`` at ``level``.

    ``high`` may be ``inf`` (an unbounded upper limit, e.g. a ratio with no events in the second
    group) and ``value`` may be ``nan`` or ``inf`` where the estimate is undefined or unbounded.
    ``note`` says how the data were adjusted, if they were (e.g. 0.5 added to every cell).
    """

    measure: str
    value: float
    low: float
    high: float
    method: str
    level: float
    note: str | None = None
