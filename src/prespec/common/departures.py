"""The departure codes prespec detects, and the notes it writes.

A departure is a way in which what ran differs from what was locked; each is recorded in the
results, the report and the audit log with what was expected and what was found. A note is
information that is part of the plan's own rules (a pre-specified switch, the missing rule).
To add a departure code: add it to ``DEPARTURE_CODES`` with a one-line meaning, raise it where
it is detected with ``departure(...)``, and add a test that provokes it.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import asdict, dataclass, field

DEPARTURE_CODES: dict[str, str] = {
    "plan-modified-after-lock": "the plan file no longer matches its lock",
    "run-without-lock": "the plan was run without having been locked",
    "override": "a command-line change to the locked analysis",
    "data-changed-since-last-run": "the data differ from those of the previous run",
    "unexpected-group": "rows whose group is blank or not one of data.groups",
    "unmapped-outcome-value": "outcome values that are neither event nor no_event",
    "sample-size-shortfall": "a group's analysed total is below its planned_n",
    "amended-after-unblinding": "the plan was amended after a run on the data",
    "environment-differs-from-lock": "a version of Python or a dependency differs from the lock's",
    "look-out-of-order": "an interim look run before an earlier one, or after a later one",
    "look-repeated": "an interim look (or the final analysis) run a second time",
    "final-without-looks": "the final analysis run without every interim look the plan names",
    "look-off-plan": "a look with classical boundaries away from its planned information "
                     "fraction, where those boundaries do not hold",
    "undeclared-level": "rows of a family whose level is not one of its declared levels",
    "missing-covariate": "units of a covariate-adjusted hypothesis left out for a blank "
                         "covariate",
    "unmatched-event-id": "event rows whose unit id is not in the unit table",
    "blank-event-level": "event rows of a unit in the unit table whose level is blank",
}

# Departures that stop a run (exit 3) unless the user accepts them with a reason.
STOPPING = frozenset({"plan-modified-after-lock", "run-without-lock", "override"})


#: How many values a departure's ``found`` lists before "… and N more".
FOUND_SHOWN = 20
#: A value longer than this is shortened where a list shows it.
VALUE_SHOWN = 60
_MORE = " … and "


def listed(values: Iterable[str], shown: int = FOUND_SHOWN) -> str:
    """``a, b, c … and 999,997 more``: at most ``shown`` values, each at most VALUE_SHOWN
    characters, so that a list from the data stays one short line however long it is."""
    items = list(values)
    cut = [v if len(v) <= VALUE_SHOWN else v[: VALUE_SHOWN - 1] + "…" for v in items[:shown]]
    rest = len(items) - len(cut)
    return ", ".join(cut) + (f"{_MORE}{rest:,} more" if rest > 0 else "")


def capped_found(found: str | None) -> str | None:
    """A ``found`` as this version writes it: an uncapped list from an earlier version (values
    joined by ", ") is capped as ``listed`` caps it, so that a recomputation compares equal."""
    if found is None or _MORE in found:
        return found
    items = found.split(", ")
    return listed(items) if len(items) > FOUND_SHOWN or any(
        len(v) > VALUE_SHOWN for v in items) else found


@dataclass(frozen=True)
class Departure:
    code: str
    detail: str
    expected: str | None
    found: str | None
    accepted: str | None = None  # the --accept-deviation reason, for stopping departures
    # every value found, where ``found`` lists some of them (not written; families merge them)
    values: tuple[str, ...] | None = field(default=None, compare=False, repr=False)

    def __post_init__(self) -> None:
        if self.code not in DEPARTURE_CODES:
            raise ValueError(f"unknown departure code {self.code!r}")

    @classmethod
    def of_values(cls, code: str, detail: str, expected: str | None,
                  values: Iterable[str]) -> Departure:
        """A departure whose ``found`` lists ``values`` (sorted, capped by ``listed``)."""
        every = tuple(sorted(set(values)))
        return cls(code, detail, expected, listed(every), values=every)

    def to_json(self) -> dict[str, str | None]:
        doc: dict[str, str | None] = {"code": self.code, "detail": self.detail,
                                      "expected": self.expected, "found": self.found}
        if self.accepted is not None:
            doc["accepted"] = self.accepted
        return doc


@dataclass(frozen=True)
class Note:
    code: str
    detail: str

    def to_json(self) -> dict[str, str]:
        return asdict(self)
