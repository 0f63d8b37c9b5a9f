"""A covariate-adjusted primary and a stratified secondary, run through prespec as a user does:
lock, run, rehearse, design, verify --rerun. The numbers are checked against computations
written here from the raw CSV with pandas and statsmodels (the GLM fit and the marginal risks
of the working model), so the wiring (which units, which covariates, which strata) is checked
against something prespec did not compute; the formulas themselves are checked in
tests/reference/test_ref_adjusted.py and tests/reference/test_ref_stratified_difference.py.
The data are the invented trial of ``prespec.demo.adjusted``.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

import prespec.report
from prespec import api, audit
from prespec.demo.adjusted import PLAN_TEXT, write_adjusted_demo
from prespec.errors import DataError, PlanError
from prespec.stats import intervals, proportions
from prespec.stats import stratified_difference as sdiff

A, B = "early-mobilisation", "usual-care"


@pytest.fixture(autouse=True)
def quick_render(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)


@pytest.fixture
def study(tmp_path: Path) -> tuple[Path, Path]:
    return write_adjusted_demo(tmp_path / "trial")


def _results(folder: Path) -> dict[str, Any]:
    return json.loads((folder / "results.json").read_text("utf-8"))


def _analysed(data: Path) -> pd.DataFrame:
    """The analysed units of H1 from the raw CSV, by pandas alone: randomised, an outcome,
    an age."""
    frame = pd.read_csv(data, dtype=str, keep_default_na=False)
    frame = frame[(frame["randomised"] == "yes") & (frame["pneumonia_14d"] != "")]
    return frame[frame["age"] != ""]


def test_the_adjusted_primary_is_the_working_model_on_the_analysed_units(
        study: tuple[Path, Path]) -> None:
    plan, data = study
    api.lock(plan, actor="ana")
    out = api.run(plan, data, actor="ana")
    results = _results(out.folder)
    h1 = results["hypotheses"][0]
    units = _analysed(data)
    y = units["pneumonia_14d"].astype(float).to_numpy()
    treated = (units["arm"] == A).astype(float).to_numpy()
    centre = pd.get_dummies(units["centre"], drop_first=True, dtype=float)  # harbour: reference
    x = np.column_stack([np.ones(len(y)), treated, units["age"].astype(float),
                         units["frail"].astype(float), centre.to_numpy()])
    fit = sm.GLM(y, x, family=sm.families.Binomial()).fit()  # statsmodels: the working model
    terms = h1["adjusted"]["model"]["terms"]
    assert [t["term"] for t in terms] == ["intercept", "group", "age", "frail",
                                          *(f"centre={c}" for c in centre.columns)]
    assert np.allclose([t["coefficient"] for t in terms], fit.params, rtol=1e-8, atol=1e-10)
    assert np.allclose([t["standard_error"] for t in terms], fit.bse, rtol=1e-6)
    x_a, x_b = x.copy(), x.copy()
    x_a[:, 1], x_b[:, 1] = 1.0, 0.0
    p_a, p_b = fit.predict(x_a).mean(), fit.predict(x_b).mean()
    risks = h1["adjusted"]["risks"]
    assert [r["group"] for r in risks] == [A, B]
    assert risks[0]["risk"] == pytest.approx(p_a, rel=1e-8)
    assert risks[1]["risk"] == pytest.approx(p_b, rel=1e-8)
    assert h1["estimate"]["value"] == pytest.approx(p_a - p_b, rel=1e-8)
    assert h1["table"] == {"groups": [A, B],
                           "events": [int(y[treated == 1].sum()), int(y[treated == 0].sum())],
                           "totals": [int((treated == 1).sum()), int((treated == 0).sum())]}
    assert h1["adjusted"]["model"]["conditional_odds_ratio"]["value"] == pytest.approx(
        np.exp(fit.params[1]), rel=1e-8)
    low, high = h1["estimate"]["ci"]
    assert low < h1["estimate"]["value"] < high
    assert h1["statistic"] == pytest.approx(
        h1["estimate"]["value"] / ((high - low) / (2 * 1.959963984540054)), rel=1e-8)
    # the three units with a blank age: a departure, counted per group, in the log too
    (dev,) = results["deviations"]
    assert dev["code"] == "missing-covariate"
    assert sum(h1["adjusted"]["missing_covariate"].values()) == 3
    (entry,) = [e for e in audit.read_log(audit.log_path(plan)) if e["action"] == "run"]
    assert [d["code"] for d in entry["deviations"]] == ["missing-covariate"]


def test_the_stratified_secondary_is_the_score_test_on_the_centres(
        study: tuple[Path, Path]) -> None:
    plan, data = study
    api.lock(plan, actor="ana")
    h2 = _results(api.run(plan, data, actor="ana").folder)["hypotheses"][1]
    frame = pd.read_csv(data, dtype=str, keep_default_na=False)
    frame = frame[(frame["randomised"] == "yes") & (frame["pneumonia_14d"] != "")]
    strata = []
    for centre in sorted(frame["centre"].unique()):
        rows = frame[frame["centre"] == centre]
        a, b = rows[rows["arm"] == A], rows[rows["arm"] == B]
        strata.append((int((a["pneumonia_14d"] == "1").sum()), len(a),
                       int((b["pneumonia_14d"] == "1").sum()), len(b)))
    assert [(s["events"][0], s["totals"][0], s["events"][1], s["totals"][1])
            for s in h2["strata_tables"]] == strata
    test = sdiff.stratified_score_test(strata, weights="cmh")
    interval = sdiff.stratified_score_interval(strata, 0.95, weights="cmh")
    assert (h2["statistic"], h2["p_value"]) == (test.statistic, test.p_value)
    assert (h2["estimate"]["value"], *h2["estimate"]["ci"]) == (
        interval.value, interval.low, interval.high)
    assert h2["stratified"]["weights"] == "cmh"
    assert sum(h2["stratified"]["stratum_weights"]) == pytest.approx(1.0, abs=1e-12)


def _small_plan(tmp_path: Path, extra: str = "", covariates: str = "{x: numeric}") -> Path:
    plan = tmp_path / "plan.yaml"
    plan.write_text(f"""\
