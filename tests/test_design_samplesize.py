"""Sample sizes per hypothesis: the alpha each is sized at, the formula each kind takes,
allocation, dropout, the power at the planned sizes, and what cannot be sized."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from prespec.design import exactpower, samplesize
from prespec.design.document import alpha_shares, design_document, size_plan
from prespec.errors import BadInput
from prespec.plan import load_plan
from prespec.stats import proportions, single

HEAD = """\
prespec: 1
title: Invented trial of wound dressings
data:
  id: participant
  group: arm
  groups: [gauze, alginate, foam]
{planned}outcomes:
  infection: {{column: infected, event: [1], no_event: [0], missing: exclude}}
alpha: 0.05
"""

DESIGN = """\
design:
  assumed: {gauze: 0.20, alginate: 0.10, foam: 0.05}
  power: 0.8
  dropout: 0.1
"""

THREE = """\
hypotheses:
  - {id: H1, outcome: infection, compare: [foam, gauze], test: pearson-chi-square}
  - {id: H2, outcome: infection, compare: [alginate, gauze], test: pearson-chi-square}
  - {id: H3, outcome: infection, compare: all, test: pearson-chi-square, role: exploratory}
"""


def plan_of(tmp_path: Path, multiplicity: str = "multiplicity: holm\n", design: str = DESIGN,
            body: str = THREE, planned: str = "") -> object:
    path = tmp_path / "plan.yaml"
    path.write_text(HEAD.format(planned=planned) + multiplicity + design + body)
    return load_plan(path).model


@pytest.mark.parametrize(("multiplicity", "h1", "h3"), [
    ("holm", 0.025, 0.05),
    ("hochberg", 0.025, 0.05),
    ("bonferroni", 0.025, 0.05),
    ("benjamini-hochberg", 0.025, 0.05),
    ("sidak", 1 - 0.95 ** 0.5, 0.05),
    ("benjamini-yekutieli", 0.05 / (2 * 1.5), 0.05),
    ("fixed-sequence", 0.05, 0.05),
    ("none", 0.05, 0.05),
])
def test_the_alpha_each_hypothesis_is_sized_at(tmp_path: Path, multiplicity: str, h1: float,
                                               h3: float) -> None:
    plan = plan_of(tmp_path, f"multiplicity: {multiplicity}\n")
    shares, rule = alpha_shares(plan)
    assert shares["H1"].alpha == pytest.approx(h1) and shares["H2"].alpha == pytest.approx(h1)
    assert shares["H3"].alpha == h3  # exploratory: the full alpha, nominal
    if multiplicity in ("holm", "hochberg"):
        assert "Bonferroni split over the 2 non-exploratory" in rule
        assert "can only gain power" in rule
    if multiplicity == "fixed-sequence":
        assert "only if every hypothesis before it" in rule


def test_graphical_sizes_at_the_initial_weight_and_not_a_zero_weight(tmp_path: Path) -> None:
    text = ("multiplicity: {method: graphical, weights: {H1: 0.8, H2: 0}, "
            "transitions: {H1: {H2: 1}, H2: {H1: 1}}}\n")
    plan = plan_of(tmp_path, text)
    sized, _ = size_plan(plan)
    assert sized[0].alpha == pytest.approx(0.04)
    expected = samplesize.two_proportion_n(0.05, 0.20, 0.02, 0.8).n
    assert tuple(sized[0].n_per_group.values()) == expected
    assert sized[1].alpha == 0.0 and sized[1].n_per_group is None
    assert "initial weight is 0" in sized[1].notes[0]


def test_two_sided_is_sized_at_half_alpha_per_side_and_dropout_inflates(tmp_path: Path) -> None:
    plan = plan_of(tmp_path)
    h1, h2, h3 = size_plan(plan)[0]
    # alpha 0.025 two-sided: 0.0125 per side (Fleiss, Levin and Paik 2003, §4.2)
    assert tuple(h1.n_per_group.values()) == samplesize.two_proportion_n(0.05, 0.20, 0.0125,
                                                                         0.8).n
    n = h2.n_per_group["alginate"]
    assert h2.n_enrol_per_group == {"alginate": math.ceil(n / 0.9), "gauze": math.ceil(n / 0.9)}
    assert h2.sides == "two-sided (0.0125 per side)"
    # the k-group test: Lachin 1977 at the full alpha (exploratory)
    assert tuple(h3.n_per_group.values()) == samplesize.k_group_n([0.20, 0.10, 0.05], 0.05,
                                                                  0.8).n
    assert h1.power is None  # no planned_n


def test_dropout_rounds_up_only_past_an_integer() -> None:
    # 90 analysed at 10% dropout is exactly 100 to enrol, not 101
    assert math.ceil(90 / 0.9 - samplesize.ROUND_SLACK) == 100


def test_one_sided_is_sized_at_alpha_and_the_wrong_direction_is_said(tmp_path: Path) -> None:
    body = """\
