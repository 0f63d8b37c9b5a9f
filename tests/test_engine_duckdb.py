"""The duckdb engine gives the pandas engine's counts, on clean and on hostile data.

The pandas engine (``prepare`` over the whole frame) is the reference semantics, checked by
hand in test_data_prepare.py and test_estimands.py; here every Prepared (counts, strata,
estimand counts, departures, notes) of the duckdb engine must equal it, for CSV and Parquet,
and a few counts are worked by hand from the hostile file below.
"""

from __future__ import annotations

import io
import re
from pathlib import Path

import pandas as pd
import pytest
import yaml

from prespec.data.engines.base import DataSource
from prespec.data.engines.compiler import compile_counts, quote_identifier
from prespec.data.engines.duckdb_engine import DuckDBEngine
from prespec.data.engines.pipeline import blinded_rows, count_source
from prespec.data.engines.request import count_request
from prespec.demo.wound import demo_data
from prespec.errors import DataError
from prespec.plan import load_plan

ROOT = Path(__file__).resolve().parent.parent
INJECTION = "x'; DROP TABLE t; --"

HOSTILE_PLAN = {
    "prespec": 1,
    "title": "Invented hostile data",
    "data": {
        "id": "pid",
        "group": "arm",
        "groups": ["gauze", "alginate"],
        "include": [{"column": "consent", "in": ["yes"]},
                    {"column": "age", "between": [18, 65]},
                    {"column": "visit", "equals": 1},
                    {"column": "note", "is_missing": True}],
    },
    "outcomes": {
        "infection": {"column": "y", "event": [1, INJECTION], "no_event": [0],
                      "missing": "exclude"},
        "healed": {"column": "z", "event": ["yes"], "no_event": ["no"], "missing": "no-event"},
    },
    "alpha": 0.05,
    "multiplicity": "none",
    "hypotheses": [
        {"id": "H1", "outcome": "infection", "compare": ["alginate", "gauze"],
         "test": "fisher-exact"},
        {"id": "H2", "outcome": "healed", "compare": ["alginate", "gauze"],
         "test": "cochran-mantel-haenszel", "strata": ["site"]},
    ],
}

# pid 14 fails consent, 4 and 13 fail age (66, blank), 7 fails age ('abc'), 16 fails note,
# 17 fails visit (2); pid 5 ('Gauze') and 6 (blank) are unexpected groups.
HOSTILE_CSV = (
    "pid,arm,y,z,age,consent,visit,site,note\n"
    "1,gauze,1,yes,30,yes,1,n,\n"
    "2, gauze ,1.0,yes,18,yes,1.0,n,\n"
    "3,alginate, +1 ,no,65.0,yes, 1 ,s,\n"
    "4,alginate,0,no,66,yes,1,s,\n"
    "5,Gauze,0,,40,yes,1,n,\n"
    "6,,1,yes,40,yes,1,n,\n"
    "7,alginate,maybe,yes,abc,yes,1,s,\n"
    f"8,gauze,\"{INJECTION}\",no,2.5e1,yes,1,,\n"
    "9,alginate,1_000,yes,50, yes ,1,s,\n"
    "10,gauze,inf,no,50,yes,1,n,\n"
    "11,alginate,\t0,yes,50,yes,1e0,n,\n"
    "12,gauze,,no,50,yes,1,s,\n"
    "13,alginate,0e0,no,,yes,1,n,\n"
    "14,gauze,nan,yes,20,no,1,n,\n"
    "15,alginate,1,yes,30,yes,1, s ,\n"
    "16,gauze,0,no,30,yes,1,n,x\n"
    "17,gauze,0,no,30,yes,2,n,\n"
    "18,alginate,1,maybe,30,yes,1,s,\n"
)


def _write_plan(folder: Path, plan: dict) -> Path:
    path = folder / "plan.yaml"
    path.write_text(yaml.safe_dump(plan, sort_keys=False), encoding="utf-8")
    return path


def _source(path: Path, kind: str = "file") -> DataSource:
    return DataSource(kind, str(path), str(path))


