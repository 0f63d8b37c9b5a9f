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
from prespec.demo.wound import PLAN_TEXT, demo_data
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
        "H%2B1.csv", "H%2F1.csv", "H_1.csv", "flow.csv", "groups-inf%20ection.csv",
        "groups-inf_ection.csv", "results.csv", "statistics.csv"]
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
    from prespec.workflow import publish

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


# --- item 6: a plan's data.source must be inside the plan's folder ---

SECRET = "hunter2-5f0c"  # in every cell of the secret file's password column


def _secret_file(path: Path) -> None:
    """The demo data with a password column: read as data.group it would fill the report."""
    lines = demo_data().splitlines()
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text("\n".join([lines[0] + ",password",
                               *(f"{row},{SECRET}-{i}" for i, row in enumerate(lines[1:]))])
                    + "\n")


def _sourced(source: str, group: str = "arm") -> str:
    return PLAN_TEXT.replace("  group: arm\n", f"  group: {group}\n  source: {source}\n")


def _everything_under(folder: Path) -> str:
    return "".join(p.read_text(errors="replace") for p in folder.rglob("*") if p.is_file()
                   and not p.is_symlink() and "secret" not in p.parts)


@pytest.mark.parametrize("source", ["../../secret/creds.csv", "ABSOLUTE", "../../secret/*.csv"])
def test_a_plan_cannot_read_data_outside_its_folder(tmp_path: Path, source: str,
                                                    capsys: pytest.CaptureFixture[str]) -> None:
    from prespec import cli

    _secret_file(tmp_path / "secret" / "creds.csv")
    source = str(tmp_path / "secret" / "creds.csv") if source == "ABSOLUTE" else source
    plan, _ = _study(tmp_path / "a" / "b", _sourced(source, "password"))
    for command in (["check"], ["lock"], ["run", "--accept-deviation", "unlocked"],
                    ["rehearse"]):
        assert cli.main([command[0], str(plan), *command[1:]]) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1
        assert err.startswith(f"prespec: {plan}:8: data.source: {source!r} ")
        assert "outside the plan's folder" in err or "an absolute path" in err
    assert not audit.log_path(plan).exists() and not (plan.parent / "reports").exists()
    assert SECRET not in _everything_under(tmp_path)


def test_a_link_inside_the_folder_to_data_outside_is_refused(tmp_path: Path) -> None:
    _secret_file(tmp_path / "secret" / "creds.csv")
    plan, _ = _study(tmp_path / "study", _sourced("inside.csv", "password"))
    (plan.parent / "inside.csv").symlink_to(tmp_path / "secret" / "creds.csv")
    with pytest.raises(BadInput, match=r"trial.yaml:8: data.source: 'inside.csv' resolves "
                                       "outside the plan's folder"):
        api.lock(plan)
    # a glob whose pattern is inside but one match links outside: refused when read
    glob_plan, _ = _study(tmp_path / "g", _sourced("parts/*.csv", "password"))
    (glob_plan.parent / "parts").mkdir()
    (glob_plan.parent / "parts" / "a.csv").write_text(demo_data())
    (glob_plan.parent / "parts" / "z.csv").symlink_to(tmp_path / "secret" / "creds.csv")
    api.lock(glob_plan)
    with pytest.raises(BadInput, match=r"trial.yaml:8: data.source: 'parts/\*.csv' matches "
                                       r"parts/z.csv, which resolves outside"):
        api.run(glob_plan)
    assert [e["action"] for e in audit.read_log(audit.log_path(glob_plan))] == ["lock"]
    assert SECRET not in _everything_under(tmp_path)


def test_data_given_on_the_command_line_may_be_anywhere(tmp_path: Path) -> None:
    plan, _ = _study(tmp_path / "study", _sourced("../elsewhere.csv"))
    (tmp_path / "elsewhere.csv").write_text(demo_data())
    with pytest.raises(BadInput, match="data.source"):
        api.lock(plan)
    plain, _ = _study(tmp_path / "plain")
    api.lock(plain)
    out = api.run(plain, tmp_path / "elsewhere.csv")
    assert out.results["data_file"] == "../elsewhere.csv"