hypotheses:
  - {id: H1, outcome: infection, compare: [foam, gauze], test: two-proportion-z,
     alternative: less}
  - {id: H2, outcome: infection, compare: [foam, gauze], test: two-proportion-z,
     alternative: greater}
"""
    plan = plan_of(tmp_path, "multiplicity: none\n", body=body)
    h1, h2 = size_plan(plan)[0]
    assert tuple(h1.n_per_group.values()) == samplesize.two_proportion_n(0.05, 0.20, 0.05, 0.8).n
    assert h1.sides == "one-sided (less)"
    assert h2.n_per_group is None
    assert "do not lie on the side of the alternative (greater)" in h2.notes[0]


def test_power_at_the_planned_sizes(tmp_path: Path) -> None:
    planned = "  planned_n: {gauze: 150, alginate: 160, foam: 140}\n"
    plan = plan_of(tmp_path, "multiplicity: bonferroni\n", planned=planned)
    h1, _h2, h3 = size_plan(plan)[0]
    assert h1.power == pytest.approx(samplesize.two_proportion_power(0.05, 0.20, 140, 150,
                                                                     0.0125))
    assert h3.power == pytest.approx(samplesize.k_group_power([0.20, 0.10, 0.05],
                                                              [150, 160, 140], 0.05))


def test_each_kind_takes_its_formula(tmp_path: Path) -> None:
    body = """\
hypotheses:
  - {id: F, outcome: infection, compare: [foam, gauze], test: fisher-exact}
  - {id: B, outcome: infection, compare: [foam], test: binomial-exact, null_rate: 0.15,
     alternative: less}
  - {id: Z, outcome: infection, compare: [foam], test: one-proportion-z, null_rate: 0.15}
  - {id: T, outcome: infection, compare: trend, test: cochran-armitage-trend, scores: [0, 1, 3]}
  - {id: N, outcome: infection, compare: [foam, gauze], test: farrington-manning,
     comparison: non-inferiority, alternative: less, margin: 0.05}
  - {id: E, outcome: infection, compare: [alginate, gauze], test: two-proportion-z,
     comparison: equivalence, margin: [-0.2, 0.2], measure: risk-difference}
  - {id: X, outcome: infection, compare: [foam, gauze], test: barnard-exact}