def _both(plan: object, path: Path) -> tuple[object, object]:
    src = _source(path)
    return (count_source(plan, src, engine="pandas").prepared,
            count_source(plan, src, engine="duckdb").prepared)


@pytest.fixture
def hostile(tmp_path: Path) -> tuple[object, Path, Path]:
    plan = load_plan(_write_plan(tmp_path, HOSTILE_PLAN)).model
    csv = tmp_path / "hostile.csv"
    csv.write_text(HOSTILE_CSV, encoding="utf-8")
    parquet = tmp_path / "hostile.parquet"
    pd.read_csv(io.StringIO(HOSTILE_CSV), dtype=str, keep_default_na=False).to_parquet(parquet)
    return plan, csv, parquet


def test_hostile_csv_and_parquet_give_the_pandas_counts(hostile: tuple) -> None:
    plan, csv, parquet = hostile
    for path in (csv, parquet):
        by_pandas, by_duckdb = _both(plan, path)
        assert by_duckdb == by_pandas
    # by hand: 18 rows; 14, 4, 13, 7, 16, 17 fail the filter (6 rows); 5, 6 stray groups
    assert (by_duckdb.rows_read, by_duckdb.excluded_by_filter, by_duckdb.excluded_group,
            by_duckdb.analysed) == (18, 6, 2, 10)
    infection = by_duckdb.outcomes["infection"]
    # gauze: 1 (1), 2 (1.0), 8 (the injection-shaped text, an event value), 10 (inf:
    # unmapped), 12 (blank) -> 3 events of 3; alginate: 3 (+1), 15 (1), 18 (1) events,
    # 11 (tab 0) no event, 9 (1_000) unmapped -> 3 of 4
    assert infection.table(["gauze", "alginate"]) == ([3, 3], [3, 4])
    assert infection.of("gauze").unmapped == 1 and infection.of("gauze").blank == 1
    codes = {d.code: d for d in by_duckdb.deviations}
    assert "'Gauze' (1)" in codes["unexpected-group"].detail
    assert "'(blank)' (1)" in codes["unexpected-group"].detail
    unmapped = [d for d in by_duckdb.deviations if d.code == "unmapped-outcome-value"]
    assert "'1_000' (1)" in unmapped[0].detail and "'inf' (1)" in unmapped[0].detail
    assert "'maybe' (1)" in unmapped[1].detail  # healed: pid 18
    # strata of H2 (site): pid 8 has a blank site; ' s ' is the stratum 's'
    strata = by_duckdb.strata[("healed", ("site",))]
    assert [s.values for s in strata] == [("n",), ("s",)]


def test_typed_parquet_numbers_and_nulls(tmp_path: Path) -> None:
    """Parquet with its types: integers, doubles (NaN is blank), nulls, and text ids."""
    plan = load_plan(_write_plan(tmp_path, HOSTILE_PLAN)).model
    frame = pd.read_csv(io.StringIO(HOSTILE_CSV), dtype=str, keep_default_na=False)
    frame["y"] = [1.0, 1.0, 1.0, 0.0, 0.0, 1.0, 2.0, None, 5.0, float("inf"), 0.0,
                  float("nan"), 0.0, 1.0, 1.0, 0.0, 0.0, 1.0]
    frame["age"] = pd.array([30, 18, 65, 66, 40, 40, None, 10, 50, 50, 50, 50, None, 20, 30,
                             30, 30, 30], dtype="Int64")
    frame["visit"] = [1.0] * 16 + [2.0, 1.0]
    path = tmp_path / "typed.parquet"
    frame.to_parquet(path)
    kinds = DuckDBEngine(_source(path)).column_kinds()
    assert (kinds["y"], kinds["age"], kinds["pid"]) == ("float", "integer", "text")
    by_pandas, by_duckdb = _both(plan, path)
    assert by_duckdb == by_pandas
    assert by_duckdb.excluded_by_filter == 7  # 4, 7, 8 (age 10), 13, 14, 16, 17


