"""The Python interface in process: lock, amend, run and their departures, verify.

The notebook step is replaced by a no-op here to keep these tests fast (the e2e tests and
tests/test_report_render.py execute it for real); everything else runs as in use.
"""

from __future__ import annotations

import importlib.metadata
import json
from pathlib import Path

import pytest

import prespec.report
import prespec.workflow.rehearse
import prespec.workflow.run
from prespec import api, audit
from prespec.common import environment
from prespec.demo.wound import PLAN_TEXT, demo_data
from prespec.errors import BadInput, IntegrityStop, PrespecError


@pytest.fixture(autouse=True)
def quick_render(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)


@pytest.fixture
def study(tmp_path: Path) -> tuple[Path, Path]:
    plan = tmp_path / "trial.yaml"
    plan.write_text(PLAN_TEXT)
    data = tmp_path / "data.csv"
    data.write_text(demo_data())
    return plan, data


def log_of(plan: Path) -> list[dict]:
    return audit.read_log(audit.log_path(plan))


def test_lock_writes_the_resolved_plan_and_an_entry(study: tuple[Path, Path]) -> None:
    plan, _ = study
    res = api.lock(plan, actor="ana")
    doc = json.loads(audit.lock_path(plan).read_text())
    (version,) = doc["versions"]
    assert res.created and res.version == 1 and version["fingerprint"] == res.fingerprint
    assert set(version) == {"version", "fingerprint", "plan", "plan_file_sha256", "previous",
                            "reason", "at", "actor", "environment"}
    assert version["previous"] is None and version["actor"] == "ana"
    assert version["plan"]["hypotheses"][2]["alternative"] == "two-sided"  # default written
    assert version["plan"]["data"]["reference"] == "gauze"
    # Python, the operating system, the packages that compute and the engines' libraries
    assert set(version["environment"]) == {"python", "os", "numpy", "scipy", "statsmodels",
                                           "pandas", "prespec", "duckdb", "SQLAlchemy",
                                           "psycopg", "pyspark"}
    assert version["environment"]["os"] == environment.operating_system()
    assert version["environment"]["scipy"] == importlib.metadata.version("scipy")
    (entry,) = log_of(plan)
    assert entry["action"] == "lock" and entry["plan"] == res.fingerprint
    assert entry["data"] is None and entry["details"]["version"] == 1
    head = json.loads(audit.head_path(plan).read_text())
    assert head == {"seq": 1, "hash": entry["hash"]}


def test_relock_is_a_no_op_and_a_layout_change_is_a_note(study: tuple[Path, Path]) -> None:
    plan, _ = study
    api.lock(plan)
    plan.write_text(PLAN_TEXT.replace("alpha: 0.05", "alpha: 5.0e-2   # written differently"))
    again = api.lock(plan)
    assert not again.created and "layout or comments" in (again.note or "")
    assert len(log_of(plan)) == 1


def test_amend_chains_versions_and_flags_amendment_after_a_run(
        study: tuple[Path, Path]) -> None:
    plan, data = study
    first = api.lock(plan)
    api.run(plan, data, out=plan.parent / "r1")
    plan.write_text(PLAN_TEXT.replace("multiplicity: holm", "multiplicity: hochberg"))
    with pytest.raises(IntegrityStop, match="prespec amend"):
        api.lock(plan)
    with pytest.raises(BadInput, match="reason"):
        api.amend(plan, reason="  ")
    second = api.amend(plan, reason="the steering committee chose Hochberg", actor="ben")
    doc = json.loads(audit.lock_path(plan).read_text())
    assert [v["version"] for v in doc["versions"]] == [1, 2]
    assert doc["versions"][1]["previous"] == first.fingerprint
    assert doc["versions"][1]["reason"] == "the steering committee chose Hochberg"
    entry = log_of(plan)[-1]
    assert entry["action"] == "amend" and entry["plan"] == second.fingerprint
    assert [d["code"] for d in entry["deviations"]] == ["amended-after-unblinding"]
    later = api.run(plan, data, out=plan.parent / "r2")
    assert later.results["plan_version"] == 2 and later.results["multiplicity"] == "hochberg"
    assert "amended-after-unblinding" in [d["code"] for d in later.results["deviations"]]
    assert len(api.verify(plan).passed) == 4


