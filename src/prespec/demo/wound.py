"""The invented demonstration study: a three-arm wound-dressing trial.

Every number here is invented, drawn with a fixed seed; no real study's data are used.
"""

from __future__ import annotations

import csv
import io
from pathlib import Path

import numpy as np

from prespec.errors import BadInput

PLAN_NAME = "wound-dressing.yaml"
DATA_NAME = "data/wound-dressing.csv"
SEED = 20270115

PLAN_TEXT = """\
# An invented three-arm trial, for demonstration only.
prespec: 1
title: Dressing regimens and 30-day wound infection
protocol: WD-2027-01 (invented demonstration study)
data:
  id: participant
  group: arm
  groups: [gauze, alginate, negative-pressure]
  reference: gauze
  include:
    - {column: consented, in: ["yes"]}
  planned_n: {gauze: 180, alginate: 180, negative-pressure: 180}
outcomes:
  infection:
    column: infected_30d
    event: [1]
    no_event: [0]
    missing: exclude
alpha: 0.05
multiplicity: holm
design:
  assumed: {gauze: 0.20, alginate: 0.14, negative-pressure: 0.10}
  power: 0.80
  dropout: 0.05
hypotheses:
  - id: H1
    title: Negative-pressure vs gauze, 30-day infection
    outcome: infection
    compare: [negative-pressure, gauze]
    test: pearson-chi-square
    alternative: two-sided
    measure: risk-difference
    interval: newcombe
    sparse: {min_expected: 5, test: fisher-exact}
    role: primary
  - id: H2
    title: Alginate vs gauze, 30-day infection
    outcome: infection
    compare: [alginate, gauze]
    test: pearson-chi-square
    measure: risk-difference
    interval: newcombe
    sparse: {min_expected: 5, test: fisher-exact}
    role: secondary
  - id: H3
    title: Any difference among the three regimens
    outcome: infection
    compare: all
    test: pearson-chi-square
    role: exploratory
"""

ARMS = {"gauze": 0.20, "alginate": 0.14, "negative-pressure": 0.10}


def demo_data(seed: int = SEED, per_arm: int = 200) -> str:
    """The demo data as CSV text: two sites, a consent column, some blank outcomes, one slip."""
    rng = np.random.default_rng(seed)
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(["participant", "site", "arm", "consented", "infected_30d"])
    arms = np.repeat(list(ARMS), per_arm)
    rng.shuffle(arms)
    for number, arm in enumerate(arms, start=1):
        site = "north" if rng.random() < 0.55 else "south"
        consented = "no" if rng.random() < 0.03 else "yes"
        if rng.random() < 0.04:
            outcome = ""
        else:
            outcome = "1" if rng.random() < ARMS[str(arm)] else "0"
        writer.writerow([f"WD-{number:04d}", site, arm, consented, outcome])
    # A data-entry slip: a group label in the wrong case is not one of data.groups.
    writer.writerow([f"WD-{len(arms) + 1:04d}", "south", "Gauze", "yes", "0"])
    return out.getvalue()


def write_demo(folder: Path) -> tuple[Path, Path]:
    """Write the plan and data under ``folder``; refuse a folder holding anything else."""
    plan = folder / PLAN_NAME
    data = folder / DATA_NAME
    if folder.exists():
        if not folder.is_dir():
            raise BadInput(f"{folder}: exists and is not a folder")
        earlier = plan.is_file() and plan.read_text("utf-8") == PLAN_TEXT
        if any(folder.iterdir()) and not earlier:
            raise BadInput(f"{folder}: exists and holds other files; choose an empty folder")
    data.parent.mkdir(parents=True, exist_ok=True)
    plan.write_text(PLAN_TEXT, encoding="utf-8")
    data.write_text(demo_data(), encoding="utf-8")
    return plan, data
