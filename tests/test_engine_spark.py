"""The ``spark`` engine (PySpark, local mode): CSV, Parquet and globs count as pandas counts.

One Spark session serves the whole test session (``tests/services.py``). The reference is
``prepare`` on the frame pandas reads (``read_data``): the counts before engines existed.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path
from typing import Any

import pandas as pd
import pytest
from services import spark_fixture  # noqa: F401 - the fixture spark

from prespec.common.canonical import file_sha256
from prespec.data import prepare, read_data
from prespec.data.engines.base import DataSource
from prespec.data.engines.fingerprint import frame_row_hash
from prespec.data.engines.pipeline import count_source
from prespec.data.engines.request import count_request
from prespec.data.engines.spark import spark_message
from prespec.demo.wound import PLAN_TEXT, demo_data
from prespec.errors import DataError
from prespec.plan import load_plan


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    folder = tmp_path_factory.mktemp("sparkdemo")
    plan_path = folder / "plan.yaml"
    plan_path.write_text(PLAN_TEXT, encoding="utf-8")
    csv = folder / "demo.csv"
    csv.write_text(demo_data(), encoding="utf-8")
    return {"folder": folder, "plan": load_plan(plan_path).model, "plan_path": plan_path,
            "csv": csv, "frame": read_data(csv)}


def counts(plan: Any, kind: str, location: Path | str) -> Any:
    return count_source(plan, DataSource(kind, str(location), str(location)), engine="spark")


def test_csv_equals_pandas_and_keeps_the_file_hash(spark: Any, demo: dict[str, Any]) -> None:
    counted = counts(demo["plan"], "file", demo["csv"])
    assert counted.engine == "spark"
    assert counted.prepared == prepare(demo["frame"], demo["plan"], demo["csv"])
    assert counted.data_hash == file_sha256(demo["csv"])  # one file: the file's hash
    assert "GROUP BY" in (counted.query or "") and "'yes'" not in (counted.query or "")


def test_parquet_with_types_equals_pandas(spark: Any, demo: dict[str, Any]) -> None:
    """Parquet keeps its types: an integer outcome with nulls, a boolean and a double."""
    frame = demo["frame"].copy()
    frame["infected_30d"] = pd.array([None if v == "" else int(v)
                                      for v in frame["infected_30d"]], dtype="Int64")
    frame["consented"] = frame["consented"] == "yes"
    frame["weight"] = [60.0 + (i % 40) + 0.25 for i in range(len(frame.index))]
    path = demo["folder"] / "typed.parquet"
    frame.to_parquet(path, index=False)
    text = PLAN_TEXT.replace('{column: consented, in: ["yes"]}',
                             '{column: consented, in: ["True"]}\n'
                             '    - {column: weight, between: [62, 90.25]}')
    plan_path = demo["folder"] / "typed.yaml"
    plan_path.write_text(text, encoding="utf-8")
    plan = load_plan(plan_path).model
    counted = counts(plan, "file", path)
    reference = prepare(read_data(path), plan, path)
    assert counted.prepared == reference
    assert 300 < reference.analysed < 581  # the weight filter selected


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_a_glob_equals_pandas_on_the_rows_together(spark: Any, demo: dict[str, Any],
                                                   fmt: str) -> None:
    """Three files, their columns in different orders (matched by name); the fingerprint is
    over the rows, as the engines developer's definition computes it on the frame."""
    frame = demo["frame"]
    folder = demo["folder"] / f"parts-{fmt}"
    folder.mkdir()
    parts = [frame.iloc[:200], frame.iloc[200:450][list(reversed(frame.columns))],
             frame.iloc[450:]]
    for i, part in enumerate(parts, start=1):
        if fmt == "csv":
            part.to_csv(folder / f"part-{i}.csv", index=False)
        else:
            part.to_parquet(folder / f"part-{i}.parquet", index=False)
    counted = counts(demo["plan"], "glob", folder / f"part-*.{fmt}")
    assert counted.prepared == prepare(frame, demo["plan"], "rows")
    request = count_request(demo["plan"], "rows")
    assert counted.data_hash == frame_row_hash(frame, request)


