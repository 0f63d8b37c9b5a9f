"""The names of the CSV files in tables/: unique, reversible, and plain names unchanged."""

from __future__ import annotations

from urllib.parse import unquote

import pytest

from prespec.report.tablenames import (
    MAX_STEM,
    decode_stem,
    encode_label,
    family_table,
    groups_table,
    hypothesis_table,
)


def test_plain_names_are_kept_as_they_were() -> None:
    assert hypothesis_table("H1") == "tables/H1.csv"
    assert hypothesis_table("H_1") == "tables/H_1.csv"
    assert groups_table("infection") == "tables/groups-infection.csv"
    assert family_table("AE") == "tables/family-AE.csv"


@pytest.mark.parametrize(("label", "stem"), [
    ("H+1", "H%2B1"), ("H/1", "H%2F1"), ("H_1", "H_1"), ("H 1", "H%201"), ("50%", "50%25"),
    (".hidden", "%2Ehidden"), ("..", "%2E."), ("a..b", "a..b"), ("é", "%C3%A9"),
    ("H1:a-b", "H1%3Aa-b"),
])
def test_every_byte_outside_the_safe_set_is_percent_encoded(label: str, stem: str) -> None:
    assert encode_label(label) == stem
    assert decode_stem(stem) == label == unquote(stem)  # urllib.parse.unquote reverses it


def test_the_three_kinds_never_share_a_name() -> None:
    # a hypothesis id shaped like a groups or family table keeps its own name
    assert hypothesis_table("groups-infection") == "tables/groups%2Dinfection.csv"
    assert hypothesis_table("family-AE") == "tables/family%2DAE.csv"
    assert decode_stem("groups%2Dinfection") == "groups-infection"
    names = {groups_table("infection"), family_table("AE"),
             hypothesis_table("groups-infection"), hypothesis_table("family-AE")}
    assert len(names) == 4


def test_a_very_long_label_is_cut_with_a_digest_and_stays_unique() -> None:
    a, b = "é" * 300 + "a", "é" * 300 + "b"
    name_a, name_b = hypothesis_table(a), hypothesis_table(b)
    stem = name_a.removeprefix("tables/").removesuffix(".csv")
    assert len(stem) <= MAX_STEM and name_a != name_b and "~" in stem
    assert "%" not in stem.split("~")[0][-2:]  # no half escape before the digest


def test_a_hypothesis_named_like_a_table_of_the_run_keeps_its_own_name() -> None:
    from prespec.report.tablenames import FLOW_TABLE, RESULTS_TABLE, STATISTICS_TABLE

    assert hypothesis_table("results") == "tables/%72esults.csv"
    assert hypothesis_table("statistics") == "tables/%73tatistics.csv"
    assert hypothesis_table("flow") == "tables/%66low.csv"
    assert decode_stem("%72esults") == "results"
    assert {hypothesis_table(n) for n in ("results", "statistics", "flow")}.isdisjoint(
        {RESULTS_TABLE, STATISTICS_TABLE, FLOW_TABLE})
    assert hypothesis_table("results2") == "tables/results2.csv"