def test_check_shows_the_source_it_will_read(tmp_path: Path,
                                             capsys: pytest.CaptureFixture[str]) -> None:
    from prespec import cli

    plan, _ = _study(tmp_path, _sourced("data.csv"))
    assert cli.main(["check", str(plan)]) == 0
    assert f"\ndata: {tmp_path / 'data.csv'} (a file; found)\n" in capsys.readouterr().out
    globbed, _ = _study(tmp_path, _sourced("parts/*.csv"), name="g.yaml")
    (tmp_path / "parts").mkdir()
    for name in ("a.csv", "b.csv", ".hidden.csv"):
        (tmp_path / "parts" / name).write_text(demo_data())
    assert cli.main(["check", str(globbed)]) == 0
    assert f"\ndata: {tmp_path / 'parts/*.csv'} (a glob; 2 files match now)\n" in \
        capsys.readouterr().out
    assert api.check(_study(tmp_path, name="n.yaml")[0]).source == (
        "none named in the plan (give it to run: prespec run PLAN DATA)")


# --- item 9: a glob reads what Python's glob matches, and every file read is recorded ---

def _parts(folder: Path) -> list[Path]:
    """The demo data split in two files under folder/parts, and a hidden third (10 rows)."""
    lines = demo_data().splitlines()
    header, rows = lines[0], lines[1:]
    parts = folder / "parts"
    parts.mkdir(parents=True)
    written = []
    for name, chunk in (("a.csv", rows[:300]), ("b.csv", rows[300:]),
                        (".b.csv", [r.replace("WD-", "HIDDEN-") for r in rows[:10]])):
        (parts / name).write_text("\n".join([header, *chunk]) + "\n")
        written.append(parts / name)
    return written


def test_expand_glob_follows_pythons_rules(tmp_path: Path) -> None:
    import glob

    from prespec.data.engines.base import expand_glob

    _parts(tmp_path)
    (tmp_path / "parts" / "sub").mkdir()
    (tmp_path / "parts" / "sub" / "c.csv").write_text("x\n")
    (tmp_path / "parts" / "folder.csv").mkdir()
    (tmp_path / "parts" / ".hid").mkdir()
    (tmp_path / "parts" / ".hid" / "d.csv").write_text("x\n")
    p = str(tmp_path / "parts")
    assert expand_glob(f"{p}/*.csv") == [f"{p}/a.csv", f"{p}/b.csv"]
    assert expand_glob(f"{p}/*.csv") == sorted(
        f for f in glob.glob(f"{p}/*.csv") if Path(f).is_file())  # glob.glob
    assert expand_glob(f"{p}/.*.csv") == [f"{p}/.b.csv"]
    assert expand_glob(f"{p}/**/*.csv") == [f"{p}/a.csv", f"{p}/b.csv", f"{p}/sub/c.csv"]


@pytest.mark.parametrize("engine", ["duckdb", "auto"])
def test_a_glob_skips_hidden_files_and_records_every_file_read(tmp_path: Path,
                                                               engine: str) -> None:
    import hashlib

    plan, _ = _study(tmp_path, _sourced("parts/*.csv"))
    a, b, _ = _parts(tmp_path)
    api.lock(plan)
    out = api.run(plan, engine=engine)
    results = out.results
    assert results["engine"] == "duckdb"
    assert results["population"]["rows_read"] == 601  # the demo's rows; not the hidden 10
    expected = [{"path": f"parts/{f.name}",
                 "sha256": "sha256:" + hashlib.sha256(f.read_bytes()).hexdigest()}
                for f in (a, b)]
    assert results["data_files"] == expected
    assert results["data_file"] == "parts/*.csv"
    assert list(results).index("data_files") == list(results).index("data_file") + 1
    (entry,) = [e for e in audit.read_log(audit.log_path(plan)) if e["action"] == "run"]
    assert entry["details"]["data_files"] == expected
    stored = json.loads((out.folder / "results.json").read_text())
    assert stored["data_files"] == expected
    assert api.verify(plan).passed
    # a rehearsal reads and records the same files
    rehearsed = api.rehearse(plan, engine="duckdb").results
    assert rehearsed["population"]["rows_read"] == 601
    assert rehearsed["data_files"] == expected


