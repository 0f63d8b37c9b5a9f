"""The plan's decision rule (``analysis.decision``), and its three callers reaching the same
decisions because they call it: the run (``analysis.hypotheses.analyse``), the design
simulation (``design.simulate.Decider``) and the tipping point
(``analysis.sensitivity.tipping_point``).

The rule's arithmetic is checked against statsmodels (``multipletests``) and against facts
of the procedures; the three callers are checked against one another on the same tables
(same test chosen, same decision, same adjusted p-value to 1e-12 relative), and a change to
the rule, made by replacing one of its functions, shows in all three.
"""

from __future__ import annotations

import math
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import numpy as np
import pytest
from statsmodels.stats.multitest import multipletests

from prespec.analysis import decision
from prespec.analysis.hypotheses import analyse
from prespec.analysis.sensitivity import Observed, tipping_point
from prespec.data import GroupCounts, OutcomeCounts, Prepared
from prespec.design.simulate import Decider, as_prepared
from prespec.plan import load_plan

REL = 1e-12

HEAD = """\
prespec: 1
title: Invented dressing trial, one decision rule
data: {id: participant, group: arm, groups: [gauze, alginate, foam]}
outcomes:
  infection: {column: infected, event: [1], no_event: [0], missing: exclude}
  healed: {column: healed, event: [1], no_event: [0], missing: exclude}
alpha: 0.05
"""

BODY = """\
hypotheses:
  - {id: H1, outcome: infection, compare: [foam, gauze], test: pearson-chi-square,
     sparse: {min_expected: 3, test: fisher-exact}}
  - {id: H2, outcome: infection, compare: all, test: pearson-chi-square,
     then: {pairwise: all, multiplicity: holm}}
  - {id: H3, outcome: healed, compare: [alginate, gauze], test: two-proportion-z,
     alternative: less}
  - {id: H4, outcome: healed, compare: [foam], test: binomial-exact, null_rate: 0.3,
     alternative: greater}
  - {id: H5, outcome: infection, compare: [foam, alginate], test: likelihood-ratio,
     role: exploratory}
  - {id: H6, outcome: healed, compare: [foam, gauze], test: pearson-chi-square,
     sparse: {min_expected: 4, test: two-proportion-z}, role: secondary}
"""

# H1 and H2 pass their weight to each other; H3, H4 and H6 start at 0 and nothing passes to
# them, so they are never rejected and their adjusted p-value is 1 (Bretz et al. 2009,
# Statistics in Medicine 28:586, Algorithm 1: weight only moves along the transitions)
GRAPHICAL = """\
multiplicity:
  method: graphical
  weights: {H1: 0.5, H2: 0.5}
  transitions: {H1: {H2: 1}, H2: {H1: 1}}
"""

MULTIPLICITIES = ["holm", "hommel", "fixed-sequence", "benjamini-hochberg", "sidak",
                  "graphical"]
SIZES = {"gauze": 12, "alginate": 10, "foam": 11}


def load(tmp_path: Path, multiplicity: str, body: str = BODY) -> Any:
    text = GRAPHICAL if multiplicity == "graphical" else f"multiplicity: {multiplicity}\n"
    path = tmp_path / "plan.yaml"
    path.write_text(HEAD + text + body)
    return load_plan(path).model


def tables() -> dict[str, np.ndarray]:
    """Simulated trials (small groups: the switch fires in some), and three by hand: no
    infection anywhere (H2 not computable, so its gate stays closed), every participant
    healed (H3 not computable: it enters the family as 1) and a clear difference."""
    rng = np.random.default_rng(20261203)
    n = [SIZES["gauze"], SIZES["alginate"], SIZES["foam"]]
    infection = rng.binomial(n, [0.55, 0.3, 0.05], size=(150, 3))
    healed = rng.binomial(n, [0.6, 0.8, 0.95], size=(150, 3))
    infection = np.vstack([infection, [[0, 0, 0], [7, 5, 1], [10, 2, 0]]])
    healed = np.vstack([healed, [[5, 5, 5], [12, 10, 11], [3, 9, 11]]])
    return {"infection": infection, "healed": healed}


def close(a: float | None, b: float) -> bool:
    """A value of results.json (None: not there) against one of an array (nan: not there)."""
    if a is None or math.isnan(b):
        return a is None and math.isnan(b)
    return a == pytest.approx(b, rel=REL, abs=1e-300)


# --- the rule itself ---

