"""Input that would cost without limit: long lists are capped with a count of the rest, keys
whose cost grows without bound have a plan-time limit with its reason, and a tab in a plan
gets a hint. (issue 14, items 5 and 17)"""

from __future__ import annotations

import json
from pathlib import Path
from types import SimpleNamespace

import pytest

from prespec import cli
from prespec.common.departures import FOUND_SHOWN, Departure, capped_found, listed
from prespec.data import prepare, read_data
from prespec.data.families import _merged_departures
from prespec.data.prepare import Prepared
from prespec.demo.wound import PLAN_TEXT, demo_data
from prespec.errors import DataError, PlanError
from prespec.plan import load_plan
from prespec.workflow.verify import _comparable, _found_capped


def _plan(id_column: str = "pid") -> SimpleNamespace:
    return SimpleNamespace(
        hypotheses=[SimpleNamespace(id="H1", outcome="inf", strata=None)],
        data=SimpleNamespace(id=id_column, group="arm", groups=["a", "b"], reference="a",
                             include=[], planned_n=None),
        outcomes={"inf": SimpleNamespace(column="y", event=[1], no_event=[0],
                                         missing="exclude")},
    )


def test_listed_caps_values_and_their_length() -> None:
    values = [f"v{i:07d}" for i in range(1_000_000)]
    text = listed(values)
    assert text == ", ".join(values[:FOUND_SHOWN]) + " … and 999,980 more"
    assert listed(["a", "b"]) == "a, b"
    assert listed(["x" * 100]) == "x" * 59 + "…"


def test_a_million_stray_groups_make_a_short_found(tmp_path: Path) -> None:
    rows = ["pid,arm,y"] + [f"{i},g{i:07d},1" for i in range(200_000)] + ["a1,a,1", "b1,b,0"]
    path = tmp_path / "d.csv"
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    prepared = prepare(read_data(path), _plan(), path)
    (dev,) = [d for d in prepared.deviations if d.code == "unexpected-group"]
    shown = ", ".join(f"g{i:07d}" for i in range(FOUND_SHOWN))
    assert dev.found == f"{shown} … and 199,980 more"
    assert dev.to_json()["found"] == dev.found and "values" not in dev.to_json()
    assert len(dev.values or ()) == 200_000  # every value, for the families' merge
    assert len(json.dumps(dev.to_json())) < 1000
    assert dev.detail.startswith("200000 rows left out: column 'arm' holds values outside "
                                 "data.groups: 'g0000000' (1), 'g0000001' (1)")


def test_unmapped_outcome_values_are_capped(tmp_path: Path) -> None:
    rows = ["pid,arm,y"] + [f"{i},a,u{i:03d}" for i in range(30)] + ["x,b,1"]
    path = tmp_path / "d.csv"
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    (dev,) = prepare(read_data(path), _plan(), path).deviations
    assert dev.code == "unmapped-outcome-value"
    assert dev.found == ", ".join(f"u{i:03d}" for i in range(20)) + " … and 10 more"


def test_the_duplicate_id_error_is_one_short_line(tmp_path: Path) -> None:
    rows = ["pid,arm,y"] + ["P1,a,1"] * 50_000 + [f"Q{i},b,0" for i in range(3)] * 2
    path = tmp_path / "d.csv"
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    with pytest.raises(DataError) as caught:
        prepare(read_data(path), _plan(), "d.csv")
    assert str(caught.value) == (
        "d.csv: duplicate ids in column 'pid': 'P1' (rows 2, 3, 4, 5, 6 and 49,995 more); "
        "'Q0' (rows 50002, 50005); 'Q1' (rows 50003, 50006); 'Q2' (rows 50004, 50007)")


def test_the_merged_family_departure_keeps_every_value() -> None:
    def level(values: list[str]) -> Prepared:
        dev = Departure.of_values("unexpected-group", "d", "a, b", values)
        return Prepared(1, 0, 0, 1, {}, (dev,), ())

    first = [f"x{i:02d}" for i in range(30)]
    second = [f"y{i:02d}" for i in range(30)] + ["x00"]
    (merged,) = _merged_departures("AE", [("L1", level(first)), ("L2", level(second))])
    every = sorted(set(first) | set(second))
    assert merged.values == tuple(every)
    assert merged.found == ", ".join(every[:20]) + " … and 40 more"


