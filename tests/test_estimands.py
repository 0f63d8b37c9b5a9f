"""Estimands: each intercurrent-event strategy against counts worked by hand, the estimand in
words, and the data errors and departures the strategies' columns can raise.

The counts of each hypothesis are derived by hand in the comments from the small CSV below;
the p-values are then checked against scipy on the hand-derived tables, so the tests show
that each hypothesis is analysed on its own counts.
"""

from __future__ import annotations

from pathlib import Path

import pytest
import scipy.stats

from prespec.analysis.hypotheses import analyse
from prespec.data import prepare, read_data
from prespec.errors import DataError
from prespec.plan import load_plan

PLAN = """\
prespec: 1
title: Invented dressing study with intercurrent events
data:
  id: pid
  group: arm
  groups: [t, c]
  include: [{column: consent, in: ["yes"]}]
outcomes:
  heal: {column: y, event: [1], no_event: [0], missing: MISSING}
alpha: 0.05
multiplicity: none
hypotheses:
  - {id: H1, outcome: heal, compare: [t, c], test: fisher-exact}
  - id: H2
    outcome: heal
    compare: [t, c]
    test: fisher-exact
    estimand:
      intercurrent:
        - {event: rescue dressing, column: rescue, happened: ["yes"],
           strategy: treatment-policy}
  - id: H3
    outcome: heal
    compare: [t, c]
    test: fisher-exact
    measure: risk-ratio
    estimand:
      population: adults with a surgical wound
      variable: wound healed at day 30
      intercurrent:
        - {event: rescue dressing, column: rescue, happened: ["yes"], strategy: composite,
           counts_as: event}
  - id: H4
    outcome: heal
    compare: [t, c]
    test: fisher-exact
    estimand:
      intercurrent:
        - {event: rescue dressing, column: rescue, happened: ["yes"], strategy: composite,
           counts_as: no-event}
  - id: H5
    outcome: heal
    compare: [t, c]
    test: fisher-exact
    estimand:
      intercurrent:
        - {event: stopped dressing, column: stopped, happened: [1],
           strategy: while-on-treatment, outcome_column: y_stop}
  - id: H6
    outcome: heal
    compare: [t, c]
    test: fisher-exact
    estimand:
      intercurrent:
        - {event: rescue dressing, column: rescue, happened: ["yes"], strategy: composite,
           counts_as: event}
        - {event: stopped dressing, column: stopped, happened: [1],
           strategy: while-on-treatment, outcome_column: y_stop}
  - id: H7
    outcome: heal
    compare: [t, c]
    test: fisher-exact
    estimand:
      intercurrent:
        - {event: stopped dressing, column: stopped, happened: [1],
           strategy: while-on-treatment, outcome_column: y_stop}
        - {event: rescue dressing, column: rescue, happened: ["yes"], strategy: composite,
           counts_as: event}
"""

# Row 16 fails the population filter (consent no) and is never counted.
CSV = """\
pid,arm,consent,y,rescue,stopped,y_stop
1,t,yes,0,no,0,
2,t,yes,1,no,0,
3,t,yes,0,yes,0,
4,t,yes,,yes,0,
5,t,yes,0,no,1,1
6,t,yes,,no,1,0
7,t,yes,1,yes,1,0
8,t,yes,,no,0,
9,c,yes,1,no,0,
10,c,yes,0,no,0,
11,c,yes,1,yes,0,
12,c,yes,0,no,1,
13,c,yes,,no,1,1
14,c,yes,0,,0,
15,c,yes,1,no,0,
16,t,no,,yes,1,1
"""