def test_the_switch_fires_strictly_below_its_bound() -> None:
    hyp = SimpleNamespace(test="pearson-chi-square", kind="pair",
                          sparse=SimpleNamespace(min_expected=5.0, test="fisher-exact"))
    assert decision.sparse_fires(hyp, [4.999, 5.0, 5.001, 0.0]).tolist() == [
        True, False, False, True]
    assert decision.test_chosen(hyp, True) == "fisher-exact"
    assert decision.test_chosen(hyp, False) == "pearson-chi-square"
    # no switch written, or a one-group test (no expected counts): it never fires
    for other in (SimpleNamespace(test="pearson-chi-square", kind="pair", sparse=None),
                  SimpleNamespace(test="binomial-exact", kind="single", sparse=hyp.sparse)):
        assert not decision.has_sparse_switch(other)
        assert decision.sparse_fires(other, [0.0, 1.0]).tolist() == [False, False]


def test_each_test_runs_only_on_the_tables_it_was_chosen_for() -> None:
    hyp = SimpleNamespace(test="planned", kind="pair",
                          sparse=SimpleNamespace(min_expected=5.0, test="switched"))
    asked = []

    def p_of(test: str, where: np.ndarray) -> np.ndarray:
        asked.append((test, where.tolist()))
        return np.full(int(where.sum()), 0.25 if test == "planned" else 0.75)

    p = decision.chosen_p_values(hyp, [True, False, True], p_of)
    assert p.tolist() == [0.75, 0.25, 0.75]
    assert asked == [("planned", [False, True, False]), ("switched", [True, False, True])]


def test_a_p_value_rejects_when_at_most_the_level() -> None:
    assert decision.rejects([0.05, 0.05 + 1e-12, 0.0, np.nan, 1.0], 0.05).tolist() == [
        True, False, True, False, False]


def test_a_family_is_adjusted_as_statsmodels_with_a_missing_p_value_as_1() -> None:
    plan = SimpleNamespace(alpha=0.05, multiplicity="holm")
    units = [decision.Unit("A", "main"), decision.Unit("B", "main"), decision.Unit("C", "main"),
             decision.Unit("D", None)]
    raw = np.array([[0.01, 0.04, np.nan, 0.03],
                    [0.2, 0.001, 0.02, 0.07]])
    out = decision.decide(plan, units, raw)
    for row, given in zip(range(2), ([0.01, 0.04, 1.0], [0.2, 0.001, 0.02]), strict=True):
        reject, want, _, _ = multipletests(given, alpha=0.05, method="holm")  # statsmodels
        computable = ~np.isnan(raw[row, :3])
        assert out.reject[row, :3].tolist() == (reject & computable).tolist()
        assert np.allclose(out.adjusted[row, :3][computable], want[computable], rtol=REL)
    # the one without a p-value has no adjusted p-value; the exploratory one is nominal
    assert math.isnan(out.adjusted[0, 2]) and math.isnan(out.adjusted[0, 3])
    assert out.reject[:, 3].tolist() == [True, False]
    assert out.computable.tolist() == [[True, True, False, True], [True] * 4]


def test_follow_ups_are_tested_only_behind_an_open_gate() -> None:
    then = SimpleNamespace(then=SimpleNamespace(multiplicity="bonferroni"))
    plan = SimpleNamespace(alpha=0.05, multiplicity="none", hypothesis=lambda i: then)
    units = [decision.Unit("K", "main"), decision.Unit("K:a", "K pairwise", "K"),
             decision.Unit("K:b", "K pairwise", "K")]
    raw = np.array([[0.01, 0.02, 0.03],    # K rejected: a at 0.04, b at 0.06
                    [0.30, 0.001, 0.001]])  # K not rejected: nothing behind it is tested
    out = decision.decide(plan, units, raw)
    assert out.gate_open.tolist() == [[True, True, True], [True, False, False]]
    assert out.reject.tolist() == [[True, True, False], [False, False, False]]
    assert out.adjusted[0].tolist() == pytest.approx([0.01, 0.04, 0.06], rel=REL)
    assert np.isnan(out.adjusted[1, 1:]).all()


def test_weight_that_never_arrives_leaves_the_others_adjusted_p_alone() -> None:
    # H1 holds all the weight and passes none on: its adjusted p-value is its own, H2's is 1
    # (Bretz et al. 2009, Algorithm 1). The array procedure used to give H1 1 as well.
    method = SimpleNamespace(method="graphical", weights={"H1": 1.0}, transitions={})
    out = decision.adjusted_p_values(np.array([[0.01, 0.02], [0.3, 0.001]]), method,
                                     ["H1", "H2"])
    assert out.tolist() == [[0.01, 1.0], [0.3, 1.0]]


