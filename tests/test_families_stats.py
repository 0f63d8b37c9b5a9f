"""A family's statistics: each member equals the ordinary machinery on its level's rows (and
scipy/statsmodels), the flagging equals statsmodels' Benjamini–Hochberg and the double FDR."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.proportion import confint_proportions_2indep, proportions_ztest

from prespec.analysis.families import analyse_family, bh_threshold, prepare_run
from prespec.analysis.hypotheses import compute_hypothesis
from prespec.common.departures import Note
from prespec.data import prepare
from prespec.demo.safety import safety_frame
from prespec.plan import load_plan
from prespec.stats.doublefdr import double_fdr

PLAN = """\
prespec: 1
title: Tolerability of two invented hand gels
data:
  id: participant
  group: gel
  groups: [new, standard]
  include:
    - {column: safety_set, in: ["yes"]}
outcomes:
  reported:
    column: had_event
    event: [1]
    no_event: [0]
    missing: exclude
alpha: 0.05
multiplicity: holm
hypotheses:
  - id: AE
    outcome: reported
    compare: [new, standard]
    test: TEST
    over: event_term
    within: body_system
EXTRA    flag_method: METHOD
    flag_level: 0.1
"""


def family(tmp_path: Path, test: str = "fisher-exact", method: str = "benjamini-hochberg",
           extra: str = "", per_group: int = 80, seed: int = 3) -> tuple[Any, pd.DataFrame]:
    text = PLAN.replace("TEST", test).replace("METHOD", method).replace("EXTRA", extra)
    path = tmp_path / "plan.yaml"
    path.write_text(text)
    frame = safety_frame(per_group=per_group, seed=seed)
    return load_plan(path).model, frame


def run(plan: Any, frame: pd.DataFrame, **kwargs: Any) -> dict[str, Any]:
    _, data = prepare_run(frame, plan, "data.csv")
    return analyse_family(plan, plan.hypotheses[0], data[0], [], **kwargs)


def ordinary(plan: Any, frame: pd.DataFrame, level: str) -> dict[str, Any]:
    """The same comparison as an ordinary hypothesis of its own plan on the level's rows."""
    hyp = plan.hypotheses[0].model_copy(update={
        "id": "H1", "over": None, "within": None, "levels": None, "members": None,
        "flag_method": None, "flag_level": None, "group_level": None})
    single = plan.model_copy(update={"hypotheses": [hyp]})
    rows = frame[frame["event_term"] == level].reset_index(drop=True)
    return compute_hypothesis(hyp, single, prepare(rows, single, "data.csv"), [])


@pytest.mark.parametrize("test", ["fisher-exact", "pearson-chi-square", "two-proportion-z",
                                  "likelihood-ratio"])
def test_each_member_equals_the_ordinary_machinery(tmp_path: Path, test: str) -> None:
    plan, frame = family(tmp_path, test)
    fam = run(plan, frame, use_array=False)
    assert len(fam["members"]) == 30
    for member in fam["members"]:
        alone = ordinary(plan, frame, member["level"])
        assert member["table"] == alone["table"]
        assert member["p_value"] == alone["p_value"]
        assert member["statistic"] == alone["statistic"]
        assert member["test"] == alone["test"] == test
        assert member["estimate"] == {k: alone["estimate"][k] for k in
                                      ("measure", "value", "ci", "ci_method", "level")}


def _against_libraries(test: str, member: dict[str, Any]) -> None:
    (a, c), (n1, n2) = member["table"]["events"], member["table"]["totals"]
    if test == "fisher-exact":
        expected = sps.fisher_exact([[a, n1 - a], [c, n2 - c]]).pvalue  # scipy.stats.fisher_exact
    elif test == "pearson-chi-square":
        expected = sps.chi2_contingency([[a, n1 - a], [c, n2 - c]],
                                        correction=False).pvalue  # scipy.stats.chi2_contingency
    else:
        expected = proportions_ztest([a, c], [n1, n2])[1]  # statsmodels proportions_ztest
    assert member["p_value"] == pytest.approx(expected, rel=1e-9)
    low, high = confint_proportions_2indep(a, n1, c, n2, method="newcomb", compare="diff",
                                           alpha=0.05)  # statsmodels, Newcombe's hybrid score
    assert member["estimate"]["ci"] == pytest.approx([low, high], rel=1e-9)
    assert member["estimate"]["value"] == pytest.approx(a / n1 - c / n2, abs=1e-15)


@pytest.mark.parametrize("test", ["fisher-exact", "pearson-chi-square", "two-proportion-z"])
def test_each_member_against_scipy_and_statsmodels(tmp_path: Path, test: str) -> None:
    plan, frame = family(tmp_path, test)
    fam = run(plan, frame)
    tested = [m for m in fam["members"] if 0 < sum(m["table"]["events"])
              < sum(m["table"]["totals"])]
    assert len(tested) >= 25
    for member in tested:
        _against_libraries(test, member)


def test_benjamini_hochberg_equals_statsmodels(tmp_path: Path) -> None:
    plan, frame = family(tmp_path, seed=11)
    fam = run(plan, frame)
    p = [m["p_value"] for m in fam["members"]]
    reject, adjusted, _, _ = multipletests(p, alpha=0.1, method="fdr_bh")  # statsmodels
    assert [m["p_adjusted"] for m in fam["members"]] == pytest.approx(list(adjusted),
                                                                      rel=1e-12)
    assert [m["flagged"] for m in fam["members"]] == list(reject)
    assert fam["members_flagged"] == int(reject.sum()) >= 2
    assert all(m["p_group"] is None for m in fam["members"])
    # the cut-off drawn in the figure separates exactly the flagged members
    cut = fam["threshold"]
    assert cut == bh_threshold(p, 0.1)
    assert [x <= cut for x in p] == [m["flagged"] for m in fam["members"]]


