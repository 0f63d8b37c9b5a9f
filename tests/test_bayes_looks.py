"""Interim looks of a Bayesian rule (docs/bayes.md, "Interim looks"): the plan keys, the
design's exact operating characteristics with the looks, each look's posterior and predictive
probabilities and decision, the log, verify and the report.

References, none of them prespec's own code:
- the posterior probability Pr(p_a > p_b | data) by ``scipy.integrate.quad`` of one
  ``scipy.stats.beta`` density against the other's distribution function;
- the predictive probability of success by a sum, written here, over every future outcome of
  each group, weighted by ``scipy.stats.betabinom`` and classified by that quad;
- the operating characteristics by a brute-force sum over every interim and final outcome,
  weighted by ``scipy.stats.binom`` and classified by that quad.
The notebook step is replaced by a no-op (the e2e tests execute it for real).
"""

from __future__ import annotations

import functools
import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy import integrate, stats

import prespec.report
from prespec import api, audit
from prespec.analysis.bayes import operating_characteristics
from prespec.analysis.looks import look_problem
from prespec.errors import BadInput, PlanError
from prespec.plan.looks import bayes_look_sizes

PLAN = """\
prespec: 1
title: Invented pilot - a structured exercise programme and the 12-week response rate
data:
  id: participant
  group: arm
  groups: [exercise, usual-care]
  planned_n: {exercise: 20, usual-care: 20}
outcomes:
  response: {column: responded, event: [1], no_event: [0], missing: exclude}
alpha: 0.05
multiplicity: none
design:
  assumed: {exercise: 0.6, usual-care: 0.3}
  power: 0.8
hypotheses:
  - id: H1
    outcome: response
    compare: [exercise, usual-care]
    test: posterior-probability
    prior: {exercise: [1, 1], usual-care: [1, 1]}
    alternative: greater
    threshold: 0.95
    looks:
      fractions: [0.5, 1]
      stop_for_success: 0.99
      stop_for_futility: 0.1
"""
GROUPS = ("exercise", "usual-care")
FINAL, SUCCESS, FUTILITY, THRESHOLD = 20, 0.99, 0.1, 0.95


@pytest.fixture(autouse=True)
def quick_render(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)


@functools.cache
def pr_greater(a1: float, b1: float, a2: float, b2: float) -> float:
    """Pr(p1 > p2) for p1 ~ Beta(a1, b1), p2 ~ Beta(a2, b2), by scipy quad."""
    return integrate.quad(lambda x: stats.beta.pdf(x, a1, b1) * stats.beta.cdf(x, a2, b2),
                          0.0, 1.0, epsabs=1e-13, epsrel=1e-12, limit=200)[0]


def posterior(xa: int, na: int, xb: int, nb: int) -> float:
    return pr_greater(1 + xa, 1 + na - xa, 1 + xb, 1 + nb - xb)


def predictive(xa: int, na: int, xb: int, nb: int) -> float:
    """Pr(the final posterior probability reaches THRESHOLD | the data so far), flat priors."""
    total = 0.0
    for ya in range(FINAL - na + 1):
        wa = stats.betabinom.pmf(ya, FINAL - na, 1 + xa, 1 + na - xa)
        for yb in range(FINAL - nb + 1):
            if posterior(xa + ya, FINAL, xb + yb, FINAL) >= THRESHOLD:
                total += wa * stats.betabinom.pmf(yb, FINAL - nb, 1 + xb, 1 + nb - xb)
    return total


def write_data(path: Path, counts: tuple[tuple[int, int], tuple[int, int]]) -> Path:
    rows = []
    for arm, (events, total) in zip(GROUPS, counts, strict=True):
        rows += [f"{len(rows) + i + 1},{arm},{1 if i < events else 0}" for i in range(total)]
    path.write_text("participant,arm,responded\n" + "\n".join(rows) + "\n")
    return path


def study(tmp_path: Path, text: str = PLAN) -> Path:
    plan = tmp_path / "pilot.yaml"
    plan.write_text(text)
    api.lock(plan, actor="ana")
    return plan


