"""Reading a data file: only the columns the plan names are parsed, a wide header costs
little, and the messages for a missing column, a wrong separator or a file that is not UTF-8
say what is wrong in one line."""

from __future__ import annotations

import io
from pathlib import Path

import pandas as pd
import pytest

from prespec.data import read_data
from prespec.data.engines.base import DataSource
from prespec.data.engines.pipeline import count_source
from prespec.data.read import COLUMNS_SHOWN, listed
from prespec.demo.wound import PLAN_TEXT, demo_data
from prespec.errors import DataError
from prespec.plan import load_plan
from prespec.plan.model import Plan

PLAN_COLUMNS = {"participant": "data.id", "arm": "data.group", "consented": "data.include[1]",
                "infected_30d": "outcomes.infection.column"}


def _plan(tmp: Path) -> Plan:
    path = tmp / "wound.yaml"
    path.write_text(PLAN_TEXT, encoding="utf-8")
    return load_plan(path).model


def _widened(text: str, extra: int, *, full_rows: bool) -> str:
    """The demo data with ``extra`` more header names; rows padded with blanks or left short."""
    lines = text.splitlines()
    head = lines[0] + "".join(f",extra{i}" for i in range(extra))
    rows = [r + "," * extra if full_rows else r for r in lines[1:]]
    return "\n".join([head, *rows]) + "\n"


def _counts(plan: Plan, path: Path) -> dict[str, list[tuple[int, int]]]:
    counted = count_source(plan, DataSource("file", str(path), str(path)), engine="pandas")
    return {name: [(g.events, g.total) for g in oc.groups]
            for name, oc in counted.prepared.outcomes.items()}


@pytest.mark.parametrize("full_rows", [True, False])
def test_a_wide_header_gives_the_counts_of_the_narrow_file(tmp_path: Path,
                                                           full_rows: bool) -> None:
    plan = _plan(tmp_path)
    narrow = tmp_path / "narrow.csv"
    narrow.write_text(demo_data(), encoding="utf-8")
    wide = tmp_path / "wide.csv"
    wide.write_text(_widened(demo_data(), 20_000, full_rows=full_rows), encoding="utf-8")
    # the counts computed here with pandas directly (independent of prespec's reading)
    raw = pd.read_csv(io.StringIO(demo_data()), dtype=str)
    kept = raw[raw["consented"] == "yes"]
    expected = [(int((kept[kept["arm"] == g]["infected_30d"] == "1").sum()),
                 int(kept[kept["arm"] == g]["infected_30d"].isin(["0", "1"]).sum()))
                for g in plan.data.groups]
    assert _counts(plan, narrow) == {"infection": expected}
    assert _counts(plan, wide) == {"infection": expected}


def test_only_the_named_columns_are_parsed(tmp_path: Path,
                                           monkeypatch: pytest.MonkeyPatch) -> None:
    wide = tmp_path / "wide.csv"
    wide.write_text(_widened(demo_data(), 500, full_rows=True), encoding="utf-8")
    asked: list[object] = []
    real = pd.read_csv

    def spy(*args: object, **kwargs: object) -> pd.DataFrame:
        asked.append(kwargs.get("usecols"))
        return real(*args, **kwargs)

    monkeypatch.setattr(pd, "read_csv", spy)
    frame = read_data(wide, PLAN_COLUMNS)
    # demo header: participant, site, arm, consented, infected_30d, then the 500 extra ones
    assert asked == [[0, 2, 3, 4]]
    assert list(frame.columns) == ["participant", "arm", "consented", "infected_30d"]
    assert len(frame.index) == len(demo_data().splitlines()) - 1 == 601


def test_a_header_wider_than_its_rows_reads_the_short_rows_as_blank(tmp_path: Path) -> None:
    path = tmp_path / "d.csv"
    path.write_text("pid,arm,y,late\n1,a,1\n2,b,0,x\n3,a\n", encoding="utf-8")
    frame = read_data(path, {"pid": "data.id", "y": "outcomes.o.column", "late": "x"})
    assert frame.to_dict("list") == {"pid": ["1", "2", "3"], "y": ["1", "0", ""],
                                     "late": ["", "x", ""]}
    # a named column no row reaches: pandas pads the rows by the header
    only = read_data(path, {"late": "x"})
    assert only.to_dict("list") == {"late": ["", "x", ""]}


def test_a_row_longer_than_the_header_is_still_an_error(tmp_path: Path) -> None:
    path = tmp_path / "d.csv"
    path.write_text("pid,arm,y\n1,a,1\n2,b,0,extra\n", encoding="utf-8")
    with pytest.raises(DataError, match=r"Expected 3 fields in line 3, saw 4"):
        read_data(path, {"pid": "data.id"})
    with pytest.raises(DataError, match=r"Expected 3 fields in line 3, saw 4"):
        read_data(path)  # the full read says the same (pandas' own message)


def test_repeated_blank_and_bom_headers_are_named_as_a_full_read_names_them(
        tmp_path: Path) -> None:
    path = tmp_path / "d.csv"
    path.write_bytes("\ufeffpid,arm,arm,,y, y \n1,a,b,z,1,2\n".encode())
    full = read_data(path)  # pandas names a repeat 'arm.1' and a blank name 'Unnamed: 3'
    assert list(full.columns) == ["pid", "arm", "arm.1", "Unnamed: 3", "y", "y"]
    part = read_data(path, dict.fromkeys(["pid", "arm.1", "Unnamed: 3"], "k"))
    assert part.to_dict("list") == {"pid": ["1"], "arm.1": ["b"], "Unnamed: 3": ["z"]}
    assert read_data(path, {"arm": "data.group"}).to_dict("list") == {"arm": ["a"]}
    # names equal once trimmed are both read, as the full read keeps both
    both = read_data(path, {"y": "outcomes.o.column"})
    assert list(both.columns) == ["y", "y"] and both.iloc[0].tolist() == ["1", "2"]


