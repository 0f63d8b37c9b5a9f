"""Reading data and reducing it to count tables: filters, groups, outcome mapping, departures."""

from __future__ import annotations

from pathlib import Path
from types import SimpleNamespace

import pandas as pd
import pytest

from prespec.data import ValueSet, is_blank, prepare, read_data
from prespec.errors import DataError


class Cond(SimpleNamespace):
    def op(self) -> tuple[str, object]:
        (key, value), = ((k, v) for k, v in vars(self).items() if k != "column")
        return key, value


def make_plan(include=(), missing="exclude", planned_n=None, event=(1,), no_event=(0,),
              strata=None):
    hypotheses = [SimpleNamespace(id="H1", outcome="inf", strata=strata)]
    return SimpleNamespace(
        hypotheses=hypotheses,
        data=SimpleNamespace(id="pid", group="arm", groups=["a", "b"], reference="a",
                             include=list(include), planned_n=planned_n),
        outcomes={"inf": SimpleNamespace(column="y", event=list(event),
                                         no_event=list(no_event), missing=missing)},
    )


def write(tmp: Path, text: str) -> Path:
    path = tmp / "d.csv"
    path.write_text(text)
    return path


CSV = """pid,arm,ok,age,y
1,a,yes,30,1
2,a,yes,41,0
3,a,no,50,1
4,b,yes,62,0
5,b,yes, 70 , 1.0
6,b,yes,80,
7,c,yes,45,0
8,,yes,33,1
9,b,yes,19,2
"""


def test_value_matching_rule() -> None:
    values = ValueSet([1, "yes"])
    assert "1" in values and "1.0" in values and " 1 " in values and 1.0 in values
    assert "yes" in values and " yes " in values
    assert "Yes" not in values  # case-sensitive (docs/plan-format.md, "Reading the data")
    assert "" not in values and None not in values and "01x" not in values
    assert is_blank("  ") and is_blank(None) and is_blank(float("nan")) and not is_blank("0")


def test_counts_and_departures(tmp_path: Path) -> None:
    frame = read_data(write(tmp_path, CSV))
    assert frame["y"].tolist()[4] == " 1.0"  # read as text, nothing converted
    prep = prepare(frame, make_plan(include=[Cond(column="ok", **{"in": ["yes"]})]), "d.csv")
    assert (prep.rows_read, prep.excluded_by_filter, prep.excluded_group, prep.analysed) == \
        (9, 1, 2, 6)
    counts = prep.outcomes["inf"]
    # a: rows 1, 2 (row 3 fails the filter); b: rows 4, 5 (1.0 is 1), 6 blank, 9 unmapped "2"
    assert (counts.of("a").events, counts.of("a").total) == (1, 2)
    assert (counts.of("b").events, counts.of("b").total, counts.of("b").blank,
            counts.of("b").unmapped) == (1, 2, 1, 1)
    codes = [d.code for d in prep.deviations]
    assert codes == ["unexpected-group", "unmapped-outcome-value"]
    assert prep.deviations[0].found == "(blank), c"
    assert "'2' (1)" in prep.deviations[1].detail
    assert [n.code for n in prep.notes] == ["missing-exclude"]


@pytest.mark.parametrize("rule,events_b,total_b", [("event", 3, 4), ("no-event", 1, 4)])
def test_missing_rule_counts_blanks(tmp_path: Path, rule: str, events_b: int,
                                    total_b: int) -> None:
    prep = prepare(read_data(write(tmp_path, CSV)), make_plan(missing=rule), "d.csv")
    b = prep.outcomes["inf"].of("b")
    assert (b.events, b.total) == (events_b, total_b)


def test_missing_error_names_values(tmp_path: Path) -> None:
    with pytest.raises(DataError, match=r"neither event nor no_event: '2' \(1\) \(rows 10\)"):
        prepare(read_data(write(tmp_path, CSV)), make_plan(missing="error"), "d.csv")


def test_filters(tmp_path: Path) -> None:
    frame = read_data(write(tmp_path, CSV))
    def analysed(cond: Cond) -> int:
        return prepare(frame, make_plan(include=[cond]), "d.csv").analysed
    assert analysed(Cond(column="age", between=[30, 62])) == 4  # 30, 41, 50, 62 (inclusive)
    assert analysed(Cond(column="ok", not_in=["no"])) == 6
    assert analysed(Cond(column="ok", equals="no")) == 1
    assert analysed(Cond(column="y", is_missing=True)) == 1
    assert analysed(Cond(column="y", is_missing=False)) == 6


def test_shortfall(tmp_path: Path) -> None:
    # a: 3 analysed (rows 1-3); b: 2 analysed (blank and unmapped excluded by the missing rule)
    prep = prepare(read_data(write(tmp_path, CSV)), make_plan(planned_n={"a": 4, "b": 2}),
                   "d.csv")
    short = [d for d in prep.deviations if d.code == "sample-size-shortfall"]
    assert [(d.expected, d.found) for d in short] == [("4", "3")]


def test_duplicate_ids_named(tmp_path: Path) -> None:
    path = write(tmp_path, "pid,arm,y\n1,a,1\n2,a,0\n1,b,0\n2,b,1\n3,a,1\n")
    with pytest.raises(DataError, match=r"duplicate ids in column 'pid': '1' \(rows 2, 4\); "
                                        r"'2' \(rows 3, 5\)"):
        prepare(read_data(path), make_plan(), path)


def test_missing_column_names_columns(tmp_path: Path) -> None:
    path = write(tmp_path, "pid,group,y\n1,a,1\n")
    with pytest.raises(DataError, match=r"column 'arm' \(data.group\) is not in the data "
                                        r"\(columns: pid, group, y\)"):
        prepare(read_data(path), make_plan(), path)