@pytest.mark.parametrize("name", ["wound-dressing.yaml", "methods-tour.yaml"])
def test_demo_plans_on_demo_data(tmp_path: Path, name: str) -> None:
    plan = load_plan(ROOT / "plans" / name).model
    csv = tmp_path / "demo.csv"
    csv.write_text(demo_data(), encoding="utf-8")
    parquet = tmp_path / "demo.parquet"
    pd.read_csv(csv, dtype=str, keep_default_na=False).to_parquet(parquet)
    for path in (csv, parquet):
        by_pandas, by_duckdb = _both(plan, path)
        assert by_duckdb == by_pandas
        assert by_duckdb.analysed > 500  # the demo's 600 rows, less the filter and strays


def test_estimands_raw_columns_match(tmp_path: Path) -> None:
    """Intercurrent-event columns and while-on-treatment outcome columns stay raw."""
    import test_estimands as est

    for missing in ("exclude", "event", "no-event"):
        plan_path = tmp_path / f"est-{missing}.yaml"
        plan_path.write_text(est.PLAN.replace("MISSING", missing), encoding="utf-8")
        plan = load_plan(plan_path).model
        csv = tmp_path / "est.csv"
        csv.write_text(est.CSV, encoding="utf-8")
        request = count_request(plan, "est.csv")
        assert {m.column for m in request.mapped} == {"arm", "y"}
        assert set(request.raw) == {"rescue", "stopped", "y_stop"}
        by_pandas, by_duckdb = _both(plan, csv)
        assert by_duckdb == by_pandas
        h3 = by_duckdb.by_hypothesis["H3"].counts
        if missing == "exclude":  # test_estimands.HAND, worked by hand there
            assert h3.table(["t", "c"]) == ([4, 3], [6, 6])


def test_compiled_sql_holds_no_plan_value_and_the_injection_matches_as_data(
        hostile: tuple) -> None:
    plan, csv, _ = hostile
    request = count_request(plan, str(csv))
    for dialect in ("duckdb", "postgresql", "spark"):
        query = compile_counts(request, quote_identifier("t", dialect), dialect, {})
        for value in ("gauze", "alginate", "yes", "no"):  # as words ('no' is in 'note')
            assert not re.search(rf"\b{value}\b", query.text)
        assert INJECTION not in query.text and "DROP" not in query.text and "'" not in (
            query.text)
        assert INJECTION in query.params.values()
    by_duckdb = count_source(plan, _source(csv), engine="duckdb").prepared
    assert by_duckdb.outcomes["infection"].of("gauze").events == 3  # pid 8 among them


def test_errors_name_ids_where_lines_are_not_known(tmp_path: Path) -> None:
    plan = dict(HOSTILE_PLAN, outcomes={"infection": {**HOSTILE_PLAN["outcomes"]["infection"],
                                                      "missing": "error"}},
                hypotheses=[HOSTILE_PLAN["hypotheses"][0]])
    loaded = load_plan(_write_plan(tmp_path, plan)).model
    csv = tmp_path / "hostile.csv"
    csv.write_text(HOSTILE_CSV, encoding="utf-8")
    with pytest.raises(DataError) as by_pandas:
        count_source(loaded, _source(csv), engine="pandas")
    with pytest.raises(DataError) as by_duckdb:
        count_source(loaded, _source(csv), engine="duckdb")
    # the same message; file lines (pid 9 on line 10, pid 10 on line 11) become ids
    assert "(rows 10, 11)" in str(by_pandas.value)
    assert str(by_duckdb.value) == str(by_pandas.value).replace("(rows 10, 11)",
                                                               "(ids '10', '9')")