def test_a_glob_reads_pythons_matches_and_names_that_look_like_globs(
        spark: Any, demo: dict[str, Any]) -> None:
    """``wave[[2]*.csv`` matches ``wave[1].csv`` and ``wave2.csv`` by Python's rules (not the
    hidden ``.wave3.csv``, not ``wave1.csv``); ``wave[1].csv`` is read as itself, not as the
    Hadoop pattern that would read ``wave1.csv``."""
    frame = demo["frame"]
    folder = demo["folder"] / "waves"
    folder.mkdir()
    frame.iloc[:300].to_csv(folder / "wave[1].csv", index=False)
    frame.iloc[300:].to_csv(folder / "wave2.csv", index=False)
    frame.iloc[:5].to_csv(folder / "wave1.csv", index=False)  # what Hadoop's glob would read
    frame.iloc[:10].to_csv(folder / ".wave3.csv", index=False)  # hidden: not matched by *
    counted = counts(demo["plan"], "glob", folder / "wave[[2]*.csv")
    assert counted.prepared == prepare(frame, demo["plan"], "rows")


def test_csv_quoting_and_whitespace_as_pandas_reads_them(spark: Any, tmp_path: Path) -> None:
    """Quoted commas and doubled quotes, a field across lines, blank and spaced cells."""
    plan_path = tmp_path / "plan.yaml"
    plan_path.write_text(PLAN_TEXT.replace('in: ["yes"]', 'in: ["yes", "yes, \\"written\\""]'),
                         encoding="utf-8")
    plan = load_plan(plan_path).model
    csv = tmp_path / "quoted.csv"
    csv.write_text(
        "participant,site,arm,consented,infected_30d\n"
        'A1,north,gauze,"yes, ""written""",1\n'
        'A2,"south\nannex",gauze,yes, 0 \n'
        "A3,north, alginate ,yes,1.0\n"
        'A4,north,alginate,"",\n'
        "A5,north,negative-pressure,yes,   \n"
        "A6,north,negative-pressure,yes,+0\n"
        "A7,north,Gauze,yes,0\n", encoding="utf-8")
    counted = counts(plan, "file", csv)
    reference = prepare(read_data(csv), plan, csv)
    assert counted.prepared == reference
    assert reference.outcomes["infection"].of("gauze").events == 1  # A1 kept by its quotes
    assert reference.excluded_by_filter == 1 and reference.excluded_group == 1


def test_a_missing_column_and_duplicate_ids_are_one_line_errors(spark: Any,
                                                                demo: dict[str, Any],
                                                                tmp_path: Path) -> None:
    frame = demo["frame"]
    path = tmp_path / "no-outcome.csv"
    frame.drop(columns=["infected_30d"]).to_csv(path, index=False)
    with pytest.raises(DataError) as err:
        counts(demo["plan"], "file", path)
    assert ("column 'infected_30d' (outcomes.infection.column) is not in the data "
            "(columns: participant, site, arm, consented)") in str(err.value)
    dup = frame.copy()
    dup.loc[9, "participant"] = "WD-0003"
    path = tmp_path / "dup.csv"
    dup.to_csv(path, index=False)
    with pytest.raises(DataError) as err:
        counts(demo["plan"], "file", path)
    assert "duplicate ids in column 'participant': 'WD-0003' (2 rows)" in str(err.value)
    assert "\n" not in str(err.value)


def test_unreadable_data_is_a_one_line_error(spark: Any, demo: dict[str, Any],
                                             tmp_path: Path) -> None:
    path = tmp_path / "broken.parquet"
    path.write_bytes(b"not a parquet file at all")
    with pytest.raises(DataError) as err:
        counts(demo["plan"], "file", path)
    assert str(err.value).startswith(f"{path}: cannot read the data (") and "\n" not in str(
        err.value)
    with pytest.raises(DataError) as err:
        counts(demo["plan"], "glob", tmp_path / "none-*.csv")
    assert "no data file matches" in str(err.value)