# --- the three callers reach the same decisions ---

def run_against_simulation(plan: Any, counts: dict[str, np.ndarray]) -> dict[str, int]:
    """Every trial decided by the run (one table) and by the simulation (all at once): the
    same test chosen, p-value, adjusted p-value, gate and decision. Returns how often each
    case of the rule came up."""
    decider = Decider(plan, SIZES)
    fired = decider.fired(counts)
    raw = decider.p_values(counts)
    decided = decider.decisions(counts)
    seen = {"switched": 0, "not computable": 0, "gate closed": 0, "gate open": 0,
            "rejected": 0, "not rejected": 0}
    for t in range(raw.shape[0]):
        entries, _ = analyse(plan, as_prepared(plan, counts, SIZES, t))
        assert [e["id"] for e in entries] == [u.id for u in decider.units]
        for k, (unit, e) in enumerate(zip(decider.units, entries, strict=True)):
            where = (t, unit.id)
            assert e["test"] == decision.test_chosen(unit.hyp, bool(fired[t, k])), where
            assert (e["rule"] is not None) == bool(fired[t, k]), where
            assert close(e["p_value"], raw[t, k]), where
            assert close(e["p_adjusted"], decided.adjusted[t, k]), where
            if unit.family is None:  # exploratory: the run writes no decision; nominal
                assert e["reject"] is None, where
                assert bool(decision.rejects(e["p_value"] if e["p_value"] is not None
                                             else np.nan, plan.alpha)) == decided.reject[t, k]
            else:
                assert (e["reject"] is True) == bool(decided.reject[t, k]), where
            if unit.parent is not None and unit.family is not None:
                assert e["gate"] == ("open" if decided.gate_open[t, k] else "closed"), where
                seen["gate open" if decided.gate_open[t, k] else "gate closed"] += 1
            seen["switched"] += bool(fired[t, k])
            seen["not computable"] += e["p_value"] is None
            seen["rejected" if decided.reject[t, k] else "not rejected"] += 1
    return seen


@pytest.mark.parametrize("multiplicity", MULTIPLICITIES)
def test_the_run_and_the_simulation_decide_alike(tmp_path: Path, multiplicity: str) -> None:
    seen = run_against_simulation(load(tmp_path, multiplicity), tables())
    assert all(n > 0 for n in seen.values()), seen  # every case of the rule came up


def test_under_a_graph_weight_that_never_arrives_rejects_nothing(tmp_path: Path) -> None:
    plan = load(tmp_path, "graphical")
    decided = Decider(plan, SIZES).decisions(tables())
    units = [u.id for u in Decider(plan, SIZES).units]
    for stranded in ("H3", "H4", "H6"):
        k = units.index(stranded)
        assert not decided.reject[:, k].any()
        computable = decided.computable[:, k]
        assert (decided.adjusted[computable, k] == 1.0).all()
    assert decided.reject[:, units.index("H1")].any()  # the array procedure lost these


TIPPING = """\
hypotheses:
  - {id: H1, outcome: infection, compare: [foam, gauze], test: TEST,
     sparse: {min_expected: 4, test: SWITCH}}
"""


def completed(plan: Any, x1: int, n1: int, x2: int, n2: int) -> Prepared:
    """The table of one cell of the tipping grid as the run's counts (nothing missing)."""
    counts = {"foam": (x1, n1), "gauze": (x2, n2), "alginate": (0, 0)}
    groups = tuple(GroupCounts(g, *counts[g], 0, 0) for g in plan.data.groups)
    outcomes = {o: OutcomeCounts(o, groups) for o in plan.outcomes}
    return Prepared(rows_read=n1 + n2, excluded_by_filter=0, excluded_group=0,
                    analysed=n1 + n2, outcomes=outcomes, deviations=(), notes=())


