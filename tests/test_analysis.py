"""From the plan's hypotheses to results entries: dispatch, sparse switch, levels, family.

Each p-value and interval is checked against scipy/statsmodels computed here on the same table,
so the test shows the pipeline hands the right table to the right method.
"""

from __future__ import annotations

from pathlib import Path

import pytest
import scipy.stats
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.proportion import confint_proportions_2indep, proportions_ztest

from prespec.analysis.hypotheses import analyse, interval_level
from prespec.data import GroupCounts, OutcomeCounts, Prepared
from prespec.plan import Plan, load_plan

PLAN = """\
prespec: 1
title: Invented hand-hygiene study
data: {id: pid, group: ward, groups: [a, b, c]}
outcomes:
  y: {column: y, event: [1], no_event: [0], missing: exclude}
alpha: 0.05
multiplicity: MULT
hypotheses:
  - {id: H1, outcome: y, compare: [b, a], test: pearson-chi-square,
     sparse: {min_expected: 5, test: fisher-exact}}
  - {id: H2, outcome: y, compare: [c, a], test: two-proportion-z, alternative: ALT,
     interval: wald}
  - {id: H3, outcome: y, compare: [c, b], test: pearson-chi-square, continuity: true}
  - {id: H4, outcome: y, compare: all, test: pearson-chi-square, role: exploratory}
"""


def plan(tmp_path: Path, mult: str = "holm", alt: str = "less") -> Plan:
    path = tmp_path / "p.yaml"
    path.write_text(PLAN.replace("MULT", mult).replace("ALT", alt))
    return load_plan(path).model


def prepared(counts: dict[str, tuple[int, int]]) -> Prepared:
    groups = tuple(GroupCounts(g, e, n, 0, 0) for g, (e, n) in counts.items())
    total = sum(n for _, n in counts.values())
    return Prepared(total, 0, 0, total, {"y": OutcomeCounts("y", groups)}, (), ())


TABLE = {"a": (30, 100), "b": (18, 100), "c": (12, 90)}


def test_each_hypothesis_gets_its_table_and_method(tmp_path: Path) -> None:
    entries, notes = analyse(plan(tmp_path), prepared(TABLE))
    h1, h2, h3, h4 = entries
    assert h1["table"] == {"groups": ["b", "a"], "events": [18, 30], "totals": [100, 100]}
    # scipy.stats.chi2_contingency, uncorrected, on [[18, 82], [30, 70]]
    chi = scipy.stats.chi2_contingency([[18, 82], [30, 70]], correction=False)
    assert h1["statistic"] == pytest.approx(chi.statistic, rel=1e-9)
    assert h1["p_value"] == pytest.approx(chi.pvalue, rel=1e-9) and h1["df"] == 1
    assert h1["rule"] is None and h1["test"] == "pearson-chi-square"
    # statsmodels.stats.proportion.proportions_ztest, pooled, "smaller" = our "less"
    z, p = proportions_ztest([12, 30], [90, 100], alternative="smaller")
    assert h2["statistic"] == pytest.approx(z, rel=1e-9)
    assert h2["p_value"] == pytest.approx(p, rel=1e-9)
    # one-sided: the interval is at 1 - 2 alpha (docs/plan-format.md), Wald as asked
    low, high = confint_proportions_2indep(12, 90, 30, 100, method="wald", compare="diff",
                                           alpha=0.10)
    assert h2["estimate"]["level"] == pytest.approx(0.90)
    assert h2["estimate"]["ci"] == pytest.approx([low, high], rel=1e-9)
    assert h2["estimate"]["ci_method"] == "wald"
    chi_c = scipy.stats.chi2_contingency([[12, 78], [18, 82]], correction=True)
    assert h3["p_value"] == pytest.approx(chi_c.pvalue, rel=1e-9)
    chi_k = scipy.stats.chi2_contingency([[30, 70], [18, 82], [12, 78]], correction=False)
    assert h4["p_value"] == pytest.approx(chi_k.pvalue, rel=1e-9) and h4["df"] == 2
    assert h4["estimate"] is None and h4["table"]["groups"] == ["a", "b", "c"]
    # the expected counts: row total x column total / grand total (common practice)
    assert h4["expected"][0] == pytest.approx([100 * 60 / 290, 100 * 230 / 290], rel=1e-12)
    assert notes == []


