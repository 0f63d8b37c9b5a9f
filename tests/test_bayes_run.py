"""A frequentist primary and a Bayesian secondary (plans/bayesian-secondary.yaml) through
check, lock, design, run and verify, on the invented data of ``prespec demo``. The Bayesian
numbers are checked against computations written here with scipy (``integrate.quad`` over
``stats.beta``, ``stats.binom``), so the wiring (which counts, which prior, which side) is
checked against something prespec did not compute; the formulas themselves are checked in
tests/reference/test_ref_bayes.py.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from scipy import integrate, stats

import prespec.report
from prespec import api
from prespec.demo.wound import demo_data

HERE = Path(__file__).parents[1]
EXAMPLE = (HERE / "plans" / "bayesian-secondary.yaml").read_text("utf-8")


@pytest.fixture(autouse=True)
def quick_render(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)


@pytest.fixture
def study(tmp_path: Path) -> tuple[Path, Path]:
    plan = tmp_path / "bayes.yaml"
    plan.write_text(EXAMPLE, encoding="utf-8")
    data = tmp_path / "data.csv"
    data.write_text(demo_data(), encoding="utf-8")
    return plan, data


def _results(folder: Path) -> dict[str, Any]:
    return json.loads((folder / "results.json").read_text("utf-8"))


def _below(post_a: tuple[float, float], post_b: tuple[float, float], d: float) -> float:
    """Pr(p_a − p_b < d) under two beta posteriors, by scipy's quad (written here)."""
    value, _ = integrate.quad(
        lambda p: stats.beta.pdf(p, *post_b) * stats.beta.cdf(p + d, *post_a), 0.0, 1.0,
        epsabs=1e-13, epsrel=1e-12, limit=200)
    return float(value)


def test_the_bayesian_secondary_is_its_posterior_probability(study: tuple[Path, Path]) -> None:
    plan, data = study
    api.lock(plan, actor="ana")
    results = _results(api.run(plan, data, actor="ana").folder)
    h1, h2 = results["hypotheses"]
    assert h1["family"] == "main" and h1["p_adjusted"] == h1["p_value"]  # holm over H1 alone
    assert h2["family"] is None and h2["p_value"] is None and h2["p_adjusted"] is None
    (xa, xb), (na, nb) = h2["table"]["events"], h2["table"]["totals"]
    post_a, post_b = (0.8 + xa, 3.2 + na - xa), (0.8 + xb, 3.2 + nb - xb)  # mean 0.2, n 4
    assert [(p["a"], p["b"]) for p in h2["bayesian"]["posterior"]] == [post_a, post_b]
    probability = _below(post_a, post_b, 0.0)  # alternative: less, margin 0
    assert h2["posterior_probability"] == pytest.approx(probability, abs=1e-9)
    assert h2["threshold"] == 0.975 and h2["reject"] is (probability >= 0.975)
    mean = post_a[0] / sum(post_a) - post_b[0] / sum(post_b)
    assert h2["estimate"]["value"] == pytest.approx(mean, abs=1e-12)
    low, high = h2["estimate"]["ci"]
    assert _below(post_a, post_b, low) == pytest.approx(0.025, abs=1e-8)
    assert _below(post_a, post_b, high) == pytest.approx(0.975, abs=1e-8)
    assert h2["estimate"]["ci_method"] == "equal-tailed-credible"
    flat, sceptical = h2["bayesian"]["sensitivity"]
    assert flat["prior"] == "flat" and flat["posterior_probability"] == pytest.approx(
        _below((1 + xa, 1 + na - xa), (1 + xb, 1 + nb - xb), 0.0), abs=1e-9)
    # the sceptical prior left out: the mean of the prior means (0.2 and 0.2), a quarter of 180
    assert (sceptical["centre"], sceptical["n"]) == (pytest.approx(0.2), 45.0)
    centre = 0.2
    scept = (centre * 45 + xa, (1 - centre) * 45 + na - xa), (
        centre * 45 + xb, (1 - centre) * 45 + nb - xb)
    assert sceptical["posterior_probability"] == pytest.approx(_below(*scept, 0.0), abs=1e-9)


