"""Reading values out of ``results.json`` and formatting them for the report.

The report shows what ``results.json`` holds and computes nothing. Every reader here names the
key path of the value it reads, so that a malformed results file fails with a one-line message
such as ``results.json: hypotheses[2].p_value: expected a number or null, found 'abc'``.

Formatting follows the report's conventions: p-values with 4 significant digits and
``< 0.0001`` below 1e-4, estimates and limits with 4 decimals, statistics with 3 decimals,
and ``—`` for a value that is null (not computable).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

from prespec.common.caution import CAUTION
from prespec.common.shown import visible  # noqa: F401  (one rule for every output; kept here by name)
from prespec.errors import PrespecError

#: What the report shows for a null (not computable) value.
NULL = "—"

#: Shown if results.json carries no caution; the report never goes out without one.
DEFAULT_CAUTION = CAUTION

#: How a measure is named in the report.
MEASURES = {
    "risk-difference": "risk difference",
    "risk-ratio": "risk ratio",
    "odds-ratio": "odds ratio",
    "proportion": "proportion",
}


def measure_label(measure: str) -> str:
    """``risk-ratio`` -> ``risk ratio``; an unknown measure is shown as written."""
    return MEASURES.get(measure, measure)


def _where(path: str) -> str:
    return f"results.json: {path}" if path else "results.json"


def _kind(value: object) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def number(value: object, path: str) -> float | None:
    """A number or None; a non-finite number is None. Anything else is an error."""
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise PrespecError(f"{_where(path)}: expected a number or null, found {_kind(value)}")
    result = float(value)
    return result if math.isfinite(result) else None


def text(value: object, path: str, *, default: str | None = None) -> str:
    """A string (numbers are shown as written); None gives ``default`` or an error."""
    if value is None:
        if default is not None:
            return default
        raise PrespecError(f"{_where(path)}: expected text, found null")
    if isinstance(value, str):
        return value
    if isinstance(value, int | float) and not isinstance(value, bool):
        return str(value)
    raise PrespecError(f"{_where(path)}: expected text, found {_kind(value)}")


def mapping(value: object, path: str) -> Mapping[str, Any]:
    """A JSON object."""
    if not isinstance(value, Mapping):
        raise PrespecError(f"{_where(path)}: expected an object, found {_kind(value)}")
    return value


def items(value: object, path: str) -> Sequence[Any]:
    """A JSON array; null or absent counts as empty."""
    if value is None:
        return []
    if isinstance(value, str) or not isinstance(value, Sequence):
        raise PrespecError(f"{_where(path)}: expected a list, found {_kind(value)}")
    return value


def pair(value: object, path: str) -> tuple[float | None, float | None]:
    """An interval ``[low, high]``; null gives ``(None, None)``."""
    if value is None:
        return (None, None)
    seq = items(value, path)
    if len(seq) != 2:
        raise PrespecError(f"{_where(path)}: expected [low, high], found {_kind(value)}")
    return (number(seq[0], f"{path}[0]"), number(seq[1], f"{path}[1]"))


def fmt_p(value: float | None) -> str:
    """A p-value: 4 significant digits, ``< 0.0001`` below 1e-4."""
    if value is None:
        return NULL
    if value < 1e-4:
        return "< 0.0001"
    return f"{value:#.4g}"


def fmt_estimate(value: float | None) -> str:
    """An estimate or an interval limit: 4 decimals."""
    return NULL if value is None else f"{value:.4f}"


def fmt_statistic(value: float | None) -> str:
    """A test statistic: 3 decimals."""
    return NULL if value is None else f"{value:.3f}"


def fmt_count(value: float | None) -> str:
    """A count, shown without decimals when it is whole."""
    if value is None:
        return NULL
    return str(int(value)) if value == int(value) else f"{value:.4g}"


def fmt_expected(value: float | None) -> str:
    """An expected count under the null hypothesis: 2 decimals."""
    return NULL if value is None else f"{value:.2f}"


def fmt_level(value: float | None) -> str:
    """A confidence level as a percentage: 0.95 -> ``95%``, 0.975 -> ``97.5%``."""
    return NULL if value is None else f"{value * 100:.10g}%"


def fmt_interval(low: float | None, high: float | None) -> str:
    """An interval ``(low, high)`` with 4 decimals; both null gives ``—``."""
    if low is None and high is None:
        return NULL
    return f"({fmt_estimate(low)}, {fmt_estimate(high)})"


def fmt_rate(value: float | None) -> str:
    """A rate fixed by the plan (a null rate): at least 2 decimals, more when it has them.

    0.3 -> ``0.30``, 0.125 -> ``0.125``.
    """
    if value is None:
        return NULL
    shown = f"{value:.6f}".rstrip("0")
    whole, _, decimals = shown.partition(".")
    return f"{whole}.{decimals.ljust(2, '0')}"


def fmt_weight(value: float | None) -> str:
    """A weight of the graphical procedure: up to 4 significant digits, 0.5 -> ``0.5``."""
    return NULL if value is None else f"{value:.4g}"


def fmt_thousands(value: float | None) -> str:
    """A whole count with thousands separators: 100000 -> ``100,000``."""
    if value is None:
        return NULL
    return f"{int(value):,}" if value == int(value) else f"{value:,.4g}"


def fmt_error(value: float | None) -> str:
    """A Monte Carlo standard error: 2 significant digits, 0.00123 -> ``0.0012``."""
    return NULL if value is None else f"{value:.2g}"


def plain(value: object) -> str:
    """Any JSON value as text: strings as they are, numbers as written, the rest as JSON."""
    if value is None:
        return NULL
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str | int | float):
        return str(value)
    import json

    return json.dumps(value, sort_keys=True, ensure_ascii=False)
