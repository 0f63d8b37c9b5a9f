"""``python -m prespec.demo.safety_events [FOLDER]``: the invented safety review as a
participant table and an adverse-event table, with its plan (a family over the event table);
the data are those of :mod:`prespec.demo.safety`, so both give the same review."""

from __future__ import annotations

import sys

from prespec.demo.safety import (
    EVENTS_PLAN_NAME,
    EVENTS_PLAN_TEXT,
    UNITS_NAME,
    write_safety_events_demo,
)

DEFAULT_FOLDER = "safety-events-demo"


def main(argv: list[str] | None = None) -> int:
    """Write the plan, the participant table and the event table into FOLDER (default:
    ``DEFAULT_FOLDER``); see :func:`prespec.demo.write_demo_main`."""
    from prespec.demo import write_demo_main

    return write_demo_main(
        argv, module="safety_events", what="safety review from an event table",
        description=("Write the invented hand-gel safety review as a participant table and an "
                     "adverse-event table, with its plan (a family over the event table), into "
                     "a folder."),
        default_folder=DEFAULT_FOLDER, plan_name=EVENTS_PLAN_NAME, data_name=UNITS_NAME,
        plan_text=EVENTS_PLAN_TEXT, write=write_safety_events_demo)


if __name__ == "__main__":
    sys.exit(main())