def test_duplicate_and_blank_ids(tmp_path: Path) -> None:
    plan = load_plan(_write_plan(tmp_path, HOSTILE_PLAN)).model
    dup = tmp_path / "dup.csv"
    dup.write_text(HOSTILE_CSV + "3,gauze,1,yes,30,yes,1,n,\n 2 ,gauze,1,yes,30,yes,1,n,\n",
                   encoding="utf-8")
    with pytest.raises(DataError, match=r"duplicate ids in column 'pid': '2' \(2 rows\); "
                                        r"'3' \(2 rows\)$"):
        count_source(plan, _source(dup), engine="duckdb")
    blank = tmp_path / "blank.csv"
    blank.write_text(HOSTILE_CSV + "  ,gauze,1,yes,30,yes,1,n,\n", encoding="utf-8")
    with pytest.raises(DataError, match=r"blank id in column 'pid' \(1 row\)"):
        count_source(plan, _source(blank), engine="duckdb")
    missing = tmp_path / "missing.csv"
    missing.write_text(HOSTILE_CSV.replace(",site,", ",place,"), encoding="utf-8")
    with pytest.raises(DataError) as by_duckdb:
        count_source(plan, _source(missing), engine="duckdb")
    with pytest.raises(DataError) as by_pandas:
        count_source(plan, _source(missing), engine="pandas")
    assert str(by_duckdb.value) == str(by_pandas.value)
    assert "column 'site' (hypotheses.H2.strata) is not in the data" in str(by_duckdb.value)


def test_unique_within_accepts_ids_repeated_across_levels(tmp_path: Path) -> None:
    plan = load_plan(_write_plan(tmp_path, {
        **HOSTILE_PLAN, "data": {"id": "pid", "group": "arm", "groups": ["a", "b"]},
        "outcomes": {"ae": {"column": "y", "event": [1], "no_event": [0],
                            "missing": "exclude"}},
        "hypotheses": [{"id": "H1", "outcome": "ae", "compare": ["a", "b"],
                        "test": "fisher-exact"}]})).model
    csv = tmp_path / "ae.csv"
    csv.write_text("pid,term,arm,y\n1,rash,a,1\n1,nausea,a,0\n2,rash,b,1\n3,rash,b,0\n",
                   encoding="utf-8")
    request = count_request(plan, "ae.csv", unique_within=("term",))
    with DuckDBEngine(_source(csv)) as engine:
        reduction = engine.reduce(request)  # pid 1 twice, in two terms: accepted
    assert int(reduction.frame["__prespec_rows__"].sum()) == 4
    csv.write_text(csv.read_text() + "2,rash,b,0\n", encoding="utf-8")
    with DuckDBEngine(_source(csv)) as engine, pytest.raises(
            DataError, match=r"'2' \(2 rows, term 'rash'\)$"):
        engine.reduce(request)
    with DuckDBEngine(_source(csv)) as engine, pytest.raises(
            DataError, match=r"duplicate ids in column 'pid': '1' \(2 rows\); '2' \(2 rows\)$"):
        engine.reduce(count_request(plan, "ae.csv"))  # without: pid 1 is a duplicate too


def test_blinded_request_never_names_the_group_column(tmp_path: Path) -> None:
    plan_doc = dict(HOSTILE_PLAN, data={**HOSTILE_PLAN["data"], "group": "secret_arm"})
    plan = load_plan(_write_plan(tmp_path, plan_doc)).model
    csv = tmp_path / "h.csv"
    csv.write_text(HOSTILE_CSV.replace(",arm,", ",secret_arm,"), encoding="utf-8")
    request = count_request(plan, str(csv), blinded=True)
    assert "secret_arm" not in request.read and "secret_arm" not in request.grouped
    for dialect in ("duckdb", "postgresql", "spark"):
        text = compile_counts(request, quote_identifier("t", dialect), dialect, {}).text
        assert "secret_arm" not in text
    rows = blinded_rows(plan, _source(csv), engine="duckdb")
    assert rows.query is not None and "secret_arm" not in rows.query
    assert "secret_arm" not in rows.frame.columns and len(rows.frame.index) == 18


