"""The simulation of whole trials: decisions on arrays equal the pipeline's, error rates and
power against alpha and exact enumeration, reproducibility, refusals."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from prespec.analysis.hypotheses import analyse
from prespec.design import exactpower
from prespec.design.document import design_document, scenarios_of
from prespec.design.simulate import Decider, as_prepared, draw, null_holds, simulate
from prespec.errors import BadInput
from prespec.plan import load_plan

HEAD = """\
prespec: 1
title: Invented trial of wound dressings
data:
  id: participant
  group: arm
  groups: [gauze, alginate, foam]
outcomes:
  infection: {column: infected, event: [1], no_event: [0], missing: exclude}
  healed: {column: healed, event: [1], no_event: [0], missing: exclude}
alpha: 0.05
"""

MIXED = """\
hypotheses:
  - {id: H1, outcome: infection, compare: [foam, gauze], test: pearson-chi-square,
     sparse: {min_expected: 5, test: fisher-exact}}
  - {id: H2, outcome: infection, compare: [alginate, gauze], test: two-proportion-z,
     alternative: less}
  - {id: H3, outcome: infection, compare: all, test: pearson-chi-square,
     then: {pairwise: all, multiplicity: hochberg}}
  - {id: H4, outcome: healed, compare: trend, test: cochran-armitage-trend}
  - {id: H5, outcome: healed, compare: [foam, gauze], test: two-proportion-z,
     comparison: non-inferiority, alternative: greater, margin: -0.15}
  - {id: H6, outcome: healed, compare: [foam], test: binomial-exact, null_rate: 0.3,
     alternative: greater}
  - {id: H7, outcome: infection, compare: [foam, alginate], test: likelihood-ratio,
     role: exploratory}
  - {id: H8, outcome: healed, compare: [alginate, gauze], test: fisher-exact,
     alternative: greater, role: secondary}
  - {id: H9, outcome: healed, compare: [alginate], test: one-proportion-z, null_rate: 0.35}
  - {id: H10, outcome: infection, compare: [foam, gauze], test: pearson-chi-square,
     continuity: true, role: secondary}
"""

GRAPHICAL = """\
multiplicity:
  method: graphical
  weights: {H1: 0.4, H2: 0.2, H3: 0.2, H4: 0.2}
  transitions: {H1: {H2: 0.5, H5: 0.5}, H2: {H1: 1}, H3: {H4: 1}, H4: {H6: 0.5, H9: 0.5},
                H5: {H8: 1}, H6: {H1: 1}, H8: {H10: 1}, H9: {H3: 1}, H10: {H1: 1}}
"""


def write_plan(tmp_path: Path, body: str, multiplicity: str = "multiplicity: holm\n",
               design: str = "") -> Path:
    path = tmp_path / "plan.yaml"
    path.write_text(HEAD + multiplicity + design + body)
    return path


def _sizes(plan: object) -> dict[str, int]:
    return {"gauze": 40, "alginate": 35, "foam": 45}


def _decisions_of_pipeline(plan: object, counts: dict[str, np.ndarray], sizes: dict[str, int],
                           trial: int) -> tuple[list[str], list[bool], list[float | None]]:
    entries, _ = analyse(plan, as_prepared(plan, counts, sizes, trial))
    rejects = []
    for e in entries:
        if e["family"] is None:  # exploratory: its nominal decision
            rejects.append(e["p_value"] is not None and e["p_value"] <= plan.alpha)
        else:
            rejects.append(bool(e["reject"]))
    return [e["id"] for e in entries], rejects, [e["p_value"] for e in entries]


@pytest.mark.parametrize("multiplicity", [
    "holm", "hochberg", "hommel", "bonferroni", "sidak", "fixed-sequence",
    "benjamini-hochberg", "benjamini-yekutieli", "none", "graphical",
])
def test_arrays_decide_as_the_pipeline(tmp_path: Path, multiplicity: str) -> None:
    text = GRAPHICAL if multiplicity == "graphical" else f"multiplicity: {multiplicity}\n"
    plan = load_plan(write_plan(tmp_path, MIXED, text)).model
    sizes = _sizes(plan)
    decider = Decider(plan, sizes)
    rng = np.random.default_rng(7)
    counts = {
        "infection": rng.binomial([40, 35, 45], [0.25, 0.15, 0.08], size=(60, 3)),
        "healed": rng.binomial([40, 35, 45], [0.35, 0.45, 0.55], size=(60, 3)),
    }
    reject = decider.decide(counts)
    raw = decider.p_values(counts)
    assert 0.05 < reject.mean() < 0.95  # the decisions vary across trials
    for trial in range(60):
        ids, expected, p_values = _decisions_of_pipeline(plan, counts, sizes, trial)
        assert ids == [u.id for u in decider.units]
        assert list(reject[trial]) == expected, (multiplicity, trial)
        for j, p in enumerate(p_values):
            if p is None:
                assert np.isnan(raw[trial, j])
            else:
                assert raw[trial, j] == pytest.approx(p, rel=1e-9, abs=1e-300)


def test_tests_without_arrays_run_once_per_distinct_table(tmp_path: Path) -> None:
    body = """\
