"""How a data cell is compared with a value written in the plan: one rule for the whole tool.

docs/plan-format.md, "Reading the data": blank is an empty or whitespace-only cell, or a null;
values match as exact text after trimming, or by numeric equality when both sides are numbers
(so ``1``, ``"1"`` and ``1.0`` agree); comparisons are case-sensitive.
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable
from typing import Any

# ASCII digits only: Python's \d (and float()) also take other scripts' digits such as "١",
# which SQL engines read as text; the engines' NUMBER_PATTERN is the same expression
_NUMBER = re.compile(r"[+-]?([0-9]+(\.[0-9]*)?|\.[0-9]+)([eE][+-]?[0-9]+)?")


def is_blank(cell: Any) -> bool:
    if cell is None:
        return True
    if isinstance(cell, float) and math.isnan(cell):
        return True
    if isinstance(cell, str):
        return cell.strip() == ""
    try:  # pandas.NA, numpy.nan, NaT
        import pandas as pd

        return bool(pd.isna(cell))
    except (TypeError, ValueError):
        return False


def as_text(cell: Any) -> str:
    """The trimmed text of a non-blank cell (numbers as Python prints them)."""
    if isinstance(cell, float) and cell.is_integer():
        return str(int(cell)) if abs(cell) < 1e16 else repr(cell)
    return str(cell).strip()


def as_number(value: Any) -> float | None:
    """The value as a finite number, or None when it is not a plain number."""
    if isinstance(value, bool):
        return None
    if isinstance(value, int | float):
        number = float(value)
    else:
        try:
            import numpy as np

            if isinstance(value, np.integer | np.floating):
                number = float(value)
            else:
                text = str(value).strip()
                if not _NUMBER.fullmatch(text):
                    return None
                number = float(text)
        except (TypeError, ValueError):
            return None
    return number if math.isfinite(number) else None


def value_key(value: Any) -> tuple[str, Any]:
    """The key under which values agree: a number when the value is one, else its trimmed text.

    Two values match exactly when their keys are equal: text equal after trimming implies
    equal numbers when both are numbers, and numbers compare by value, so ``1``, ``"1"`` and
    ``1.0`` share the key ``("number", 1.0)``.
    """
    number = as_number(value)
    return ("number", number) if number is not None else ("text", as_text(value))


class ValueSet:
    """A set of plan values that answers ``cell in set`` by the matching rule above."""

    def __init__(self, values: Iterable[Any]) -> None:
        self.values = list(values)
        self._keys = {value_key(v) for v in self.values}

    def __contains__(self, cell: Any) -> bool:
        return not is_blank(cell) and value_key(cell) in self._keys
