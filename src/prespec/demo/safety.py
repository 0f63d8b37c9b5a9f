"""An invented safety review, for demonstration and the tests of families only.

Written twice: one row per participant and term (``safety-review.yaml``), and as a
participant table with an adverse-event table (``safety-events.yaml``, a family over the event
table), both from the same draws, so that the two give the same review.

Two hand-gel formulations (a new one and the standard one), 200 participants each, and 30
adverse-event terms in 3 body systems. The data have one row per participant and term
(``had_event`` 1 or 0), the shape a family expects. A few skin terms are made more frequent
with the new gel so that the flagging has something to find. Nothing here is real.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd

PLAN_NAME = "safety-review.yaml"
DATA_NAME = "safety-review.csv"

# body system -> term -> (rate with the standard gel, rate with the new gel); invented.
TERMS: dict[str, dict[str, tuple[float, float]]] = {
    "skin": {
        "dryness": (0.10, 0.30), "redness": (0.08, 0.22), "itching": (0.07, 0.16),
        "burning": (0.03, 0.12), "cracking": (0.04, 0.06), "peeling": (0.03, 0.04),
        "rash": (0.02, 0.03), "swelling": (0.01, 0.02), "blistering": (0.01, 0.01),
        "discolouration": (0.01, 0.01), "stinging": (0.05, 0.07), "tightness": (0.04, 0.05),
    },
    "eyes": {
        "eye irritation": (0.03, 0.04), "watering": (0.02, 0.03), "eye redness": (0.02, 0.02),
        "blurred vision": (0.01, 0.01), "eye itching": (0.02, 0.02), "eyelid swelling": (0.01, 0.01),
        "dry eye": (0.02, 0.03), "light sensitivity": (0.01, 0.01),
    },
    "general": {
        "headache": (0.06, 0.06), "nausea": (0.02, 0.02), "dizziness": (0.02, 0.02),
        "cough": (0.03, 0.03), "sneezing": (0.03, 0.04), "sore throat": (0.03, 0.03),
        "fatigue": (0.04, 0.04), "unpleasant smell": (0.02, 0.05), "dry mouth": (0.01, 0.01),
        "chest tightness": (0.01, 0.01),
    },
}

PLAN_TEXT = """\
# An invented safety review of two hand-gel formulations, for demonstration only.
prespec: 1
title: Skin and general tolerability of two hand-gel formulations
protocol: HG-SAFE-01 (invented demonstration study)
data:
  id: participant
  group: gel
  groups: [new, standard]
  reference: standard
  include:
    - {column: safety_set, in: ["yes"]}
  planned_n: {new: 200, standard: 200}
outcomes:
  reported:
    column: had_event
    event: [1]
    no_event: [0]
    missing: no-event
alpha: 0.05
multiplicity: holm
hypotheses:
  - id: AE
    title: Each adverse-event term, new vs standard gel
    outcome: reported
    compare: [new, standard]
    test: fisher-exact
    over: event_term
    within: body_system
    levels:
""" + "".join(f"      {system}: [{', '.join(terms)}]\n" for system, terms in TERMS.items()) + """\
    flag_method: double-fdr
    flag_level: 0.1
"""


def safety_frame(*, per_group: int = 200, seed: int = 7,
                 terms: dict[str, dict[str, tuple[float, float]]] | None = None
                 ) -> pd.DataFrame:
    """One row per participant and term: participant, gel, body_system, event_term, had_event,
    safety_set. Deterministic for a seed."""
    rng = np.random.default_rng(seed)
    terms = TERMS if terms is None else terms
    ids = [f"P{i:04d}" for i in range(1, 2 * per_group + 1)]
    gels = np.array(["new"] * per_group + ["standard"] * per_group)
    rng.shuffle(gels)
    parts = []
    for system, rates in terms.items():
        for term, (standard, new) in rates.items():
            p = np.where(gels == "new", new, standard)
            parts.append(pd.DataFrame({
                "participant": ids, "gel": gels, "body_system": system, "event_term": term,
                "had_event": (rng.random(len(ids)) < p).astype(int).astype(str),
                "safety_set": "yes"}))
    return pd.concat(parts, ignore_index=True)


EVENTS_PLAN_NAME = "safety-events.yaml"
UNITS_NAME = "safety-participants.csv"
EVENTS_NAME = "safety-events.csv"

EVENTS_PLAN_TEXT = """\
# The invented hand-gel safety review, from a participant table and an adverse-event table.
prespec: 1
title: Skin and general tolerability of two hand-gel formulations (from an event table)
protocol: HG-SAFE-01 (invented demonstration study)
data:
  id: participant
  group: gel
  groups: [new, standard]
  reference: standard
  include:
    - {column: safety_set, in: ["yes"]}
  planned_n: {new: 200, standard: 200}
  source: safety-participants.csv
  events:
    source: safety-events.csv
    id: participant
    level: event_term
    within: body_system
