"""The blinded rehearsal in process: the dummy allocation, the pooled figures, the departures
it raises, the hypotheses that execute or fail, the lock and the log, verify.

The notebook step is replaced by a recording no-op here (tests/e2e/test_rehearsal_e2e.py runs
it for real, through the command); everything else runs as in use. The data are invented.
"""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from statsmodels.stats.proportion import proportion_confint

import prespec.report
from prespec import api, audit, cli
from prespec.analysis import methods
from prespec.errors import BadInput, DataError
from prespec.report.tables import POOLED_HEADER
from prespec.workflow import rehearse as rehearsal

PLAN = """\
prespec: 1
title: Two dressings and 30-day wound infection (invented)
data:
  id: participant
  group: arm
  groups: [foam, film]
  include:
    - {column: consented, in: ["yes"]}
  planned_n: {foam: 30, film: 30}
outcomes:
  infection: {column: infected, event: [1], no_event: [0], missing: exclude}
alpha: 0.05
multiplicity: holm
hypotheses:
  - id: H1
    title: Foam vs film
    outcome: infection
    compare: [foam, film]
    test: pearson-chi-square
  - id: H2
    outcome: infection
    compare: [foam]
    test: binomial-exact
    null_rate: 0.2
    role: secondary
"""


def rows_text(rows: list[dict[str, str]]) -> str:
    out = io.StringIO()
    w = csv.DictWriter(out, fieldnames=list(rows[0]))
    w.writeheader()
    w.writerows(rows)
    return out.getvalue()


def trial_rows() -> list[dict[str, str]]:
    """50 rows: 40 consented (12 events, 24 no events, 3 blank, 1 'unknown'), 10 not."""
    outcome = ["1"] * 12 + ["0"] * 24 + [""] * 3 + ["unknown"] + ["1"] * 4 + ["0"] * 6
    consent = ["yes"] * 40 + ["no"] * 10
    arms = ["foam", "film"] * 25
    return [{"participant": f"P{i:03d}", "arm": arms[i], "consented": consent[i],
             "infected": outcome[i]} for i in range(50)]


WRITE_FIGURES = prespec.report.write_figures


@pytest.fixture(autouse=True)
def no_figures(monkeypatch: pytest.MonkeyPatch) -> None:
    """Figures take a second a report; the tests that need them put them back."""
    monkeypatch.setattr(prespec.report, "write_figures", lambda results, folder: [])


@pytest.fixture
def renders(monkeypatch: pytest.MonkeyPatch) -> list[dict[str, Any]]:
    """Replace the notebook with a no-op that records the results.json of each folder."""
    seen: list[dict[str, Any]] = []

    def record(folder: Path) -> None:
        seen.append({"folder": Path(folder),
                     "results": json.loads((Path(folder) / "results.json").read_text())})

    monkeypatch.setattr(prespec.report, "render_notebook", record)
    return seen


@pytest.fixture
def study(tmp_path: Path) -> tuple[Path, Path]:
    plan = tmp_path / "trial.yaml"
    plan.write_text(PLAN)
    data = tmp_path / "data.csv"
    data.write_text(rows_text(trial_rows()))
    return plan, data


def log_of(plan: Path) -> list[dict[str, Any]]:
    return audit.read_log(audit.log_path(plan))


# --- the dummy allocation ---------------------------------------------------------------


def test_allocation_sizes_equal_and_in_planned_proportions() -> None:
    # largest remainders, ties to the earlier group  # common practice (Hamilton's method)
    assert rehearsal.allocation_sizes(10, ["a", "b", "c"], None) == [4, 3, 3]
    assert rehearsal.allocation_sizes(9, ["a", "b", "c"], None) == [3, 3, 3]
    # 2:1 of 10 rows: 6.67 and 3.33 -> 7 and 3
    assert rehearsal.allocation_sizes(10, ["a", "b"], {"a": 200, "b": 100}) == [7, 3]
    # planned_n that does not name every group: equal sizes
    assert rehearsal.allocation_sizes(5, ["a", "b"], {"a": 200}) == [3, 2]
    assert rehearsal.allocation_sizes(0, ["a", "b"], None) == [0, 0]


