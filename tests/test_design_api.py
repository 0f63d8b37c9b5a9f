"""``api.design``, ``prespec design``, the design in check's summary and in results.json.

The notebook step is replaced by a no-op here (as in tests/test_api.py); the e2e tests run
the command for real.
"""

from __future__ import annotations

import io
import json
import re
from pathlib import Path

import pytest

import prespec.report
from prespec import api, audit, cli
from prespec.common.canonical import canonical_json, sha256_tag
from prespec.demo.wound import PLAN_TEXT as DEMO_PLAN
from prespec.demo.wound import demo_data
from prespec.design import samplesize
from prespec.errors import BadInput
from prespec.plan import load_plan

# The demo plan without its own design section; these tests add the design they need.
PLAN_TEXT = re.sub(r"^design:\n(?:  .*\n)+", "", DEMO_PLAN, flags=re.MULTILINE)

DESIGN = """\
design:
  assumed: {gauze: 0.20, alginate: 0.14, negative-pressure: 0.10}
  power: 0.8
  dropout: 0.1
  scenarios:
    pessimistic: {gauze: 0.20, alginate: 0.18, negative-pressure: 0.15}
"""


@pytest.fixture(autouse=True)
def quick_render(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)


@pytest.fixture
def study(tmp_path: Path) -> tuple[Path, Path]:
    plan = tmp_path / "trial.yaml"
    plan.write_text(PLAN_TEXT.replace("hypotheses:\n", DESIGN + "hypotheses:\n", 1))
    data = tmp_path / "data.csv"
    data.write_text(demo_data())
    return plan, data


def log_of(plan: Path) -> list[dict]:
    return audit.read_log(audit.log_path(plan))


def test_design_returns_the_document_and_logs_it(study: tuple[Path, Path]) -> None:
    plan, _ = study
    doc = api.design(plan, actor="ana")
    (entry,) = log_of(plan)
    loaded = load_plan(plan)
    assert entry["action"] == "design" and entry["actor"] == "ana"
    assert entry["plan"] == loaded.fingerprint == doc["plan"] and entry["data"] is None
    details = entry["details"]
    assert details["document"] == sha256_tag(canonical_json(doc))
    assert details["simulate"] is None and details["seed"] is None and details["scenarios"] == []
    assert details["plan_file_sha256"] == loaded.file_sha256
    h1 = doc["hypotheses"][0]
    assert details["hypotheses"][0] == {k: h1[k] for k in ("id", "alpha", "n_per_group",
                                                           "n_enrol_per_group", "power")}
    # H1 and H2 under Holm: alpha / 2 each, two-sided, at planned_n 180 per group
    assert h1["alpha"] == pytest.approx(0.025)
    assert h1["n_per_group"] == dict(zip(
        ["negative-pressure", "gauze"],
        samplesize.two_proportion_n(0.10, 0.20, 0.0125, 0.8).n, strict=True))
    assert h1["power"] == pytest.approx(samplesize.two_proportion_power(
        0.10, 0.20, 180, 180, 0.0125, two_sided=True), rel=1e-12)
    assert set(doc) >= {"hypotheses", "scenarios", "alpha_rule", "caution"}


def test_a_simulation_is_logged_with_its_seed(study: tuple[Path, Path]) -> None:
    plan, _ = study
    api.lock(plan)
    doc = api.design(plan, simulate=1500, seed=4)
    entry = log_of(plan)[-1]
    assert entry["details"]["simulate"] == 1500 and entry["details"]["seed"] == 4
    names = [s["name"] for s in entry["details"]["scenarios"]]
    assert names == ["assumed", "pessimistic", "global-null"]
    null = doc["scenarios"][2]
    assert set(null) >= {"name", "rates", "trials", "fwer", "any", "all", "power", "mc_se"}
    assert null["trials"] == 1500 and null["n_per_group"] == {"gauze": 180, "alginate": 180,
                                                              "negative-pressure": 180}
    assert doc["simulation"]["sizes_from"] == "data.planned_n"
    assert api.verify(plan).passed  # a design entry leaves the log verifiable