# (events, total, missing) per group, derived by hand from CSV (missing: exclude):
HAND = {
    # plain: t has y = 0,1,0,_,0,_,1,_ -> events rows 2 and 7, no events 1, 3, 5, blank 4,
    # 6, 8; c has 1,0,1,0,_,0,1 -> events 9, 11, 15, no events 10, 12, 14, blank 13
    "H1": {"t": (2, 5, 3), "c": (3, 6, 1)},
    # treatment-policy: the outcome as observed, whatever happened: as H1
    "H2": {"t": (2, 5, 3), "c": (3, 6, 1)},
    # composite, rescue = event: t rows 3, 4, 7 and c row 11 become events; t: events 2,
    # 3, 4, 7, no events 1, 5, blank 6, 8; c: events 9, 11, 15, no events 10, 12, 14
    "H3": {"t": (4, 6, 2), "c": (3, 6, 1)},
    # composite, rescue = no event: t: events 2, no events 1, 3, 4, 5, 7, blank 6, 8;
    # c: events 9, 15, no events 10, 11, 12, 14, blank 13
    "H4": {"t": (1, 6, 2), "c": (2, 6, 1)},
    # while-on-treatment: rows with stopped = 1 take y_stop: t 5 -> 1, 6 -> 0, 7 -> 0;
    # c 12 -> blank (missing), 13 -> 1. t: events 2, 5, no events 1, 3, 6, 7, blank 4, 8;
    # c: events 9, 11, 13, 15, no events 10, 14, blank 12
    "H5": {"t": (2, 6, 2), "c": (4, 6, 1)},
    # rescue (composite event) listed first: row 7 (both happened) is an event; t: events
    # 2, 3, 4, 5, 7, no events 1, 6, blank 8; c: events 9, 11, 13, 15, no 10, 14, blank 12
    "H6": {"t": (5, 7, 1), "c": (4, 6, 1)},
    # stopped listed first: row 7 takes y_stop = 0; t: events 2, 3, 4, 5, no events 1, 6,
    # 7, blank 8; c as H6
    "H7": {"t": (4, 7, 1), "c": (4, 6, 1)},
}


def load(tmp_path: Path, plan_text: str = PLAN, csv: str = CSV, missing: str = "exclude"):
    (tmp_path / "p.yaml").write_text(plan_text.replace("MISSING", missing))
    (tmp_path / "d.csv").write_text(csv)
    plan = load_plan(tmp_path / "p.yaml").model
    return plan, prepare(read_data(tmp_path / "d.csv"), plan, tmp_path / "d.csv")


def test_each_strategy_against_hand_counts(tmp_path: Path) -> None:
    _plan, prep = load(tmp_path)
    for hyp_id, groups in HAND.items():
        counts = prep.counts_for(hyp_id, "heal")
        for group, (events, total, missing) in groups.items():
            gc = counts.of(group)
            assert (gc.events, gc.total, gc.blank + gc.unmapped) == (events, total, missing), \
                (hyp_id, group)
    # the plain per-outcome counts stay those of H1, and H1 has no counts of its own
    assert prep.outcomes["heal"] == prep.counts_for("H1", "heal")
    assert "H1" not in prep.by_hypothesis and set(prep.by_hypothesis) == set(HAND) - {"H1"}
    assert prep.rows_read == 16 and prep.excluded_by_filter == 1 and prep.analysed == 15


def test_each_hypothesis_is_tested_on_its_own_table(tmp_path: Path) -> None:
    plan, prep = load(tmp_path)
    entries, _ = analyse(plan, prep)
    for entry in entries:
        (e1, n1, _), (e2, n2, _) = HAND[entry["id"]]["t"], HAND[entry["id"]]["c"]
        assert entry["table"] == {"groups": ["t", "c"], "events": [e1, e2], "totals": [n1, n2]}
        # scipy.stats.fisher_exact on the hand-derived table
        want = scipy.stats.fisher_exact([[e1, n1 - e1], [e2, n2 - e2]]).pvalue
        assert entry["p_value"] == pytest.approx(want, rel=1e-9), entry["id"]


def test_intercurrent_events_counted_where_they_happened(tmp_path: Path) -> None:
    _plan, prep = load(tmp_path)
    (rescue,) = prep.by_hypothesis["H3"].intercurrent
    # rescue = yes among the analysed rows: t 3, 4, 7; c 11 (row 16 fails the filter);
    # row 14 has a blank rescue cell, read as: did not happen
    assert rescue.happened == {"t": 3, "c": 1} and rescue.blank == 1
    stopped = prep.by_hypothesis["H6"].intercurrent[1]
    assert stopped.happened == {"t": 3, "c": 2}  # t 5, 6, 7; c 12, 13
    notes = [n for n in prep.notes if n.code == "intercurrent-blank"]
    assert len(notes) == 5  # one per hypothesis naming the rescue column: H2, H3, H4, H6, H7
    assert "column 'rescue'" in notes[0].detail and "1 row" in notes[0].detail


