"""The graphical procedure over hypotheses and interim looks (Maurer & Bretz 2013): the pure
procedure, its error rate by simulation, and a run of two hypotheses with looks under Holm.

References: the boundaries against ``prespec.stats.sequential`` (checked against published
tables); at a single look the procedure must reject exactly what the graphical procedure of
Bretz et al. (2009) rejects (``prespec.stats.graphical``, checked against its published
examples); the family-wise error rate over the looks by simulation of the canonical joint
distribution (# common practice: Monte Carlo within three standard errors).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from statsmodels.stats.proportion import proportions_ztest

import prespec.report
from prespec import api
from prespec.stats import graphical, sequential
from prespec.stats.graphlooks import family_graph, graph_over_looks

ARMS = ("negative-pressure", "alginate", "gauze")
PLAN = """\
prespec: 1
title: Two dressings versus gauze, 30-day wound infection (two looks, Holm over the looks)
data:
  id: participant
  group: arm
  groups: [negative-pressure, alginate, gauze]
  planned_n: {negative-pressure: 200, alginate: 200, gauze: 200}
outcomes:
  infection: {column: infected_30d, event: [1], no_event: [0], missing: exclude}
alpha: 0.05
multiplicity: holm
hypotheses:
  - id: H1
    outcome: infection
    compare: [negative-pressure, gauze]
    test: two-proportion-z
    looks: {fractions: [0.5, 1], efficacy: lan-demets-pocock}
  - id: H3
    outcome: infection
    compare: [alginate, gauze]
    test: two-proportion-z
    looks: {fractions: [0.5, 1], efficacy: lan-demets-pocock}