hypotheses:
  - {id: H1, outcome: infection, compare: [foam, gauze], test: barnard-exact}
  - {id: H2, outcome: infection, compare: all, test: fisher-exact}
  - {id: H3, outcome: healed, compare: [foam, gauze], test: farrington-manning,
     comparison: non-inferiority, alternative: greater, margin: -0.2}
  - {id: H4, outcome: healed, compare: [foam, gauze], test: pearson-chi-square,
     sparse: {min_expected: 8, test: boschloo-exact}}
"""
    plan = load_plan(write_plan(tmp_path, body)).model
    sizes = {"gauze": 12, "alginate": 10, "foam": 11}
    decider = Decider(plan, sizes)
    assert decider.per_table == ["H1: barnard-exact", "H2: fisher-exact",
                                 "H3: farrington-manning", "H4: boschloo-exact (sparse switch)"]
    rng = np.random.default_rng(3)
    counts = {"infection": rng.binomial([12, 10, 11], [0.5, 0.3, 0.1], size=(25, 3)),
              "healed": rng.binomial([12, 10, 11], [0.5, 0.5, 0.8], size=(25, 3))}
    reject = decider.decide(counts)
    for trial in range(25):
        _, expected, _ = _decisions_of_pipeline(plan, counts, sizes, trial)
        assert list(reject[trial]) == expected


def test_a_stratified_test_is_refused(tmp_path: Path) -> None:
    body = """\
hypotheses:
  - {id: H1, outcome: infection, compare: [foam, gauze], test: cochran-mantel-haenszel,
     strata: [site]}
"""
    plan = load_plan(write_plan(tmp_path, body)).model
    with pytest.raises(BadInput, match=r"hypotheses\.H1: a stratified test"):
        Decider(plan, {"gauze": 10, "alginate": 10, "foam": 10})


SINGLE = """\
hypotheses:
  - {{id: H1, outcome: infection, compare: [foam, gauze], test: {test}}}
"""


@pytest.mark.parametrize("test", ["pearson-chi-square", "two-proportion-z"])
def test_simulated_type_one_error_is_alpha_within_monte_carlo_error(tmp_path: Path,
                                                                   test: str) -> None:
    # 200 per group at 0.3: the chi-square test (≡ the pooled z) holds its level (common
    # practice: expected counts far above 5); 40,000 trials give a standard error of 0.0011
    plan = load_plan(write_plan(tmp_path, SINGLE.format(test=test),
                                "multiplicity: none\n")).model
    sizes = {"gauze": 200, "alginate": 200, "foam": 200}
    (result,), _ = simulate(plan, scenarios={"null": {g: 0.3 for g in sizes}}, sizes=sizes,
                            trials=40_000, seed=11)
    assert result.true_nulls == ("H1",)
    assert result.fwer == result.power["H1"]
    assert abs(result.fwer - 0.05) <= 3.5 * result.mc_se["fwer"]
    assert result.mc_se["fwer"] == pytest.approx(np.sqrt(result.fwer * (1 - result.fwer)
                                                         / 40_000))


def test_holm_keeps_the_family_wise_error_rate_under_the_global_null(tmp_path: Path) -> None:
    body = """\
hypotheses:
  - {id: H1, outcome: infection, compare: [foam, gauze], test: pearson-chi-square}
  - {id: H2, outcome: infection, compare: [alginate, gauze], test: pearson-chi-square}
  - {id: H3, outcome: infection, compare: [foam, alginate], test: pearson-chi-square}
"""
    plan = load_plan(write_plan(tmp_path, body)).model
    sizes = {"gauze": 150, "alginate": 150, "foam": 150}
    (result,), _ = simulate(plan, scenarios={"global-null": {g: 0.25 for g in sizes}},
                            sizes=sizes, trials=30_000, seed=5)
    # Holm controls the family-wise error rate at alpha in the strong sense (Holm 1979);
    # with three correlated comparisons it is below alpha
    assert result.fwer is not None
    assert result.fwer <= 0.05 + 3.5 * result.mc_se["fwer"]
    assert result.fwer > 0.02
    assert result.any == result.fwer


def test_benjamini_hochberg_reports_the_false_discovery_rate(tmp_path: Path) -> None:
    body = """\
hypotheses:
  - {id: H1, outcome: infection, compare: [foam, gauze], test: pearson-chi-square}
  - {id: H2, outcome: infection, compare: [alginate, gauze], test: pearson-chi-square}