def test_a_second_run_on_other_data_is_recorded(study: tuple[Path, Path]) -> None:
    plan, data = study
    api.lock(plan)
    first = api.run(plan, data, out=plan.parent / "r1")
    assert "data-changed-since-last-run" not in [d["code"] for d in first.results["deviations"]]
    same = api.run(plan, data, out=plan.parent / "r2")
    assert "data-changed-since-last-run" not in [d["code"] for d in same.results["deviations"]]
    data.write_text(data.read_text().replace(",Gauze,yes,0", ",Gauze,yes,1"))
    changed = api.run(plan, data, out=plan.parent / "r3")
    (dev,) = [d for d in changed.results["deviations"]
              if d["code"] == "data-changed-since-last-run"]
    assert dev["expected"] == first.results["data"] and dev["found"] == changed.results["data"]
    assert changed.entry["deviations"] == changed.results["deviations"]


def test_modified_plan_runs_the_locked_one_only_when_accepted(study: tuple[Path, Path]) -> None:
    plan, data = study
    locked = api.lock(plan)
    plan.write_text(PLAN_TEXT.replace("alpha: 0.05", "alpha: 0.10"))
    with pytest.raises(IntegrityStop, match="no longer matches its lock"):
        api.run(plan, data, out=plan.parent / "r")
    assert not (plan.parent / "r").exists() and len(log_of(plan)) == 1
    out = api.run(plan, data, out=plan.parent / "r", accept_deviation="typo fixed in a title")
    assert out.results["plan"] == locked.fingerprint and out.results["alpha"] == 0.05
    dev = out.results["deviations"][0]
    assert dev["code"] == "plan-modified-after-lock" and dev["accepted"] == "typo fixed in a title"
    assert dev["expected"] == locked.fingerprint
    # verify accepts the changed plan file because the log records it as an accepted departure
    assert any("accepted departure" in line for line in api.verify(plan).passed)


def test_environment_change_is_recorded(study: tuple[Path, Path],
                                        monkeypatch: pytest.MonkeyPatch) -> None:
    plan, data = study
    api.lock(plan)
    real = prespec.workflow.run.environment()
    monkeypatch.setattr(prespec.workflow.run, "environment", lambda: {**real, "scipy": "0.0-other"})
    out = api.run(plan, data, out=plan.parent / "r")
    (dev,) = [d for d in out.results["deviations"] if d["code"] == "environment-differs-from-lock"]
    assert dev["expected"] == f"scipy {real['scipy']}" and dev["found"] == "scipy 0.0-other"


def test_edited_lock_metadata_fails_verify(study: tuple[Path, Path]) -> None:
    plan, _ = study
    api.lock(plan)
    path = audit.lock_path(plan)
    doc = json.loads(path.read_text())
    doc["versions"][0]["environment"]["scipy"] = "9.9"  # not part of the fingerprint
    path.write_text(json.dumps(doc))
    with pytest.raises(IntegrityStop, match="the lock was edited"):
        api.verify(plan)


def test_default_report_folders_do_not_clash(study: tuple[Path, Path]) -> None:
    plan, data = study
    api.lock(plan)
    a = api.run(plan, data).folder
    b = api.run(plan, data).folder
    assert a.parent == b.parent == plan.parent / "reports" / "trial"
    assert a != b and (b.name.endswith("-run-2") or a.name[:16] != b.name[:16])
    assert log_of(plan)[-1]["details"]["report"] == b.relative_to(plan.parent).as_posix()


def test_out_folder_must_be_new_or_empty(study: tuple[Path, Path]) -> None:
    plan, data = study
    api.lock(plan)
    full = plan.parent / "full"
    full.mkdir()
    (full / "x").write_text("keep me")
    with pytest.raises(BadInput, match="must not exist yet or be empty"):
        api.run(plan, data, out=full)
    assert (full / "x").read_text() == "keep me"
    empty = plan.parent / "nested" / "empty"
    empty.mkdir(parents=True)
    assert (api.run(plan, data, out=empty).folder / "results.json").is_file()


