"""A family's data: the split by level, ids within a level, and every data error and departure."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from prespec.analysis.families import prepare_run
from prespec.data import families as data_families
from prespec.data.families import family_data
from prespec.errors import DataError
from prespec.plan import load_plan

PLAN = """\
prespec: 1
title: Tolerability of two invented hand gels
data:
  id: participant
  group: gel
  groups: [new, standard]
  include:
    - {column: safety_set, in: ["yes"]}
  planned_n: {new: 3, standard: 3}
outcomes:
  reported:
    column: had_event
    event: [1]
    no_event: [0]
    missing: exclude
alpha: 0.05
multiplicity: holm
hypotheses:
  - id: AE
    outcome: reported
    compare: [new, standard]
    test: fisher-exact
    over: event_term
    within: body_system
LEVELS
    flag_method: double-fdr
"""


def rows(term: str, system: str, events: list[int], gels: list[str] | None = None,
         start: int = 1) -> list[dict[str, str]]:
    gels = gels or ["new", "new", "new", "standard", "standard", "standard"]
    return [{"participant": f"P{start + i}", "gel": g, "body_system": system,
             "event_term": term, "had_event": str(e), "safety_set": "yes"}
            for i, (g, e) in enumerate(zip(gels, events, strict=True))]


BASE = [*rows("dryness", "skin", [1, 1, 0, 0, 0, 0]),
        *rows("redness", "skin", [1, 0, 0, 0, 0, 1]),
        *rows("watering", "eyes", [0, 0, 1, 0, 1, 1])]


def setup(tmp_path: Path, records: list[dict[str, str]], levels: str = "") -> tuple[
        object, pd.DataFrame, Path]:
    plan = tmp_path / "plan.yaml"
    plan.write_text(PLAN.replace("LEVELS\n", levels))
    data = tmp_path / "data.csv"
    frame = pd.DataFrame(records)
    frame.to_csv(data, index=False)
    frame = pd.read_csv(data, dtype=str, keep_default_na=False)
    return load_plan(plan).model, frame, data


def test_levels_found_in_the_data_sorted_by_group_then_level(tmp_path: Path) -> None:
    plan, frame, data = setup(tmp_path, BASE)
    fam = family_data(frame, plan, plan.hypotheses[0], data)
    assert [(lv.value, lv.group) for lv in fam.levels] == [
        ("watering", "eyes"), ("dryness", "skin"), ("redness", "skin")]
    dry = fam.levels[1].prepared
    assert dry.outcomes["reported"].table(["new", "standard"]) == ([2, 0], [3, 3])
    assert fam.deviations == () and fam.left_out == 0


def test_ids_are_unique_within_each_level_not_across(tmp_path: Path) -> None:
    plan, frame, data = setup(tmp_path, BASE)  # P1..P6 in every level
    prepared, fams = prepare_run(frame, plan, data)
    assert [len(lv.rows) for lv in fams[0].levels] == [6, 6, 6]
    assert prepared.rows_read == 18 and prepared.analysed == 18 and prepared.outcomes == {}
    twice = [*BASE, *rows("dryness", "skin", [0], gels=["new"], start=2)]
    plan, frame, data = setup(tmp_path, twice)
    with pytest.raises(DataError) as caught:
        prepare_run(frame, plan, data)
    message = str(caught.value)
    # row 2 of the file is P2 of dryness; the repeat is the file's last row (19 + 1 header)
    assert message == (f"{data}: hypotheses.AE, the rows where event_term is 'dryness': "
                       "duplicate ids in column 'participant': 'P2' (rows 3, 20)")


def test_a_plan_with_an_ordinary_hypothesis_keeps_ids_unique_overall(tmp_path: Path) -> None:
    plan, frame, data = setup(tmp_path, BASE)
    ordinary = plan.hypotheses[0].model_copy(update={
        "id": "H1", "over": None, "within": None, "flag_method": None, "flag_level": None,
        "group_level": None, "members": None, "role": "primary"})
    mixed = plan.model_copy(update={"hypotheses": [plan.hypotheses[0], ordinary]})
    with pytest.raises(DataError, match="duplicate ids in column 'participant'"):
        prepare_run(frame, mixed, data)
    one_each = [{**r, "participant": f"U{i}"} for i, r in enumerate(BASE)]
    frame = pd.DataFrame(one_each)
    prepared, fams = prepare_run(frame, mixed, data)
    assert prepared.outcomes["reported"].table(["new", "standard"]) == ([4, 3], [9, 9])
    assert len(fams[0].levels) == 3


def test_blank_level_rows_are_left_out_with_a_note(tmp_path: Path) -> None:
    blank = [*BASE, {**BASE[0], "participant": "P99", "event_term": "  "}]
    plan, frame, data = setup(tmp_path, blank)
    fam = family_data(frame, plan, plan.hypotheses[0], data)
    assert [n.code for n in fam.notes] == ["family-blank-level"]
    assert "1 row with a blank 'event_term' left out" in fam.notes[0].detail
    assert fam.left_out == 1 and len(fam.levels) == 3


DECLARED = "    levels: {skin: [dryness, redness, cracking], eyes: [watering]}\n"


def test_declared_levels_undeclared_rows_and_an_absent_level(tmp_path: Path) -> None:
    extra = [*BASE, *rows("sneezing", "general", [1, 0, 0, 0, 0, 0])]
    plan, frame, data = setup(tmp_path, extra, DECLARED)
    fam = family_data(frame, plan, plan.hypotheses[0], data)
    assert [lv.value for lv in fam.levels] == ["dryness", "redness", "cracking", "watering"]
    (dev,) = fam.deviations
    assert dev.code == "undeclared-level"
    assert dev.found == "sneezing" and dev.expected == "dryness, redness, cracking, watering"
    assert "6 rows left out" in dev.detail
    absent = [n for n in fam.notes if n.code == "family-level-absent"]
    assert [n.detail.split(":")[0] for n in absent] == ["AE[cracking]"]
    assert fam.levels[2].prepared is None and fam.left_out == 6


def test_declared_levels_match_by_the_matching_rule(tmp_path: Path) -> None:
    padded = [{**r, "event_term": f" {r['event_term']} "} for r in BASE]
    plan, frame, data = setup(tmp_path, padded, DECLARED)
    fam = family_data(frame, plan, plan.hypotheses[0], data)
    assert fam.deviations == ()
    assert [len(lv.rows) for lv in fam.levels] == [6, 6, 0, 6]


def test_one_term_in_two_body_systems_names_the_file_and_rows(tmp_path: Path) -> None:
    moved = [dict(r) for r in BASE]
    moved[4]["body_system"] = "eyes"  # dryness, file row 6
    plan, frame, data = setup(tmp_path, moved)
    with pytest.raises(DataError) as caught:
        family_data(frame, plan, plan.hypotheses[0], data)
    assert str(caught.value) == (
        f"{data}: level 'dryness' of 'event_term' sits in more than one 'body_system' "
        "(hypotheses.AE.within): 'eyes' (rows 6); 'skin' (rows 2, 3, 4, 5, 7); a level "
        "belongs to one group")


def test_data_that_disagree_with_the_declared_mapping(tmp_path: Path) -> None:
    moved = [dict(r) for r in BASE]
    moved[13]["body_system"] = "skin"  # watering, file row 15
    plan, frame, data = setup(tmp_path, moved, DECLARED)
    with pytest.raises(DataError) as caught:
        family_data(frame, plan, plan.hypotheses[0], data)
    assert str(caught.value) == (
        f"{data}: level 'watering' of 'event_term' is declared under 'eyes' "
        "(hypotheses.AE.levels), but column 'body_system' puts it under 'skin' (rows 15)")


def test_a_missing_over_column_is_named(tmp_path: Path) -> None:
    plan, frame, data = setup(tmp_path, BASE)
    with pytest.raises(DataError) as caught:
        family_data(frame.drop(columns=["event_term"]), plan, plan.hypotheses[0], data)
    assert str(caught.value).startswith(
        f"{data}: column 'event_term' (hypotheses.AE.over) is not in the data (columns: ")


def test_departures_of_the_levels_are_merged_per_code(tmp_path: Path) -> None:
    stray = [dict(r) for r in BASE]
    stray[0]["gel"] = "other"  # dryness
    stray[7]["gel"] = "other"  # redness
    stray[8]["had_event"] = "9"  # redness
    plan, frame, data = setup(tmp_path, stray)
    fam = family_data(frame, plan, plan.hypotheses[0], data)
    codes = {d.code: d for d in fam.deviations}
    assert set(codes) == {"unexpected-group", "unmapped-outcome-value", "sample-size-shortfall"}
    assert codes["unexpected-group"].detail.startswith("AE: in 2 of 3 levels (dryness, redness)")
    assert codes["unmapped-outcome-value"].detail.startswith("AE[redness]: ")
    assert codes["unmapped-outcome-value"].found == "9"
    # dryness loses one 'new' row (2 of 3 analysed); redness two (a stray group, an
    # unmapped value left out by missing: exclude), so 1 of 3
    assert codes["sample-size-shortfall"].found == "1, 2"
    assert codes["sample-size-shortfall"].expected == "3"


def test_every_column_is_carried_to_the_levels(tmp_path: Path,
                                               monkeypatch: pytest.MonkeyPatch) -> None:
    weighted = [{**r, "row_weight": "2"} for r in BASE]
    plan, frame, data = setup(tmp_path, weighted)
    seen: list[list[str]] = []
    real = data_families.prepare

    def spy(sub: pd.DataFrame, plan: object, source: object, **kwargs: object) -> object:
        seen.append(list(sub.columns))
        assert list(sub["row_weight"]) == ["2"] * len(sub)
        return real(sub, plan, source, **kwargs)

    monkeypatch.setattr(data_families, "prepare", spy)
    family_data(frame, plan, plan.hypotheses[0], data)
    assert seen == [list(frame.columns)] * 3


def test_a_repeated_column_name_is_refused_as_every_engine_refuses_it(tmp_path: Path) -> None:
    """A plan with families is read by pandas alone; a header naming two columns 'gel' (one
    spaced and capitalised) is refused as the engines refuse it (prespec.data.engines.columns),
    not counted from whichever column pandas keeps."""
    from prespec.common.environment import environment
    from prespec.data.engines.base import DataSource
    from prespec.workflow.execute import compute_results

    plan, _, data = setup(tmp_path, BASE)
    header, rest = data.read_text().split("\n", 1)
    assert header.endswith(",safety_set")
    data.write_text(header.replace(",safety_set", ", Gel") + "\n" + rest)
    with pytest.raises(DataError) as caught:
        compute_results(plan_path=tmp_path / "plan.yaml", plan=plan,
                        fingerprint="sha256:" + "0" * 64, version=None, data_path=None,
                        actor="tester", environment=environment(), deviations=[], notes=[],
                        previous_data=None, source=DataSource("file", str(data), str(data)),
                        engine="pandas")
    assert str(caught.value) == (
        f"{data}: 2 columns are named 'gel' (columns 2 'gel' and 6 ' Gel'; names are compared "
        "trimmed and ignoring case); rename all but one")