def test_parquet_reads_the_named_columns_only(tmp_path: Path) -> None:
    path = tmp_path / "d.parquet"
    pd.DataFrame({"pid": ["1", "2"], "arm": ["a", None], "other": [1.5, 2.5]}).to_parquet(path)
    frame = read_data(path, {"pid": "data.id", "arm": "data.group"})
    assert frame.to_dict("list") == {"pid": ["1", "2"], "arm": ["a", None]}
    with pytest.raises(DataError, match=r"column 'y' \(outcomes.o.column\) is not in the data "
                                        r"\(columns: pid, arm, other\)"):
        read_data(path, {"y": "outcomes.o.column"})


def test_the_missing_column_message_lists_a_capped_header(tmp_path: Path) -> None:
    path = tmp_path / "d.csv"
    names = [f"c{i}" for i in range(100_000)]
    path.write_text(",".join(names) + "\n" + "," * 99_999 + "\n", encoding="utf-8")
    with pytest.raises(DataError) as caught:
        read_data(path, {"pid": "data.id"}, "d.csv")
    message = str(caught.value)
    shown = ", ".join(names[:COLUMNS_SHOWN])
    assert message == (f"d.csv: column 'pid' (data.id) is not in the data (columns: {shown} "
                       f"… and {100_000 - COLUMNS_SHOWN:,} more)")
    assert "\n" not in message and len(message) < 400
    long_name = "n" * 500
    assert listed([long_name]) == "n" * 59 + "…"


@pytest.mark.parametrize("sep,said", [(";", "';' (semicolon)"), ("\t", "a tab"),
                                      ("|", "'|' (vertical bar)")])
def test_a_file_with_another_separator_gets_a_hint(tmp_path: Path, sep: str,
                                                   said: str) -> None:
    path = tmp_path / "d.csv"
    path.write_text(sep.join(["pid", "arm", "site"]) + "\n" + sep.join(["1", "a", "n"]) + "\n",
                    encoding="utf-8")
    header = sep.join(["pid", "arm", "site"])
    with pytest.raises(DataError) as caught:
        read_data(path, {"pid": "data.id"}, "d.csv")
    assert str(caught.value) == (
        f"d.csv: column 'pid' (data.id) is not in the data (columns: {header}); the header "
        f"is one column and looks separated by {said}: prespec reads comma-separated files, "
        "so save the file with commas")


def test_the_separator_hint_in_the_full_run(tmp_path: Path) -> None:
    plan = _plan(tmp_path)
    path = tmp_path / "semi.csv"
    path.write_text(demo_data().replace(",", ";"), encoding="utf-8")
    with pytest.raises(DataError, match=r"column 'participant' \(data.id\) is not in the data "
                       r"\(columns: participant;site;arm;consented;infected_30d\); the header "
                       r"is one column and looks separated by ';' \(semicolon\)"):
        _counts(plan, path)


def test_a_latin1_file_names_the_byte_and_the_encodings_tried(tmp_path: Path) -> None:
    path = tmp_path / "d.csv"
    text = "pid,arm,site,y\n1,a,north,1\n2,b,Orléans,0\n"
    path.write_bytes(text.encode("latin-1"))
    assert text.encode("latin-1").index(b"\xe9") == 34  # counted from 0
    expected = (f"{path}: byte offset 34 (line 3) is 0xe9, which is not UTF-8; the file reads "
                "as Windows-1252 (Latin-1) text: save it as UTF-8 (encodings tried: UTF-8, "
                "Windows-1252)")
    for columns in (None, {"pid": "data.id"}):
        with pytest.raises(DataError) as caught:
            read_data(path, columns)
        assert str(caught.value) == expected


def test_the_first_bad_byte_is_found_past_the_first_block(tmp_path: Path) -> None:
    path = tmp_path / "d.csv"
    good = "pid,y\n" + "".join(f"{i},é\n" for i in range(300_000))  # 2-byte characters
    data = good.encode("utf-8")
    path.write_bytes(data + b"x,\x81\n")
    with pytest.raises(DataError) as caught:
        read_data(path)
    # 0x81 is undefined in Windows-1252: no claim about the encoding
    assert str(caught.value) == (
        f"{path}: byte offset {len(data) + 2} (line {good.count(chr(10)) + 1}) is 0x81, which "
        "is not UTF-8; save the file as UTF-8 (encodings tried: UTF-8, Windows-1252)")


def test_a_long_field_is_read_and_the_csv_limit_is_put_back(tmp_path: Path) -> None:
    import csv

    before = csv.field_size_limit()
    path = tmp_path / "d.csv"
    long_text = "z" * 200_000  # over the csv module's default limit of 131,072
    path.write_text(f"pid,note,y\n1,{long_text},1\n2,,0\n", encoding="utf-8")
    frame = read_data(path, {"pid": "data.id", "note": "x"})
    assert frame["note"].tolist() == [long_text, ""]
    assert csv.field_size_limit() == before