def _exact_rule_probability(region: np.ndarray, na: int, nb: int, pa: float,
                            pb: float) -> float:
    return float(stats.binom.pmf(np.arange(na + 1), na, pa)
                 @ region @ stats.binom.pmf(np.arange(nb + 1), nb, pb))


def test_the_operating_characteristics_are_the_rule_summed_over_every_outcome(
        study: tuple[Path, Path]) -> None:
    plan, data = study
    api.lock(plan, actor="ana")
    oc = _results(api.run(plan, data, actor="ana").folder)["hypotheses"][1]["bayesian"][
        "operating_characteristics"]
    assert oc["sizes"] == {"alginate": 180, "gauze": 180} and oc["alpha"] == 0.05
    # the region of the rule comes from prespec (each of its cells is checked against quad in
    # tests/reference/test_ref_bayes.py); its probabilities are summed here with scipy's pmfs
    from prespec.stats import bayes

    region = bayes.rule_region(180, 180, (0.8, 3.2), (0.8, 3.2), margin=0.0,
                               alternative="less", threshold=0.975).astype(float)
    power = _exact_rule_probability(region, 180, 180, 0.14, 0.20)
    assert oc["power"] == pytest.approx(power, abs=1e-12)
    worst = max(_exact_rule_probability(region, 180, 180, p["rate_a"], p["rate_b"])
                for p in oc["curve"])
    assert oc["type_one_error"] == pytest.approx(worst, abs=1e-12)
    assert all(p["rate_a"] == pytest.approx(p["rate_b"]) for p in oc["curve"])
    assert oc["exceeds_alpha"] is (oc["type_one_error"] > 0.05)


def test_design_shows_the_rule_and_simulates_it(study: tuple[Path, Path]) -> None:
    plan, _ = study
    doc = api.design(plan, simulate=4000, seed=3, actor="ana")
    h2 = next(h for h in doc["hypotheses"] if h["id"] == "H2")
    assert h2["n_per_group"] is None and "operating characteristics" in h2["method"]
    assert any(n.startswith("type I error at the planned sizes") for n in h2["notes"])
    assert "warnings" not in doc  # within alpha: the design document has no warnings key
    assumed = next(s for s in doc["scenarios"] if s["name"] == "assumed")
    simulated, se = assumed["power"]["H2"], assumed["mc_se"]["power"]["H2"]
    assert abs(simulated - h2["power"]) < 4 * se + 1e-9
    assert "H2" not in assumed["true_nulls"]


def test_a_rule_above_alpha_is_a_warning_not_an_error(study: tuple[Path, Path]) -> None:
    plan, _ = study
    plan.write_text(EXAMPLE.replace("threshold: 0.975", "threshold: 0.6"), encoding="utf-8")
    res = api.check(plan)
    (line,) = res.warnings
    assert line.startswith("hypotheses.H2: the rule's exact type I error at the planned sizes "
                           "(alginate 180, gauze 180), maximised over the null boundary, is ")
    assert "above alpha 0.05" in line
    locked = api.lock(plan, actor="ana")
    assert locked.created and locked.warnings == res.warnings


def test_verify_recomputes_the_bayesian_run(study: tuple[Path, Path]) -> None:
    plan, data = study
    api.lock(plan, actor="ana")
    api.run(plan, data, actor="ana")
    res = api.verify(plan, rerun=data)
    assert [r.locked for r in res.runs] == [True]