def test_estimand_entries_and_words(tmp_path: Path) -> None:
    plan, prep = load(tmp_path)
    entries = {e["id"]: e for e in analyse(plan, prep)[0]}
    assert entries["H1"]["estimand"] is None  # no estimand in the plan
    h3 = entries["H3"]["estimand"]
    assert h3["population"] == "adults with a surgical wound"
    assert h3["variable"] == "wound healed at day 30 (y)"
    assert h3["summary"] == "risk-ratio"
    assert h3["intercurrent"] == [{"event": "rescue dressing", "column": "rescue",
                                   "strategy": "composite", "counts_as": "event",
                                   "outcome_column": None, "affected": 4}]
    assert h3["text"] == (
        "Population: adults with a surgical wound; variable: wound healed at day 30 (y); "
        "intercurrent event 'rescue dressing' (column rescue) handled by a composite strategy "
        "(counted as an event); population-level summary: the risk ratio (t over c).")
    h5 = entries["H5"]["estimand"]
    # no population in the plan: the analysed participants and the population filter
    assert h5["population"] == "the analysed participants of t and c (consent in [yes])"
    assert h5["variable"] == "heal (y)"
    assert h5["intercurrent"][0]["affected"] == 5
    assert h5["text"] == (
        "Population: the analysed participants of t and c (consent in [yes]); variable: heal "
        "(y); intercurrent event 'stopped dressing' (column stopped) handled by a "
        "while-on-treatment strategy (the outcome before it, from column y_stop); "
        "population-level summary: the risk difference (t minus c).")
    assert "treatment-policy strategy (the outcome as observed" in entries["H2"]["estimand"][
        "text"]
    assert "counted as no event" in entries["H4"]["estimand"]["text"]
    assert "where more than one happened, the first listed decides" in \
        entries["H6"]["estimand"]["text"]


def test_a_missing_intercurrent_column_is_bad_input(tmp_path: Path) -> None:
    csv = "\n".join(",".join(c for k, c in enumerate(line.split(",")) if k != 4)
                    for line in CSV.splitlines()) + "\n"  # drop the rescue column
    with pytest.raises(DataError) as err:
        load(tmp_path, csv=csv)
    assert err.value.exit_status == 2
    assert "column 'rescue' (hypotheses.H2.estimand.intercurrent[1].column) is not in the " \
        "data" in str(err.value)
    csv = "\n".join(line.rsplit(",", 1)[0] for line in CSV.splitlines()) + "\n"  # no y_stop
    with pytest.raises(DataError, match=r"column 'y_stop' \(hypotheses.H5.estimand."
                                        r"intercurrent\[1\].outcome_column\)"):
        load(tmp_path, csv=csv)


def test_an_unmapped_value_before_the_event_is_a_departure(tmp_path: Path) -> None:
    csv = CSV.replace("6,t,yes,,no,1,0", "6,t,yes,,no,1,healed")
    _plan, prep = load(tmp_path, csv=csv)
    (dep,) = [d for d in prep.deviations if d.code == "unmapped-outcome-value"]
    # reported once although H5, H6 and H7 all read row 6 from y_stop
    assert "outcome 'heal' (column 'y_stop', the outcome before an intercurrent event): 1 " \
        "row with values that are neither event nor no_event: 'healed' (1)" in dep.detail
    assert dep.found == "healed"
    # row 6 is now missing in t for H5: events 2, 5, no events 1, 3, 7, missing 4, 6, 8
    gc = prep.counts_for("H5", "heal").of("t")
    assert (gc.events, gc.total, gc.blank, gc.unmapped) == (2, 5, 2, 1)
    # under missing: error it is bad input (only H5 kept, whose strategy decides blanks later)
    only_h5 = PLAN[:PLAN.index("  - {id: H1")] + PLAN[PLAN.index("  - id: H5"):
                                                      PLAN.index("  - id: H6")]
    with pytest.raises(DataError, match=r"outcome 'heal' \(column 'y_stop', the outcome "
                                        r"before an intercurrent event\) has values that are "
                                        r"neither event nor no_event: 'healed' \(1\) \(rows 7\)"):
        load(tmp_path, only_h5, csv, missing="error")


ONE = """\
prespec: 1
title: Invented study, one estimand
data: {id: pid, group: arm, groups: [t, c]}
outcomes:
  heal: {column: y, event: [1], no_event: [0], missing: error}
alpha: 0.05
multiplicity: none
hypotheses:
  - id: H1
    outcome: heal
    compare: [t, c]
    test: pearson-chi-square
    estimand:
      intercurrent:
        - {event: died, column: died, happened: [1], strategy: composite, counts_as: no-event}
"""