def test_dummy_allocation_is_a_permutation_of_the_planned_sizes() -> None:
    rng = np.random.default_rng(7)
    first = rehearsal.dummy_allocation(300, ["a", "b"], {"a": 2, "b": 1}, rng)
    second = rehearsal.dummy_allocation(300, ["a", "b"], {"a": 2, "b": 1}, rng)
    assert sorted(first.tolist()) == ["a"] * 200 + ["b"] * 100
    assert first.tolist() != second.tolist()  # shuffled anew each time


def test_the_dummy_split_varies_and_sums_to_the_pooled_figures(
        study: tuple[Path, Path], renders: list[dict[str, Any]]) -> None:
    plan, data = study
    for k in range(2):
        api.rehearse(plan, data, out=plan.parent / f"r{k}")
    dummy = [r["results"] for r in renders if r["results"]["kind"] == "run"]
    assert len(dummy) == 2
    for d in dummy:  # 36 analysed, 12 events, however the 50 rows were split
        assert sum(g["total"] for g in d["groups"]["infection"]) == 36
        assert sum(g["events"] for g in d["groups"]["infection"]) == 12
    a, b = rehearsal._fresh_generator(), rehearsal._fresh_generator()
    assert a.integers(2**62) != b.integers(2**62)  # a new seed each time


def test_the_seed_is_written_nowhere(study: tuple[Path, Path], renders: list[dict[str, Any]],
                                     monkeypatch: pytest.MonkeyPatch) -> None:
    plan, data = study
    fixed = bytes(range(101, 133))
    monkeypatch.setattr(rehearsal.os, "urandom", lambda n: fixed[:n])
    out = api.rehearse(plan, data, out=plan.parent / "r")
    seed = int.from_bytes(fixed, "big")
    written = b"".join(p.read_bytes() for p in out.folder.rglob("*") if p.is_file())
    written += audit.log_path(plan).read_bytes()
    for form in (str(seed), f"{seed:x}", fixed.hex(), str(seed % 2**64)):
        assert form.encode() not in written


# --- the pooled document ----------------------------------------------------------------


def test_pooled_figures_population_and_departures(study: tuple[Path, Path],
                                                  renders: list[dict[str, Any]]) -> None:
    plan, data = study
    out = api.rehearse(plan, data, out=plan.parent / "rehearsal", actor="ana")
    res = out.results
    assert res["kind"] == "rehearsal" and res["blinded"] is True
    assert "groups" not in res
    assert res["population"] == {"rows_read": 50, "excluded_by_filter": 10, "excluded_group": 0,
                                 "analysed": 40}
    assert res["planned_total"] == 60 and res["analysed_total"] == 40
    pooled = res["pooled"]["infection"]
    # by hand: 12 events, 24 no events among the 40 consented; 3 blank + 1 unmapped excluded
    assert (pooled["events"], pooled["total"], pooled["missing"]) == (12, 36, 4)
    assert pooled["rate"] == pytest.approx(12 / 36, rel=1e-12)
    low, high = proportion_confint(12, 36, alpha=0.05, method="wilson")  # statsmodels
    assert pooled["ci"] == pytest.approx([low, high], rel=1e-9)
    assert pooled["ci_method"] == "wilson" and pooled["level"] == 0.95
    codes = [d["code"] for d in res["deviations"]]
    assert codes == ["unmapped-outcome-value", "sample-size-shortfall"]
    short = res["deviations"][1]
    assert (short["expected"], short["found"]) == ("60", "36")
    assert "all groups together" in short["detail"]
    notes = {n["code"]: n["detail"] for n in res["notes"]}
    assert "rehearsal-without-lock" in notes and "rehearsal-groups-not-read" in notes
    assert "4 missing outcomes left out" in notes["missing-exclude"]
    assert "per group" not in notes["missing-exclude"]
    assert [(h["id"], h["executed"], h["problem"]) for h in res["hypotheses"]] == [
        ("H1", True, None), ("H2", True, None)]
    for h in res["hypotheses"]:
        assert set(h) == {"id", "title", "role", "outcome", "compare", "test", "parent",
                          "executed", "problem"}