def h1(outcome: api.RunOutcome) -> dict:
    return next(x for x in outcome.results["hypotheses"] if x["id"] == "H1")


def notes(outcome: api.RunOutcome) -> list[str]:
    return [n["code"] for n in outcome.results["notes"]]


# --- the plan --------------------------------------------------------------------------------


def test_the_planned_sizes_per_look_and_the_summary(tmp_path: Path) -> None:
    plan = tmp_path / "p.yaml"
    plan.write_text(PLAN.replace("fractions: [0.5, 1]", "fractions: [0.33, 0.66, 1]"))
    checked = api.check(plan)
    model = checked.loaded.model
    # floor(0.33·20 + 0.5) = 7, floor(0.66·20 + 0.5) = 13, then planned_n
    assert bayes_look_sizes(model, model.hypotheses[0]) == [[7, 13, 20], [7, 13, 20]]
    assert ("3 looks at information 0.33, 0.66, 1; stop for success where the posterior "
            "probability reaches 0.99; futility may be considered where the predictive "
            "probability of success falls below 0.1 (non-binding)") in checked.summary
    looks = checked.loaded.resolved["hypotheses"][0]["looks"]
    assert looks["stop_for_success"] == 0.99 and looks["stop_for_futility"] == 0.1
    assert looks["efficacy"] is None


BAD = [
    ("a spending function on a Bayesian rule",
     PLAN.replace("      stop_for_futility: 0.1\n", "      stop_for_futility: 0.1\n"
                  "      efficacy: pocock\n"),
     "efficacy: pocock", "hypotheses.H1.looks.efficacy", "a Bayesian rule stops by"),
    ("no stopping rule",
     PLAN.replace("      stop_for_success: 0.99\n      stop_for_futility: 0.1\n", ""),
     "looks:", "hypotheses.H1.looks", "give stop_for_success"),
    ("no planned_n", PLAN.replace("  planned_n: {exercise: 20, usual-care: 20}\n", ""),
     "fractions: [", "hypotheses.H1.looks.fractions", "give data.planned_n for exercise"),
    ("sizes without planned_n",
     PLAN.replace("  planned_n: {exercise: 20, usual-care: 20}\n", "")
     .replace("fractions: [0.5, 1]", "sizes: [20, 40]"),
     "sizes: [", "hypotheses.H1.looks.sizes", "the predictive probability is of success at"),
    ("a first look of no one", PLAN.replace("fractions: [0.5, 1]", "fractions: [0.01, 1]"),
     "looks:", "hypotheses.H1.looks", "must start at 1 or more"),
    ("a threshold of 1", PLAN.replace("stop_for_success: 0.99", "stop_for_success: 1"),
     "stop_for_success: 1", "hypotheses.H1.looks.stop_for_success", "less than 1"),
    ("a frequentist test with a Bayesian stop",
     PLAN.replace("    test: posterior-probability\n    prior: {exercise: [1, 1], usual-care: "
                  "[1, 1]}\n    alternative: greater\n    threshold: 0.95\n",
                  "    test: two-proportion-z\n")
     .replace("      stop_for_futility: 0.1\n",
              "      stop_for_futility: 0.1\n      efficacy: pocock\n"),
     "stop_for_success: 0.99", "hypotheses.H1.looks.stop_for_success",
     "is used only with test: posterior-probability"),
    ("a frequentist test without efficacy",
     PLAN.replace("    test: posterior-probability\n    prior: {exercise: [1, 1], usual-care: "
                  "[1, 1]}\n    alternative: greater\n    threshold: 0.95\n",
                  "    test: two-proportion-z\n")
     .replace("      stop_for_success: 0.99\n      stop_for_futility: 0.1\n", ""),
     "looks:", "hypotheses.H1.looks", "needs efficacy"),
]


@pytest.mark.parametrize(("name", "text", "line_text", "path", "message"), BAD,
                         ids=[b[0] for b in BAD])