def test_a_failing_step_leaves_nothing_behind(study: tuple[Path, Path],
                                              monkeypatch: pytest.MonkeyPatch) -> None:
    plan, data = study
    api.lock(plan)
    before = audit.log_path(plan).read_bytes()

    def broken(folder: Path) -> None:
        raise PrespecError("report notebook failed in cell 3")

    monkeypatch.setattr(prespec.report, "render_notebook", broken)
    with pytest.raises(PrespecError, match="cell 3"):
        api.run(plan, data, out=plan.parent / "r")
    assert not (plan.parent / "r").exists()
    assert not [p for p in plan.parent.iterdir() if p.name.startswith(".")]
    assert audit.log_path(plan).read_bytes() == before


def test_check_writes_nothing(study: tuple[Path, Path]) -> None:
    plan, _ = study
    res = api.check(plan)
    assert res.lock_status == "not locked" and res.loaded.fingerprint.startswith("sha256:")
    assert sorted(p.name for p in plan.parent.iterdir()) == ["data.csv", "trial.yaml"]


def test_actor_resolution(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("PRESPEC_ACTOR", "from-env")
    assert api.resolve_actor("given") == "given"
    assert api.resolve_actor(None) == "from-env"
    monkeypatch.delenv("PRESPEC_ACTOR")
    assert api.resolve_actor(None)  # the login name


def test_runs_in_the_same_second_get_numbered_folders(study: tuple[Path, Path],
                                                      monkeypatch: pytest.MonkeyPatch) -> None:
    plan, data = study
    api.lock(plan)
    fixed = plan.parent / "reports" / "trial" / "20270101T000000Z-run"
    for step in (prespec.workflow.run, prespec.workflow.rehearse):  # each names its folder
        monkeypatch.setattr(step, "default_folder", lambda p, kind: fixed)
    names = [api.run(plan, data).folder.name for _ in range(3)]
    assert names == ["20270101T000000Z-run", "20270101T000000Z-run-2", "20270101T000000Z-run-3"]
    assert len(api.verify(plan).passed) == 4


# --- overrides: command-line changes to the locked analysis ---

def test_an_override_stops_without_a_reason_and_writes_nothing(
        study: tuple[Path, Path]) -> None:
    plan, data = study
    api.lock(plan)
    before = audit.log_path(plan).read_bytes()
    with pytest.raises(IntegrityStop, match=r"alpha 0.05 → 0.025.*--accept-deviation"):
        api.run(plan, data, out=plan.parent / "r", overrides={"alpha": 0.025})
    assert not (plan.parent / "r").exists() and audit.log_path(plan).read_bytes() == before


def test_an_accepted_override_is_recorded_and_marked_not_pre_specified(
        study: tuple[Path, Path]) -> None:
    plan, data = study
    locked = api.lock(plan)
    out = api.run(plan, data, out=plan.parent / "r", accept_deviation="monitor's request",
                  overrides={"alpha": 0.05, "hypotheses.H2.test": "two-proportion-z"})
    res = out.results
    assert res["plan"] == locked.fingerprint  # the fingerprint stays the locked one
    assert res["overrides"] == [{"key": "hypotheses.H2.test", "locked": "pearson-chi-square",
                                 "used": "two-proportion-z"}]  # alpha unchanged: no override
    assert [(h["id"], h["pre_specified"], h["test"]) for h in res["hypotheses"]] == [
        ("H1", True, "pearson-chi-square"), ("H2", False, "two-proportion-z"),
        ("H3", True, "pearson-chi-square")]
    (dev,) = [d for d in res["deviations"] if d["code"] == "override"]
    assert dev == {"code": "override", "detail": "hypotheses.H2.test: pearson-chi-square as "
                   "locked, two-proportion-z used (set on the command line; not pre-specified)",
                   "expected": "pearson-chi-square", "found": "two-proportion-z",
                   "accepted": "monitor's request"}
    assert out.entry["deviations"] == res["deviations"] and out.entry["plan"] == locked.fingerprint
    api.verify(plan)


def test_alpha_and_multiplicity_overrides_reach_the_results(study: tuple[Path, Path]) -> None:
    plan, data = study
    api.lock(plan)
    res = api.run(plan, data, out=plan.parent / "r", accept_deviation="sensitivity",
                  overrides={"alpha": 0.01, "multiplicity": "bonferroni"}).results
    assert res["alpha"] == 0.01 and res["multiplicity"] == "bonferroni"
    assert [c["key"] for c in res["overrides"]] == ["alpha", "multiplicity"]
    assert all(h["pre_specified"] is False for h in res["hypotheses"])
    h1 = res["hypotheses"][0]
    # Bonferroni over the two non-exploratory hypotheses (common practice: min(1, 2p))
    assert h1["p_adjusted"] == pytest.approx(min(1.0, 2 * h1["p_value"]), rel=1e-12)
    assert h1["estimate"]["level"] == pytest.approx(0.99)


def test_an_override_of_the_test_drops_a_switch_to_that_test(study: tuple[Path, Path]) -> None:
    plan, data = study
    api.lock(plan)
    res = api.run(plan, data, out=plan.parent / "r", accept_deviation="exact test",
                  overrides={"hypotheses.H1.test": "fisher-exact"}).results
    assert [c["key"] for c in res["overrides"]] == ["hypotheses.H1.test", "hypotheses.H1.sparse"]
    assert res["overrides"][1]["used"] is None and res["hypotheses"][0]["test"] == "fisher-exact"


def test_bad_overrides_are_bad_input(study: tuple[Path, Path]) -> None:
    plan, data = study
    api.lock(plan)
    with pytest.raises(BadInput, match="the plan has no hypothesis 'H9'"):
        api.run(plan, data, accept_deviation="x", overrides={"hypotheses.H9.test": "fisher-exact"})
    with pytest.raises(BadInput, match=r"^command line: hypotheses.H2.test: 'chi' is not a known"):
        api.run(plan, data, accept_deviation="x", overrides={"hypotheses.H2.test": "chi"})
    with pytest.raises(BadInput, match="not a key that can be overridden"):
        api.run(plan, data, accept_deviation="x", overrides={"title": "other"})
    assert len(log_of(plan)) == 1 and not (plan.parent / "reports").exists()


def test_out_outside_the_plan_folder_must_be_a_plain_writable_folder(
        study: tuple[Path, Path], tmp_path: Path) -> None:
    plan, data = study
    api.lock(plan)
    outside = tmp_path.parent / f"{tmp_path.name}-elsewhere"
    with pytest.raises(BadInput, match="must go into an existing plain folder"):
        api.run(plan, data, out=outside / "deep" / "report")
    assert not outside.exists()
    outside.mkdir()
    link = plan.parent / "link"
    link.symlink_to(outside, target_is_directory=True)
    with pytest.raises(BadInput, match="is a symbolic link"):
        api.run(plan, data, out=link)
    done = api.run(plan, data, out=outside / "report")
    assert done.entry["details"]["report"] == f"../{outside.name}/report"
    api.verify(plan)


def _amend_in_child(plan: str, n: int) -> None:
    Path(plan).write_text(PLAN_TEXT.replace("alpha: 0.05", f"alpha: 0.0{n + 1}"))
    try:
        api.amend(plan, reason=f"child {n}")
    except IntegrityStop:
        pass


def test_amends_at_the_same_moment_get_distinct_versions(study: tuple[Path, Path]) -> None:
    import multiprocessing

    plan, _ = study
    api.lock(plan)
    ctx = multiprocessing.get_context("fork")
    procs = [ctx.Process(target=_amend_in_child, args=(str(plan), n)) for n in range(1, 5)]
    for p in procs:
        p.start()
    for p in procs:
        p.join(60)
    doc = json.loads(audit.lock_path(plan).read_text())
    numbers = [v["version"] for v in doc["versions"]]
    assert numbers == list(range(1, len(numbers) + 1)) and len(numbers) >= 2
    last_alpha = doc["versions"][-1]["plan"]["alpha"]
    plan.write_text(PLAN_TEXT.replace("alpha: 0.05", f"alpha: {last_alpha}"))
    api.verify(plan)


def test_the_example_plan_is_the_demo_plan() -> None:
    # plans/wound-dressing.yaml is the plan `prespec demo` writes; they must not drift apart
    example = Path(__file__).parent.parent / "plans" / "wound-dressing.yaml"
    assert example.read_text(encoding="utf-8") == PLAN_TEXT