"""
    design = DESIGN.replace("  dropout: 0.1\n", "  allocation: {gauze: 1, alginate: 1, foam: 2}\n")
    plan = plan_of(tmp_path, "multiplicity: none\n", design=design, body=body)
    got = {h.id: h for h in size_plan(plan)[0]}
    guess = samplesize.two_proportion_n(0.05, 0.20, 0.025, 0.8, ratio=0.5, continuity=True).n[0]
    assert tuple(got["F"].n_per_group.values()) == exactpower.fisher_n(
        0.05, 0.20, 0.05, 0.8, "two-sided", ratio=0.5, guess=guess).n
    assert "Fisher" in got["F"].method and "saw-toothed" in got["F"].method
    assert tuple(got["B"].n_per_group.values()) == exactpower.binomial_n(
        0.05, 0.15, 0.05, 0.8, "less").n
    assert tuple(got["Z"].n_per_group.values()) == samplesize.one_proportion_n(
        0.05, 0.15, 0.025, 0.8).n
    assert tuple(got["T"].n_per_group.values()) == samplesize.trend_n(
        [0.20, 0.10, 0.05], [0, 1, 3], 0.025, 0.8, [1, 1, 2]).n
    assert tuple(got["N"].n_per_group.values()) == samplesize.margin_n(
        0.05, 0.20, 0.05, 0.8, margin=0.05, measure="risk-difference", alternative="less",
        ratio=0.5).n
    assert "Farrington–Manning" in got["N"].method
    assert tuple(got["E"].n_per_group.values()) == samplesize.equivalence_n(
        0.10, 0.20, 0.05, 0.8, low=-0.2, high=0.2, measure="risk-difference", score=False).n
    assert "normal approximation without continuity" in got["X"].notes[0]
    # allocation 2:1 for foam against gauze
    foam, gauze = got["X"].n_per_group["foam"], got["X"].n_per_group["gauze"]
    assert gauze == math.ceil(foam / 2)


def test_the_sizes_reach_the_power_they_claim() -> None:
    assert samplesize.two_proportion_n(0.3, 0.4, 0.025, 0.9, ratio=1.7).power >= 0.9
    got = samplesize.equivalence_n(0.5, 0.5, 0.05, 0.8, low=-0.1, high=0.1,
                                   measure="risk-difference")
    below = samplesize.equivalence_power(0.5, 0.5, got.n[0] - 1, got.n[1] - 1, 0.05, low=-0.1,
                                         high=0.1, measure="risk-difference")
    assert got.power >= 0.8 > below


@pytest.mark.parametrize(("call", "message"), [
    (lambda: samplesize.two_proportion_n(0.2, 0.2, 0.025, 0.8), "no difference"),
    (lambda: samplesize.one_proportion_n(0.2, 0.2, 0.025, 0.8), "no difference"),
    (lambda: samplesize.k_group_n([0.2, 0.2], 0.05, 0.8), "no difference"),
    (lambda: samplesize.trend_n([0.2, 0.1, 0.2], [0, 1, 2], 0.025, 0.8), "no linear trend"),
    (lambda: samplesize.margin_n(0.2, 0.4, 0.025, 0.8, margin=-0.1, measure="risk-difference",
                                 alternative="greater"), "not on the side"),
    (lambda: samplesize.equivalence_n(0.2, 0.5, 0.05, 0.8, low=-0.1, high=0.1,
                                      measure="risk-difference"), "not inside"),
    (lambda: samplesize.two_proportion_power(0.2, 1.0, 10, 10, 0.025), "must be in"),
    (lambda: samplesize.two_proportion_n(0.2, 0.3, 0.6, 0.8), "level of one side"),
])
def test_what_cannot_be_sized_says_why(call: object, message: str) -> None:
    assert callable(call)
    with pytest.raises(ValueError, match=message):
        call()


def test_no_design_section_is_bad_input(tmp_path: Path) -> None:
    path = tmp_path / "plan.yaml"
    path.write_text(HEAD.format(planned="") + "multiplicity: holm\n" + THREE)
    with pytest.raises(BadInput, match="no design section"):
        design_document(load_plan(path).model, where=str(path))


# --- the array p-values of the exact tests ------------------------------------------------


@pytest.mark.parametrize(("n1", "n2"), [(9, 9), (7, 13), (20, 4)])
@pytest.mark.parametrize("alternative", ["two-sided", "greater", "less"])
def test_fisher_p_values_on_arrays_equal_the_stats_function(n1: int, n2: int,
                                                           alternative: str) -> None:
    x1, x2 = np.meshgrid(np.arange(n1 + 1), np.arange(n2 + 1), indexing="ij")
    got = exactpower.FisherTables(n1, n2, alternative).p_values(x1, x2)
    for a in range(n1 + 1):
        for b in range(n2 + 1):
            expected = proportions.fisher_exact(a, n1, b, n2, alternative=alternative).p_value
            assert got[a, b] == pytest.approx(expected, rel=1e-12, abs=1e-300)


def test_fisher_tables_forget_rows_past_their_limit() -> None:
    tables = exactpower.FisherTables(30, 30, "two-sided", keep=40)
    first = tables.p_values(np.arange(31), np.zeros(31, dtype=int))
    again = tables.p_values(np.arange(31), np.zeros(31, dtype=int))
    assert np.array_equal(first, again)
    assert tables._kept <= 40 + 31


@pytest.mark.parametrize("alternative", ["two-sided", "greater", "less"])
@pytest.mark.parametrize(("n", "rate"), [(25, 0.3), (40, 0.5), (17, 0.05)])
def test_binomial_p_values_equal_the_stats_function(n: int, rate: float,
                                                    alternative: str) -> None:
    got = single.binomial_exact_all(n, rate, alternative)
    for x in range(n + 1):
        expected = single.binomial_exact(x, n, rate, alternative=alternative).p_value
        assert got[x] == pytest.approx(expected, rel=1e-12, abs=1e-300)


def test_the_binomial_mean_outcome_has_p_one() -> None:
    # scipy.stats.binomtest: an outcome at the mean n·p0 has two-sided p = 1
    assert single.binomial_exact_all(20, 0.5, "two-sided")[10] == 1.0
    assert stats.binomtest(10, 20, 0.5).pvalue == 1.0


def test_the_saw_tooth_is_said_in_the_notes(tmp_path: Path) -> None:
    body = """\
