"""Amendments and ``prespec history``: the versions, and what changed in meaning between two."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

import prespec.report
from prespec import api, audit, cli
from prespec.audit.history import Change, plan_changes, show
from prespec.demo.wound import PLAN_TEXT, demo_data
from prespec.errors import BadInput
from prespec.plan import load_plan


@pytest.fixture(autouse=True)
def quick_render(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)


def resolved(tmp_path: Path, text: str, name: str = "p.yaml") -> dict:
    path = tmp_path / name
    path.write_text(text)
    return load_plan(path).resolved


def test_changes_read_as_key_old_new(tmp_path: Path) -> None:
    before = resolved(tmp_path, PLAN_TEXT, "a.yaml")
    after = resolved(tmp_path, PLAN_TEXT.replace("alpha: 0.05", "alpha: 0.025").replace(
        "    compare: [alginate, gauze]\n    test: pearson-chi-square",
        "    compare: [alginate, gauze]\n    test: two-proportion-z"), "b.yaml")
    assert [str(c) for c in plan_changes(before, after)] == [
        "alpha: 0.05 → 0.025",
        "hypotheses.H2.test: pearson-chi-square → two-proportion-z",
    ]


def test_layout_and_spelt_out_defaults_are_no_change(tmp_path: Path) -> None:
    before = resolved(tmp_path, PLAN_TEXT, "a.yaml")
    after = resolved(tmp_path, "# reformatted\n" + PLAN_TEXT.replace(
        "    role: secondary", "    role: secondary\n    alternative: two-sided"), "b.yaml")
    assert plan_changes(before, after) == []


def test_hypotheses_matched_by_id_added_removed_reordered(tmp_path: Path) -> None:
    before = resolved(tmp_path, PLAN_TEXT, "a.yaml")
    h3 = PLAN_TEXT.index("  - id: H3")
    h2 = PLAN_TEXT.index("  - id: H2")
    reordered = PLAN_TEXT[:h2] + PLAN_TEXT[h3:] + PLAN_TEXT[h2:h3]
    after = resolved(tmp_path, reordered.replace("id: H3", "id: H4"), "b.yaml")
    lines = [str(c) for c in plan_changes(before, after)]
    assert lines[0].startswith("hypotheses.H3: removed (was {")
    assert lines[1].startswith("hypotheses.H4: added ({") and '"compare": "all"' in lines[1]
    assert len(lines) == 2  # H1 and H2 keep their order: no order line
    swapped = resolved(tmp_path, PLAN_TEXT[:h2] + PLAN_TEXT[h3:] + PLAN_TEXT[h2:h3], "c.yaml")
    assert [str(c) for c in plan_changes(before, swapped)] == [
        "hypotheses order: H1, H2, H3 → H1, H3, H2"]


def test_nested_lists_and_mappings(tmp_path: Path) -> None:
    before = resolved(tmp_path, PLAN_TEXT, "a.yaml")
    after = resolved(tmp_path, PLAN_TEXT.replace("planned_n: {gauze: 180, alginate: 180, "
                                                 "negative-pressure: 180}",
                                                 "planned_n: {gauze: 180, alginate: 200, "
                                                 "negative-pressure: 180}")
                     .replace('in: ["yes"]', 'in: ["yes", "verbal"]'), "b.yaml")
    assert [str(c) for c in plan_changes(before, after)] == [
        'data.include[1].in: ["yes"] → ["yes", "verbal"]',
        "data.planned_n.alginate: 180 → 200",
    ]


def test_show_values() -> None:
    assert show("fisher-exact") == "fisher-exact"
    assert show(" padded") == '" padded"' and show("") == '""' and show("a\nb") == '"a\\nb"'
    assert show(None) == "null" and show(True) == "true" and show(0.025) == "0.025"
    assert str(Change("x", 1, None, "removed")) == "x: removed (was 1)"


def test_history_through_the_command(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    plan, data = tmp_path / "trial.yaml", tmp_path / "data.csv"
    plan.write_text(PLAN_TEXT)
    data.write_text(demo_data())
    assert cli.main(["lock", str(plan), "--actor", "ana"]) == 0
    assert cli.main(["history", str(plan)]) == 0
    out = capsys.readouterr().out
    assert "version 1" in out and "one version; nothing to compare" in out
    plan.write_text(PLAN_TEXT.replace("alpha: 0.05", "alpha: 0.025"))
    assert cli.main(["amend", str(plan), "--reason", "tighter alpha", "--actor", "ben"]) == 0
    assert cli.main(["run", str(plan), str(data), "--out", str(tmp_path / "r1")]) == 0
    plan.write_text(PLAN_TEXT.replace("alpha: 0.05", "alpha: 0.025").replace(
        "multiplicity: holm", "multiplicity: bonferroni"))
    assert cli.main(["amend", str(plan), "--reason", "simpler rule", "--actor", "ben"]) == 0
    capsys.readouterr()
    assert cli.main(["history", str(plan)]) == 0
    out = capsys.readouterr().out.splitlines()
    versions = [line for line in out if line.startswith("version ")]
    assert len(versions) == 3
    assert "[amended after unblinding]" in versions[2] and "[amended" not in versions[1]
    assert "   reason: simpler rule" in out
    assert out[-2:] == ["changes in meaning from version 2 to 3:",
                        "  multiplicity: holm → bonferroni"]
    assert cli.main(["history", str(plan), "--from", "1", "--to", "3"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[-3:] == ["changes in meaning from version 1 to 3:", "  alpha: 0.05 → 0.025",
                        "  multiplicity: holm → bonferroni"]
    assert cli.main(["history", str(plan), "--from", "1"]) == 0
    assert capsys.readouterr().out.splitlines()[-1] == "  alpha: 0.05 → 0.025"
    assert cli.main(["history", str(plan), "--to", "4"]) == 2
    assert "the lock holds versions 1 to 3" in capsys.readouterr().err
    # each amend entry lists its changes, and the lock keeps every version, chained
    amends = [e for e in audit.read_log(audit.log_path(plan)) if e["action"] == "amend"]
    assert [e["details"]["changes"] for e in amends] == [["alpha: 0.05 → 0.025"],
                                                         ["multiplicity: holm → bonferroni"]]
    assert [d["code"] for d in amends[1]["deviations"]] == ["amended-after-unblinding"]
    doc = json.loads(audit.lock_path(plan).read_text())
    assert [(v["version"], v["reason"], v["actor"]) for v in doc["versions"]] == [
        (1, None, "ana"), (2, "tighter alpha", "ben"), (3, "simpler rule", "ben")]
    assert [v["previous"] for v in doc["versions"]] == [
        None, doc["versions"][0]["fingerprint"], doc["versions"][1]["fingerprint"]]


def test_history_of_an_unlocked_plan(tmp_path: Path) -> None:
    plan = tmp_path / "p.yaml"
    plan.write_text(PLAN_TEXT)
    with pytest.raises(BadInput, match="not locked"):
        api.history(plan)


def test_a_design_added_or_removed_reads_key_by_key(tmp_path: Path) -> None:
    import re

    bare = re.sub(r"^design:\n(?:  .*\n)+", "", PLAN_TEXT, flags=re.MULTILINE)
    assert "design:" not in bare and "design:" in PLAN_TEXT
    before = resolved(tmp_path, bare, "a.yaml")
    after = resolved(tmp_path, PLAN_TEXT, "b.yaml")
    added = [str(c) for c in plan_changes(before, after)]
    assert added == [
        "design.assumed.gauze: added (0.2)",
        "design.assumed.alginate: added (0.14)",
        "design.assumed.negative-pressure: added (0.1)",
        "design.power: added (0.8)",
        "design.allocation.gauze: added (1.0)",
        "design.allocation.alginate: added (1.0)",
        "design.allocation.negative-pressure: added (1.0)",
        "design.dropout: added (0.05)",
        "design.continuity: added (false)",
    ]
    removed = [str(c) for c in plan_changes(after, before)]
    assert removed[0] == "design.assumed.gauze: removed (was 0.2)"
    assert len(removed) == len(added) and all(" removed (was " in line for line in removed)
    assert not any("{" in line for line in added + removed)  # no JSON blob
    # a sparse switch added to a hypothesis reads the same way
    no_switch = resolved(tmp_path, PLAN_TEXT.replace(
        "    sparse: {min_expected: 5, test: fisher-exact}\n", "", 1), "c.yaml")
    assert [str(c) for c in plan_changes(no_switch, after)] == [
        "hypotheses.H1.sparse.min_expected: added (5.0)",
        "hypotheses.H1.sparse.test: added (fisher-exact)",
    ]