def test_one_error_line_per_misuse(tmp_path: Path, name: str, text: str, line_text: str,
                                   path: str, message: str) -> None:
    plan = tmp_path / "p.yaml"
    plan.write_text(text)
    with pytest.raises(PlanError) as err:
        api.check(plan)
    line = next(i for i, t in enumerate(text.splitlines(), 1) if line_text in t)
    assert err.value.path == path, str(err.value)
    assert err.value.line == line, str(err.value)
    assert message in err.value.message
    assert "\n" not in str(err.value)


# --- the design ------------------------------------------------------------------------------


def brute_force_success(rate_a: float, rate_b: float) -> tuple[float, float, float]:
    """(Pr success, Pr stop for success at look 1, Pr futility crossed at look 1) at 10/10 then
    20/20, by every interim and final outcome: scipy binom weights, scipy quad posteriors."""
    half = FINAL // 2
    ia = stats.binom.pmf(np.arange(half + 1), half, rate_a)
    ib = stats.binom.pmf(np.arange(half + 1), half, rate_b)
    da, db = ia, ib  # the increments are binomial on the same number of units
    success = stopped = futile = 0.0
    for xa in range(half + 1):
        for xb in range(half + 1):
            w = ia[xa] * ib[xb]
            if posterior(xa, half, xb, half) >= SUCCESS:
                stopped += w
                continue
            if predictive(xa, half, xb, half) < FUTILITY:
                futile += w
            for ya in range(half + 1):
                for yb in range(half + 1):
                    if posterior(xa + ya, FINAL, xb + yb, FINAL) >= THRESHOLD:
                        success += w * da[ya] * db[yb]
    return success + stopped, stopped, futile


def test_design_operating_characteristics_with_the_looks(tmp_path: Path) -> None:
    plan = tmp_path / "p.yaml"
    plan.write_text(PLAN)
    model = api.check(plan).loaded.model
    oc = operating_characteristics(model.hypotheses[0], model)
    looks = oc["looks"]
    assert looks["sizes"] == {"exercise": [10, 20], "usual-care": [10, 20]}
    assert oc["type_one_error"] == max(p["probability"] for p in oc["curve"])
    worst = looks["under_null"]
    assert worst["rates"]["usual-care"] == oc["at_rate"]
    assert worst["success"] == pytest.approx(oc["type_one_error"], rel=1e-12)
    assert looks["under_assumed"]["success"] == pytest.approx(oc["power"], rel=1e-12)
    for point in (worst, looks["under_assumed"]):
        rates = point["rates"]
        success, stopped, futile = brute_force_success(rates["exercise"], rates["usual-care"])
        assert point["success"] == pytest.approx(success, rel=1e-9, abs=1e-12)
        assert point["stop_for_success"][0] == pytest.approx(stopped, rel=1e-9, abs=1e-12)
        assert point["futility"][0] == pytest.approx(futile, rel=1e-9, abs=1e-12)
        for g in GROUPS:  # stopping for success only: 10 with Pr(stop), else 20
            assert point["expected_size"][g] == pytest.approx(20 - 10 * stopped, rel=1e-12)
    # without the looks the same rule is the fixed-sample one, of lower type I error here
    fixed = tmp_path / "f.yaml"
    fixed.write_text(PLAN.split("    looks:")[0])
    plain = api.check(fixed).loaded.model
    assert operating_characteristics(plain.hypotheses[0], plain)["type_one_error"] < \
        oc["type_one_error"]


def test_design_prints_the_looks(tmp_path: Path) -> None:
    plan = tmp_path / "p.yaml"
    plan.write_text(PLAN)
    doc = api.design(plan, actor="ana")
    entry = next(h for h in doc["hypotheses"] if h["id"] == "H1")
    text = " ".join(entry["notes"])
    assert "interim looks at cumulative sizes exercise 10, 20; usual-care 10, 20" in text
    assert "stop for success at posterior probability >= 0.99" in text
    assert "futility (non-binding) at predictive probability < 0.1" in text
    assert "with its interim looks" in entry["method"]
    model = api.check(plan).loaded.model
    oc = operating_characteristics(model.hypotheses[0], model)
    assert f"success {oc['type_one_error']:.4f}" in text
    assert entry["power"] == oc["power"]