@pytest.mark.parametrize("text,message", [("", "empty"), ("pid,arm,y\n", "no rows")])
def test_empty_files(tmp_path: Path, text: str, message: str) -> None:
    with pytest.raises(DataError, match=message):
        read_data(write(tmp_path, text))


def test_non_utf8_and_unknown_format(tmp_path: Path) -> None:
    path = tmp_path / "d.csv"
    path.write_bytes(b"pid,arm,y\n1,\xff\xfe,1\n")
    with pytest.raises(DataError, match="not UTF-8"):
        read_data(path)
    other = tmp_path / "d.xlsx"
    other.write_text("x")
    with pytest.raises(DataError, match="unknown data format"):
        read_data(other)


def test_parquet_numbers_match_plan_values(tmp_path: Path) -> None:
    path = tmp_path / "d.parquet"
    pd.DataFrame({"pid": [1, 2, 3, 4], "arm": ["a", "a", "b", "b"],
                  "y": [1.0, 0.0, None, 1.0]}).to_parquet(path)
    prep = prepare(read_data(path), make_plan(), path)
    assert prep.outcomes["inf"].table(["a", "b"]) == ([1, 1], [2, 1])
    assert prep.outcomes["inf"].of("b").blank == 1


def test_strata_tables(tmp_path: Path) -> None:
    text = CSV.replace("pid,arm,ok,age,y", "pid,arm,site,age,y").replace(",yes,", ",n,", 5)
    text = text.replace(",no,", ",s,").replace(",yes,", ",s,")
    path = write(tmp_path, text + "10,a,,20,1\n")
    prep = prepare(read_data(path), make_plan(strata=["site"]), path)
    (north, south) = prep.strata[("inf", ("site",))]
    assert north.values == ("n",) and south.values == ("s",)
    # n: rows 1, 2 (a) and 4, 5, 6 blank (b); s: row 3 (a), 9 unmapped (b); row 10 has no site
    assert north.counts.table(["a", "b"]) == ([1, 1], [2, 2])
    assert south.counts.table(["a", "b"]) == ([1, 0], [1, 0])
    assert [n.code for n in prep.notes] == ["missing-exclude", "blank-stratum"]
    with pytest.raises(DataError, match=r"column 'centre' \(hypotheses.H1.strata\)"):
        prepare(read_data(path), make_plan(strata=["centre"]), path)



@pytest.mark.parametrize("cell, number", [
    ("1", 1.0), (" +2.5 ", 2.5), (".5", 0.5), ("1e1", 10.0), ("-0", 0.0),
    # digits of other scripts are text: Python's float() takes them, SQL casts do not
    ("\u0661", None), ("\u0664\u0665", None), ("\uff11", None), ("1\u0660", None),
    ("1_000", None), ("inf", None), ("nan", None),
])
def test_only_ascii_digits_make_a_number(cell: str, number: float | None) -> None:
    import re

    from prespec.data import as_number
    from prespec.data.engines.compiler import NUMBER_PATTERN

    assert as_number(cell) == number
    # the pattern the SQL engines apply to the trimmed text says the same
    assert (re.fullmatch(NUMBER_PATTERN, cell.strip()) is not None) == (number is not None)
    if cell.strip().isdecimal() and number is None:  # another script's digits
        assert cell not in ValueSet([float(cell)])  # float() reads them; the rule does not


def test_flow_counts_each_row_under_the_first_condition_it_fails(tmp_path: Path) -> None:
    """The participant flow of CSV by hand: condition 1 ok = yes, condition 2 age 20 to 75."""
    from prespec.data.prepare import Flow

    plan = make_plan(include=[Cond(column="ok", equals="yes"),
                              Cond(column="age", between=[20, 75])])
    prepared = prepare(read_data(write(tmp_path, CSV)), plan, "d.csv")
    assert prepared.flow == Flow(
        # a: pid 1-3; b: 4, 5, 6, 9; other: 7 (c), 8 (blank)
        read={"a": 3, "b": 4, None: 2},
        excluded=({"a": 1, "b": 0, None: 0},  # ok = no: pid 3 (fails age too: counted once)
                  {"a": 0, "b": 2, None: 0}),  # age: pid 6 (80), pid 9 (19)
        analysed={"a": 2, "b": 2},
    )
    assert prepared.excluded_by_filter == 3 and prepared.excluded_group == 2
    # read = left out + outside the groups + analysed, per group and in total
    total = sum(prepared.flow.read.values())
    assert total == prepared.rows_read == 9
    assert total == prepared.excluded_by_filter + prepared.excluded_group + prepared.analysed


def test_flow_without_conditions_and_from_an_aggregate_without_the_failed_column() -> None:
    from prespec.data.prepare import KEEP_COLUMN, WEIGHT_COLUMN

    plan = make_plan()
    frame = pd.DataFrame({"pid": ["1", "2", "3"], "arm": ["a", "b", "x"], "y": [1, 0, 1]})
    flow = prepare(frame, plan, "d.csv").flow
    assert flow is not None and flow.excluded == ()
    assert flow.read == {"a": 1, "b": 1, None: 1} and flow.analysed == {"a": 1, "b": 1}
    # an aggregate that does not say which condition failed: no flow rather than a wrong one
    weighted = pd.DataFrame({KEEP_COLUMN: [True, False], "arm": ["a", None], "y": ["1", None],
                             WEIGHT_COLUMN: [5, 2]})
    plan = make_plan(include=[Cond(column="ok", equals="yes")])
    assert prepare(weighted, plan, "d.csv").flow is None