alpha: 0.05
multiplicity: holm
hypotheses:
  - id: AE
    title: Each adverse-event term, new vs standard gel
    compare: [new, standard]
    test: fisher-exact
    over: events
    levels:
""" + "".join(f"      {system}: [{', '.join(terms)}]\n" for system, terms in TERMS.items()) + """\
    flag_method: double-fdr
    flag_level: 0.1
"""


def event_tables(frame: pd.DataFrame, *, seed: int = 11) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The one-row-per-participant-and-term ``frame`` as a participant table (participant,
    gel, safety_set) and an event table (participant, event_term, body_system, day): one row
    per event, so a participant with a term has one row of it, or two on different days."""
    rng = np.random.default_rng(seed)
    units = (frame[["participant", "gel", "safety_set"]].drop_duplicates("participant")
             .reset_index(drop=True))
    had = frame.loc[frame["had_event"].astype(str) == "1",
                    ["participant", "event_term", "body_system"]].reset_index(drop=True)
    had = had.assign(day=rng.integers(1, 29, len(had.index)).astype(str))
    again = had.loc[rng.random(len(had.index)) < 0.15]
    again = again.assign(day=rng.integers(29, 57, len(again.index)).astype(str))
    events = pd.concat([had, again], ignore_index=True)
    events = events.iloc[rng.permutation(len(events.index))].reset_index(drop=True)
    return units, events


def write_safety_events_demo(folder: Path, *, per_group: int = 200, seed: int = 7
                             ) -> tuple[Path, Path]:
    """Write the event-table form of the demo into ``folder``: the plan, the participant
    table and the event table; (plan path, participant table path). Overwrites them."""
    folder.mkdir(parents=True, exist_ok=True)
    plan = folder / EVENTS_PLAN_NAME
    plan.write_text(EVENTS_PLAN_TEXT, encoding="utf-8")
    units, events = event_tables(safety_frame(per_group=per_group, seed=seed))
    units.to_csv(folder / UNITS_NAME, index=False)
    events.to_csv(folder / EVENTS_NAME, index=False)
    return plan, folder / UNITS_NAME


def write_safety_demo(folder: Path, *, per_group: int = 200, seed: int = 7
                      ) -> tuple[Path, Path]:
    """Write the plan and its data into ``folder``: (plan path, data path). Overwrites them."""
    folder.mkdir(parents=True, exist_ok=True)
    plan = folder / PLAN_NAME
    plan.write_text(PLAN_TEXT, encoding="utf-8")
    data = folder / DATA_NAME
    safety_frame(per_group=per_group, seed=seed).to_csv(data, index=False)
    return plan, data


DEFAULT_FOLDER = "safety-demo"


def main(argv: list[str] | None = None) -> int:
    """``python -m prespec.demo.safety [FOLDER]``: write the plan and its data into FOLDER
    (default: ``DEFAULT_FOLDER``); see :func:`prespec.demo.write_demo_main`."""
    from prespec.demo import write_demo_main

    return write_demo_main(
        argv, module="safety", what="safety review",
        description=("Write the invented hand-gel safety review (a plan with a family over 30 "
                     "adverse-event terms, and its data) into a folder."),
        default_folder=DEFAULT_FOLDER, plan_name=PLAN_NAME, data_name=DATA_NAME,
        plan_text=PLAN_TEXT, write=write_safety_demo)


if __name__ == "__main__":
    sys.exit(main())