@pytest.mark.parametrize(("kwargs", "message"), [
    ({"simulate": 0}, "at least 1"),
    ({"simulate": 10, "seed": -1}, "0 or more"),
])
def test_bad_options_write_nothing(study: tuple[Path, Path], kwargs: dict,
                                   message: str) -> None:
    plan, _ = study
    with pytest.raises(BadInput, match=message):
        api.design(plan, **kwargs)
    assert not audit.log_path(plan).exists()


def test_a_plan_without_design_is_bad_input(tmp_path: Path) -> None:
    plan = tmp_path / "trial.yaml"
    plan.write_text(PLAN_TEXT)
    with pytest.raises(BadInput, match=r"trial\.yaml: the plan has no design section") as err:
        api.design(plan)
    assert err.value.exit_status == 2
    assert not audit.log_path(plan).exists()


def _stratified(plan: Path) -> str:
    """The plan's first hypothesis tested by Cochran–Mantel–Haenszel over site, written back."""
    text = plan.read_text().replace("    test: pearson-chi-square\n    alternative: two-sided",
                                    "    test: cochran-mantel-haenszel\n    strata: [site]\n"
                                    "    alternative: two-sided", 1)
    text = text.replace("    interval: newcombe\n    sparse: {min_expected: 5, test: fisher-exact}\n"
                        "    role: primary", "    interval: sato\n    role: primary", 1)
    plan.write_text(text)
    return text


def test_a_stratified_plan_cannot_be_simulated_and_nothing_is_written(
        study: tuple[Path, Path]) -> None:
    plan, _ = study
    _stratified(plan)
    with pytest.raises(BadInput, match="stratified test"):
        api.design(plan, simulate=100)
    assert not audit.log_path(plan).exists()
    assert api.design(plan)["hypotheses"][0]["notes"][0].startswith("cochran-mantel-haenszel")


def test_check_shows_the_design_and_its_sizes(study: tuple[Path, Path]) -> None:
    plan, _ = study
    text = api.check(plan).summary
    assert "Design:        power 0.8 at assumed rates gauze 0.2, alginate 0.14, " \
           "negative-pressure 0.1; allocation 1:1:1; dropout 0.1" in text
    assert "  scenario pessimistic: gauze 0.2, alginate 0.18, negative-pressure 0.15" in text
    n = samplesize.two_proportion_n(0.10, 0.20, 0.0125, 0.8).n[0]
    assert f"    H1 (alpha 0.025): analysed negative-pressure {n}, gauze {n}" in text


def test_a_run_records_planned_versus_achieved(study: tuple[Path, Path]) -> None:
    plan, data = study
    api.lock(plan)
    results = api.run(plan, data).results
    design = results["design"]
    assert design["power"] == 0.8 and design["dropout"] == 0.1
    assert "Bonferroni split" in design["rule"]
    by_id = {h["id"]: h for h in results["hypotheses"]}
    for entry in design["hypotheses"]:
        table = by_id[entry["id"]]["table"]
        assert entry["achieved_per_group"] == dict(zip(table["groups"], table["totals"],
                                                       strict=True))
    h1 = design["hypotheses"][0]
    got = h1["achieved_per_group"]
    assert h1["power_at_achieved"] == pytest.approx(samplesize.two_proportion_power(
        0.10, 0.20, got["negative-pressure"], got["gauze"], 0.0125, two_sided=True), rel=1e-12)
    assert design["two_sided_power"] == "both tails"
    assert h1["n_per_group"] == api.design(plan)["hypotheses"][0]["n_per_group"]


def test_results_of_a_plan_without_design_have_no_design_entry(tmp_path: Path) -> None:
    plan = tmp_path / "trial.yaml"
    plan.write_text(PLAN_TEXT)
    data = tmp_path / "data.csv"
    data.write_text(demo_data())
    api.lock(plan)
    assert "design" not in api.run(plan, data).results