def test_an_earlier_uncapped_found_compares_equal_to_the_capped_one() -> None:
    values = [f"v{i:03d}" for i in range(500)]
    old = {"code": "unexpected-group", "detail": "d", "expected": "a, b",
           "found": ", ".join(values)}
    new = Departure.of_values("unexpected-group", "d", "a, b", values).to_json()
    assert old != new
    assert _comparable([old], "deviations") == _comparable([new], "deviations")
    assert capped_found("a, b") == "a, b" and capped_found(None) is None
    assert capped_found(new["found"]) == new["found"]
    # a found that is not a list of data values is compared as it is, however long
    shortfall = {"code": "sample-size-shortfall", "detail": "d", "expected": "x",
                 "found": ", ".join(["y" * 70] * 30)}
    assert _found_capped(shortfall) == shortfall
    assert _found_capped(old)["found"] == new["found"]


def _write_plan(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "plan.yaml"
    path.write_text(text, encoding="utf-8")
    return path


MONTE_CARLO = """
  - id: H4
    outcome: infection
    compare: all
    test: fisher-exact
    role: exploratory
    monte_carlo: {tables: TABLES, seed: 1}
"""


def test_monte_carlo_tables_have_a_plan_time_limit(tmp_path: Path) -> None:
    text = PLAN_TEXT.rstrip("\n") + MONTE_CARLO
    ok = load_plan(_write_plan(tmp_path, text.replace("TABLES", "10000000")))
    assert ok.model.hypothesis("H4").monte_carlo.tables == 10_000_000
    with pytest.raises(PlanError) as caught:
        load_plan(_write_plan(tmp_path, text.replace("TABLES", "9007199254740991")))
    message = str(caught.value)
    assert message.endswith(
        "hypotheses.H4.monte_carlo.tables: must be at most 10,000,000, found "
        "9,007,199,254,740,991: with 10,000,000 tables the Monte Carlo standard error is below "
        "0.0002 at any p-value, and each million tables takes a second or more")


LOOKS = """
    looks:
      sizes: [SIZES]
      efficacy: lan-demets-obrien-fleming
"""


def test_the_number_of_looks_has_a_plan_time_limit(tmp_path: Path) -> None:
    base = PLAN_TEXT.replace("  planned_n: {gauze: 180, alginate: 180, negative-pressure: 180}\n",
                             "")
    head, sep, tail = base.partition("    role: primary\n")
    head = head.replace("    sparse: {min_expected: 5, test: fisher-exact}\n", "")
    assert sep
    many = ", ".join(str(20 * (k + 1)) for k in range(25))
    with pytest.raises(PlanError) as caught:
        load_plan(_write_plan(tmp_path, head + sep + LOOKS.lstrip("\n").replace(
            "SIZES", many) + tail))
    assert "hypotheses.H1.looks.sizes: lists 25 looks, and a plan may have at most 20: the " \
           "boundaries' computation grows steeply with the number of looks" in str(caught.value)
    twenty = ", ".join(str(20 * (k + 1)) for k in range(20))
    loaded = load_plan(_write_plan(tmp_path, head + sep + LOOKS.lstrip("\n").replace(
        "SIZES", twenty) + tail))
    assert len(loaded.model.hypothesis("H1").looks.sizes) == 20


@pytest.mark.parametrize("old,new,line,column,use", [
    ("  id: participant", "\tid: participant", 6, 1, "indent"),
    ("    compare: [negative-pressure, gauze]", "  \t  compare: [negative-pressure, gauze]",
     None, 3, "indent"),
    ("alpha: 0.05", "alpha:\t0.05", None, 7, "separate"),
])
def test_a_tab_in_the_plan_says_to_use_spaces(tmp_path: Path, old: str, new: str,
                                              line: int | None, column: int, use: str) -> None:
    assert old in PLAN_TEXT
    text = PLAN_TEXT.replace(old, new, 1)
    with pytest.raises(PlanError) as caught:
        load_plan(_write_plan(tmp_path, text))
    message = str(caught.value)
    tab_line = text[: text.index("\t")].count("\n") + 1
    assert message.startswith(f"{tmp_path / 'plan.yaml'}:{tab_line}: not valid YAML: ")
    assert message.endswith(f"; the line holds a tab (column {column}): {use} with spaces, "
                            "not tabs")
    if line is not None:
        assert tab_line == line


def test_the_separator_hint_through_the_command(tmp_path: Path,
                                                capsys: pytest.CaptureFixture[str]) -> None:
    plan = _write_plan(tmp_path, PLAN_TEXT)
    data = tmp_path / "semi.csv"
    data.write_text(demo_data().replace(",", ";"), encoding="utf-8")
    assert cli.main(["lock", str(plan)]) == 0
    capsys.readouterr()
    status = cli.main(["run", str(plan), str(data), "--engine", "pandas",
                       "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert status != 0 and not (tmp_path / "out").exists()
    assert err.count("\n") == 1
    assert "column 'participant' (data.id) is not in the data (columns: " \
           "participant;site;arm;consented;infected_30d); the header is one column and looks " \
           "separated by ';' (semicolon)" in err