hypotheses:
  - {id: B, outcome: infection, compare: [foam], test: binomial-exact, null_rate: 0.2,
     alternative: less}
"""
    design = DESIGN.replace("foam: 0.05", "foam: 0.10")
    plan = plan_of(tmp_path, "multiplicity: none\n", design=design, body=body)
    (b,), _ = size_plan(plan)
    found = exactpower.binomial_n(0.10, 0.20, 0.05, 0.8, "less")
    assert b.n_per_group == {"foam": found.n[0]}
    assert found.dips  # this case is saw-toothed (scipy.stats.binomtest agrees: see reference)
    below = [exactpower.binomial_power(0.10, 0.20, k, 0.05, "less") < 0.8
             for k in range(found.n[0] + 1, found.checked_to + 1)]
    assert tuple(k for k, low in zip(range(found.n[0] + 1, found.checked_to + 1), below,
                                     strict=True) if low) == found.dips
    assert b.notes[-1] == (
        f"exact power searched from n = 1; n = {found.n[0]} is the first to reach the target; "
        f"it falls below the target again at n = {', '.join(map(str, found.dips[:8]))}"
        f"{' …' if len(found.dips) > 8 else ''} and stays at or above it from n = "
        f"{found.dips[-1] + 1} to {found.checked_to}, the largest checked (exact power is "
        "saw-toothed in n)")


def test_a_large_binomial_search_started_below_the_normal_size_finds_the_same_n() -> None:
    guess = samplesize.one_proportion_n(0.35, 0.30, 0.025, 0.8).n[0]
    assert guess > 400
    near = exactpower.binomial_n(0.35, 0.30, 0.05, 0.8, "two-sided", guess=guess, check=0)
    scanned = exactpower.binomial_n(0.35, 0.30, 0.05, 0.8, "two-sided", check=0)
    assert near.start > 1 and scanned.start == 1
    assert near.n == scanned.n


def test_past_the_enumeration_limit_fisher_is_sized_by_the_corrected_normal_formula(
        tmp_path: Path) -> None:
    body = """\
hypotheses:
  - {id: F, outcome: infection, compare: [foam, gauze], test: fisher-exact}
"""
    design = DESIGN.replace("foam: 0.05", "foam: 0.185")
    planned = "  planned_n: {gauze: 9000, alginate: 10, foam: 9000}\n"
    plan = plan_of(tmp_path, "multiplicity: none\n", design=design, body=body, planned=planned)
    (f,), _ = size_plan(plan)
    normal = samplesize.two_proportion_n(0.185, 0.20, 0.025, 0.8, continuity=True)
    assert normal.n[0] > 5000
    assert tuple(f.n_per_group.values()) == normal.n
    assert f.power == pytest.approx(samplesize.two_proportion_power(
        0.185, 0.20, 9000, 9000, 0.025, continuity=True, two_sided=True), rel=1e-12)
    assert f.notes[-2:] == (
        ("sized by the normal approximation: above 5000 per group the exact enumeration gives "
        "way to the continuity-corrected normal approximation (Casagrande, Pike and Smith 1978)"),
        ("power by the normal approximation: above 5000 per group the exact enumeration gives "
        "way to the continuity-corrected normal approximation (Casagrande, Pike and Smith 1978)"))