def test_quoted_names_and_a_nul(tmp_path: Path) -> None:
    assert quote_identifier('a"b', "duckdb") == '"a""b"'
    assert quote_identifier("a`b", "spark") == "`a``b`"
    with pytest.raises(ValueError, match="NUL"):
        quote_identifier("a\x00b", "postgresql")
    plan_doc = dict(HOSTILE_PLAN, data={**HOSTILE_PLAN["data"], "group": 'the "arm"'})
    plan = load_plan(_write_plan(tmp_path, plan_doc)).model
    csv = tmp_path / "q.csv"
    csv.write_text(HOSTILE_CSV.replace(",arm,", ',"the ""arm""",'), encoding="utf-8")
    by_pandas, by_duckdb = _both(plan, csv)
    assert by_duckdb == by_pandas and by_duckdb.analysed == 10


def test_whitespace_is_what_str_strip_removes() -> None:
    import sys

    from prespec.data.engines.compiler import WHITESPACE

    assert WHITESPACE == "".join(chr(c) for c in range(sys.maxunicode + 1) if chr(c).isspace())
    assert ("\u3000\t x \x1f\xa0").strip() == "x"  # Python's rule, which the SQL trim follows


def _weights(reduction: object) -> dict:
    frame = reduction.frame  # type: ignore[attr-defined]
    return {tuple(r[:-1]): r[-1] for r in frame.astype(object).itertuples(index=False)}


def test_an_id_repeated_in_other_cells_is_found(tmp_path: Path) -> None:
    """The id scan sees every row, whatever its cells: pid 4 once in arm a with y 1, once in
    arm b with y 0 (two different groups of the counts)."""
    plan = load_plan(_write_plan(tmp_path, {
        **HOSTILE_PLAN, "data": {"id": "pid", "group": "arm", "groups": ["a", "b"]},
        "outcomes": {"ae": {"column": "y", "event": [1], "no_event": [0],
                            "missing": "exclude"}},
        "hypotheses": [{"id": "H1", "outcome": "ae", "compare": ["a", "b"],
                        "test": "fisher-exact"}]})).model
    csv = tmp_path / "ae.csv"
    rows = [f"{i},{'ab'[i % 2]},{i % 3 == 0:d}" for i in range(1, 40)] + ["\t4 ,b,0"]
    csv.write_text("pid,arm,y\n" + "\n".join(rows) + "\n", encoding="utf-8")
    with pytest.raises(DataError, match=r"duplicate ids in column 'pid': '4' \(2 rows\)$"):
        count_source(plan, _source(csv), engine="duckdb")
    # a blank id with unique_within: its key hashes as a blank one still (NULL || ...)
    csv.write_text("pid,term,arm,y\n1,rash,a,1\n \t,rash,b,0\n", encoding="utf-8")
    request = count_request(plan, "ae.csv", unique_within=("term",))
    with DuckDBEngine(_source(csv)) as engine, pytest.raises(
            DataError, match=r"blank id in column 'pid' \(1 row\)"):
        engine.reduce(request)