@pytest.mark.parametrize(("test", "switch"), [
    ("pearson-chi-square", "fisher-exact"),
    ("fisher-exact", "pearson-chi-square"),
    ("two-proportion-z", "likelihood-ratio"),
])
def test_the_tipping_point_decides_each_cell_as_the_run_and_the_simulation(
        tmp_path: Path, test: str, switch: str) -> None:
    plan = load(tmp_path, "holm", TIPPING.replace("SWITCH", switch).replace("TEST", test))
    # foam: 1 infected of 9 observed, 6 missing; gauze: 4 of 8 observed, 5 missing
    a, b = Observed("foam", 1, 9, 6), Observed("gauze", 4, 8, 5)
    hyp = plan.hypothesis("H1")
    grid = tipping_point(a, b, hyp, plan.alpha)
    n1, n2 = a.total + a.missing, b.total + b.missing
    i, j = np.indices(grid.p_values.shape)
    x1, x2 = (a.events + i).ravel(), (b.events + j).ravel()
    trials = {"infection": np.column_stack([x2, np.zeros_like(x1), x1])}
    decider = Decider(plan, {"gauze": n2, "alginate": 1, "foam": n1})
    simulated = decider.decisions(trials)
    fired = decider.fired(trials)[:, 0]
    assert 0 < grid.switched.sum() < grid.switched.size  # both tests chosen somewhere
    assert grid.reject.any() and not grid.reject.all()  # both decisions made somewhere
    for cell, (c1, c2) in enumerate(zip(x1, x2, strict=True)):
        (entry,), _ = analyse(plan, completed(plan, int(c1), n1, int(c2), n2))
        p, switched = grid.p_values.flat[cell], bool(grid.switched.flat[cell])
        assert (entry["rule"] is not None) == switched == bool(fired[cell]), (c1, c2)
        assert entry["test"] == decision.test_chosen(hyp, switched)
        assert close(entry["p_value"], p), (c1, c2)
        # one hypothesis: its adjusted p-value is its own, and the decision the nominal one
        assert close(entry["p_adjusted"], simulated.adjusted[cell, 0])
        assert close(entry["p_adjusted"], p), (c1, c2)
        assert entry["reject"] == bool(grid.reject.flat[cell]) == bool(
            simulated.reject[cell, 0]), (c1, c2)


# --- a change to the rule shows in all three ---

def three_callers(tmp_path: Path) -> tuple[dict, np.ndarray, Any]:
    """H1 decided by the run on one table, by the simulation on the same table, and the
    tipping grid whose first cell is that table."""
    plan = load(tmp_path, "holm", TIPPING.replace("TEST", "pearson-chi-square")
                .replace("SWITCH", "fisher-exact"))
    a, b = Observed("foam", 2, 15, 2), Observed("gauze", 8, 14, 2)
    (entry,), _ = analyse(plan, completed(plan, 2, 17, 8, 16))
    counts = {"infection": np.array([[8, 0, 2]])}
    decider = Decider(plan, {"gauze": 16, "alginate": 1, "foam": 17})
    return entry, decider.decisions(counts), tipping_point(a, b, plan.hypothesis("H1"),
                                                           plan.alpha)


def test_a_change_to_the_switch_shows_in_all_three(tmp_path: Path,
                                                   monkeypatch: pytest.MonkeyPatch) -> None:
    entry, simulated, grid = three_callers(tmp_path)
    # smallest expected count 16·10/33 ≈ 4.85 is not below 4: the planned test
    assert entry["test"] == "pearson-chi-square" and not grid.switched[0, 0]
    assert close(entry["p_adjusted"], simulated.adjusted[0, 0])
    before = entry["p_value"]
    monkeypatch.setattr(decision, "sparse_fires",
                        lambda hyp, smallest: np.ones(np.shape(smallest), dtype=bool))
    entry, switched, grid = three_callers(tmp_path)
    assert entry["test"] == "fisher-exact" and grid.switched.all()
    assert entry["p_value"] != pytest.approx(before, rel=1e-3)
    assert close(entry["p_value"], grid.p_values[0, 0])
    assert close(entry["p_adjusted"], switched.adjusted[0, 0])


def test_a_change_to_the_decision_shows_in_all_three(tmp_path: Path,
                                                     monkeypatch: pytest.MonkeyPatch) -> None:
    entry, simulated, grid = three_callers(tmp_path)
    assert entry["p_value"] < 0.05 and entry["reject"] is True
    assert simulated.reject[0, 0] and grid.reject[0, 0]
    monkeypatch.setattr(decision, "rejects", lambda p, level: np.zeros(np.shape(p), bool))
    entry, simulated, grid = three_callers(tmp_path)
    assert entry["reject"] is False
    assert not simulated.reject.any() and not grid.reject.any()


def test_a_change_to_the_adjustment_shows_in_the_run_and_the_simulation(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # the tipping point decides at the nominal alpha: it has no family to adjust
    monkeypatch.setattr(decision, "adjusted_p_values",
                        lambda p, method, ids: np.minimum(1.0, 3.0 * p))
    entry, simulated, _ = three_callers(tmp_path)
    assert entry["p_adjusted"] == pytest.approx(3.0 * entry["p_value"], rel=REL)
    assert simulated.adjusted[0, 0] == pytest.approx(entry["p_adjusted"], rel=REL)
