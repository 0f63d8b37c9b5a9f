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
from prespec import api
from prespec.demo import PLAN_TEXT, demo_data


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
