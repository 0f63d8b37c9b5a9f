"""Interim looks run in process: z statistics, recomputed boundaries, decisions, adjusted
inference, repeated confidence intervals, every look departure, the log entries and verify.

References: the z statistic against statsmodels ``proportions_ztest`` (pooled variance); the
boundaries and the adjusted inference against ``prespec.stats.sequential`` (itself checked
against published tables); the repeated confidence interval against its closed form
θ̂ ± b_k / sqrt(I_k) (Jennison & Turnbull 1989), written out here. The notebook step is
replaced by a no-op (the e2e test executes it for real).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
from statsmodels.stats.proportion import proportions_ztest

import prespec.report
from prespec import api, audit
from prespec.analysis.looks import look_problem
from prespec.errors import BadInput
from prespec.stats import sequential

PLAN = """\
prespec: 1
title: Negative-pressure dressing versus gauze, 30-day wound infection (three looks)
data:
  id: participant
  group: arm
  groups: [negative-pressure, gauze]
  planned_n: {negative-pressure: 300, gauze: 300}
outcomes:
  infection: {column: infected_30d, event: [1], no_event: [0], missing: exclude}
alpha: 0.05
multiplicity: none
design:
  assumed: {negative-pressure: 0.10, gauze: 0.20}
  power: 0.8
hypotheses:
  - id: H1
    outcome: infection
    compare: [negative-pressure, gauze]
    test: two-proportion-z
    looks:
      sizes: [200, 400, 600]
      efficacy: lan-demets-obrien-fleming
      futility: {spending: hwang-shih-decani, gamma: -2}
  - id: H2
    outcome: infection
    compare: [negative-pressure, gauze]
    test: fisher-exact
    role: secondary