def test_missing_error_after_the_strategies(tmp_path: Path) -> None:
    # the one blank outcome (row 2) is of a participant who died: the composite strategy
    # decides it, so missing: error is met; the plain counts leave it out with a note
    csv = "pid,arm,y,died\n1,t,1,0\n2,t,,1\n3,c,0,0\n4,c,1,0\n"
    _plan, prep = load(tmp_path, ONE, csv)
    gc = prep.counts_for("H1", "heal").of("t")
    assert (gc.events, gc.total, gc.blank) == (1, 2, 0)
    assert prep.outcomes["heal"].of("t").total == 1
    assert any(n.code == "missing-error" for n in prep.notes)
    # a blank that no intercurrent event decides is bad input, naming the hypothesis
    with pytest.raises(DataError, match=r"hypotheses.H1: outcome 'heal' \(column 'y'\) is "
                                        r"blank in 1 analysed rows that no intercurrent "
                                        r"event decides \(rows 3\)"):
        load(tmp_path, ONE, csv.replace("2,t,,1", "2,t,,0"))
    # and so is the died row when another hypothesis uses the outcome as observed
    two = ONE + "  - {id: H2, outcome: heal, compare: [t, c], test: pearson-chi-square}\n"
    with pytest.raises(DataError, match=r"is blank in 1 analysed rows \(rows 3\); missing: "
                                        r"error"):
        load(tmp_path, two, csv)


FOLLOW = """\
prespec: 1
title: Invented three-arm study
data: {id: pid, group: arm, groups: [a, b, c], reference: a}
outcomes:
  heal: {column: y, event: [1], no_event: [0], missing: exclude}
alpha: 0.05
multiplicity: none
hypotheses:
  - id: H1
    outcome: heal
    compare: all
    test: pearson-chi-square
    then: {pairwise: reference, multiplicity: holm}
    estimand:
      intercurrent:
        - {event: rescue, column: r, happened: [1], strategy: composite, counts_as: event}
  - id: H2
    outcome: heal
    compare: [b, a]
    test: cochran-mantel-haenszel
    strata: [site]
    estimand:
      intercurrent:
        - {event: rescue, column: r, happened: [1], strategy: composite, counts_as: event}
"""


def test_follow_ups_and_strata_use_the_estimand_counts(tmp_path: Path) -> None:
    rows = ["pid,arm,site,y,r"]
    # a: 2 of 6 healed, no rescue; b: 1 of 6 healed as observed, 3 rescued (rows with y 0,
    # 0 and blank), so 4 of 6 under the composite; c: 5 of 6, one rescued (already healed)
    data = {"a": [(1, 0), (1, 0), (0, 0), (0, 0), (0, 0), (0, 0)],
            "b": [(1, 0), (0, 1), (0, 1), ("", 1), (0, 0), (0, 0)],
            "c": [(1, 1), (1, 0), (1, 0), (1, 0), (1, 0), (0, 0)]}
    pid = 0
    for arm, cells in data.items():
        for k, (y, r) in enumerate(cells):
            pid += 1
            rows.append(f"{pid},{arm},{'north' if k < 3 else 'south'},{y},{r}")
    plan, prep = load(tmp_path, FOLLOW, "\n".join(rows) + "\n")
    entries = {e["id"]: e for e in analyse(plan, prep)[0]}
    assert entries["H1"]["table"]["events"] == [2, 4, 5]
    assert entries["H1"]["table"]["totals"] == [6, 6, 6]
    follow = entries["H1:b-vs-a"]
    assert follow["table"] == {"groups": ["b", "a"], "events": [4, 2], "totals": [6, 6]}
    assert follow["estimand"]["intercurrent"][0]["affected"] == 3  # b 3, a 0
    # H2 per stratum under the composite: north b rows 1-3: 1, R, R -> 3 of 3, a 2 of 3;
    # south b rows 4-6: R, 0, 0 -> 1 of 3, a 0 of 3
    assert entries["H2"]["strata_tables"] == [
        {"stratum": {"site": "north"}, "events": [3, 2], "totals": [3, 3]},
        {"stratum": {"site": "south"}, "events": [1, 0], "totals": [3, 3]},
    ]
    # statsmodels StratifiedTable.test_null_odds(correction=False): the CMH test
    from statsmodels.stats.contingency_tables import StratifiedTable
    want = StratifiedTable([[[3, 0], [2, 1]], [[1, 2], [0, 3]]]).test_null_odds(
        correction=False)
    assert entries["H2"]["p_value"] == pytest.approx(want.pvalue, rel=1e-9)