def test_the_command_prints_text_or_json(study: tuple[Path, Path],
                                         capsys: pytest.CaptureFixture[str]) -> None:
    plan, _ = study
    assert cli.main(["design", str(plan)]) == 0
    out = capsys.readouterr()
    assert out.out.startswith("Design: Dressing regimens")
    assert "  H1: alpha 0.025, two-sided (0.0125 per side)" in out.out
    assert "Caution: prespec computes what the plan asks" in out.out
    assert out.err == ""  # no progress bar off a terminal
    assert cli.main(["design", str(plan), "--simulate", "800", "--seed", "3", "--json"]) == 0
    out = capsys.readouterr()
    doc = json.loads(out.out)
    assert doc["simulation"]["trials"] == 800 and doc["simulation"]["seed"] == 3
    assert [s["name"] for s in doc["scenarios"]] == ["assumed", "pessimistic", "global-null"]
    assert out.err == ""
    assert len(log_of(plan)) == 2


def test_the_command_refuses_a_bad_count(study: tuple[Path, Path],
                                         capsys: pytest.CaptureFixture[str]) -> None:
    plan, _ = study
    assert cli.main(["design", str(plan), "--simulate", "-5"]) == 2
    assert "prespec: --simulate: the number of trials must be at least 1" in \
        capsys.readouterr().err


def test_the_progress_bar_draws_on_a_terminal(monkeypatch: pytest.MonkeyPatch) -> None:
    class Terminal(io.StringIO):
        def isatty(self) -> bool:
            return True

    screen = Terminal()
    monkeypatch.setattr("sys.stderr", screen)
    show = cli._progress_bar()
    assert show is not None
    show("assumed", 50, 100)
    show("global-null", 100, 100)
    assert screen.getvalue() == (
        "\rsimulating assumed                  [###############...............]  50%"
        "\rsimulating global-null              [##############################] 100%\n")


# --- issue 14, item 13 -------------------------------------------------------------------------

EQUAL = """\
prespec: 1
title: Invented three-arm trial, rates assumed equal
data:
  id: participant
  group: arm
  groups: [a, b, c]
  planned_n: {a: 120, b: 120, c: 120}
outcomes:
  cured: {column: cured, event: [1], no_event: [0], missing: exclude}
alpha: 0.05
multiplicity: bonferroni
design:
  assumed: {a: 0.25, b: 0.25, c: 0.25}
  power: 0.8
hypotheses:
  - {id: H1, outcome: cured, compare: [b, a], test: two-proportion-z}
  - {id: H2, outcome: cured, compare: [c, a], test: pearson-chi-square}
  - {id: H3, outcome: cured, compare: [c, b], test: two-proportion-z, alternative: greater}
"""


def test_two_sided_power_under_equal_rates_is_the_alpha_share(tmp_path: Path) -> None:
    from statsmodels.stats.proportion import power_proportions_2indep

    plan = tmp_path / "equal.yaml"
    plan.write_text(EQUAL)
    doc = api.design(plan)
    h1, h2, h3 = doc["hypotheses"]
    share = 0.05 / 3
    # a level-alpha test rejects a true null with probability alpha (common practice), both
    # tails; statsmodels.stats.proportion.power_proportions_2indep(diff=0, "two-sided") agrees
    expected = power_proportions_2indep(0.0, 0.25, 120, ratio=1.0, alpha=share,
                                        alternative="two-sided").power
    for h in (h1, h2):
        assert h["alpha"] == pytest.approx(share)
        assert h["power"] == pytest.approx(share, rel=1e-12)
        assert h["power"] == pytest.approx(expected, rel=1e-9)
        assert h["n_per_group"] is None  # no difference to detect
    assert h3["power"] is None  # one-sided, the rates not on its side: not computed
    from prespec.design import design_text

    assert "      power at data.planned_n: 0.0167\n" in design_text(doc)


LOOKS = """\
prespec: 1
title: Invented two-arm trial with an interim look
data:
  id: participant
  group: arm
  groups: [control, treated]
outcomes:
  cured: {column: cured, event: [1], no_event: [0], missing: exclude}
alpha: 0.05
multiplicity: none
design:
  assumed: {control: 0.30, treated: 0.45}
  power: 0.8
hypotheses:
  - id: H1
    outcome: cured
    compare: [treated, control]
    test: two-proportion-z
    looks: {fractions: [0.5, 1], efficacy: lan-demets-obrien-fleming}
"""