"""
# Cumulative (events, total) per look: negative-pressure, then gauze (invented).
CONTINUE = [((12, 100), (18, 100)), ((30, 200), (44, 200)), ((42, 300), (62, 300))]
EFFICACY = [((12, 100), (18, 100)), ((16, 200), (44, 200)), ((30, 300), (60, 300))]
FUTILE = [((22, 100), (18, 100)), ((38, 200), (40, 200)), ((58, 300), (60, 300))]


@pytest.fixture(autouse=True)
def quick_render(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)


def write_looks(folder: Path, looks: list[tuple[tuple[int, int], ...]]) -> list[Path]:
    """One CSV per look holding every participant enrolled up to it (the data grow)."""
    rows: list[str] = []
    before = {"negative-pressure": (0, 0), "gauze": (0, 0)}
    paths = []
    for k, counts in enumerate(looks, start=1):
        for arm, (events, total) in zip(("negative-pressure", "gauze"), counts, strict=True):
            e0, n0 = before[arm]
            for i in range(total - n0):
                rows.append(f"{len(rows) + 1},{arm},{1 if i < events - e0 else 0}")
            before[arm] = (events, total)
        path = folder / f"look{k}.csv"
        path.write_text("participant,arm,infected_30d\n" + "\n".join(rows) + "\n")
        paths.append(path)
    return paths


def study(tmp_path: Path, looks: list[tuple[tuple[int, int], ...]],
          text: str = PLAN) -> tuple[Path, list[Path]]:
    plan = tmp_path / "trial.yaml"
    plan.write_text(text)
    api.lock(plan, actor="ana")
    return plan, write_looks(tmp_path, looks)


def h(outcome: api.RunOutcome, hid: str = "H1") -> dict:
    return next(x for x in outcome.results["hypotheses"] if x["id"] == hid)


def codes(outcome: api.RunOutcome) -> list[str]:
    return [d["code"] for d in outcome.results["deviations"]]


def ztest(counts: tuple[tuple[int, int], ...]) -> float:
    (a, n), (b, m) = counts
    return float(proportions_ztest([a, b], [n, m])[0])  # statsmodels, pooled variance


def information(counts: tuple[tuple[int, int], ...]) -> float:
    (a, n), (b, m) = counts
    p = (a + b) / (n + m)
    return 1.0 / (p * (1 - p) * (1 / n + 1 / m))


def test_three_looks_continue_then_reject_at_final(tmp_path: Path) -> None:
    plan, data = study(tmp_path, CONTINUE)
    outs = [api.run(plan, d, out=tmp_path / f"r{k}", look=k) for k, d in enumerate(data, 1)]
    fractions = [1 / 3, 2 / 3, 1.0]
    for k, out in enumerate(outs, start=1):
        lk = h(out)["looks"]
        assert (lk["look"], lk["of"]) == (k, 3)
        assert lk["z"] == pytest.approx(ztest(CONTINUE[k - 1]), rel=1e-9, abs=1e-12)
        assert lk["observed_fraction"] == pytest.approx(fractions[k - 1], rel=1e-12)
        assert lk["information"] == pytest.approx(information(CONTINUE[k - 1]), rel=1e-12)
        planned = sequential.boundaries(fractions, alpha=0.05, sides=2,
                                        efficacy="lan-demets-obrien-fleming",
                                        futility="hwang-shih-decani", futility_gamma=-2,
                                        power=0.8)
        expected = sequential.boundaries(fractions[:k - 1] + [fractions[k - 1] if k < 3 else 1],
                                         alpha=0.05, sides=2,
                                         efficacy="lan-demets-obrien-fleming", final=k == 3,
                                         futility="hwang-shih-decani", futility_gamma=-2,
                                         power=0.8, drift=planned.drift)
        assert [b["z"] for b in lk["boundaries"]] == pytest.approx(list(expected.z), rel=1e-12)
        assert [b["alpha_spent"] for b in lk["boundaries"]] == pytest.approx(
            list(expected.alpha_spent), rel=1e-12)
        assert [b["futility_z"] for b in lk["boundaries"]] == pytest.approx(
            list(expected.futility_z), rel=1e-12)
        assert [x["look"] for x in lk["history"]] == list(range(1, k))
        assert [x["z"] for x in lk["history"]] == pytest.approx(
            [ztest(c) for c in CONTINUE[:k - 1]], rel=1e-9)
        for j, rci in enumerate(lk["repeated_ci"]):  # closed form θ̂ ± b_j / sqrt(I_j)
            (a, n), (b, m) = CONTINUE[j]
            est, half = a / n - b / m, expected.z[j] / math.sqrt(information(CONTINUE[j]))
            assert rci["ci"] == pytest.approx([est - half, est + half], rel=1e-12)
            assert rci["level"] == 0.95
        assert codes(out) == []
        assert out.entry["action"] == "look"
        assert out.entry["details"]["look"] == k
        assert out.entry["details"]["hypotheses"][0]["z"] == lk["z"]
        assert out.entry["details"]["hypotheses"][0]["fraction"] == lk["observed_fraction"]
    decisions = [h(o)["looks"]["decision"] for o in outs]
    assert decisions == ["continue", "continue", "reject-at-final"]
    assert [h(o)["reject"] for o in outs] == [False, False, True]
    # at the final analysis the adjusted inference is the stage-wise one on the three looks
    final = h(outs[2])["looks"]
    zs = [-ztest(c) for c in CONTINUE]  # oriented so that the crossing is upward
    got = sequential.stagewise_inference(
        zs, [information(c) for c in CONTINUE],
        sequential.boundaries(fractions, alpha=0.05, sides=2,
                              efficacy="lan-demets-obrien-fleming"), level=0.95)
    assert final["adjusted"]["p_value"] == pytest.approx(got.p_value, rel=1e-9)
    assert final["adjusted"]["estimate"] == pytest.approx(-got.estimate, rel=1e-9)
    assert final["adjusted"]["ci"] == pytest.approx([-got.ci[1], -got.ci[0]], rel=1e-9)
    assert h(outs[2])["p_adjusted"] == final["adjusted"]["p_value"]
    # the hypothesis without looks is shown but not tested at the interim looks
    assert [h(o, "H2")["reject"] for o in outs[:2]] == [None, None]
    assert h(outs[2], "H2")["reject"] is not None
    assert any(n["code"] == "not-tested-at-interim" for n in outs[0].results["notes"])
    # interim looks are short of planned_n by design: a note, not a departure
    assert any(n["code"] == "interim-below-planned-n" for n in outs[0].results["notes"])
    # the report: a boundary figure per look and the log verified
    assert (outs[2].folder / "figures" / "looks-H1.png").stat().st_size > 1000
    res = api.verify(plan)
    assert any(line.startswith("interim looks: 3 look(s)") for line in res.passed)
    res = api.verify(plan, rerun=data[1])
    assert res.passed[-1].startswith("rerun: 1 report(s)")


def test_efficacy_at_an_interim_look_gives_the_adjusted_inference(tmp_path: Path) -> None:
    plan, data = study(tmp_path, EFFICACY)
    api.run(plan, data[0], out=tmp_path / "r1", look=1)
    out = api.run(plan, data[1], out=tmp_path / "r2", look=2)
    lk = h(out)["looks"]
    assert lk["decision"] == "stop-for-efficacy"
    assert lk["crossed"] is True and h(out)["reject"] is True
    bounds = sequential.boundaries([1 / 3, 2 / 3], alpha=0.05, sides=2,
                                   efficacy="lan-demets-obrien-fleming", final=False,
                                   futility="hwang-shih-decani", futility_gamma=-2, power=0.8,
                                   drift=lk and sequential.boundaries(
                                       [1 / 3, 2 / 3, 1], alpha=0.05, sides=2,
                                       efficacy="lan-demets-obrien-fleming",
                                       futility="hwang-shih-decani", futility_gamma=-2,
                                       power=0.8).drift)
    assert abs(lk["z"]) >= bounds.z[1]
    got = sequential.stagewise_inference([-ztest(c) for c in EFFICACY[:2]],
                                         [information(c) for c in EFFICACY[:2]], bounds,
                                         level=0.95)
    adj = lk["adjusted"]
    assert adj["p_value"] == pytest.approx(got.p_value, rel=1e-9)
    assert adj["estimate"] == pytest.approx(-got.estimate, rel=1e-9)
    assert adj["ci"] == pytest.approx([-got.ci[1], -got.ci[0]], rel=1e-9)
    assert adj["p_value"] <= 0.05 and adj["ci"][1] < 0
    assert h(out)["p_adjusted"] == adj["p_value"]
    # a look after the stop is recorded as such, with no adjusted inference
    after = api.run(plan, data[2], out=tmp_path / "r3", look=3)
    notes = {n["code"] for n in after.results["notes"]}
    assert {"look-after-stop", "no-adjusted-inference"} <= notes
    assert h(after)["looks"]["adjusted"] is None


def test_futility_may_be_considered(tmp_path: Path) -> None:
    plan, data = study(tmp_path, FUTILE)
    out = api.run(plan, data[0], out=tmp_path / "r1", look=1)
    lk = h(out)["looks"]
    # benefit is a lower rate with negative-pressure (design.assumed), so z > 0 is unfavourable
    assert lk["direction"] == -1
    assert -lk["z"] <= lk["futility_boundary"]
    assert lk["decision"] == "futility-may-be-considered"
    assert h(out)["reject"] is False and h(out)["p_adjusted"] is None and lk["adjusted"] is None
    second = api.run(plan, data[1], out=tmp_path / "r2", look=2)
    assert h(second)["looks"]["decision"] == "futility-may-be-considered"  # non-binding: go on
    assert -h(second)["looks"]["z"] <= h(second)["looks"]["futility_boundary"]
    final = api.run(plan, data[2], out=tmp_path / "r3")  # a plain run is the final analysis
    assert final.entry["action"] == "run" and final.entry["details"]["look"] == 3
    assert h(final)["looks"]["decision"] == "not-rejected-at-final"
    assert h(final)["reject"] is False and h(final)["p_adjusted"] > 0.05
    assert codes(final) == []


def test_look_out_of_order_repeated_and_final_without_looks(tmp_path: Path) -> None:
    plan, data = study(tmp_path, CONTINUE)
    second = api.run(plan, data[1], out=tmp_path / "r2", look=2)
    dev = second.results["deviations"][0]
    assert dev["code"] == "look-out-of-order"
    assert (dev["expected"], dev["found"]) == ("looks 1 to 1 run before look 2, none after",
                                              "looks run: none")
    assert second.entry["deviations"] == second.results["deviations"]
    # its boundaries are those of a single look at the fraction observed
    assert [b["look"] for b in h(second)["looks"]["boundaries"]] == [2]
    first = api.run(plan, data[0], out=tmp_path / "r1", look=1)
    assert codes(first) == ["look-out-of-order"]
    assert first.results["deviations"][0]["expected"] == "no later look run before look 1"
    assert "look(s) 2 already run" in first.results["deviations"][0]["detail"]
    again = api.run(plan, data[0], out=tmp_path / "r1b", look=1)
    assert codes(again) == ["look-repeated", "look-out-of-order"]
    assert again.results["deviations"][0]["found"] == "look 1 run 2 times"
    assert "data-changed-since-last-run" not in codes(again)


def test_final_without_looks(tmp_path: Path) -> None:
    plan, data = study(tmp_path, CONTINUE)
    api.run(plan, data[0], out=tmp_path / "r1", look=1)
    final = api.run(plan, data[2], out=tmp_path / "r3", look=3)
    dev = final.results["deviations"][0]
    assert dev["code"] == "final-without-looks"
    assert dev["found"] == "interim looks run: 1"
    assert final.entry["action"] == "look"
    plain = tmp_path / "other"
    plain.mkdir()
    p2, d2 = study(plain, CONTINUE)
    out = api.run(p2, d2[2], out=plain / "final")
    assert codes(out) == ["final-without-looks"]
    assert out.results["deviations"][0]["found"] == "interim looks run: none"
    assert api.run(p2, d2[2], out=plain / "again").results["deviations"][0]["code"] \
        == "look-repeated"


def test_classical_boundaries_off_their_plan(tmp_path: Path) -> None:
    text = PLAN.replace("efficacy: lan-demets-obrien-fleming\n      futility: {spending: "
                        "hwang-shih-decani, gamma: -2}", "efficacy: pocock")
    plan, data = study(tmp_path, [((25, 150), (30, 150)), *CONTINUE[1:]], text)
    out = api.run(plan, data[0], out=tmp_path / "r1", look=1)
    dev = out.results["deviations"][0]
    assert dev["code"] == "look-off-plan"
    assert (dev["expected"], dev["found"]) == ("0.3333", "0.5")
    pocock = sequential.boundaries([1 / 3, 2 / 3, 1], alpha=0.05, sides=2, efficacy="pocock")
    assert h(out)["looks"]["boundary"] == pytest.approx(pocock.z[0], rel=1e-12)
    on_plan = api.run(plan, data[1], out=tmp_path / "r2", look=2)
    assert codes(on_plan) == []
    assert h(on_plan)["looks"]["boundary"] == pytest.approx(pocock.z[1], rel=1e-12)


def test_bad_look_numbers_and_fractions(tmp_path: Path) -> None:
    plan, data = study(tmp_path, CONTINUE)
    with pytest.raises(BadInput, match=r"--look 4: the plan names looks 1 to 3"):
        api.run(plan, data[0], out=tmp_path / "x", look=4)
    with pytest.raises(BadInput, match=r"H1: look 1 of 3: the observed information fraction is "
                       r"1, not below 1 .*--look 3"):
        api.run(plan, data[2], out=tmp_path / "x", look=1)
    api.run(plan, data[1], out=tmp_path / "r1", look=1)
    with pytest.raises(BadInput, match=r"look 2: the observed information fraction 0.3333 is not "
                       r"above look 1's 0.6667"):
        api.run(plan, data[0], out=tmp_path / "x", look=2)
    assert not (tmp_path / "x").exists()
    assert len(audit.read_log(audit.log_path(plan))) == 2  # the lock and look 1 only
    plain = tmp_path / "plain"
    plain.mkdir()
    text = PLAN[:PLAN.index("    looks:")] + PLAN[PLAN.index("  - id: H2"):]
    p2, d2 = study(plain, CONTINUE, text)
    with pytest.raises(BadInput, match=r"^--look 1: the plan names no interim looks"):
        api.run(p2, d2[0], look=1)


def test_verify_finds_a_look_entry_that_differs_from_its_report(tmp_path: Path) -> None:
    plan, data = study(tmp_path, CONTINUE)
    api.run(plan, data[0], out=tmp_path / "r1", look=1)
    api.run(plan, data[1], out=tmp_path / "r2", look=2)
    entries = audit.read_log(audit.log_path(plan))
    results = json.loads((tmp_path / "r2" / "results.json").read_text())
    assert look_problem(entries, entries[2], results) is None
    edited = json.loads(json.dumps(entries))
    edited[1]["details"]["hypotheses"][0]["z"] = 0.5  # look 1's z as the log would say it
    assert "history of earlier looks differs" in look_problem(edited, edited[2], results)
    edited = json.loads(json.dumps(entries))
    edited[2]["details"]["look"] = 3
    assert "differs from its log entry" in look_problem(edited, edited[2], results)


def test_amend_after_a_look_is_after_unblinding(tmp_path: Path) -> None:
    plan, data = study(tmp_path, CONTINUE)
    api.run(plan, data[0], out=tmp_path / "r1", look=1)
    plan.write_text(PLAN.replace("gamma: -2}", "gamma: -1}"))
    api.amend(plan, reason="futility shape changed", actor="ana")
    entry = audit.read_log(audit.log_path(plan))[-1]
    assert [d["code"] for d in entry["deviations"]] == ["amended-after-unblinding"]
    # looks of an earlier lock version are not this version's history
    out = api.run(plan, data[1], out=tmp_path / "r2", look=2)
    assert "look-out-of-order" in codes(out)


def test_rehearsal_of_a_plan_with_looks_is_pooled(tmp_path: Path) -> None:
    plan, data = study(tmp_path, CONTINUE)
    out = api.rehearse(plan, data[1], out=tmp_path / "reh")
    assert not any(n["code"] == "rehearsal-step-failed" for n in out.results["notes"])
    text = "".join(p.read_text(errors="replace") for p in (tmp_path / "reh").rglob("*")
                   if p.is_file() and p.suffix in (".json", ".csv", ".html", ".ipynb"))
    assert "looks" not in json.dumps(out.results["hypotheses"])
    for value in (ztest(CONTINUE[1]), information(CONTINUE[1])):  # no per-group statistic
        assert f"{value:.4f}" not in text and repr(value) not in text
    assert not (tmp_path / "reh" / "figures" / "looks-H1.png").exists()


def test_design_shows_the_planned_boundaries(tmp_path: Path) -> None:
    plan = tmp_path / "trial.yaml"
    plan.write_text(PLAN)
    doc = api.design(plan)
    h1 = doc["hypotheses"][0]
    planned = sequential.design([1 / 3, 2 / 3, 1], alpha=0.05, sides=2,
                                efficacy="lan-demets-obrien-fleming",
                                futility="hwang-shih-decani", futility_gamma=-2, power=0.8)
    assert [set(b) for b in h1["boundaries"]] == [{"look", "fraction", "z", "nominal_p",
                                                   "alpha_spent"}] * 3
    assert [b["z"] for b in h1["boundaries"]] == pytest.approx(list(planned.boundaries.z))
    assert h1["boundaries"][-1]["alpha_spent"] == pytest.approx(0.05, abs=1e-9)
    assert h1["inflation"] == pytest.approx(planned.inflation, rel=1e-12)
    fixed = sum(h1["n_per_group"].values())
    assert h1["expected_n_null"] == pytest.approx(fixed * planned.expected_fraction_null)
    assert h1["n_max_per_group"]["gauze"] == math.ceil(h1["n_per_group"]["gauze"]
                                                       * planned.inflation - 1e-9)
    assert "boundaries" not in doc["hypotheses"][1]