def test_the_commands_print_the_warning_on_stderr(study: tuple[Path, Path],
                                                   capsys: pytest.CaptureFixture[str]) -> None:
    from prespec.cli import main

    plan, _ = study
    plan.write_text(EXAMPLE.replace("threshold: 0.975", "threshold: 0.6"), encoding="utf-8")
    said = []
    for command in (["check", str(plan)], ["design", str(plan)], ["lock", str(plan)]):
        assert main(command) == 0
        err = capsys.readouterr().err
        assert err.startswith("prespec: warning: hypotheses.H2: ") and "alpha 0.05" in err, \
            command
        said.append(err)
    assert said[0] == said[1] == said[2]  # one warning, in the same words from each command


def test_one_group_against_its_null_rate(study: tuple[Path, Path]) -> None:
    plan, data = study
    plan.write_text(EXAMPLE + """\
  - id: H3
    outcome: infection
    compare: [negative-pressure]
    test: posterior-probability
    null_rate: 0.2
    alternative: less
    threshold: 0.95
    role: secondary
""", encoding="utf-8")
    api.lock(plan, actor="ana")
    h3 = _results(api.run(plan, data, actor="ana").folder)["hypotheses"][2]
    (x,), (n,) = h3["table"]["events"], h3["table"]["totals"]
    assert h3["posterior_probability"] == pytest.approx(
        stats.beta.cdf(0.2, 1 + x, 1 + n - x), abs=1e-12)  # scipy: Pr(p < 0.2 | data)
    assert h3["estimate"]["measure"] == "proportion"
    assert h3["estimate"]["value"] == pytest.approx((1 + x) / (2 + n), abs=1e-12)
    low, high = h3["estimate"]["ci"]
    assert (low, high) == (pytest.approx(stats.beta.ppf(0.025, 1 + x, 1 + n - x), abs=1e-10),
                           pytest.approx(stats.beta.ppf(0.975, 1 + x, 1 + n - x), abs=1e-10))
    oc = h3["bayesian"]["operating_characteristics"]
    met = np.array([stats.beta.cdf(0.2, 1 + k, 1 + 180 - k) >= 0.95 for k in range(181)])
    assert oc["type_one_error"] == pytest.approx(
        float(stats.binom.pmf(np.arange(181), 180, 0.2) @ met), abs=1e-12)
    assert oc["power"] == pytest.approx(
        float(stats.binom.pmf(np.arange(181), 180, 0.10) @ met), abs=1e-12)
    assert all(p["rate_b"] is None for p in oc["curve"])


def test_the_sentence_never_shows_a_probability_on_the_wrong_side_of_the_threshold() -> None:
    from types import SimpleNamespace

    from prespec.analysis.bayes import _statement

    hyp = SimpleNamespace(alternative="greater", kind="pair", margin=0.0, threshold=0.975,
                          null_rate=None)
    missed = _statement(hyp, ["a", "b"], SimpleNamespace(probability=0.97496), False)
    assert "is 0.97496, which does not reach the threshold 0.975" in missed
    met = _statement(hyp, ["a", "b"], SimpleNamespace(probability=0.99123), True)
    assert "is 0.9912, which reaches the threshold 0.975: the rule is met." in met


def test_overriding_the_bayesian_rule_with_a_test_drops_its_own_keys(
        study: tuple[Path, Path]) -> None:
    plan, data = study
    api.lock(plan, actor="ana")
    out = api.run(plan, data, actor="ana", overrides={"hypotheses.H2.test": "fisher-exact"},
                  accept_deviation="a frequentist look at the secondary")
    results = _results(out.folder)
    assert [o["key"] for o in results["overrides"]] == [
        "hypotheses.H2.test", "hypotheses.H2.prior", "hypotheses.H2.threshold",
        "hypotheses.H2.credible", "hypotheses.H2.interval"]
    h2 = results["hypotheses"][1]
    assert h2["test"] == "fisher-exact" and h2["family"] == "main" and "bayesian" not in h2
    assert h2["estimate"]["ci_method"] == "newcombe" and h2["p_value"] is not None
    assert [r.locked for r in api.verify(plan, rerun=data).runs] == [False]
