"""The lines ``prespec run`` and ``prespec rehearse`` print per hypothesis: the p-value the
decision rests on (adjusted where a procedure applies, named) with the decision, ``not
tested (gate closed)`` for follow-ups behind a closed gate, and a rehearsal that says a
confirmatory hypothesis would not compute and exits 2. In process; the notebook step is a
no-op here."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from scipy.stats import chi2_contingency
from statsmodels.stats.multitest import multipletests

import prespec.report
from prespec import cli

PLAN = """\
prespec: 1
title: Invented three-arm comparison of a wound rinse
data:
  id: pid
  group: arm
  groups: [a, b, c]
  reference: a
  include:
    - {column: enrolled, in: ["yes"]}
outcomes:
  healed:
    column: healed
    event: [1]
    no_event: [0]
    missing: exclude
alpha: 0.05
multiplicity: holm
hypotheses:
  - id: H1
    outcome: healed
    compare: [b, a]
    test: pearson-chi-square
    role: primary
  - id: H2
    outcome: healed
    compare: [c, a]
    test: pearson-chi-square
    role: secondary
  - id: H3
    outcome: healed
    compare: all
    test: pearson-chi-square
    role: secondary
    then: {pairwise: reference, multiplicity: holm}
"""

EVENTS = {"a": 20, "b": 33, "c": 25}  # of 100 each


def rows(enrolled: str = "yes") -> str:
    lines = ["pid,arm,enrolled,healed"]
    n = 0
    for arm, events in EVENTS.items():
        for i in range(100):
            n += 1
            lines.append(f"{n},{arm},{enrolled},{1 if i < events else 0}")
    return "\n".join(lines) + "\n"


@pytest.fixture(autouse=True)
def quick_render(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)


def _p(*arms: str) -> float:
    table = [[EVENTS[g], 100 - EVENTS[g]] for g in arms]
    return float(chi2_contingency(table, correction=False)[1])


def run_lines(tmp_path: Path, capsys: pytest.CaptureFixture[str], data: str) -> list[str]:
    plan = tmp_path / "trial.yaml"
    plan.write_text(PLAN)
    (tmp_path / "data.csv").write_text(data)
    assert cli.main(["lock", str(plan)]) == 0
    capsys.readouterr()
    assert cli.main(["run", str(plan), str(tmp_path / "data.csv"), "--out",
                     str(tmp_path / "r")]) == 0
    return capsys.readouterr().out.splitlines()


def test_run_prints_the_adjusted_p_the_decision_rests_on_and_closed_gates(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    out = run_lines(tmp_path, capsys, rows())
    # scipy.stats.chi2_contingency(correction=False) for each table; Holm over the main
    # family by statsmodels.stats.multitest.multipletests(method="holm")
    p1, p2, p3 = _p("b", "a"), _p("c", "a"), _p("a", "b", "c")
    adj = multipletests([p1, p2, p3], method="holm")[1]
    assert p1 < 0.05 < adj[0]  # nominally below alpha, not after Holm: the decision is Holm's
    assert out[:5] == [
        f"H1: pearson-chi-square, p = {p1:.4g}, holm-adjusted p = {adj[0]:.4g}: do not reject H0",
        f"H2: pearson-chi-square, p = {p2:.4g}, holm-adjusted p = {adj[1]:.4g}: do not reject H0",
        f"H3: pearson-chi-square, p = {p3:.4g}, holm-adjusted p = {adj[2]:.4g}: do not reject H0",
        f"H3:b-vs-a: pearson-chi-square, nominal p = {p1:.4g}: not tested (gate closed)",
        f"H3:c-vs-a: pearson-chi-square, nominal p = {p2:.4g}: not tested (gate closed)",
    ]
    assert (f"{adj[0]:.4g}", f"{p1:.4g}") == ("0.1118", "0.03726")


def test_with_nothing_analysed_every_line_says_the_same_true_thing(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    out = run_lines(tmp_path, capsys, rows(enrolled="no"))
    hyps = [line for line in out if line.startswith("H")]
    assert hyps == [
        "H1: pearson-chi-square, p not computable: no decision",
        "H2: pearson-chi-square, p not computable: no decision",
        "H3: pearson-chi-square, p not computable: no decision",
        "H3:b-vs-a: pearson-chi-square, nominal p not computable: not tested (gate closed)",
        "H3:c-vs-a: pearson-chi-square, nominal p not computable: not tested (gate closed)",
    ]
    results = json.loads((tmp_path / "r" / "results.json").read_text())
    assert [h["reject"] for h in results["hypotheses"]] == [None, None, None, False, False]


def test_an_open_gate_names_the_follow_ups_family_and_procedure(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    EVENTS_OPEN = {"a": 20, "b": 45, "c": 25}
    lines = ["pid,arm,enrolled,healed"]
    for n, (arm, i) in enumerate(((g, i) for g in EVENTS_OPEN for i in range(100)), start=1):
        lines.append(f"{n},{arm},yes,{1 if i < EVENTS_OPEN[arm] else 0}")
    out = run_lines(tmp_path, capsys, "\n".join(lines) + "\n")
    table = {g: [e, 100 - e] for g, e in EVENTS_OPEN.items()}
    pb = float(chi2_contingency([table["b"], table["a"]], correction=False)[1])
    pc = float(chi2_contingency([table["c"], table["a"]], correction=False)[1])
    follow = multipletests([pb, pc], method="holm")[1]
    assert out[3] == (f"H3:b-vs-a: pearson-chi-square, p = {pb:.4g}, holm-adjusted p = "
                      f"{follow[0]:.4g} within H3 pairwise: reject H0")
    assert out[4] == (f"H3:c-vs-a: pearson-chi-square, p = {pc:.4g}, holm-adjusted p = "
                      f"{follow[1]:.4g} within H3 pairwise: do not reject H0")


def rehearse(tmp_path: Path, capsys: pytest.CaptureFixture[str], plan_text: str,
             data: str) -> tuple[int, list[str], str, dict]:
    plan = tmp_path / "trial.yaml"
    plan.write_text(plan_text)
    (tmp_path / "data.csv").write_text(data)
    capsys.readouterr()
    status = cli.main(["rehearse", str(plan), str(tmp_path / "data.csv"), "--out",
                       str(tmp_path / "h")])
    done = capsys.readouterr()
    results = json.loads((tmp_path / "h" / "results.json").read_text())
    return status, done.out.splitlines(), done.err, results


def test_a_rehearsal_whose_outcome_maps_nothing_would_not_compute_and_exits_2(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    plan_text = PLAN.replace("event: [1]\n    no_event: [0]", 'event: ["yes"]\n    no_event: ["no"]')
    status, out, err, results = rehearse(tmp_path, capsys, plan_text, rows())
    why = ("would not compute: outcome 'healed' maps no value of column 'healed': none of its "
           '300 non-blank values in the population is in event ["yes"] or no_event ["no"]')
    assert status == 2
    assert "outcome healed: 0 events of 0 analysed, not computable, 300 missing" in out
    assert [line for line in out if line.startswith("H")] == [
        f"H1: pearson-chi-square, {why}", f"H2: pearson-chi-square, {why}",
        f"H3: pearson-chi-square, {why}", f"H3:b-vs-a: pearson-chi-square, {why}",
        f"H3:c-vs-a: pearson-chi-square, {why}"]
    assert err.startswith(f"prespec: {tmp_path / 'trial.yaml'}: 5 confirmatory hypotheses would "
                          "not compute in the run: H1, H2, H3, H3:b-vs-a, H3:c-vs-a (outcome ")
    assert [h["executed"] for h in results["hypotheses"]] == [False] * 5


def test_a_rehearsal_of_an_empty_population_would_not_compute(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    status, out, _, _ = rehearse(tmp_path, capsys, PLAN, rows(enrolled="no"))
    assert status == 2
    assert ("H1: pearson-chi-square, would not compute: the population is empty: the "
            "population filter (data.include) leaves out all 300 rows read") in out


def test_a_rehearsal_where_only_exploratory_hypotheses_would_not_compute_exits_0(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    plan_text = PLAN.replace("role: secondary\n    then", "role: exploratory\n    then") + (
        "  - id: H4\n    outcome: other\n    compare: [b, a]\n    test: fisher-exact\n"
        "    role: exploratory\n")
    plan_text = plan_text.replace(
        "alpha: 0.05", "  other:\n    column: other\n    event: [1]\n    no_event: [0]\n"
        "    missing: exclude\nalpha: 0.05")
    data = "\n".join(line + ("," if i else ",other") for i, line in
                     enumerate(rows().splitlines())) + "\n"
    status, out, err, results = rehearse(tmp_path, capsys, plan_text, data)
    assert status == 0 and err == ""
    assert ("H4: fisher-exact, would not compute: outcome 'other': all 300 outcomes in the "
            "population are blank (missing: exclude)") in out
    assert [(h["id"], h["executed"]) for h in results["hypotheses"]] == [
        ("H1", True), ("H2", True), ("H3", True), ("H3:b-vs-a", True), ("H3:c-vs-a", True),
        ("H4", False)]


def test_under_looks_the_boundary_decides_and_untested_hypotheses_say_so() -> None:
    """The line of a hypothesis with looks, one in a graph over looks, and one not tested at
    an interim look (results.json entries as looks.py writes them)."""
    base = {"id": "H1", "test": "two-proportion-z", "role": "primary", "family": "main",
            "p_value": 0.0123, "p_adjusted": None, "gate": None}
    line = cli._hypothesis_line
    looked = {**base, "looks": {"look": 1, "of": 3}, "reject": False}
    assert line(looked, {"main": "holm"}, True) == (
        "H1: two-proportion-z, nominal p = 0.0123, the look's efficacy boundary decides: "
        "do not reject H0")
    graphed = {**base, "graph": {"rejected_at": 2}, "reject": True}
    assert line(graphed, {"main": "graphical"}, False) == (
        "H1: two-proportion-z, nominal p = 0.0123, the graph over the looks decides: reject H0")
    untested = {**base, "id": "H2", "reject": None}
    assert line(untested, {"main": "holm"}, True) == (
        "H2: two-proportion-z, p = 0.0123: not tested at this look")
    plain = {**base, "p_adjusted": 0.0123, "reject": True}
    assert line(plain, {"main": "none"}, False) == (
        "H1: two-proportion-z, p = 0.0123 (multiplicity: none): reject H0")