def test_spark_message_keeps_the_cause_not_the_stack() -> None:
    error = RuntimeError("An error occurred while calling o81.collect.\n"
                         ": org.apache.spark.SparkException: Malformed records are detected.\n"
                         "\tat org.apache.spark.sql.Foo.bar(Foo.scala:1)")
    assert spark_message(error) == "Malformed records are detected."


def test_without_java_the_command_says_so(demo: dict[str, Any], tmp_path: Path) -> None:
    """A fresh process with no java on PATH and no JAVA_HOME: one line, exit status 2."""
    pytest.importorskip("pyspark")
    env = {k: v for k, v in os.environ.items() if k != "JAVA_HOME"}
    env["PATH"] = str(tmp_path)  # nothing there
    done = subprocess.run([sys.executable, "-m", "prespec", "rehearse", str(demo["plan_path"]),
                           str(demo["csv"]), "--engine", "spark", "--out",
                           str(tmp_path / "dry")], check=False, env=env, capture_output=True,
                          text=True, timeout=120)
    assert done.returncode == 2, done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and "needs Java" in lines[0]
    assert not (tmp_path / "dry").exists()


def test_a_rehearsal_through_spark_never_names_the_group(spark: Any, demo: dict[str, Any],
                                                         tmp_path: Path) -> None:
    """The blinded rehearsal's one query reads the id and the columns the plan reads, not
    the group column; the recorded query names the same view on every run."""
    from prespec import api
    from prespec.audit import log_path, read_log

    plan = tmp_path / "plan.yaml"
    plan.write_text(PLAN_TEXT, encoding="utf-8")
    api.rehearse(plan, demo["csv"], engine="spark", out=tmp_path / "dry", actor="tester")
    entry = read_log(log_path(plan))[-1]
    assert entry["details"]["engine"] == "spark"
    assert entry["details"]["query"] == (
        "SELECT `participant`, `consented`, `infected_30d` FROM `prespec_source`")


def test_a_malformed_csv_through_the_command_is_one_quiet_line(demo: dict[str, Any],
                                                               tmp_path: Path) -> None:
    """A row with a field too many: exit status 2 and one line on stderr; Spark's own log
    (a failed task's Java stack) stays quiet."""
    csv = tmp_path / "extra.csv"
    csv.write_text(demo_data() + "WD-9999,north,gauze,yes,0,surplus\n", encoding="utf-8")
    done = subprocess.run([sys.executable, "-m", "prespec", "rehearse", str(demo["plan_path"]),
                           str(csv), "--engine", "spark", "--out", str(tmp_path / "dry")],
                          check=False, capture_output=True, text=True, timeout=300)
    assert done.returncode == 2, done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1, done.stderr
    assert "cannot read the data" in lines[0] and "Malformed records" in lines[0]
    assert not (tmp_path / "dry").exists()


def test_a_table_of_the_session_named_by_the_plan(spark: Any, demo: dict[str, Any],
                                                  tmp_path: Path) -> None:
    """data.source "spark://" with data.table: a table (here a view) of the Spark session."""
    from services import spark_view

    from prespec.data.engines.sources import resolve_source
    from prespec.errors import BadInput

    spark_view(spark, "wound_view", demo["frame"])
    plan_path = tmp_path / "plan.yaml"
    plan_path.write_text(PLAN_TEXT.replace(
        "  id: participant\n", "  id: participant\n  source: \"spark://\"\n  table: wound_view\n"),
        encoding="utf-8")
    plan = load_plan(plan_path).model
    source, _ = resolve_source(plan_path, plan, None)
    counted = count_source(plan, source, engine="spark")
    assert counted.prepared == prepare(demo["frame"], plan, "rows")
    assert counted.data_hash == frame_row_hash(demo["frame"], count_request(plan, "rows"))
    database = DataSource("url", "postgresql://someone@localhost/trial", "db", table="t")
    with pytest.raises(BadInput) as err:
        count_source(plan, database, engine="spark")
    assert "use --engine sql" in str(err.value) and "\n" not in str(err.value)