def test_missing_rule_event_counts_the_missing_as_events(tmp_path: Path,
                                                        renders: list[dict[str, Any]]) -> None:
    plan = tmp_path / "trial.yaml"
    plan.write_text(PLAN.replace("missing: exclude", "missing: event"))
    data = tmp_path / "data.csv"
    data.write_text(rows_text(trial_rows()))
    pooled = api.rehearse(plan, data, out=tmp_path / "r").results["pooled"]["infection"]
    assert (pooled["events"], pooled["total"], pooled["missing"]) == (16, 40, 4)  # by hand


def test_the_group_column_is_never_read(tmp_path: Path, renders: list[dict[str, Any]]) -> None:
    """Masked, absent, or holding values outside data.groups: the same pooled document."""
    rows = trial_rows()
    plan = tmp_path / "trial.yaml"
    plan.write_text(PLAN)
    docs = []
    variants = {
        "labelled": rows,
        "masked": [{**r, "arm": "XXXX"} for r in rows],
        "absent": [{k: v for k, v in r.items() if k != "arm"} for r in rows],
        "blank": [{**r, "arm": ""} for r in rows],
    }
    for name, variant in variants.items():
        data = tmp_path / f"{name}.csv"
        data.write_text(rows_text(variant))
        res = api.rehearse(plan, data, out=tmp_path / f"r-{name}").results
        docs.append({k: v for k, v in res.items() if k not in ("data", "data_file", "created")})
    assert all(d == docs[0] for d in docs[1:])
    assert docs[0]["population"]["excluded_group"] == 0
    assert "unexpected-group" not in [d["code"] for d in docs[0]["deviations"]]