# --- the looks -------------------------------------------------------------------------------


@pytest.mark.parametrize(("counts", "decision"), [
    (((9, 10), (2, 10)), "stop-for-success"),
    (((2, 10), (6, 10)), "futility-may-be-considered"),
    (((6, 10), (4, 10)), "continue"),
])
def test_an_interim_look(tmp_path: Path, counts: tuple, decision: str) -> None:
    plan = study(tmp_path)
    out = api.run(plan, write_data(tmp_path / "look1.csv", counts), out=tmp_path / "r1",
                  look=1)
    hyp = h1(out)
    (xa, na), (xb, nb) = counts
    post, pred = posterior(xa, na, xb, nb), predictive(xa, na, xb, nb)
    lk = hyp["looks"]
    assert lk["rule"] == "bayesian" and (lk["look"], lk["of"]) == (1, 2)
    assert lk["posterior_probability"] == pytest.approx(post, rel=1e-9)
    assert lk["predictive_probability"] == pytest.approx(pred, rel=1e-9, abs=1e-12)
    expected = ("stop-for-success" if post >= SUCCESS else
                "futility-may-be-considered" if pred < FUTILITY else "continue")
    assert lk["decision"] == expected == decision
    assert lk["crossed"] is (decision == "stop-for-success")
    assert hyp["reject"] is (decision == "stop-for-success")
    assert hyp["threshold"] == SUCCESS  # at an interim look, the look's threshold
    assert lk["threshold"] == THRESHOLD
    assert lk["sizes"] == {"exercise": 10, "usual-care": 10}
    assert lk["planned_sizes"] == {"exercise": [10, 20], "usual-care": [10, 20]}
    assert lk["observed_fraction"] == 0.5 and lk["history"] == []
    statement = hyp["bayesian"]["statement"]
    assert statement.startswith(f"At look 1 of 2, the posterior probability of the rule's "
                                f"event is {post:.4f}")
    assert f"Decision: {decision.replace('-', ' ')}." in statement
    for row in hyp["bayesian"]["sensitivity"]:  # against the look's threshold as well
        assert row["rule_met"] is (row["posterior_probability"] >= SUCCESS)
    entry = audit.read_log(audit.log_path(plan))[-1]
    assert entry["action"] == "look"
    assert entry["details"]["hypotheses"] == [{
        "id": "H1", "analysed": 20, "fraction": 0.5, "estimate": lk["estimate"],
        "posterior_probability": lk["posterior_probability"],
        "predictive_probability": lk["predictive_probability"], "crossed": lk["crossed"]}]
    assert "look-after-stop" not in notes(out)


def test_the_final_look_keeps_the_history_and_verifies(tmp_path: Path) -> None:
    plan = study(tmp_path)
    first = api.run(plan, write_data(tmp_path / "look1.csv", ((6, 10), (4, 10))),
                    out=tmp_path / "r1", look=1)
    final_data = write_data(tmp_path / "final.csv", ((14, 20), (6, 20)))
    out = api.run(plan, final_data, out=tmp_path / "r2")
    hyp = h1(out)
    lk = hyp["looks"]
    post = posterior(14, 20, 6, 20)
    assert lk["decision"] == ("rule-met-at-final" if post >= THRESHOLD else
                              "rule-not-met-at-final") == "rule-met-at-final"
    assert lk["predictive_probability"] is None
    assert hyp["threshold"] == THRESHOLD and hyp["reject"] is True
    before = h1(first)["looks"]
    assert lk["history"] == [{
        "look": 1, "analysed": 20, "fraction": 0.5, "estimate": before["estimate"],
        "posterior_probability": before["posterior_probability"],
        "predictive_probability": before["predictive_probability"], "crossed": False}]
    result = api.verify(plan, rerun=final_data)
    assert result.summary.startswith("verified")
    entries = audit.read_log(audit.log_path(plan))
    results = json.loads((tmp_path / "r2" / "results.json").read_text())
    assert look_problem(entries, entries[-1], results) is None
    edited = json.loads(json.dumps(entries))
    edited[-2]["details"]["hypotheses"][0]["posterior_probability"] = 0.5
    assert "history of earlier looks differs" in look_problem(edited, edited[-1], results)