def test_default_interval_is_newcombe_at_one_minus_alpha(tmp_path: Path) -> None:
    h1 = analyse(plan(tmp_path), prepared(TABLE))[0][0]
    low, high = confint_proportions_2indep(18, 100, 30, 100, method="newcomb", compare="diff",
                                           alpha=0.05)
    assert h1["estimate"]["measure"] == "risk-difference"
    assert h1["estimate"]["value"] == pytest.approx(-0.12, rel=1e-12)
    assert h1["estimate"]["ci"] == pytest.approx([low, high], rel=1e-9)
    assert h1["estimate"]["level"] == pytest.approx(0.95)


@pytest.mark.parametrize("method,sm", [("holm", "holm"), ("bonferroni", "bonferroni"),
                                       ("hochberg", "simes-hochberg"),
                                       ("benjamini-hochberg", "fdr_bh")])
def test_family_excludes_exploratory(tmp_path: Path, method: str, sm: str) -> None:
    entries, _ = analyse(plan(tmp_path, mult=method), prepared(TABLE))
    raw = [e["p_value"] for e in entries[:3]]
    # statsmodels.stats.multitest.multipletests over the three confirmatory hypotheses
    reject, adjusted, _, _ = multipletests(raw, alpha=0.05, method=sm)
    assert [e["p_adjusted"] for e in entries[:3]] == pytest.approx(list(adjusted), rel=1e-9)
    assert [e["reject"] for e in entries[:3]] == list(reject)
    assert entries[3]["p_adjusted"] is None and entries[3]["reject"] is None


def test_none_leaves_p_unadjusted(tmp_path: Path) -> None:
    entries, _ = analyse(plan(tmp_path, mult="none"), prepared(TABLE))
    assert all(e["p_adjusted"] == e["p_value"] for e in entries[:3])


def test_sparse_switch_fires_below_the_threshold(tmp_path: Path) -> None:
    sparse = {"a": (1, 12), "b": (6, 11), "c": (12, 90)}
    h1 = analyse(plan(tmp_path), prepared(sparse))[0][0]
    # expected events for b: 11 x 7 / 23 = 3.348 < 5 (row x column / total, common practice)
    assert h1["rule"] == {"switch": "sparse", "min_expected": 5,
                          "smallest_expected": pytest.approx(11 * 7 / 23, rel=1e-12),
                          "from": "pearson-chi-square", "to": "fisher-exact"}
    assert h1["test"] == "fisher-exact" and h1["planned_test"] == "pearson-chi-square"
    # scipy.stats.fisher_exact on [[6, 5], [1, 11]], two-sided
    assert h1["p_value"] == pytest.approx(scipy.stats.fisher_exact([[6, 5], [1, 11]]).pvalue,
                                          rel=1e-12)
    assert h1["statistic"] is None and h1["df"] is None


def test_not_computable_is_null_with_a_note(tmp_path: Path) -> None:
    # no events in a or b: the smallest expected count is 0, so the sparse switch fires and
    # scipy.stats.fisher_exact([[0, 10], [0, 10]]) gives p = 1
    entries, notes = analyse(plan(tmp_path), prepared({"a": (0, 10), "b": (0, 10),
                                                       "c": (0, 0)}))
    h1, h2, h3, h4 = entries
    assert h1["test"] == "fisher-exact"
    assert h1["p_value"] == scipy.stats.fisher_exact([[0, 10], [0, 10]]).pvalue == 1.0
    assert h1["estimate"]["value"] == 0.0
    for h in (h2, h3, h4):  # c has no analysed participants
        assert h["p_value"] is None and h["p_adjusted"] is None and h["reject"] is None
        assert h["statistic"] is None and h["estimate"] is None and h["expected"] is None
    assert [n.detail.split(":")[0] for n in notes if n.code == "not-computable"] == \
        ["H2", "H3", "H4", "H2", "H3"]