"""
    plan = load_plan(write_plan(tmp_path, body, "multiplicity: benjamini-hochberg\n")).model
    sizes = {"gauze": 150, "alginate": 150, "foam": 150}
    rates = {"gauze": 0.3, "alginate": 0.3, "foam": 0.15}
    (result,), _ = simulate(plan, scenarios={"one-effect": rates}, sizes=sizes, trials=20_000,
                            seed=2)
    assert result.true_nulls == ("H2",)
    assert result.fdr is not None and result.mc_se["fdr"] is not None
    # Benjamini and Hochberg 1995: FDR <= (m0/m)·alpha = 0.025 for independent or positively
    # dependent tests
    assert result.fdr <= 0.025 + 3.5 * result.mc_se["fdr"]
    assert result.fdr <= result.fwer


def test_exact_power_by_enumeration_agrees_with_simulation(tmp_path: Path) -> None:
    body = """\
hypotheses:
  - {id: H1, outcome: infection, compare: [foam, gauze], test: fisher-exact}
  - {id: H2, outcome: infection, compare: [alginate], test: binomial-exact, null_rate: 0.4,
     alternative: less}
"""
    plan = load_plan(write_plan(tmp_path, body, "multiplicity: none\n")).model
    sizes = {"gauze": 50, "alginate": 40, "foam": 45}
    rates = {"gauze": 0.35, "alginate": 0.2, "foam": 0.1}
    (result,), _ = simulate(plan, scenarios={"assumed": rates}, sizes=sizes, trials=30_000,
                            seed=9)
    fisher = exactpower.fisher_power(0.1, 0.35, 45, 50, 0.05, "two-sided")
    binomial = exactpower.binomial_power(0.2, 0.4, 40, 0.05, "less")
    assert abs(result.power["H1"] - fisher) <= 3.5 * result.mc_se["power"]["H1"]
    assert abs(result.power["H2"] - binomial) <= 3.5 * result.mc_se["power"]["H2"]


def test_the_fisher_test_on_arrays_is_conservative_under_the_null(tmp_path: Path) -> None:
    # Fisher's exact test never exceeds its level (common practice): the exact size by
    # enumeration is below alpha, and the simulation agrees with it
    plan = load_plan(write_plan(tmp_path, SINGLE.format(test="fisher-exact"),
                                "multiplicity: none\n")).model
    sizes = {"gauze": 30, "alginate": 30, "foam": 30}
    size = exactpower.fisher_power(0.2, 0.2, 30, 30, 0.05, "two-sided")
    (result,), _ = simulate(plan, scenarios={"null": {g: 0.2 for g in sizes}}, sizes=sizes,
                            trials=20_000, seed=4)
    assert size < 0.05
    assert result.fwer is not None
    assert abs(result.fwer - size) <= 3.5 * result.mc_se["fwer"]


DESIGNED = """\
design:
  assumed: {gauze: 0.25, alginate: 0.15, foam: 0.10}
  power: 0.8
  scenarios:
    modest: {gauze: 0.25, alginate: 0.22, foam: 0.18}
hypotheses:
  - {id: H1, outcome: infection, compare: [foam, gauze], test: pearson-chi-square,
     sparse: {min_expected: 5, test: fisher-exact}}
  - {id: H2, outcome: infection, compare: [alginate, gauze], test: pearson-chi-square}
"""


def test_a_fixed_seed_reproduces_and_scenarios_have_their_own_streams(tmp_path: Path) -> None:
    plan = load_plan(write_plan(tmp_path, DESIGNED)).model
    first = design_document(plan, simulate_trials=3000, seed=8)
    again = design_document(plan, simulate_trials=3000, seed=8)
    other = design_document(plan, simulate_trials=3000, seed=9)
    assert json.dumps(first) == json.dumps(again)
    assert first["scenarios"] != other["scenarios"]
    assert [s["name"] for s in first["scenarios"]] == ["assumed", "modest", "global-null"]
    # the assumed scenario's draws do not depend on the other scenarios
    sizes = first["simulation"]["n_per_group"]
    alone, _ = simulate(plan, scenarios={"assumed": scenarios_of(plan)["assumed"]},
                        sizes=sizes, trials=3000, seed=8)
    assert alone[0].power == first["scenarios"][0]["power"]


def test_the_global_null_is_the_allocation_weighted_rate(tmp_path: Path) -> None:
    design = """\
design:
  assumed: {gauze: 0.30, alginate: 0.20, foam: 0.10}
  power: 0.9
  allocation: {gauze: 2, alginate: 1, foam: 1}