def test_rehearsal_tables_are_the_pooled_table_and_the_dictionary(
        study: tuple[Path, Path], renders: list[dict[str, Any]],
        monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(prespec.report, "write_figures", WRITE_FIGURES)
    plan, data = study
    folder = api.rehearse(plan, data, out=plan.parent / "r").folder
    assert sorted(p.name for p in (folder / "tables").iterdir()) == ["data-dictionary.csv",
                                                                    "pooled.csv"]
    assert not (folder / "figures").exists()  # no per-group proportions, no estimates
    pooled = list(csv.reader((folder / "tables" / "pooled.csv").open()))
    assert pooled[0] == POOLED_HEADER
    assert pooled[1][:5] == ["infection", "12", "24", "36", "4"]
    dictionary = list(csv.DictReader((folder / "tables" / "data-dictionary.csv").open()))
    assert [(r["column"], r["value"], r["count"], r["meaning"]) for r in dictionary] == [
        ("participant", "", "", ""),
        ("consented", "yes", "40", "passes filter"),
        ("consented", "no", "10", "fails filter"),
        ("infected", "1", "16", "event"),
        ("infected", "0", "30", "no-event"),
        ("infected", "unknown", "1", "unmapped"),
        ("infected", "(blank)", "3", "blank"),
    ]
    assert dictionary[0]["distinct"] == "50" and dictionary[0]["duplicates"] == "0"


def test_the_dummy_run_renders_a_full_report_that_is_deleted(
        study: tuple[Path, Path], renders: list[dict[str, Any]]) -> None:
    plan, data = study
    out = api.rehearse(plan, data, out=plan.parent / "r")
    dummy, real = renders
    assert dummy["results"]["kind"] == "run" and "groups" in dummy["results"]
    assert [h["p_value"] is not None for h in dummy["results"]["hypotheses"]] == [True, True]
    assert not dummy["folder"].exists() and not dummy["folder"].parent.exists()
    assert plan.parent not in dummy["folder"].parents
    assert real["folder"].parent == out.folder.parent and real["results"] == out.results


# --- failures are findings ----------------------------------------------------------------


def test_a_hypothesis_that_fails_is_named_and_the_others_execute(
        study: tuple[Path, Path], renders: list[dict[str, Any]],
        monkeypatch: pytest.MonkeyPatch) -> None:
    plan, data = study

    def broken(table: Any, hyp: Any) -> Any:
        raise BadInput(f"{hyp.id}: this test cannot run here")

    monkeypatch.setitem(methods.TESTS, "binomial-exact", broken)
    res = api.rehearse(plan, data, out=plan.parent / "r").results
    assert [(h["id"], h["executed"], h["problem"]) for h in res["hypotheses"]] == [
        ("H1", True, None), ("H2", False, "BadInput: H2: this test cannot run here")]
    notes = [n["detail"] for n in res["notes"] if n["code"] == "rehearsal-step-failed"]
    assert notes == ["the report step was not reached"]
    assert len(renders) == 1  # only the rehearsal's own report


def test_a_report_step_that_fails_is_a_note(study: tuple[Path, Path],
                                            monkeypatch: pytest.MonkeyPatch) -> None:
    plan, data = study
    calls: list[Path] = []

    def fail_first(folder: Path) -> None:
        calls.append(folder)
        if len(calls) == 1:
            raise prespec.errors.PrespecError("report notebook failed in cell 5: KeyError")

    monkeypatch.setattr(prespec.report, "render_notebook", fail_first)
    res = api.rehearse(plan, data, out=plan.parent / "r").results
    notes = [n["detail"] for n in res["notes"] if n["code"] == "rehearsal-step-failed"]
    assert notes == [("the report step failed on the dummy allocation: PrespecError: report "
                      "notebook failed in cell 5: KeyError")]
    assert all(h["executed"] for h in res["hypotheses"])


def test_follow_ups_are_listed_under_their_parent(tmp_path: Path,
                                                  renders: list[dict[str, Any]]) -> None:
    plan = tmp_path / "trial.yaml"
    plan.write_text(PLAN.replace("groups: [foam, film]", "groups: [foam, film, gel]")
                    .replace("planned_n: {foam: 30, film: 30}", "planned_n: {foam: 10, film: "
                             "10, gel: 10}")
                    + "  - id: H3\n    outcome: infection\n    compare: all\n"
                      "    test: pearson-chi-square\n"
                      "    then: {pairwise: reference, multiplicity: holm}\n")
    data = tmp_path / "data.csv"
    data.write_text(rows_text(trial_rows()))
    res = api.rehearse(plan, data, out=tmp_path / "r").results
    assert [(h["id"], h["parent"], h["executed"]) for h in res["hypotheses"]] == [
        ("H1", None, True), ("H2", None, True), ("H3", None, True),
        ("H3:film-vs-foam", "H3", True), ("H3:gel-vs-foam", "H3", True)]
    assert res["planned_total"] == 30
    assert "sample-size-shortfall" not in [d["code"] for d in res["deviations"]]


def test_no_analysed_outcome_is_not_computable_and_would_not_compute(
        tmp_path: Path, renders: list[dict[str, Any]],
        capsys: pytest.CaptureFixture[str]) -> None:
    plan = tmp_path / "trial.yaml"
    plan.write_text(PLAN)
    rows = trial_rows()[:4]
    rows[0]["consented"], rows[1]["consented"] = "no", "no"
    rows[2]["infected"], rows[3]["infected"] = "", " "
    data = tmp_path / "data.csv"
    data.write_text(rows_text(rows))
    # the rehearsal is written and logged, and exits 2: its confirmatory hypotheses would
    # have no result in the run
    assert cli.main(["rehearse", str(plan), str(data), "--out", str(tmp_path / "r")]) == 2
    res = json.loads((tmp_path / "r" / "results.json").read_text())
    assert res["pooled"]["infection"] == {"events": 0, "total": 0, "missing": 2, "rate": None,
                                          "ci": [None, None], "ci_method": "wilson",
                                          "level": 0.95}
    why = "would not compute: outcome 'infection': all 2 outcomes in the population are blank " \
        "(missing: exclude)"
    assert [(h["executed"], h["problem"]) for h in res["hypotheses"]] == [(False, why)] * 2
    done = capsys.readouterr()
    assert "0 events of 0 analysed, not computable, 2 missing" in done.out
    assert f"H1: pearson-chi-square, {why}" in done.out.splitlines()
    assert done.err == (f"prespec: {plan}: 2 confirmatory hypotheses would not compute in the "
                        "run: H1, H2 (outcome 'infection': all 2 outcomes in the population are "
                        "blank (missing: exclude))\n")
    assert [e["action"] for e in audit.read_log(audit.log_path(plan))] == ["rehearse"]


# --- bad input ---------------------------------------------------------------------------


def test_a_plan_that_reads_the_group_column_elsewhere_is_refused(
        tmp_path: Path, renders: list[dict[str, Any]]) -> None:
    plan = tmp_path / "trial.yaml"
    plan.write_text(PLAN.replace('{column: consented, in: ["yes"]}',
                                 '{column: arm, not_in: ["withdrawn"]}'))
    data = tmp_path / "data.csv"
    data.write_text(rows_text(trial_rows()))
    with pytest.raises(BadInput, match=r"data.include\[1\]: column 'arm' is the group column"):
        api.rehearse(plan, data, out=tmp_path / "r")
    assert not (tmp_path / "r").exists() and not audit.log_path(plan).exists()


def test_bad_data_stop_with_nothing_written(study: tuple[Path, Path],
                                            renders: list[dict[str, Any]]) -> None:
    plan, data = study
    rows = trial_rows()
    rows[7]["participant"] = rows[3]["participant"]
    data.write_text(rows_text(rows))
    with pytest.raises(DataError, match="duplicate ids"):
        api.rehearse(plan, data)
    data.write_text(rows_text([{k: v for k, v in r.items() if k != "infected"} for r in rows]))
    with pytest.raises(DataError, match=r"column 'infected' \(outcomes.infection.column\)"):
        api.rehearse(plan, data)
    with pytest.raises(BadInput, match="no such data file"):
        api.rehearse(plan, plan.parent / "nowhere.csv")
    assert not (plan.parent / "reports").exists() and not audit.log_path(plan).exists()
    assert renders == []


# --- lock, log, verify ---------------------------------------------------------------------


def test_rehearsal_entry_lock_untouched_and_verify_passes(
        study: tuple[Path, Path], renders: list[dict[str, Any]]) -> None:
    plan, data = study
    locked = api.lock(plan, actor="ana")
    lock_bytes = audit.lock_path(plan).read_bytes()
    out = api.rehearse(plan, data, actor="ben")
    assert out.folder.parent == plan.parent / "reports" / "trial"
    assert out.folder.name.endswith("-rehearsal")
    assert audit.lock_path(plan).read_bytes() == lock_bytes
    entry = log_of(plan)[-1]
    assert entry["action"] == "rehearse" and entry["actor"] == "ben"
    assert entry["plan"] == locked.fingerprint == out.results["plan"]
    assert entry["details"]["report"] == f"reports/trial/{out.folder.name}"
    assert entry["deviations"] == out.results["deviations"]
    assert out.results["plan_version"] == 1
    assert "rehearsal-without-lock" not in [n["code"] for n in out.results["notes"]]
    res = api.verify(plan, expect=locked.fingerprint)
    assert any("reports: 1 folder(s)" in line for line in res.passed)
    # a change after a rehearsal is not an amendment after unblinding
    plan.write_text(PLAN.replace("alpha: 0.05", "alpha: 0.025"))
    changed = api.rehearse(plan, data, out=plan.parent / "again")
    assert changed.results["plan_version"] is None
    assert "rehearsal-of-unlocked-change" in [n["code"] for n in changed.results["notes"]]
    api.amend(plan, reason="alpha split with a second trial")
    assert log_of(plan)[-1]["deviations"] == []
    api.verify(plan)


# --- the command ----------------------------------------------------------------------------


def test_the_command_prints_pooled_figures_and_the_folder_last(
        study: tuple[Path, Path], renders: list[dict[str, Any]],
        capsys: pytest.CaptureFixture[str]) -> None:
    plan, data = study
    assert cli.main(["rehearse", str(plan), str(data), "--out", str(plan.parent / "r"),
                     "--actor", "cy"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[-1] == str(plan.parent / "r")
    text = "\n".join(lines)
    assert "outcome infection: 12 events of 36 analysed, rate 0.3333" in text
    assert "4 missing" in text and "H2: binomial-exact, executes" in text
    assert "departure: sample-size-shortfall" in text
    assert log_of(plan)[-1]["actor"] == "cy"