def test_a_look_after_a_stop_for_success_and_off_its_sizes(tmp_path: Path) -> None:
    plan = study(tmp_path)
    api.run(plan, write_data(tmp_path / "look1.csv", ((9, 10), (2, 10))), out=tmp_path / "r1",
            look=1)
    out = api.run(plan, write_data(tmp_path / "final.csv", ((15, 20), (5, 17))),
                  out=tmp_path / "r2")
    found = {n["code"]: n["detail"] for n in out.results["notes"]}
    assert found["look-after-stop"] == ("H1: look(s) 1 stopped for success; the trial "
                                        "continued to look 2")
    assert found["bayes-look-sizes"] == ("H1: look 2 of 2 analysed usual-care 17 (planned "
                                         "20); the design's operating characteristics hold at "
                                         "the planned sizes")


def test_an_interim_look_at_the_final_size_is_refused(tmp_path: Path) -> None:
    plan = study(tmp_path)
    with pytest.raises(BadInput, match=r"^H1: look 1 of 2 has reached the planned final size "
                       r"of usual-care 20 of 20; .* \(--look 2\)$"):
        api.run(plan, write_data(tmp_path / "d.csv", ((5, 12), (4, 20))), look=1)
    assert not (tmp_path / "reports").exists() or not any((tmp_path / "reports").iterdir())


def test_one_group_rule_with_looks(tmp_path: Path) -> None:
    text = (PLAN.replace("compare: [exercise, usual-care]", "compare: [exercise]\n"
                         "    null_rate: 0.3")
            .replace("prior: {exercise: [1, 1], usual-care: [1, 1]}", "prior: {exercise: [1, 1]}"))
    plan = study(tmp_path, text)
    out = api.run(plan, write_data(tmp_path / "look1.csv", ((6, 10), (4, 10))),
                  out=tmp_path / "r1", look=1)
    lk = h1(out)["looks"]
    post = stats.beta.sf(0.3, 7, 5)  # Pr(p > 0.3 | 6 of 10), flat prior
    pred = sum(stats.betabinom.pmf(y, 10, 7, 5) for y in range(11)
               if stats.beta.sf(0.3, 7 + y, 15 - y) >= THRESHOLD)
    assert lk["posterior_probability"] == pytest.approx(post, rel=1e-12)
    assert lk["predictive_probability"] == pytest.approx(pred, rel=1e-12)
    assert lk["sizes"] == {"exercise": 10}
    model = api.check(plan).loaded.model
    oc = operating_characteristics(model.hypotheses[0], model)
    # Pr(success) at the null rate: stop at 10 or meet the rule at 20, by binomial sums
    p = 0.3
    stop = [x for x in range(11) if stats.beta.sf(0.3, 1 + x, 11 - x) >= SUCCESS]
    brute = sum(stats.binom.pmf(x, 10, p) for x in stop) + sum(
        stats.binom.pmf(x, 10, p) * stats.binom.pmf(y, 10, p)
        for x in range(11) if x not in stop for y in range(11)
        if stats.beta.sf(0.3, 1 + x + y, 21 - x - y) >= THRESHOLD)
    assert oc["type_one_error"] == pytest.approx(brute, rel=1e-10)
    assert oc["looks"]["under_null"]["rates"] == {"exercise": 0.3}


def test_an_untested_bayesian_rule_at_another_hypothesis_look(tmp_path: Path) -> None:
    text = PLAN.replace("      fractions: [0.5, 1]\n      stop_for_success: 0.99\n"
                        "      stop_for_futility: 0.1\n", "").replace("    looks:\n", "") + """\
  - id: H2
    outcome: response
    compare: [exercise, usual-care]
    test: two-proportion-z
    role: secondary
    looks: {fractions: [0.5, 1], efficacy: lan-demets-obrien-fleming}
"""
    plan = study(tmp_path, text)
    out = api.run(plan, write_data(tmp_path / "look1.csv", ((9, 10), (2, 10))),
                  out=tmp_path / "r1", look=1)
    hyp = h1(out)
    assert hyp["reject"] is None and "looks" not in hyp
    assert "not held against the threshold" in hyp["bayesian"]["statement"]
    assert "rule is met" not in hyp["bayesian"]["statement"]