prespec: 1
title: An invented two-arm check of the adjusted analysis
data: {{id: id, group: arm, groups: [t, c]}}
outcomes:
  y: {{column: y, event: [1], no_event: [0], missing: exclude}}
alpha: 0.05
multiplicity: none
hypotheses:
  - id: H1
    outcome: y
    compare: [t, c]
    test: g-computation
    covariates: {covariates}
{extra}""", encoding="utf-8")
    return plan


def _data(tmp_path: Path, rows: list[tuple[str, str, str, str]]) -> Path:
    data = tmp_path / "data.csv"
    data.write_text("id,arm,x,y\n" + "".join(f"{','.join(r)}\n" for r in rows), "utf-8")
    return data


def _rows(seed: int = 3, n: int = 120) -> list[tuple[str, str, str, str]]:
    rng = np.random.default_rng(seed)
    return [(f"U{i}", "t" if i % 2 else "c", f"{rng.normal():.3f}",
             str(int(rng.random() < (0.45 if i % 2 else 0.3)))) for i in range(n)]


def test_no_covariates_give_the_unadjusted_difference_exactly(tmp_path: Path) -> None:
    plan = _small_plan(tmp_path, covariates="{}")
    data = _data(tmp_path, _rows())
    api.lock(plan, actor="ana")
    h1 = _results(api.run(plan, data, actor="ana").folder)["hypotheses"][0]
    (xt, xc), (nt, nc) = h1["table"]["events"], h1["table"]["totals"]
    assert h1["estimate"]["value"] == pytest.approx(xt / nt - xc / nc, abs=1e-12)
    assert [t["term"] for t in h1["adjusted"]["model"]["terms"]] == ["intercept", "group"]


def test_separation_falls_back_to_the_prespecified_test_with_a_note(tmp_path: Path) -> None:
    # x decides the outcome completely: the working model has no finite maximum
    rows = [(f"U{i}", "t" if i % 2 else "c", str(i), "1" if i >= 20 else "0")
            for i in range(40)]
    plan = _small_plan(tmp_path)
    data = _data(tmp_path, rows)
    api.lock(plan, actor="ana")
    results = _results(api.run(plan, data, actor="ana").folder)
    h1 = results["hypotheses"][0]
    assert h1["planned_test"] == "g-computation" and h1["test"] == "two-proportion-z"
    assert h1["adjusted"]["fallback"]["test"] == "two-proportion-z"
    assert "separation" in h1["adjusted"]["fallback"]["reason"]
    assert h1["adjusted"]["model"] is None and h1["adjusted"]["risks"] is None
    (xt, xc), (nt, nc) = h1["table"]["events"], h1["table"]["totals"]
    z = proportions.two_proportion_z(xt, nt, xc, nc)
    assert (h1["statistic"], h1["p_value"]) == (z.statistic, z.p_value)
    newcombe = intervals.newcombe_difference(xt, nt, xc, nc, 0.95)
    assert h1["estimate"]["ci_method"] == "newcombe"
    assert h1["estimate"]["ci"] == [newcombe.low, newcombe.high]
    assert [n["code"] for n in results["notes"]] == ["model-fallback"]


def test_a_named_fallback_is_the_one_that_runs(tmp_path: Path) -> None:
    rows = [(f"U{i}", "t" if i % 2 else "c", str(i), "1" if i >= 20 else "0")
            for i in range(40)]
    plan = _small_plan(tmp_path, "    fallback: fisher-exact\n")
    api.lock(plan, actor="ana")
    h1 = _results(api.run(plan, _data(tmp_path, rows), actor="ana").folder)["hypotheses"][0]
    (xt, xc), (nt, nc) = h1["table"]["events"], h1["table"]["totals"]
    assert h1["test"] == "fisher-exact"
    assert h1["p_value"] == proportions.fisher_exact(xt, nt, xc, nc).p_value


def test_a_blank_covariate_under_error_is_bad_input_naming_the_rows(tmp_path: Path) -> None:
    rows = _rows()
    rows[4] = (rows[4][0], rows[4][1], "", rows[4][3])
    plan = _small_plan(tmp_path, "    covariate_missing: error\n")
    data = _data(tmp_path, rows)
    api.lock(plan, actor="ana")
    with pytest.raises(DataError) as caught:
        api.run(plan, data, actor="ana")
    assert str(caught.value) == (f"{data}: hypotheses.H1: blank covariates in 1 row "
                                 "analysed: 'x' (1) (rows 6); covariate_missing: error")
    assert not (plan.parent / "reports").exists()


def test_text_in_a_numeric_covariate_is_bad_input(tmp_path: Path) -> None:
    rows = _rows()
    rows[7] = (rows[7][0], rows[7][1], "high", rows[7][3])
    plan = _small_plan(tmp_path)
    data = _data(tmp_path, rows)
    api.lock(plan, actor="ana")
    with pytest.raises(DataError) as caught:
        api.run(plan, data, actor="ana")
    text = str(caught.value)
    assert "hypotheses.H1.covariates.x" in text and "'high' (1)" in text and "rows 9" in text


def test_verify_recomputes_the_adjusted_run(study: tuple[Path, Path]) -> None:
    plan, data = study
    api.lock(plan, actor="ana")
    api.run(plan, data, actor="ana")
    res = api.verify(plan, rerun=data)
    assert res.runs and all(r.locked for r in res.runs)
    assert "recomputed" in " ".join(res.passed)


def test_design_sizes_the_adjusted_test_as_unadjusted_and_refuses_to_simulate_it(
        study: tuple[Path, Path]) -> None:
    plan, _ = study
    doc = api.design(plan, actor="ana")
    h1 = next(h for h in doc["hypotheses"] if h["id"] == "H1")
    assert any("sized as the unadjusted comparison" in n for n in h1["notes"])
    h2 = next(h for h in doc["hypotheses"] if h["id"] == "H2")
    assert any("sized as an unstratified comparison" in n for n in h2["notes"])
    with pytest.raises(PlanError) as caught:
        api.design(plan, simulate=100, actor="ana")
    assert caught.value.path == "hypotheses.H1.covariates"
    assert caught.value.line == PLAN_TEXT[:PLAN_TEXT.index("covariates:")].count("\n") + 1


def test_the_rehearsal_shows_pooled_covariates_and_no_risk(study: tuple[Path, Path]) -> None:
    plan, data = study
    out = api.rehearse(plan, data, actor="ana")
    results = _results(out.folder)
    frame = pd.read_csv(data, dtype=str, keep_default_na=False)
    frame = frame[(frame["randomised"] == "yes") & (frame["pneumonia_14d"] != "")]
    complete = frame[frame["age"] != ""]
    age = next(c for c in results["covariates"] if c["column"] == "age")
    assert (age["analysed"], age["missing"]) == (len(complete), len(frame) - len(complete))
    assert age["summary"]["mean"] == pytest.approx(complete["age"].astype(float).mean(),
                                                   rel=1e-12)
    centre = next(c for c in results["covariates"] if c["column"] == "centre")
    assert centre["levels"] == [{"level": k, "count": int(v)} for k, v in
                                sorted(complete["centre"].value_counts().items())]
    assert results["model_checks"] == [{"hypothesis": "H1", "fits": True, "reason": None}]
    pooled = json.dumps([results["covariates"], results["model_checks"]])
    assert "risk" not in pooled and A not in pooled and B not in pooled


def test_the_demo_command_writes_the_trial_and_refuses_a_folder_of_other_files(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    from prespec.demo.adjusted import DATA_NAME, PLAN_NAME, main

    folder = tmp_path / "demo"
    assert main([str(folder)]) == 0
    assert sorted(p.name for p in folder.iterdir()) == sorted([PLAN_NAME, DATA_NAME])
    assert (folder / PLAN_NAME).read_text("utf-8") == PLAN_TEXT
    assert main([str(folder)]) == 0  # its own files again: written over
    (folder / "notes.txt").write_text("mine", "utf-8")
    assert main([str(folder)]) == 2
    assert "holds other files" in capsys.readouterr().err
    assert (folder / "notes.txt").read_text("utf-8") == "mine"


def test_an_undefined_inverse_variance_weight_is_said(tmp_path: Path) -> None:
    """A stratum with no events in either group under miettinen-nurminen weights: the test
    cannot reject at 0, and the run says why (the statistic and p-value are the module's)."""
    plan = tmp_path / "plan.yaml"
    plan.write_text("""\
prespec: 1
title: An invented stratified check
data: {id: id, group: arm, groups: [t, c]}
outcomes:
  y: {column: y, event: [1], no_event: [0], missing: exclude}
alpha: 0.05
multiplicity: none
hypotheses:
  - {id: H1, outcome: y, compare: [t, c], test: stratified-score, strata: [site],
     weights: miettinen-nurminen}
""", encoding="utf-8")
    rows = ([(f"A{i}", "t" if i % 2 else "c", "a", "0") for i in range(20)]
            + [(f"B{i}", "t" if i % 2 else "c", "b", "1" if (i % 2 and i < 16) or i in (2, 4)
                else "0") for i in range(40)])
    data = tmp_path / "data.csv"
    data.write_text("id,arm,site,y\n" + "".join(",".join(r) + "\n" for r in rows), "utf-8")
    api.lock(plan, actor="ana")
    results = _results(api.run(plan, data, actor="ana").folder)
    h1 = results["hypotheses"][0]
    assert (h1["statistic"], h1["p_value"]) == (0.0, 1.0)
    assert h1["stratified"] == {"weights": "miettinen-nurminen",
                                "stratum_weights": [None, None]}
    assert "stratum-weight-undefined" in [n["code"] for n in results["notes"]]


def test_overriding_the_adjusted_test_drops_its_own_keys_and_reruns(
        study: tuple[Path, Path]) -> None:
    """--test H1=two-proportion-z: the keys only g-computation uses no longer apply and its
    interval becomes the measure's default; each change is an override departure, and
    verify --rerun re-applies them and gets the same report."""
    plan, data = study
    api.lock(plan, actor="ana")
    out = api.run(plan, data, actor="ana", overrides={"hypotheses.H1.test": "two-proportion-z"},
                  accept_deviation="an unadjusted look, for comparison")
    results = _results(out.folder)
    assert [o["key"] for o in results["overrides"]] == [
        "hypotheses.H1.test", "hypotheses.H1.covariates", "hypotheses.H1.variance",
        "hypotheses.H1.randomisation_strata", "hypotheses.H1.covariate_missing",
        "hypotheses.H1.fallback", "hypotheses.H1.interval"]
    h1 = results["hypotheses"][0]
    assert h1["test"] == "two-proportion-z" and "adjusted" not in h1
    assert h1["estimate"]["ci_method"] == "newcombe" and h1["pre_specified"] is False
    res = api.verify(plan, rerun=data)
    assert [r.locked for r in res.runs] == [False]