def test_looks_by_fractions_are_designed_without_planned_n(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    from prespec.design import design_text
    from prespec.errors import PlanError

    plan = tmp_path / "looks.yaml"
    plan.write_text(LOOKS)
    with pytest.raises(PlanError, match=r"looks\.yaml:19: hypotheses\.H1\.looks\.fractions: .*"
                       r"give data\.planned_n for treated and control \(prespec design "
                       r"computes it\)"):
        load_plan(plan)  # check and lock still need it
    doc = api.design(plan)
    (h1,) = doc["hypotheses"]
    fixed = samplesize.two_proportion_n(0.45, 0.30, 0.025, 0.8).n
    assert h1["n_per_group"] == {"treated": fixed[0], "control": fixed[1]}
    n_max = h1["n_max_per_group"]
    assert n_max == {g: -(-n * h1["inflation"] // 1) for g, n in h1["n_per_group"].items()}
    assert doc["planned_n_from_design"] == {"control": n_max["control"],
                                            "treated": n_max["treated"]}
    assert h1["power"] == pytest.approx(samplesize.two_proportion_power(
        0.45, 0.30, n_max["treated"], n_max["control"], 0.025, two_sided=True), rel=1e-12)
    text = design_text(doc)
    line = (f"Sizes: data.planned_n is not in the plan: the interim looks and the power below "
            f"use the designed analysed sizes per group (control {n_max['control']}, treated "
            f"{n_max['treated']}), the largest any hypothesis needs; write them into "
            "data.planned_n before locking")
    assert line in text
    assert text.count("data.planned_n is not in the plan") == 1
    assert "      power at the designed sizes: " in text
    entry = log_of(plan)[-1]
    assert entry["details"]["planned_n_from_design"] == doc["planned_n_from_design"]
    # the fingerprint is that of the plan with the designed sizes written in
    filled = tmp_path / "filled.yaml"
    filled.write_text(LOOKS.replace(
        "  groups: [control, treated]\n",
        f"  groups: [control, treated]\n  planned_n: {{control: {n_max['control']}, "
        f"treated: {n_max['treated']}}}\n"))
    assert entry["plan"] == load_plan(filled).fingerprint
    assert "planned_n_from_design" not in api.design(filled)
    assert cli.main(["design", str(plan)]) == 0
    assert line in capsys.readouterr().out
    simulated = api.design(plan, simulate=50)["simulation"]
    assert simulated["n_per_group"] == doc["planned_n_from_design"]
    assert simulated["sizes_from"] == "the designed sizes; the plan has no data.planned_n"


def test_a_looks_plan_that_cannot_be_sized_keeps_its_error(tmp_path: Path) -> None:
    from prespec.errors import PlanError

    plan = tmp_path / "looks.yaml"
    plan.write_text(LOOKS.replace("treated: 0.45}", "treated: 0.30}"))  # nothing to detect
    with pytest.raises(PlanError, match="give data.planned_n for treated and control"):
        api.design(plan)
    assert not audit.log_path(plan).exists()


def test_simulate_refuses_a_stratified_test_at_its_line(
        study: tuple[Path, Path], capsys: pytest.CaptureFixture[str]) -> None:
    plan, _ = study
    text = _stratified(plan)
    line = text.splitlines().index("    strata: [site]") + 1
    assert cli.main(["design", str(plan), "--simulate", "100"]) == 2
    err = capsys.readouterr().err
    assert err == (f"prespec: {plan}:{line}: hypotheses.H1.strata: a stratified test "
                   "(cochran-mantel-haenszel) cannot be simulated: --simulate draws one assumed "
                   "rate per group, with no strata; leave out --simulate (the sizes assume the "
                   "same rates in every stratum)\n")
    assert not audit.log_path(plan).exists()


def test_a_simulation_says_it_leaves_the_interim_looks_out(tmp_path: Path) -> None:
    plan = tmp_path / "looks.yaml"
    plan.write_text(LOOKS.replace("  groups: [control, treated]\n",
                                  "  groups: [control, treated]\n"
                                  "  planned_n: {control: 170, treated: 170}\n"))
    doc = api.design(plan, simulate=200)
    assert ("interim looks are not simulated: each simulated trial is analysed once, at the "
            "sizes above, by the fixed-sample test without the group-sequential boundaries "
            "(which are shown per hypothesis)") in doc["notes"]