def test_interval_levels() -> None:
    # docs/plan-format.md: 1 - alpha two-sided; 1 - 2 alpha one-sided or with a margin
    assert interval_level(0.05, "two-sided", "superiority") == pytest.approx(0.95)
    assert interval_level(0.025, "greater", "superiority") == pytest.approx(0.95)
    assert interval_level(0.05, "two-sided", "equivalence") == pytest.approx(0.90)


GATED = """\
prespec: 1
title: Invented three-ward hand-hygiene study
data: {id: pid, group: ward, groups: [a, b, c]}
outcomes:
  y: {column: y, event: [1], no_event: [0], missing: exclude}
alpha: 0.05
multiplicity: holm
hypotheses:
  - {id: K, outcome: y, compare: all, test: pearson-chi-square,
     then: {pairwise: PAIRS, multiplicity: holm}}
  - {id: P, outcome: y, compare: [b, a], test: fisher-exact}
"""


def gated_plan(tmp_path: Path, pairs: str = "reference") -> Plan:
    path = tmp_path / "g.yaml"
    path.write_text(GATED.replace("PAIRS", pairs))
    return load_plan(path).model


def test_follow_ups_are_tested_only_through_an_open_gate(tmp_path: Path) -> None:
    entries, notes = analyse(gated_plan(tmp_path), prepared(TABLE))
    ids = [e["id"] for e in entries]
    assert ids == ["K", "K:b-vs-a", "K:c-vs-a", "P"]
    k, ba, ca, p = entries
    # X2 = 8.69 on 2 df, p = 0.0130 (scipy.stats.chi2_contingency); Holm with P (p = 0.068)
    assert k["reject"] is True and k["p_adjusted"] == pytest.approx(2 * k["p_value"])
    assert ba["gate"] == ca["gate"] == "open" and ba["family"] == "K pairwise"
    # statsmodels.stats.multitest.multipletests(holm) within the follow-up family only
    reject, adjusted, _, _ = multipletests([ba["p_value"], ca["p_value"]], method="holm")
    assert [ba["p_adjusted"], ca["p_adjusted"]] == pytest.approx(list(adjusted), rel=1e-12)
    assert [ba["reject"], ca["reject"]] == list(reject)
    # the follow-up uses the parent's test on its own 2x2 table (uncorrected X2, scipy)
    chi = scipy.stats.chi2_contingency([[12, 78], [30, 70]], correction=False)
    assert ca["p_value"] == pytest.approx(chi.pvalue, rel=1e-9)
    assert ca["estimate"]["ci_method"] == "newcombe"
    assert p["family"] == "main" and not any(n.code == "gate-closed" for n in notes)


def test_a_closed_gate_tests_nothing(tmp_path: Path) -> None:
    flat = {"a": (20, 100), "b": (21, 100), "c": (19, 90)}
    entries, notes = analyse(gated_plan(tmp_path, "all"), prepared(flat))
    k, *follow, _ = entries
    assert k["reject"] is False
    assert [e["id"] for e in follow] == ["K:b-vs-a", "K:c-vs-a", "K:c-vs-b"]
    for e in follow:
        assert e["gate"] == "closed" and e["reject"] is False and e["p_adjusted"] is None
        assert e["p_value"] is not None  # shown, nominal
    assert [n.code for n in notes] == ["gate-closed"]


def test_k_group_fisher_too_large_asks_for_monte_carlo(tmp_path: Path) -> None:
    from prespec.errors import DataError

    path = tmp_path / "f.yaml"
    groups = [f"w{i}" for i in range(8)]
    path.write_text(GATED.replace("groups: [a, b, c]", f"groups: [{', '.join(groups)}]")
                    .replace("test: pearson-chi-square,\n     then: {pairwise: PAIRS, "
                             "multiplicity: holm}", "test: fisher-exact")
                    .replace("compare: [b, a]", "compare: [w1, w0]"))
    plan = load_plan(path).model
    events = [30, 40, 60, 55, 45, 52, 48, 70]
    big = prepared({g: (e, 100) for g, e in zip(groups, events, strict=True)})
    with pytest.raises(DataError, match=r"hypotheses.K: .*monte_carlo: \{tables: 100000"):
        analyse(plan, big)
    path.write_text(path.read_text().replace("test: fisher-exact}",
                                             "test: fisher-exact,\n     monte_carlo: "
                                             "{tables: 2000, seed: 7}}", 1))
    entries, _ = analyse(load_plan(path).model, big)
    mc = entries[0]["monte_carlo"]
    assert mc["tables"] == 2000 and mc["seed"] == 7 and 0 < mc["standard_error"] < 0.02
    again, _ = analyse(load_plan(path).model, big)
    assert again[0]["p_value"] == entries[0]["p_value"]  # the seed fixes the draw