def test_the_report_and_the_terminal_show_the_look(tmp_path: Path) -> None:
    from prespec.cli import _hypothesis_line
    from prespec.report.looks import look_line, looks_block, looks_jobs

    plan = study(tmp_path)
    out = api.run(plan, write_data(tmp_path / "look1.csv", ((6, 10), (4, 10))),
                  out=tmp_path / "r1", look=1)
    hyp = h1(out)
    lk = hyp["looks"]
    line = look_line(hyp)
    assert line.startswith(f"look 1 of 2 (exercise 10, usual-care 10): posterior probability "
                           f"{lk['posterior_probability']:.4f} (stop for success at 0.99), "
                           f"predictive probability of final success "
                           f"{lk['predictive_probability']:.4f} (futility below 0.1, "
                           "non-binding): continue")
    assert _hypothesis_line(hyp, {}, True).endswith("the look decides")
    html, figures = looks_block(hyp, "hypotheses.H1")
    assert "Interim looks of H1 (a Bayesian rule)" in html
    assert f"{lk['predictive_probability']:.4f}" in html
    assert figures == [("figures/looks-H1.png", figures[0][1])]
    jobs = dict(looks_jobs(out.results))
    job = jobs["figures/looks-H1.png"]
    assert job.posterior == [(0.5, lk["posterior_probability"])]
    assert job.predictive == [(0.5, lk["predictive_probability"])]
    fig = job.draw()
    labels = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert labels == ["posterior probability", "predictive probability of final success",
                      "stop for success (0.99)", "final threshold (0.95)",
                      "futility, non-binding (0.1)"]
    assert math.isclose(fig.axes[0].get_ylim()[1], 1.02)


def test_the_plan_document_words_the_looks(tmp_path: Path) -> None:
    import re

    plan = study(tmp_path)
    page = re.sub(r"<[^>]+>", "", api.describe(plan).html.read_text("utf-8"))
    page = re.sub(r"\s+", " ", page)
    assert ("2 looks at information fractions 0.5, 1; an interim look stops for success where "
            "the posterior probability reaches 0.99; futility may be considered (non-binding) "
            "where the predictive probability of meeting the rule at the final sizes") in page
    assert "falls below 0.1; the final look is the rule itself" in page
    assert "Planned sizes at the looksexercise 10, 20; usual-care 10, 20" in page  # th, td
    assert api.verify(plan, document=api.describe(plan).html).summary.startswith("verified")


def test_the_summary_says_what_an_interim_look_decided(tmp_path: Path) -> None:
    from prespec.report.summary import facts, result_rows

    text = PLAN + """\
  - id: H2
    outcome: response
    compare: [exercise, usual-care]
    test: fisher-exact
    role: secondary
"""
    plan = study(tmp_path, text)
    out = api.run(plan, write_data(tmp_path / "look1.csv", ((9, 10), (2, 10))),
                  out=tmp_path / "r1", look=1)
    rows = {r["id"]: r for r in result_rows(out.results)}
    assert rows["H1"]["decision"] == "look 1 of 2: stop for success (rule met)"
    assert rows["H2"]["decision"] == "not tested at look 1 of 2"
    assert "Analysis run: interim look 1 of 2" in facts(out.results)
    final = api.run(plan, write_data(tmp_path / "final.csv", ((15, 20), (5, 20))),
                    out=tmp_path / "r2")
    rows = {r["id"]: r for r in result_rows(final.results)}
    assert rows["H1"]["decision"] == "rule met"
    assert rows["H2"]["decision"] in ("reject H0", "do not reject H0")
    assert "interim look" not in facts(final.results)
