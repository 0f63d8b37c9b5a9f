"""The departure codes prespec detects, and the notes it writes.

A departure is a way in which what ran differs from what was locked; each is recorded in the
results, the report and the audit log with what was expected and what was found. A note is
information that is part of the plan's own rules (a pre-specified switch, the missing rule).
To add a departure code: add it to ``DEPARTURE_CODES`` with a one-line meaning, raise it where
it is detected with ``departure(...)``, and add a test that provokes it.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

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
}

# Departures that stop a run (exit 3) unless the user accepts them with a reason.
STOPPING = frozenset({"plan-modified-after-lock", "run-without-lock", "override"})


@dataclass(frozen=True)
class Departure:
    code: str
    detail: str
    expected: str | None
    found: str | None
    accepted: str | None = None  # the --accept-deviation reason, for stopping departures

    def __post_init__(self) -> None:
        if self.code not in DEPARTURE_CODES:
            raise ValueError(f"unknown departure code {self.code!r}")

    def to_json(self) -> dict[str, str | None]:
        doc = asdict(self)
        if self.accepted is None:
            del doc["accepted"]
        return doc


@dataclass(frozen=True)
class Note:
    code: str
    detail: str

    def to_json(self) -> dict[str, str]:
        return asdict(self)
