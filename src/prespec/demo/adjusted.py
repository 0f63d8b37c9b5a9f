"""An invented two-arm trial with a covariate-adjusted primary analysis, for demonstration only.

Early mobilisation after hip-fracture surgery against usual care, 14-day pneumonia, four
centres, randomised in permuted blocks of four within each centre. The primary hypothesis is
adjusted for age, frailty and centre by g-computation (variance of Ye et al. in its
stratified-randomisation form); the secondary is a common risk difference over the centres
(stratified Miettinen–Nurminen score test). A few patients have a blank age, so the run shows
the departure ``missing-covariate``. Every number is drawn with a fixed seed; nothing is real.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd

PLAN_NAME = "adjusted-primary.yaml"
DATA_NAME = "adjusted-primary.csv"
SEED = 20270301
DEFAULT_FOLDER = "adjusted-demo"

PLAN_TEXT = """\
# An invented two-arm trial with stratified randomisation, for demonstration only.
prespec: 1
title: Early mobilisation after hip-fracture surgery and 14-day pneumonia
protocol: EM-HIP-01 (invented demonstration study)
data:
  id: patient
  group: arm
  groups: [early-mobilisation, usual-care]
  include:
    - {column: randomised, in: ["yes"]}
  planned_n: {early-mobilisation: 330, usual-care: 330}
outcomes:
  pneumonia:
    column: pneumonia_14d
    event: [1]
    no_event: [0]
    missing: exclude
alpha: 0.05
multiplicity: fixed-sequence
design:
  assumed: {early-mobilisation: 0.12, usual-care: 0.20}
  power: 0.80
  dropout: 0.03
hypotheses:
  - id: H1
    title: Early mobilisation vs usual care, adjusted for age, frailty and centre
    outcome: pneumonia
    compare: [early-mobilisation, usual-care]
    test: g-computation
    covariates: {age: numeric, frail: numeric, centre: categorical}
    measure: risk-difference
    variance: ye
    randomisation_strata: [centre]
    role: primary
  - id: H2
    title: Early mobilisation vs usual care, a common risk difference over the centres
    outcome: pneumonia
    compare: [early-mobilisation, usual-care]
    test: stratified-score
    strata: [centre]
    weights: cmh
    measure: risk-difference
    interval: stratified-miettinen-nurminen
    role: secondary
"""

# centre -> (patients, shift of the log odds of pneumonia); invented
CENTRES = {"harbour": (212, 0.0), "hill": (172, 0.3), "river": (160, -0.2), "valley": (176, 0.1)}


def adjusted_frame(seed: int = SEED) -> pd.DataFrame:
    """One row per patient: patient, centre, arm, randomised, age, frail, pneumonia_14d (text
    cells, as a CSV holds them). Deterministic for a seed."""
    rng = np.random.default_rng(seed)
    rows = []
    number = 0
    for centre, (size, shift) in CENTRES.items():
        arms: list[str] = []
        while len(arms) < size:  # permuted blocks of four within the centre
            block = ["early-mobilisation"] * 2 + ["usual-care"] * 2
            rng.shuffle(block)
            arms.extend(block)
        for arm in arms[:size]:
            number += 1
            age = int(np.clip(round(rng.normal(81, 7)), 65, 99))
            frail = int(rng.random() < 0.25 + 0.015 * (age - 81))
            logit = (-1.55 + shift + 0.045 * (age - 81) + 0.002 * (age - 81) ** 2
                     + 0.8 * frail - 0.65 * (arm == "early-mobilisation"))
            event = rng.random() < 1.0 / (1.0 + np.exp(-logit))
            outcome = "" if rng.random() < 0.03 else str(int(event))
            randomised = "no" if rng.random() < 0.015 else "yes"
            rows.append([f"EM-{number:04d}", centre, arm, randomised, str(age), str(frail),
                         outcome])
    frame = pd.DataFrame(rows, columns=["patient", "centre", "arm", "randomised", "age",
                                        "frail", "pneumonia_14d"])
    # three ages were never recorded
    for index in rng.choice(len(frame.index), size=3, replace=False):
        frame.loc[index, "age"] = ""
    return frame


def write_adjusted_demo(folder: Path, seed: int = SEED) -> tuple[Path, Path]:
    """Write the plan and its data into ``folder``: (plan path, data path). Overwrites them."""
    folder.mkdir(parents=True, exist_ok=True)
    plan = folder / PLAN_NAME
    plan.write_text(PLAN_TEXT, encoding="utf-8")
    data = folder / DATA_NAME
    adjusted_frame(seed).to_csv(data, index=False, lineterminator="\n")
    return plan, data


def main(argv: list[str] | None = None) -> int:
    """``python -m prespec.demo.adjusted [FOLDER]``: write the plan and its data into FOLDER
    (default: ``DEFAULT_FOLDER``); see :func:`prespec.demo.write_demo_main`."""
    from prespec.demo import write_demo_main

    return write_demo_main(
        argv, module="adjusted", what="early-mobilisation trial",
        description=("Write the invented early-mobilisation trial (a covariate-adjusted primary and "
                     "a stratified secondary, and its data) into a folder."),
        default_folder=DEFAULT_FOLDER, plan_name=PLAN_NAME, data_name=DATA_NAME,
        plan_text=PLAN_TEXT, write=write_adjusted_demo)


if __name__ == "__main__":
    sys.exit(main())
