"""Input that reaches where it should not: the plan's data source outside its folder, report
folders that are links or land outside ``reports/``, table file names that collide, globs
that read hidden files, and things planted in a study's report folders.

The notebook step is replaced by a no-op (as in tests/test_api.py); everything else runs.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import pytest

import prespec.report
from prespec import api, audit
from prespec.demo import PLAN_TEXT, demo_data
from prespec.errors import BadInput


@pytest.fixture(autouse=True)
def quick_render(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)


def _study(folder: Path, plan_text: str = PLAN_TEXT, name: str = "trial.yaml"
           ) -> tuple[Path, Path]:
    folder.mkdir(parents=True, exist_ok=True)
    plan = folder / name
    plan.write_text(plan_text)
    data = folder / "data.csv"
    data.write_text(demo_data())
    return plan, data


# --- item 8: table file names are unique within a run and reversible ---

TWO_OUTCOMES = PLAN_TEXT.replace("""\
outcomes:
  infection:
    column: infected_30d
    event: [1]
    no_event: [0]
    missing: exclude
""", """\
outcomes:
  inf ection:
    column: infected_30d
    event: [1]
    no_event: [0]
    missing: exclude
  inf_ection:
    column: infected_30d
    event: [0]
    no_event: [1]
    missing: exclude
""").replace("outcome: infection", "outcome: inf ection").replace(
    "id: H1", "id: H+1").replace("id: H2", "id: H/1").replace("id: H3", "id: H_1")


def test_table_files_are_unique_and_name_their_labels(tmp_path: Path) -> None:
    plan, data = _study(tmp_path, TWO_OUTCOMES)
    api.lock(plan)
    out = api.run(plan, data)
    tables = out.folder / "tables"
    assert sorted(p.name for p in tables.iterdir()) == [
        "H%2B1.csv", "H%2F1.csv", "H_1.csv", "groups-inf%20ection.csv", "groups-inf_ection.csv"]
    results = out.results
    by_id = {h["id"]: h for h in results["hypotheses"]}
    for name, hid in (("H%2B1.csv", "H+1"), ("H%2F1.csv", "H/1"), ("H_1.csv", "H_1")):
        rows = list(csv.reader((tables / name).open()))
        table = by_id[hid]["table"]
        assert [r[0] for r in rows[1:]] == table["groups"]
        assert [int(r[1]) for r in rows[1:]] == table["events"]
    # the two outcomes count opposite values: each file holds its own outcome's events
    for name, outcome in (("groups-inf%20ection.csv", "inf ection"),
                          ("groups-inf_ection.csv", "inf_ection")):
        rows = list(csv.reader((tables / name).open()))
        assert [int(r[1]) for r in rows[1:]] == [g["events"] for g in results["groups"][outcome]]
    listed = json.loads((out.folder / "manifest.json").read_text())["files"]
    assert {n for n in listed if n.startswith("tables/")} == {
        f"tables/{p.name}" for p in tables.iterdir()}
    assert api.verify(plan).passed


# --- item 7: report folders are real folders inside the study ---

def _files_under(folder: Path) -> list[str]:
    return sorted(p.relative_to(folder).as_posix() for p in folder.rglob("*"))


@pytest.mark.parametrize("linked", ["reports", "reports/trial"])
def test_a_linked_report_place_is_refused_and_nothing_is_written(
        tmp_path: Path, linked: str) -> None:
    plan, data = _study(tmp_path / "study")
    api.lock(plan)
    outside = tmp_path / "outside"
    outside.mkdir()
    link = plan.parent / linked
    link.parent.mkdir(parents=True, exist_ok=True)
    link.symlink_to(outside, target_is_directory=True)
    log_before = audit.log_path(plan).read_bytes()
    with pytest.raises(BadInput) as err:
        api.run(plan, data)
    assert str(err.value) == (f"{link}: is a symbolic link; report folders are written only "
                              "into real folders inside the study (remove the link, or give "
                              "--out)")
    assert err.value.exit_status == 2
    assert _files_under(outside) == []
    assert audit.log_path(plan).read_bytes() == log_before
    with pytest.raises(BadInput, match="symbolic link"):
        api.rehearse(plan, data)
    assert _files_under(outside) == []


def test_a_file_where_the_reports_folder_goes_is_refused(tmp_path: Path) -> None:
    plan, data = _study(tmp_path)
    api.lock(plan)
    (tmp_path / "reports").mkdir()
    (tmp_path / "reports" / "trial").write_text("not a folder\n")
    with pytest.raises(BadInput, match=r"reports/trial: is not a folder"):
        api.run(plan, data)
    assert (tmp_path / "reports" / "trial").read_text() == "not a folder\n"
    assert [e["action"] for e in audit.read_log(audit.log_path(plan))] == ["lock"]


@pytest.mark.parametrize("name", ["...yaml", "..yaml"])
def test_a_plan_name_that_gives_no_report_folder_is_refused(tmp_path: Path, name: str) -> None:
    plan, data = _study(tmp_path / "study", name=name)
    api.lock(plan)
    before = _files_under(tmp_path)
    with pytest.raises(BadInput, match=r"the plan's file name gives no report folder name"):
        api.run(plan, data)
    assert _files_under(tmp_path) == before
    out = api.run(plan, data, out=tmp_path / "study" / "chosen")  # --out still works
    assert out.folder == tmp_path / "study" / "chosen" and (out.folder / "manifest.json").is_file()


def test_a_link_planted_while_the_run_computes_is_refused(tmp_path: Path,
                                                          monkeypatch: pytest.MonkeyPatch) -> None:
    from prespec import publish

    plan, data = _study(tmp_path / "study")
    api.lock(plan)
    outside = tmp_path / "outside"
    outside.mkdir()
    real_reserve = publish.reserve_folder

    def reserve(out: Path, *, numbered: bool) -> tuple[Path, bool]:
        out.parent.parent.mkdir(parents=True, exist_ok=True)
        out.parent.symlink_to(outside, target_is_directory=True)  # after the first check
        return real_reserve(out, numbered=numbered)

    monkeypatch.setattr(publish, "reserve_folder", reserve)
    with pytest.raises(BadInput, match="symbolic link"):
        api.run(plan, data)
    assert _files_under(outside) == []
    assert [e["action"] for e in audit.read_log(audit.log_path(plan))] == ["lock"]