def test_bh_threshold_by_hand() -> None:
    # p(1..4) = 0.01, 0.02, 0.03, 0.5 at q = 0.1: i*q/m = 0.025, 0.05, 0.075, 0.1, so k = 3
    assert bh_threshold([0.5, 0.03, 0.01, 0.02], 0.1) == pytest.approx(0.075)
    assert bh_threshold([0.9, 0.8], 0.1) == pytest.approx(0.05)  # none: q/m, which none reaches


def test_double_fdr_equals_the_double_fdr_function(tmp_path: Path) -> None:
    plan, frame = family(tmp_path, method="double-fdr", extra="    group_level: 0.2\n")
    fam = run(plan, frame)
    p = [m["p_value"] for m in fam["members"]]
    groups = [m["group"] for m in fam["members"]]
    ref = double_fdr(p, groups, level_groups=0.2, level_terms=0.1)
    assert [m["p_adjusted"] for m in fam["members"]] == list(ref.p_adjusted)
    assert [m["p_group"] for m in fam["members"]] == list(ref.p_group)
    assert [m["flagged"] for m in fam["members"]] == list(ref.flagged)
    assert [(g["group"], g["p_group"], g["flagged"]) for g in fam["groups"]] == list(
        zip(ref.groups, ref.group_p, ref.group_flagged, strict=True))
    assert fam["threshold"] is None and fam["members_flagged"] == sum(ref.flagged) >= 1
    # and the within-group step is Benjamini-Hochberg per group (statsmodels)
    for g in set(groups):
        idx = [i for i, x in enumerate(groups) if x == g]
        within = multipletests([p[i] for i in idx], method="fdr_bh")[1]
        assert [fam["members"][i]["p_adjusted"] for i in idx] == pytest.approx(list(within),
                                                                                rel=1e-12)


def test_the_array_fisher_gives_the_same_numbers(tmp_path: Path) -> None:
    pytest.importorskip("prespec.stats.fisherarray", reason="the array Fisher module has not "
                        "landed in this tree")
    for alternative in ("two-sided", "greater", "less"):
        extra = f"    alternative: {alternative}\n"
        plan, frame = family(tmp_path, extra=extra, seed=5)
        fast, slow = run(plan, frame), run(plan, frame, use_array=False)
        assert [m["id"] for m in fast["members"]] == [m["id"] for m in slow["members"]]
        for a, b in zip(fast["members"], slow["members"], strict=True):
            assert a["table"] == b["table"] and a["estimate"] == b["estimate"]
            assert a["p_value"] == pytest.approx(b["p_value"], rel=1e-12, abs=0)
            assert a["flagged"] == b["flagged"]


def test_a_member_without_data_enters_as_one_and_is_not_flagged(tmp_path: Path) -> None:
    levels = ("    levels: {skin: [dryness, redness, itching, never seen], "
              "eyes: [watering]}\n")
    plan, frame = family(tmp_path, extra=levels, seed=11)
    notes: list[Note] = []
    _, data = prepare_run(frame, plan, "data.csv")
    fam = analyse_family(plan, plan.hypotheses[0], data[0], notes)
    ids = [m["id"] for m in fam["members"]]
    assert ids == ["AE[dryness]", "AE[redness]", "AE[itching]", "AE[never seen]",
                   "AE[watering]"]
    empty = fam["members"][3]
    assert empty["p_value"] is None and empty["p_adjusted"] is None
    assert empty["flagged"] is False and empty["table"]["totals"] == [0, 0]
    p = [1.0 if m["p_value"] is None else m["p_value"] for m in fam["members"]]
    adjusted = multipletests(p, method="fdr_bh")[1]  # statsmodels, the missing one as 1
    shown = [m["p_adjusted"] for m in fam["members"]]
    assert [x for i, x in enumerate(shown) if i != 3] == pytest.approx(
        [x for i, x in enumerate(adjusted) if i != 3], rel=1e-12)
    assert fam["members_without_data"] == 1
    assert any("enter benjamini-hochberg as 1: AE[never seen]" in n.detail for n in notes)


def test_a_sparse_switch_applies_per_member(tmp_path: Path) -> None:
    extra = "    sparse: {min_expected: 5, test: fisher-exact}\n"
    plan, frame = family(tmp_path, "pearson-chi-square", extra=extra)
    fam = run(plan, frame)
    switched = [m for m in fam["members"] if m["rule"] is not None]
    kept = [m for m in fam["members"] if m["rule"] is None]
    assert switched and kept
    for m in switched:
        assert m["test"] == "fisher-exact" and m["rule"]["smallest_expected"] < 5
        _against_libraries("fisher-exact", m)
    for m in kept:
        assert m["test"] == "pearson-chi-square"
        assert math.isfinite(m["statistic"])
        _against_libraries("pearson-chi-square", m)


def test_minus_log10_is_finite_for_every_member(tmp_path: Path) -> None:
    plan, frame = family(tmp_path)
    fam = run(plan, frame)
    p = np.array([m["p_value"] for m in fam["members"]])
    assert np.all((p > 0) & (p <= 1))