def test_unconditional_exact_test_on_groups_too_large_is_bad_input(tmp_path: Path) -> None:
    from prespec.errors import DataError

    path = tmp_path / "b.yaml"
    path.write_text(GATED.replace("test: pearson-chi-square,\n     then: {pairwise: PAIRS, "
                                  "multiplicity: holm}", "test: pearson-chi-square")
                    .replace("test: fisher-exact}", "test: barnard-exact}"))
    big = prepared({"a": (10, 1500), "b": (20, 1500), "c": (5, 10)})
    with pytest.raises(DataError, match=r"hypotheses.P: barnard-exact: .*\(1000 per group\)"):
        analyse(load_plan(path).model, big)


@pytest.mark.parametrize("counts, limit", [
    ({"a": (20, 20), "b": (0, 20), "c": (0, 20)}, -1.0),  # 0/20 vs 20/20
    ({"a": (0, 1), "b": (0, 1), "c": (1, 1)}, 1.0),  # n = 1 in each group
])
def test_zero_width_wald_interval_gets_a_note(tmp_path: Path, counts: dict, limit: float) -> None:
    """H2 compares c with a by Wald: every unit in each group had the same outcome, so the
    standard error is 0 and the interval a point, which a note explains."""
    entries, notes = analyse(plan(tmp_path), prepared(counts))
    h2 = entries[1]
    # statsmodels.stats.proportion.confint_proportions_2indep, Wald, gives the same point
    low, high = confint_proportions_2indep(counts["c"][0], counts["c"][1], counts["a"][0],
                                           counts["a"][1], method="wald", compare="diff",
                                           alpha=0.10)
    assert (low, high) == pytest.approx((limit, limit), abs=1e-15)
    assert h2["estimate"]["ci"] == [limit, limit]
    zero = [n for n in notes if n.code == "zero-width-interval"]
    assert [n.detail.split(":")[0] for n in zero] == ["H2"]
    assert f"the wald interval is [{limit:g}, {limit:g}], of zero width" in zero[0].detail
    assert "variance estimate is 0" in zero[0].detail


def test_no_zero_width_note_for_an_ordinary_interval(tmp_path: Path) -> None:
    _, notes = analyse(plan(tmp_path), prepared(TABLE))
    assert not [n for n in notes if n.code == "zero-width-interval"]


@pytest.mark.parametrize("function, strata, limit", [
    # Sato: all events in the second group, none in the first, in both strata
    ("mantel_haenszel_risk_difference", [(0, 10, 10, 10), (0, 5, 7, 7)], -1.0),
    # Greenland–Robins: every unit an event in both groups of both strata
    ("mantel_haenszel_risk_ratio", [(10, 10, 10, 10), (5, 5, 7, 7)], 1.0),
])
def test_zero_width_stratified_interval_gets_a_note(function: str, strata: list,
                                                    limit: float) -> None:
    """The note is written wherever an estimate enters the results, and the report's notes
    table shows it."""
    from prespec.analysis.hypotheses import estimate_json
    from prespec.report import sections
    from prespec.stats import stratified

    est = getattr(stratified, function)(strata, 0.95)
    assert (est.low, est.high) == (limit, limit)
    notes: list = []
    out = estimate_json(est, 0.95, "H7", notes)
    assert out is not None and out["ci"] == [limit, limit]
    assert [(n.code, n.detail.split(":")[0]) for n in notes] == [("zero-width-interval", "H7")]
    assert f"the {est.method} interval is [{limit:g}, {limit:g}]" in notes[0].detail
    page = sections.departures({"deviations": [], "notes": [n.to_json() for n in notes]})
    assert "zero-width-interval" in page and f"[{limit:g}, {limit:g}], of zero width" in page