def test_hash_collisions_are_confirmed_by_the_exact_queries(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Every id made to hash alike, and the blank hash made that of a real id: the exact
    follow-up queries find no duplicate and no blank id, and the counts stay those of the
    plain reduction."""
    import prespec.data.engines.duckdb_engine as engine_module
    from prespec.data.engines.compiler import Query

    plan = load_plan(_write_plan(tmp_path, HOSTILE_PLAN)).model
    csv = tmp_path / "hostile.csv"
    csv.write_text(HOSTILE_CSV, encoding="utf-8")
    request = count_request(plan, "hostile.csv")
    with DuckDBEngine(_source(csv)) as engine:
        expected = _weights(engine.reduce(request))
    calls: list[str] = []

    def colliding(request: object, relation: str, dialect: str, kinds: object) -> Query:
        return Query(f"SELECT CAST(7 AS UBIGINT) AS prespec_id_hash FROM {relation}", {},
                     dialect)

    def blank_is_seven(dialect: str) -> Query:
        return Query("SELECT CAST(7 AS UBIGINT) AS prespec_id_hash", {}, dialect)

    monkeypatch.setattr(engine_module, "compile_id_hashes", colliding)
    monkeypatch.setattr(engine_module, "compile_blank_hash", blank_is_seven)
    with DuckDBEngine(_source(csv)) as engine:
        for name in ("duplicate_ids", "check_blank_ids"):
            method = getattr(engine, name)
            monkeypatch.setattr(engine, name, lambda *a, _m=method, _n=name: (
                calls.append(_n), _m(*a))[1])
        assert _weights(engine.reduce(request)) == expected
    assert sorted(calls) == ["check_blank_ids", "duplicate_ids"]


def test_the_id_hash_query_hashes_trimmed_text_and_blanks_as_null(tmp_path: Path) -> None:
    """compile_id_hashes: ' 12\\t' hashes as '12' does; '', ' ' and a missing cell as NULL."""
    import duckdb

    from prespec.data.engines.compiler import compile_blank_hash, compile_id_hashes

    csv = tmp_path / "ids.csv"
    csv.write_text('pid,arm,y\n12,a,1\n" 12\t",b,0\n"",a,1\n" ",b,0\n,a,1\n',
                   encoding="utf-8")
    plan = load_plan(_write_plan(tmp_path, {
        **HOSTILE_PLAN, "data": {"id": "pid", "group": "arm", "groups": ["a", "b"]},
        "outcomes": {"ae": {"column": "y", "event": [1], "no_event": [0],
                            "missing": "exclude"}},
        "hypotheses": [{"id": "H1", "outcome": "ae", "compare": ["a", "b"],
                        "test": "fisher-exact"}]})).model
    request = count_request(plan, "ids.csv")
    with DuckDBEngine(_source(csv)) as engine:
        kinds = engine.column_kinds()
        query = compile_id_hashes(request, engine.relation(request), "duckdb", kinds)
        got = [int(v) for v in engine.fetch(query)["prespec_id_hash"]]
    con = duckdb.connect()
    twelve = con.execute("SELECT hash('12')").fetchone()[0]
    blank = con.execute(compile_blank_hash("duckdb").text).fetchone()[0]
    assert got == [twelve, twelve, blank, blank, blank]


def test_a_long_reduction_reports_its_progress_and_duckdb_draws_nothing(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
        capfd: pytest.CaptureFixture[str]) -> None:
    """The callback gets DuckDB's own progress figures, rising, ending at 100; DuckDB's bar is
    never printed (it would be for ``python -c``, which it takes for an interactive session)."""
    import duckdb

    from prespec.data.engines import duckdb_engine

    csv = tmp_path / "many.csv"
    duckdb.connect().execute(
        "COPY (SELECT printf('P%07d', i) AS id, CASE WHEN i % 2 = 0 THEN 'gauze' ELSE "
        "'foam' END AS arm, CAST(hash(i) % 2 AS VARCHAR) AS healed FROM range(1500000) t(i)) "
        "TO $p (HEADER, FORMAT csv)", {"p": str(csv)})
    plan = load_plan(_write_plan(tmp_path, {
        **HOSTILE_PLAN, "data": {"id": "id", "group": "arm", "groups": ["gauze", "foam"]},
        "outcomes": {"healed": {"column": "healed", "event": [1], "no_event": [0],
                                "missing": "exclude"}},
        "hypotheses": [{"id": "H1", "outcome": "healed", "compare": ["foam", "gauze"],
                        "test": "pearson-chi-square"}]})).model
    monkeypatch.setattr(duckdb_engine, "POLL_SECONDS", 0.005)
    seen: list[float] = []
    counted = count_source(plan, _source(csv), engine="duckdb", progress=seen.append)
    assert counted.prepared.analysed == 1_500_000
    assert seen and seen[-1] == 100.0
    assert any(0 < v < 100 for v in seen), seen  # a figure from within a query
    assert all(0 <= v <= 100 for v in seen)
    with DuckDBEngine(_source(csv)) as engine:  # no bar asked for: none tracked, none drawn
        assert engine.con.execute("SELECT current_setting('enable_progress_bar'), "
                                  "current_setting('enable_progress_bar_print')").fetchone() \
            == (False, False)
    captured = capfd.readouterr()
    assert "%" not in captured.err and "▕" not in captured.err