"""


@pytest.fixture(autouse=True)
def quick_render(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)


def write_looks(folder: Path, looks: list[dict[str, tuple[int, int]]]) -> list[Path]:
    rows: list[str] = []
    before = {arm: (0, 0) for arm in ARMS}
    paths = []
    for k, counts in enumerate(looks, start=1):
        for arm in ARMS:
            events, total = counts[arm]
            e0, n0 = before[arm]
            rows += [f"{len(rows) + i + 1},{arm},{1 if i < events - e0 else 0}"
                     for i in range(total - n0)]
            before[arm] = (events, total)
        path = folder / f"look{k}.csv"
        path.write_text("participant,arm,infected_30d\n" + "\n".join(rows) + "\n")
        paths.append(path)
    return paths


def z(counts: dict[str, tuple[int, int]], a: str, b: str) -> float:
    return float(proportions_ztest([counts[a][0], counts[b][0]],
                                   [counts[a][1], counts[b][1]])[0])  # statsmodels, pooled


def hyp(out: api.RunOutcome, hid: str) -> dict:
    return next(x for x in out.results["hypotheses"] if x["id"] == hid)


def test_at_one_look_it_is_the_graphical_procedure() -> None:
    rng = np.random.default_rng(20270101)
    for _ in range(200):
        m = int(rng.integers(2, 5))
        p = rng.uniform(0, 0.06, m)
        for method in ("bonferroni", "holm", "fixed-sequence"):
            w, g = family_graph(method, m)
            got = graph_over_looks(w, g, 0.05, 1, lambda i, level, k, p=p: p[i] <= level)
            rejected = [got.rejected_at(i) is not None for i in range(m)]
            assert rejected == graphical.graphical_rejections(list(p), w, g, 0.05)


def test_family_graphs() -> None:
    assert family_graph("holm", 3) == ([1 / 3] * 3, [[0, 0.5, 0.5], [0.5, 0, 0.5], [0.5, 0.5, 0]])
    assert family_graph("fixed-sequence", 3) == ([1, 0, 0], [[0, 1, 0], [0, 0, 1], [0, 0, 0]])
    with pytest.raises(ValueError, match="not a Bonferroni-based procedure"):
        family_graph("hochberg", 2)


def test_level_passes_on_within_a_look_and_to_earlier_looks() -> None:
    calls: list[tuple[int, float, int]] = []

    def crosses(i: int, level: float, k: int) -> bool:
        calls.append((i, level, k))
        # H0 crosses at look 2 at its own level; H1's look-1 z crosses only at the full level
        return (i == 0 and k == 2) or (i == 1 and level >= 0.05)

    w, g = family_graph("holm", 2)
    got = graph_over_looks(w, g, 0.05, 2, crosses)
    assert [(r.hypothesis, r.look, r.level) for r in got.rejections] == [(0, 2, 0.025),
                                                                          (1, 2, 0.05)]
    assert got.levels == (0.025, 0.05)


def test_family_wise_error_over_two_looks_by_simulation() -> None:
    # global null, two independent hypotheses, two equally spaced looks, Holm as a graph
    alpha, trials = 0.05, 200_000
    rng = np.random.default_rng(7)
    inc = rng.standard_normal((trials, 2, 2)) * np.sqrt(0.5)
    zs = np.cumsum(inc, axis=2) / np.sqrt([0.5, 1.0])  # Z_k = S_k / sqrt(t_k)
    bounds = {a: sequential.boundaries([0.5, 1], alpha=a, sides=2,
                                       efficacy="lan-demets-obrien-fleming").z
              for a in (alpha / 2, alpha)}

    def crossed(level: float, k: int) -> np.ndarray:
        b = np.asarray(bounds[level][:k])
        return (np.abs(zs[:, :, :k]) >= b).any(axis=2)

    # the procedure vectorised over trials: first look at alpha/2; a rejection passes alpha on
    any_reject = np.zeros(trials, dtype=bool)
    for k in (1, 2):
        low = crossed(alpha / 2, k)
        full = crossed(alpha, k)
        any_reject |= low.any(axis=1) | (low[:, ::-1] & full).any(axis=1)
    fwer = any_reject.mean()
    se = np.sqrt(0.05 * 0.95 / trials)
    assert fwer <= alpha + 3 * se
    assert fwer >= 0.045  # Holm over independent tests is close to alpha


def test_holm_over_looks_in_a_run(tmp_path: Path) -> None:
    looks = [{"negative-pressure": (5, 100), "alginate": (12, 100), "gauze": (25, 100)},
             {"negative-pressure": (12, 200), "alginate": (30, 200), "gauze": (50, 200)}]
    plan = tmp_path / "trial.yaml"
    plan.write_text(PLAN)
    api.lock(plan, actor="ana")
    data = write_looks(tmp_path, looks)
    out = api.run(plan, data[0], out=tmp_path / "r1", look=1)
    h1, h3 = hyp(out, "H1")["looks"], hyp(out, "H3")["looks"]
    b_half = sequential.boundaries([0.5], alpha=0.025, sides=2, efficacy="lan-demets-pocock",
                                   final=False).z[0]
    b_full = sequential.boundaries([0.5], alpha=0.05, sides=2, efficacy="lan-demets-pocock",
                                   final=False).z[0]
    z1, z3 = z(looks[0], "negative-pressure", "gauze"), z(looks[0], "alginate", "gauze")
    assert abs(z1) >= b_half and b_full <= abs(z3) < b_half  # H3 needs H1's level
    assert h1["graph"] == {"method": "holm", "initial_level": 0.025, "level": 0.025,
                           "rejected_at": 1, "order": 1}
    assert h3["graph"] == {"method": "holm", "initial_level": 0.025, "level": 0.05,
                           "rejected_at": 1, "order": 2}
    assert h1["boundary"] == pytest.approx(b_half, rel=1e-12)
    assert h3["boundary"] == pytest.approx(b_full, rel=1e-12)
    assert [h1["decision"], h3["decision"]] == ["stop-for-efficacy", "stop-for-efficacy"]
    assert hyp(out, "H1")["reject"] is True and hyp(out, "H1")["p_adjusted"] is None
    assert any(n["code"] == "graph-over-looks" for n in out.results["notes"])
    # the repeated intervals stay at the plan's alpha (never adjusted for multiplicity)
    assert h3["repeated_ci"][0]["level"] == 0.95
    final = api.run(plan, data[1], out=tmp_path / "r2", look=2)
    assert [hyp(final, h)["looks"]["decision"] for h in ("H1", "H3")] == ["rejected-earlier"] * 2
    assert api.verify(plan).passed


def test_a_level_passed_on_later_reaches_an_earlier_look(tmp_path: Path) -> None:
    looks = [{"negative-pressure": (15, 100), "alginate": (12, 100), "gauze": (25, 100)},
             {"negative-pressure": (20, 200), "alginate": (40, 200), "gauze": (50, 200)}]
    plan = tmp_path / "trial.yaml"
    plan.write_text(PLAN)
    api.lock(plan, actor="ana")
    data = write_looks(tmp_path, looks)
    first = api.run(plan, data[0], out=tmp_path / "r1", look=1)
    assert [hyp(first, h)["looks"]["decision"] for h in ("H1", "H3")] == ["continue"] * 2
    final = api.run(plan, data[1], out=tmp_path / "r2", look=2)
    h1, h3 = hyp(final, "H1")["looks"], hyp(final, "H3")["looks"]
    assert h1["graph"]["rejected_at"] == 2 and h1["decision"] == "reject-at-final"
    # H3's z at look 2 crosses no boundary; its look-1 z crosses look 1's boundary at alpha
    b = sequential.boundaries([0.5, 1], alpha=0.05, sides=2, efficacy="lan-demets-pocock").z
    assert abs(z(looks[1], "alginate", "gauze")) < b[1]
    assert abs(z(looks[0], "alginate", "gauze")) >= b[0]
    assert h3["graph"] == {"method": "holm", "initial_level": 0.025, "level": 0.05,
                           "rejected_at": 2, "order": 2}
    assert h3["decision"] == "reject-at-final" and hyp(final, "H3")["reject"] is True
    assert [r["z"] for r in h3["boundaries"]] == pytest.approx(list(b), rel=1e-12)


def test_a_plain_member_is_tested_at_the_final_look(tmp_path: Path) -> None:
    text = PLAN.replace("    looks: {fractions: [0.5, 1], efficacy: lan-demets-pocock}\n"
                        "  - id: H3", "    looks: {fractions: [0.5, 1], efficacy: "
                        "lan-demets-pocock}\n  - id: H3").rsplit("    looks:", 1)[0]
    looks = [{"negative-pressure": (5, 100), "alginate": (12, 100), "gauze": (25, 100)},
             {"negative-pressure": (12, 200), "alginate": (33, 200), "gauze": (50, 200)}]
    plan = tmp_path / "trial.yaml"
    plan.write_text(text)
    api.lock(plan, actor="ana")
    data = write_looks(tmp_path, looks)
    interim = api.run(plan, data[0], out=tmp_path / "r1", look=1)
    assert hyp(interim, "H3")["reject"] is None  # not tested at an interim look
    final = api.run(plan, data[1], out=tmp_path / "r2", look=2)
    h3 = hyp(final, "H3")
    assert 0.025 < h3["p_value"] <= 0.05  # rejected only because H1 passed its level on
    assert h3["graph"]["level"] == 0.05 and h3["reject"] is True and h3["p_adjusted"] is None


def test_a_member_at_level_zero_has_no_boundary_yet(tmp_path: Path) -> None:
    from prespec.report.looks import look_line, looks_block, looks_jobs

    looks = [{"negative-pressure": (15, 100), "alginate": (12, 100), "gauze": (25, 100)}]
    plan = tmp_path / "trial.yaml"
    plan.write_text(PLAN.replace("multiplicity: holm", "multiplicity: fixed-sequence"))
    api.lock(plan, actor="ana")
    out = api.run(plan, write_looks(tmp_path, looks)[0], out=tmp_path / "r1", look=1)
    h3 = hyp(out, "H3")
    assert h3["looks"]["graph"]["level"] == 0.0 and h3["looks"]["boundary"] is None
    assert h3["looks"]["decision"] == "continue" and h3["reject"] is False
    assert "efficacy boundary at level 0 none (level 0)" in look_line(h3)
    html, figures = looks_block(h3, "hypotheses.H3")
    assert figures == [] and "level now 0" in html
    assert "±—" not in html and "<td>—</td>" in html
    assert [name for name, _ in looks_jobs(out.results)] == ["figures/looks-H1.png"]
    assert not (out.folder / "figures" / "looks-H3.png").exists()