"""
    plan = load_plan(write_plan(tmp_path, SINGLE.format(test="pearson-chi-square"),
                                design=design)).model
    null = scenarios_of(plan)["global-null"]
    # (2·0.30 + 0.20 + 0.10) / 4
    assert null == {"gauze": pytest.approx(0.225), "alginate": pytest.approx(0.225),
                    "foam": pytest.approx(0.225)}


def test_simulation_sizes_default_to_the_design_and_the_progress_is_reported(
        tmp_path: Path) -> None:
    plan = load_plan(write_plan(tmp_path, DESIGNED)).model
    seen: list[tuple[str, int, int]] = []
    doc = design_document(plan, simulate_trials=45_000, seed=1,
                          progress=lambda name, done, total: seen.append((name, done, total)))
    sim = doc["simulation"]
    h1, h2 = doc["hypotheses"]
    # no planned_n: each group gets the largest size any hypothesis needs
    assert sim["n_per_group"] == {"gauze": max(h1["n_per_group"]["gauze"],
                                               h2["n_per_group"]["gauze"]),
                                  "alginate": h2["n_per_group"]["alginate"],
                                  "foam": h1["n_per_group"]["foam"]}
    assert sim["sizes_from"] == "the largest design size per group over the hypotheses"
    assert seen[-1] == ("global-null", 135_000, 135_000)
    assert [d for _, d, _ in seen] == sorted(d for _, d, _ in seen)
    assert len(seen) == 9  # three chunks per scenario
    assumed = doc["scenarios"][0]
    # at its own design size, each hypothesis has about the target power alone; Holm adds
    assert assumed["power"]["H1"] >= 0.75
    assert assumed["fwer"] is None and assumed["true_nulls"] == []
    assert doc["scenarios"][2]["true_nulls"] == ["H1", "H2"]


@pytest.mark.parametrize(("yaml_hyp", "rates", "holds"), [
    ("{id: H, outcome: infection, compare: [foam, gauze], test: fisher-exact}",
     [0.2, 0.2], True),
    ("{id: H, outcome: infection, compare: [foam, gauze], test: fisher-exact}",
     [0.2, 0.3], False),
    (("{id: H, outcome: infection, compare: [foam, gauze], test: fisher-exact, "
     "alternative: greater}"), [0.2, 0.3], True),
    (("{id: H, outcome: infection, compare: [foam, gauze], test: farrington-manning, "
     "comparison: non-inferiority, alternative: greater, margin: -0.1}"), [0.2, 0.3], True),
    (("{id: H, outcome: infection, compare: [foam, gauze], test: farrington-manning, "
     "comparison: non-inferiority, alternative: greater, margin: -0.1}"), [0.25, 0.3], False),
    (("{id: H, outcome: infection, compare: [foam, gauze], test: two-proportion-z, "
     "comparison: equivalence, margin: [-0.1, 0.1]}"), [0.25, 0.3], False),
    (("{id: H, outcome: infection, compare: [foam, gauze], test: two-proportion-z, "
     "comparison: equivalence, margin: [-0.1, 0.1]}"), [0.1, 0.3], True),
    (("{id: H, outcome: infection, compare: [foam], test: binomial-exact, null_rate: 0.2, "
     "alternative: less}"), [0.25], True),
    ("{id: H, outcome: infection, compare: all, test: pearson-chi-square}",
     [0.2, 0.2, 0.21], False),
    (("{id: H, outcome: infection, compare: trend, test: cochran-armitage-trend, "
     "alternative: greater}"), [0.3, 0.2, 0.1], True),
])
def test_which_nulls_hold(tmp_path: Path, yaml_hyp: str, rates: list[float],
                          holds: bool) -> None:
    plan = load_plan(write_plan(tmp_path, f"hypotheses:\n  - {yaml_hyp}\n")).model
    assert null_holds(plan.hypotheses[0], rates, [10] * len(rates)) is holds


def test_draws_are_binomial_at_the_rates(tmp_path: Path) -> None:
    plan = load_plan(write_plan(tmp_path, DESIGNED)).model
    rng = np.random.default_rng(1)
    counts = draw(rng, plan, ["infection"], np.array([0.1, 0.5, 0.9]), np.array([20, 30, 40]),
                  20_000)
    events = counts["infection"]
    assert events.shape == (20_000, 3)
    # the mean and variance of Binomial(n, p) (common practice), within sampling error
    assert events.mean(axis=0) == pytest.approx([2, 15, 36], rel=0.01)
    assert events.var(axis=0) == pytest.approx([1.8, 7.5, 3.6], rel=0.05)
    frequency = np.bincount(events[:, 0], minlength=21)[:7] / 20_000
    # scipy.stats.binom.pmf; the standard error of each frequency is at most 0.0036
    assert frequency == pytest.approx(stats.binom.pmf(np.arange(7), 20, 0.1), abs=0.015)