def test_the_report_header_lists_the_files_read() -> None:
    from prespec.report.summary import summary as header  # the report's first screen

    files = [{"path": "parts/a.csv", "sha256": "sha256:" + "a" * 64},
             {"path": "parts/<b>.csv", "sha256": "sha256:" + "b" * 64}]
    shown = header({"kind": "run", "data_file": "parts/*.csv", "data_files": files})
    assert "Files read" in shown
    assert (f"parts/a.csv (sha256:{'a' * 64}); parts/&lt;b&gt;.csv (sha256:{'b' * 64})"
            in shown)
    assert "Files read" not in header({"kind": "run", "data_file": "one.csv"})


def test_a_file_changed_while_a_glob_is_read_stops_the_run(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from prespec.data.engines import pipeline

    plan, _ = _study(tmp_path, _sourced("parts/*.csv"))
    a, _, _ = _parts(tmp_path)
    api.lock(plan)
    real = pipeline.count_source

    def count_then_touch(*args: object, **kwargs: object) -> object:
        counted = real(*args, **kwargs)
        a.write_text(a.read_text() + "\n")
        return counted

    monkeypatch.setattr(pipeline, "count_source", count_then_touch)
    with pytest.raises(BadInput, match=r"parts/\*.csv: a data file changed, appeared or went "
                                       "while it was read"):
        api.run(plan)
    assert [e["action"] for e in audit.read_log(audit.log_path(plan))] == ["lock"]


def test_duckdb_reads_a_file_whose_name_looks_like_a_glob(tmp_path: Path) -> None:
    plan, _ = _study(tmp_path)
    api.lock(plan)
    odd = tmp_path / "wave[1].csv"
    odd.write_text(demo_data())
    (tmp_path / "wave1.csv").write_text("participant,arm\n")  # what DuckDB's glob would read
    out = api.run(plan, odd, engine="duckdb")
    assert out.results["population"]["rows_read"] == 601
    assert out.results["data_file"] == "wave[1].csv" and "data_files" not in out.results


# --- item 10: verify names what no recorded run wrote; --strict fails on it ---

@pytest.fixture
def verified_study(tmp_path: Path) -> tuple[Path, Path]:
    """A locked study with one run; (the plan, the run's report folder)."""
    plan, data = _study(tmp_path / "study")
    api.lock(plan)
    out = api.run(plan, data)
    assert not api.verify(plan).warnings and not api.verify(plan).notes
    return plan, out.folder


def test_a_planted_complete_report_dressed_as_a_temporary_folder_is_named(
        verified_study: tuple[Path, Path], capsys: pytest.CaptureFixture[str],
        monkeypatch: pytest.MonkeyPatch) -> None:
    import shutil

    from prespec import cli
    from prespec.errors import IntegrityStop

    plan, folder = verified_study
    planted = folder.parent / ".x.partial-evil"
    shutil.copytree(folder, planted)  # complete: results, tables, manifest
    res = api.verify(plan)
    assert res.warnings == [
        ("reports/trial/.x.partial-evil: named like a temporary report folder, but no stopped "
        "run left it (no empty reserved folder x beside it, or the log names that report); "
        "not produced by a recorded run")]
    assert not any("safe to delete" in n for n in res.notes)
    with pytest.raises(IntegrityStop, match=r"^--strict: 1 thing in the report folders no "
                                            r"recorded run wrote \(first: reports/trial/"
                                            r"\.x\.partial-evil: named like"):
        api.verify(plan, strict=True)
    # the same folder beside the run's own name, with that report logged: also planted
    shutil.move(planted, folder.parent / f".{folder.name}.partial-evil")
    assert len(api.verify(plan).warnings) == 1
    capsys.readouterr()
    monkeypatch.chdir(plan.parent)  # the plan named as a user in its folder names it
    assert cli.main(["verify", plan.name]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[-2].startswith(f"warn  reports/trial/.{folder.name}.partial-evil: named like")
    assert out[-1] == ("verified: files intact; the run was the locked analysis; 1 warning: "
                       "the report folders hold things no recorded run wrote (listed above; "
                       "--strict fails on them)")
    assert cli.main(["verify", plan.name, "--strict"]) == 3
    captured = capsys.readouterr()
    assert "warn  reports/trial/." in captured.out and "FAIL  --strict: 1 thing" in captured.out
    assert captured.err.count("\n") == 1


def test_loose_files_pipes_and_empty_folders_are_each_named(
        verified_study: tuple[Path, Path]) -> None:
    import os
    import socket

    from prespec.errors import IntegrityStop

    plan, folder = verified_study
    place = folder.parent
    (place / "notes.txt").write_text("looks harmless\n")
    os.mkfifo(place / "pipe")
    (place / "empty").mkdir()
    os.mkfifo(folder / "figures" / "inner-pipe")
    (folder / "tables" / "nothing").mkdir()
    sock = socket.socket(socket.AF_UNIX)
    cwd = os.getcwd()
    try:
        os.chdir(place)  # a short path for the socket's address
        sock.bind("sock")
    finally:
        os.chdir(cwd)
    try:
        res = api.verify(plan)
        with pytest.raises(IntegrityStop, match="--strict: 6 things"):
            api.verify(plan, strict=True)
    finally:
        sock.close()
    rel = f"reports/trial/{folder.name}"
    assert res.warnings == [
        ("reports/trial/empty: an empty folder among the report folders; no recorded run "
        "reserved it"),
        "reports/trial/notes.txt: a loose file among the report folders; no recorded run wrote it",
        ("reports/trial/pipe: a named pipe (FIFO) among the report folders; no recorded run "
        "wrote it"),
        "reports/trial/sock: a socket among the report folders; no recorded run wrote it",
        (f"report {rel}: figures/inner-pipe: a named pipe (FIFO) inside the report (not in its "
        "manifest)"),
        f"report {rel}: tables/nothing: an empty folder inside the report (not in its manifest)",
    ]
    assert res.passed and not res.notes


def test_an_unlogged_dot_named_report_folder_fails_and_a_linked_place_is_named(
        verified_study: tuple[Path, Path], tmp_path: Path) -> None:
    import shutil

    from prespec.errors import IntegrityStop

    plan, folder = verified_study
    hidden = folder.parent / ".quiet"
    shutil.copytree(folder, hidden)
    with pytest.raises(IntegrityStop, match=r"reports/trial/\.quiet: a report folder that the "
                                            "log does not name"):
        api.verify(plan)
    shutil.rmtree(hidden)
    moved = tmp_path / "elsewhere"
    shutil.move(folder.parent, moved)
    (plan.parent / "reports" / "trial").symlink_to(moved, target_is_directory=True)
    assert api.verify(plan).warnings == [
        ("reports/trial: a symbolic link; report folders are real folders inside the study "
        "(not written by prespec)")]


def test_verify_of_a_plan_whose_stem_names_no_report_folder(tmp_path: Path) -> None:
    """A plan named ``...yaml`` (run with --out): verify does not take the plan's own folder
    for its report folder, so the data and the plan beside it are no warnings."""
    plan, data = _study(tmp_path / "study", name="...yaml")
    api.lock(plan)
    api.run(plan, data, out=plan.parent / "chosen")
    (plan.parent / "notes").mkdir()
    (plan.parent / "notes" / "minutes.txt").write_text("kept beside the plan\n")
    res = api.verify(plan, strict=True)
    assert not res.warnings and not res.notes
    assert res.passed[-1] == "reports: 1 folder(s) match their manifests and log entries"
