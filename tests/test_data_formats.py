"""Transport and dataset files (``.xpt`` 5 and 8, ``.sas7bdat``, ``.sav``, ``.zsav``, ``.dta``) on
the pandas and duckdb engines.

The same invented rows are written as CSV and in every format, each by a writer we did not
write: pyreadstat (``write_xport`` versions 5 and 8, ``write_sav``, ``write_dta``), pandas
(``DataFrame.to_stata``) and the ReadStat command-line converter from Debian's ``readstat``
package (``.xpt`` and ``.sas7bdat``, which no Python writer makes). A third ``.xpt`` comes from
``write_transport_v5`` below, written from the format's record layout, so that one transport
file owes nothing to ReadStat (the ``xport`` package would be that writer, but its releases
either require pandas below 1.4 or fail under pandas 3). Every file must give the
results.json of the CSV, apart from the data hash (the SHA-256 of the file's own bytes, checked
here with hashlib) and the file's name. The cells prespec reads are also compared with an
independent reader, pandas' own (``pandas.read_sas``, ``pandas.read_stata``).
"""

from __future__ import annotations

import hashlib
import math
import shutil
import struct
import subprocess
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyreadstat
import pytest
from services import unavailable

from prespec import cli
from prespec.common.environment import environment
from prespec.data import datasets
from prespec.data.engines.base import DataSource
from prespec.data.engines.choose import open_engine
from prespec.data.engines.pipeline import count_source
from prespec.data.read import open_data_file, read_data
from prespec.errors import BadInput, DataError
from prespec.plan import load_plan
from prespec.workflow.execute import compute_results

# An invented study: three ways of reminding people of a screening visit; whether they came.
PLAN = """\
prespec: 1
title: Screening reminders (invented data, for the format tests)
data:
  id: SUBJID
  group: ARM
  groups: [usual, leaflet, phone]
  include:
    - {column: ITTFL, in: [1]}
outcomes:
  attended: {column: ATTEND, event: [1], no_event: [0], missing: exclude}
alpha: 0.05
multiplicity: holm
hypotheses:
  - {id: H1, outcome: attended, compare: [phone, usual], test: pearson-chi-square}
  - {id: H2, outcome: attended, compare: [leaflet, usual], test: cochran-mantel-haenszel,
     strata: [CLINIC]}
"""
COLUMN_LABELS = {"ATTEND": "Attended the screening visit", "ITTFL": "Randomised population"}
VALUE_LABELS = {"ATTEND": {1: "attended", 0: "did not attend"}, "ITTFL": {1: "yes", 0: "no"}}
# what differs between two files of the same rows: the file, its hash, the clock, the engine,
# and the labels a file declares (a CSV none; tested on their own below)
PER_FILE = ("data", "data_file", "created", "engine", "engine_library", "query", "data_labels")


def frame(n: int = 240, seed: int = 20270301) -> pd.DataFrame:
    """The invented rows: text id, group and clinic; numeric codes for the population flag
    and the outcome (1 or 0), some outcomes missing. Names of at most 8 characters, as a
    version 5 transport file requires."""
    rng = np.random.default_rng(seed)
    arm = rng.choice(["usual", "leaflet", "phone"], n)
    rate = {"usual": 0.45, "leaflet": 0.55, "phone": 0.65}
    attend = np.array([1.0 if rng.random() < rate[a] else 0.0 for a in arm])
    attend[rng.random(n) < 0.05] = np.nan
    return pd.DataFrame({"SUBJID": [f"RM-{i:04d}" for i in range(1, n + 1)], "ARM": arm,
                         "CLINIC": rng.choice(["east", "west", "harbour"], n),
                         "ITTFL": (rng.random(n) > 0.04).astype(float), "ATTEND": attend})


def write_csv(df: pd.DataFrame, path: Path) -> Path:
    """Codes as whole numbers (``1``, ``0``, blank), as a data manager exports them."""
    out = df.copy()
    for column in ("ITTFL", "ATTEND"):
        out[column] = out[column].astype("Int64")
    out.to_csv(path, index=False)
    return path


def _ibm_double(x: float) -> bytes:
    """A number as the transport format stores it: an IBM hexadecimal double (sign bit, a
    7-bit exponent of 16 biased by 64, a 56-bit fraction); a missing value is ``.`` then
    zeros. # from memory: the published layout of the version 5 transport format"""
    if math.isnan(x):
        return b"." + bytes(7)
    if x == 0:
        return bytes(8)
    sign = 0x80 if x < 0 else 0
    fraction, exponent = abs(x), 64
    while fraction >= 1:
        fraction /= 16
        exponent += 1
    while fraction < 1 / 16:
        fraction *= 16
        exponent -= 1
    mantissa = round(fraction * 2**56)
    if mantissa >= 2**56:  # rounding carried into a new hexadecimal digit
        mantissa //= 16
        exponent += 1
    return bytes([sign | exponent]) + mantissa.to_bytes(7, "big")


def write_transport_v5(df: pd.DataFrame, path: Path, labels: dict[str, str]) -> Path:
    """A second, independent writer of a version 5 transport file, written here from the
    format's published record layout (# from memory) rather than through ReadStat: 80-byte
    records, a 140-byte description per column, rows of fixed width padded with blanks. The
    descriptive records that name the writing program are left blank."""
    def record(text: str) -> bytes:
        return text.encode("ascii").ljust(80, b" ")

    def header(name: str, numbers: str = "0" * 30) -> bytes:
        return record(f"HEADER RECORD*******{name:<8}HEADER RECORD!!!!!!!{numbers}")

    def padded(data: bytes) -> bytes:
        return data + b" " * (-len(data) % 80)

    stamp = "01MAR27:09:30:00"
    widths = {c: 8 if df[c].dtype.kind == "f" else max(1, int(df[c].str.len().max()))
              for c in df.columns}
    out = [header("LIBRARY"), record(" " * 64 + stamp), record(stamp),
           header("MEMBER", "0" * 17 + "16" + "0" * 8 + "140"), header("DSCRPTR"),
           record("        ROWS    " + " " * 48 + stamp), record(stamp + " " * 64),
           header("NAMESTR", f"000000{len(df.columns):04d}" + "0" * 20)]
    descriptions, position = b"", 0
    for number, column in enumerate(df.columns, start=1):
        numeric = df[column].dtype.kind == "f"
        descriptions += struct.pack(
            ">hhhh8s40s8shhh2s8shhl52s", 1 if numeric else 2, 0, widths[column], number,
            column.encode().ljust(8), labels.get(column, "").encode().ljust(40), b" " * 8,
            0, 0, 0, b"\0\0", b" " * 8, 0, 0, position, bytes(52))
        position += widths[column]
    out += [padded(descriptions), header("OBS")]
    rows = b"".join(
        b"".join(_ibm_double(float(v)) if df[c].dtype.kind == "f" else
                 str(v).encode().ljust(widths[c]) for c, v in zip(df.columns, row, strict=True))
        for row in df.itertuples(index=False))
    path.write_bytes(b"".join(out) + padded(rows))
    return path


def test_the_second_writer_stores_numbers_as_pyreadstat_does(tmp_path: Path) -> None:
    values = [0.0, 1.0, -2.5, 100.0, 0.1, 1 / 3, 123456.789, float("nan")]
    pyreadstat.write_xport(pd.DataFrame({"X": values}), tmp_path / "x.xpt",
                           file_format_version=5)
    raw = (tmp_path / "x.xpt").read_bytes()
    start = raw.index(b"HEADER RECORD*******OBS") + 80
    stored = [raw[start + 8 * k:start + 8 * (k + 1)] for k in range(len(values))]
    assert [_ibm_double(v) for v in values] == stored


def the_file(files: dict[str, Path], name: str) -> Path:
    """The file of format ``name``; the two the readstat command writes need it installed."""
    if name not in files:
        unavailable("the readstat command (Debian package readstat) is not installed")
    return files[name]


def write_all(df: pd.DataFrame, folder: Path) -> dict[str, Path]:
    """The rows in every format, each by a writer we did not write."""
    files = {"csv": write_csv(df, folder / "rows.csv")}
    pyreadstat.write_xport(df, folder / "v5.xpt", file_format_version=5,
                           column_labels=COLUMN_LABELS)
    files["xpt5"] = folder / "v5.xpt"
    pyreadstat.write_xport(df, folder / "v8.xpt", file_format_version=8)
    files["xpt8"] = folder / "v8.xpt"
    files["xpt-layout"] = write_transport_v5(df, folder / "layout.xpt", COLUMN_LABELS)
    pyreadstat.write_sav(df, folder / "rows.sav", column_labels=COLUMN_LABELS,
                         variable_value_labels=VALUE_LABELS)
    files["sav"] = folder / "rows.sav"
    pyreadstat.write_sav(df, folder / "rows.zsav", compress=True)
    files["zsav"] = folder / "rows.zsav"
    pyreadstat.write_dta(df, folder / "rows.dta", variable_value_labels=VALUE_LABELS)
    files["dta"] = folder / "rows.dta"
    df.to_stata(folder / "pandas.dta", write_index=False, variable_labels=COLUMN_LABELS)
    files["dta-pandas"] = folder / "pandas.dta"
    tool = shutil.which("readstat")
    if tool is not None:  # ReadStat's own converter, from the .dta pandas wrote (a test
        # that needs its files and finds none skips, or fails in CI: ``the_file``)
        for name, target in (("xpt-readstat", "readstat.xpt"), ("sas7bdat", "rows.sas7bdat")):
            subprocess.run([tool, str(files["dta-pandas"]), str(folder / target)], check=True,
                           capture_output=True)
            files[name] = folder / target
    return files


@pytest.fixture(scope="module")
def study(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    folder = tmp_path_factory.mktemp("formats")
    plan_path = folder / "reminders.yaml"
    plan_path.write_text(PLAN, encoding="utf-8")
    return {"folder": folder, "plan_path": plan_path, "plan": load_plan(plan_path).model,
            "files": write_all(frame(), folder)}


def results(study: dict[str, Any], path: Path, engine: str) -> dict[str, Any]:
    return compute_results(
        plan_path=study["plan_path"], plan=study["plan"], fingerprint="sha256:" + "0" * 64,
        version=None, data_path=None, actor="tester", environment=environment(),
        deviations=[], notes=[], previous_data=None,
        source=DataSource("file", str(path), str(path)), engine=engine)


def without(doc: dict[str, Any], keys: tuple[str, ...]) -> dict[str, Any]:
    return {k: v for k, v in doc.items() if k not in keys}


FORMATS = ("xpt5", "xpt8", "xpt-layout", "xpt-readstat", "sav", "zsav", "dta", "dta-pandas", "sas7bdat")


@pytest.mark.parametrize("engine", ["pandas", "duckdb"])
@pytest.mark.parametrize("name", FORMATS)
def test_every_format_gives_the_results_of_the_csv(study: dict[str, Any], name: str,
                                                   engine: str) -> None:
    reference = results(study, study["files"]["csv"], "pandas")
    path = the_file(study["files"], name)
    found = results(study, path, engine)
    assert without(found, PER_FILE) == without(reference, PER_FILE)
    # the data hash is the SHA-256 of the file's bytes (hashlib, not prespec's helper)
    assert found["data"] == "sha256:" + hashlib.sha256(path.read_bytes()).hexdigest()
    assert found["engine"] == engine
    # and the counts are the ones pandas finds on the frame written (independent of prespec)
    df = frame()
    kept = df[(df["ITTFL"] == 1) & df["ATTEND"].isin([0, 1])]
    h1 = next(h for h in found["hypotheses"] if h["id"] == "H1")
    assert h1["table"]["events"] == [int(kept[kept["ARM"] == g]["ATTEND"].sum())
                                     for g in h1["table"]["groups"]]
    assert h1["table"]["totals"] == [int((kept["ARM"] == g).sum())
                                     for g in h1["table"]["groups"]]


# pandas reads no .xpt v8, and needs the writing program's name in the records that
# write_transport_v5 leaves blank
@pytest.mark.parametrize("name", ["xpt5", "dta", "dta-pandas"])
def test_the_cells_read_are_those_an_independent_reader_finds(study: dict[str, Any],
                                                              name: str) -> None:
    path = study["files"][name]
    ours = read_data(path)
    if path.suffix == ".xpt":
        theirs = pd.read_sas(path, format="xport", encoding="utf-8")
    else:
        theirs = pd.read_stata(path, convert_categoricals=False)
    assert list(ours.columns) == list(theirs.columns)
    for column in ours.columns:
        for mine, other in zip(ours[column], theirs[column], strict=True):
            if isinstance(other, str):
                assert mine == other
            elif other is None or pd.isna(other):
                assert mine is None or mine == ""
            elif path.suffix == ".xpt" and mine == 0.0:
                # pandas reads the transport format's zero (eight zero bytes, checked here)
                # as 2**-260 (5.4e-79), not 0: its reader is off there, not ours
                assert float(other) in (0.0, 2.0**-260)
            else:
                assert mine == float(other)
    if path.suffix == ".xpt":
        raw = path.read_bytes()
        start = raw.index(b"HEADER RECORD*******OBS") + 80
        assert raw[start:].find(bytes(8)) >= 0  # a zero as stored: eight zero bytes


def test_stored_values_are_matched_never_their_labels(tmp_path: Path) -> None:
    """A plan that names the label (``attended``) of the stored code 1 finds no event: the
    outcome values are unmapped; the code itself (``1``) matches."""
    df = frame()
    pyreadstat.write_sav(df, tmp_path / "rows.sav", variable_value_labels=VALUE_LABELS)
    plan_path = tmp_path / "labels.yaml"
    plan_path.write_text(PLAN.replace("event: [1], no_event: [0]",
                                      "event: [attended], no_event: [did not attend]"),
                         encoding="utf-8")
    plan = load_plan(plan_path).model
    source = DataSource("file", str(tmp_path / "rows.sav"), "rows.sav")
    counted = count_source(plan, source, engine="pandas")
    outcome = counted.prepared.outcomes["attended"]
    assert [g.total for g in outcome.groups] == [0, 0, 0]
    codes = tmp_path / "codes.yaml"
    codes.write_text(PLAN, encoding="utf-8")
    by_code = count_source(load_plan(codes).model, source, engine="duckdb")
    assert sum(g.events for g in by_code.prepared.outcomes["attended"].groups) > 0


def _spy(monkeypatch: pytest.MonkeyPatch) -> list[tuple[Any, dict[str, Any]]]:
    """Every call of the reader: (what it was given, its options)."""
    calls: list[tuple[Any, dict[str, Any]]] = []
    original = datasets._reader

    def spying(path: Path) -> Any:
        reader = original(path)

        def call(given: Any, **options: Any) -> Any:
            calls.append((given, options))
            return reader(given, **options)

        return call

    monkeypatch.setattr(datasets, "_reader", spying)
    return calls


def test_the_duckdb_engine_copies_a_chunk_of_rows_at_a_time(
        study: dict[str, Any], monkeypatch: pytest.MonkeyPatch) -> None:
    """With 50-row chunks, the 240 rows of a .sav file are read by five calls of the reader,
    each with a row offset and a limit of 50 (never the whole file), and the results are
    those of the CSV; only the columns the plan reads are copied."""
    monkeypatch.setattr(datasets, "CHUNK_ROWS", 50)
    calls = _spy(monkeypatch)
    reference = results(study, study["files"]["csv"], "pandas")
    found = results(study, study["files"]["sav"], "duckdb")
    assert without(found, PER_FILE) == without(reference, PER_FILE)
    reads = [options for _, options in calls if not options.get("metadataonly")]
    assert [(c["row_offset"], c["row_limit"]) for c in reads] == [
        (0, 50), (50, 50), (100, 50), (150, 50), (200, 50)]
    assert {tuple(sorted(c["usecols"])) for c in reads} == {
        ("ARM", "ATTEND", "CLINIC", "ITTFL", "SUBJID")}


@pytest.mark.parametrize("name", ["xpt5", "xpt8"])
def test_a_transport_file_is_read_by_windows_of_its_rows(
        study: dict[str, Any], monkeypatch: pytest.MonkeyPatch, name: str) -> None:
    """A transport file's rows are fixed width, so each chunk is a window of the file (its
    header records and 51 rows: 50 kept and one more), never a row offset that makes the
    reader parse every row before it; the last window is the rest of the file."""
    monkeypatch.setattr(datasets, "CHUNK_ROWS", 50)
    calls = _spy(monkeypatch)
    reference = results(study, study["files"]["csv"], "pandas")
    found = results(study, study["files"][name], "duckdb")
    assert without(found, PER_FILE) == without(reference, PER_FILE)
    windows = [given for given, options in calls if not options.get("metadataonly")]
    assert len(windows) == 5 and all(isinstance(w, datasets._Window) for w in windows)
    assert all("row_offset" not in options for _, options in calls)
    size = study["files"][name].stat().st_size
    raw = study["files"][name].read_bytes()
    start = raw.index(b"HEADER RECORD*******OBS") + 80
    row = (size - start) // 240  # the rows fill the file but for its last record's blanks
    assert all(len(w._bytes.getvalue()) <= start + 51 * row + 80 for w in windows)


def test_rows_of_blanks_at_a_window_edge_are_kept(tmp_path: Path,
                                                  monkeypatch: pytest.MonkeyPatch) -> None:
    """Rows whose text is all blanks, on either side of a window's edge and at the end of the
    file, are rows, not the blanks that end a file: the windowed read finds every row that
    pyreadstat finds reading the whole file at once."""
    texts = [f"T{i:03d}" for i in range(120)]
    for i in (49, 50, 99, 100, 118, 119):
        texts[i] = ""
    df = pd.DataFrame({"A": texts, "B": ["" if t == "" else "x" for t in texts]})
    path = tmp_path / "blanks.xpt"
    pyreadstat.write_xport(df, path, file_format_version=5)
    whole, _ = pyreadstat.read_xport(path)
    monkeypatch.setattr(datasets, "CHUNK_ROWS", 50)
    staged = tmp_path / "staged.parquet"
    rows = datasets.stage_parquet(path, None, staged, "blanks.xpt")
    import pyarrow.parquet as pq

    copied = pq.read_table(staged).to_pydict()
    assert rows == len(whole.index) and copied["A"] == list(whole["A"])


@pytest.mark.parametrize("engine", ["pandas", "duckdb"])
def test_a_rehearsal_never_reads_the_group_column_of_a_dataset_file(
        study: dict[str, Any], monkeypatch: pytest.MonkeyPatch, engine: str) -> None:
    from prespec.data.engines.pipeline import blinded_rows

    calls = _spy(monkeypatch)
    path = study["files"]["sav"]
    read = blinded_rows(study["plan"], DataSource("file", str(path), "rows.sav"), engine=engine)
    assert "ARM" not in read.frame.columns and len(read.frame.index) == 240
    reads = [options for _, options in calls if not options.get("metadataonly")]
    assert reads and all("ARM" not in c["usecols"] for c in reads)
    assert read.data_hash == "sha256:" + hashlib.sha256(path.read_bytes()).hexdigest()


def test_the_dictionary_shows_the_column_and_value_labels(
        study: dict[str, Any], monkeypatch: pytest.MonkeyPatch) -> None:
    """A rehearsal of the .sav file: each column's label and each stored value's label, as
    the file declares them (read back here by pyreadstat's metadata)."""
    import prespec.report

    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)
    _, meta = pyreadstat.read_sav(study["files"]["sav"], metadataonly=True)
    assert meta.column_names_to_labels["ATTEND"] == COLUMN_LABELS["ATTEND"]
    from prespec.workflow.rehearse import compute_rehearsal

    doc = compute_rehearsal(
        plan_path=study["plan_path"], plan=study["plan"], fingerprint="sha256:" + "0" * 64,
        version=None, data_path=study["files"]["sav"], actor="tester",
        environment=environment(), deviations=[], notes=[], engine="duckdb")
    columns = {c["column"]: c for c in doc["data_dictionary"]["columns"]}
    assert columns["ATTEND"]["label"] == "Attended the screening visit"
    assert columns["ITTFL"]["label"] == "Randomised population"
    assert "label" not in columns["SUBJID"] and "label" not in columns["CLINIC"]
    attend = {v["value"]: v for v in columns["ATTEND"]["values"]}
    assert attend["1"]["label"] == "attended" and attend["1"]["meaning"] == "event"
    assert attend["0"]["label"] == "did not attend" and attend["0"]["meaning"] == "no-event"
    assert "label" not in attend[None]  # the blank cells: no stored value, no label
    ittfl = {v["value"]: v for v in columns["ITTFL"]["values"]}
    assert ittfl["1"]["meaning"] == "passes filter" and ittfl["1"]["label"] == "yes"
    df = frame()
    assert attend["1"]["count"] == int((df["ATTEND"] == 1).sum())
    assert attend[None]["count"] == int(df["ATTEND"].isna().sum())


def test_a_run_lists_the_labels_of_the_columns_and_of_the_plans_values(
        study: dict[str, Any]) -> None:
    """results.json of a run on the .sav file: ``data_labels`` holds each column's label and
    the label of each value the plan names (the codes 1 and 0), as pyreadstat reads them from
    the file; the report shows them under the population. A CSV run has no such key."""
    from prespec.report.sections import population

    _, meta = pyreadstat.read_sav(study["files"]["sav"], metadataonly=True)
    attend = {str(int(k)): v for k, v in meta.variable_value_labels["ATTEND"].items()}
    found = results(study, study["files"]["sav"], "pandas")
    assert found["data_labels"] == [
        {"column": "ITTFL", "role": "data.include[1]",
         "label": meta.column_names_to_labels["ITTFL"],
         "values": [{"value": "1", "label": "yes"}]},
        {"column": "ATTEND", "role": "outcomes.attended.column",
         "label": meta.column_names_to_labels["ATTEND"],
         "values": [{"value": "1", "label": attend["1"]}, {"value": "0", "label": attend["0"]}]},
    ]
    html = population(found)
    assert "Labels in the data file" in html and "1 = attended; 0 = did not attend" in html
    plain = results(study, study["files"]["csv"], "pandas")
    assert "data_labels" not in plain and "Labels in the data file" not in population(plain)


def test_the_plan_values_find_their_labels_by_the_matching_rule(tmp_path: Path) -> None:
    """``1.0`` in a plan names the stored code 1 (and is shown as the plan writes it); a range
    (``between``) names no value; a column with neither a label nor a labelled plan value is
    left out."""
    from prespec.data.dictionary import plan_labels

    plan_path = tmp_path / "p.yaml"
    plan_path.write_text(PLAN.replace("in: [1]", "between: [1, 1]").replace(
        "event: [1], no_event: [0]", 'event: ["1.0"], no_event: [0]'), encoding="utf-8")
    labels = datasets.Labels(columns={"ITTFL": "Randomised"},
                             values={"ATTEND": {"1": "came", "0": "did not come"},
                                     "ITTFL": {"1": "yes"}, "CLINIC": {"east": "East wing"}})
    assert plan_labels(load_plan(plan_path).model, labels) == [
        {"column": "ITTFL", "role": "data.include[1]", "label": "Randomised", "values": []},
        {"column": "ATTEND", "role": "outcomes.attended.column",
         "values": [{"value": "1.0", "label": "came"}, {"value": "0", "label": "did not come"}]},
    ]
    assert plan_labels(load_plan(plan_path).model, datasets.Labels()) is None


def test_the_labels_of_two_files_combine_the_first_winning() -> None:
    units = datasets.Labels("units", {"SUBJID": "Subject", "ARM": "Arm"}, {"ARM": {"1": "a"}})
    events = datasets.Labels(None, {"SUBJID": "Subject id", "TERM": "Event term"},
                             {"ARM": {"1": "b"}, "TERM": {"7": "rash"}})
    both = units.combined(events)
    assert both == datasets.Labels("units", {"SUBJID": "Subject", "ARM": "Arm",
                                             "TERM": "Event term"},
                                   {"ARM": {"1": "a"}, "TERM": {"7": "rash"}})


def test_a_file_without_labels_has_none_in_the_dictionary(study: dict[str, Any]) -> None:
    from prespec.data.dictionary import data_dictionary
    from prespec.data.engines.sources import source_labels

    for name in ("csv", "zsav"):  # the .zsav was written without labels
        path = study["files"][name]
        labels = source_labels(DataSource("file", str(path), name))
        assert labels == datasets.Labels()
        rows = read_data(path).drop(columns=["ARM"])
        assert "label" not in str(data_dictionary(rows, study["plan"], name, labels))


def test_the_dictionary_table_and_report_show_the_labels() -> None:
    """tables/data-dictionary.csv gains the two label columns only when there are labels;
    the report's card shows the column label and a Label column beside the value."""
    import csv
    import io

    from prespec.report.blinded import _column_detail, _value_rows
    from prespec.report.tables import DICTIONARY_HEADER, write_dictionary_csv

    column = {"column": "ATTEND", "role": "outcomes.attended.column", "distinct": 2,
              "blank": 0, "more": 0, "more_count": 0, "label": "Attended the visit",
              "values": [{"value": "1", "count": 5, "meaning": "event", "label": "attended"},
                         {"value": "0", "count": 3, "meaning": "no-event"}]}
    plain = {**{k: v for k, v in column.items() if k != "label"},
             "values": [{k: v for k, v in val.items() if k != "label"}
                        for val in column["values"]]}
    import tempfile

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "d.csv"
        write_dictionary_csv(path, {"columns": [column]})
        rows = list(csv.reader(io.StringIO(path.read_text("utf-8"))))
        assert rows[0] == [*DICTIONARY_HEADER, "column_label", "value_label"]
        assert rows[1][-3:] == ["event", "Attended the visit", "attended"]
        assert rows[2][-3:] == ["no-event", "Attended the visit", ""]
        write_dictionary_csv(path, {"columns": [plain]})
        header = next(csv.reader(io.StringIO(path.read_text("utf-8"))))
        assert header == DICTIONARY_HEADER
    at = "data_dictionary.ATTEND"
    value_rows, marks, _ = _value_rows(column, at)
    assert value_rows[0][:2] == ["1", "attended"] and value_rows[1][:2] == ["0", ""]
    html = _column_detail(column, at, "ATTEND", "outcome", value_rows, marks)
    assert "Label: Attended the visit" in html and "<th>Label</th>" in html.replace(
        ' class="num"', "")
    plain_rows, plain_marks, _ = _value_rows(plain, at)
    assert "Label" not in _column_detail(plain, at, "ATTEND", "outcome", plain_rows,
                                         plain_marks)


# -- bad files: one line, exit 2, nothing written ----------------------------------------------
def _cut(source: Path, target: Path, keep: int) -> Path:
    target.write_bytes(source.read_bytes()[:keep])
    return target


def bad_files(study: dict[str, Any], folder: Path) -> dict[str, tuple[Path, str]]:
    files = study["files"]
    xpt = files["xpt5"].read_bytes()
    # a transport file's rows begin after the record that opens them; cut inside row 3
    start = xpt.index(b"HEADER RECORD*******OBS") + 80
    width = len(frame().iloc[0]["SUBJID"]) + len("leaflet") + len("harbour") + 8 + 8
    assert width == 37 and start % 80 == 0
    return {
        "csv named .xpt": (_cut(files["csv"], folder / "csv.xpt", 10**9),
                           "cannot read the file as a .xpt transport file"),
        ".sav named .dta": (_cut(files["sav"], folder / "sav.dta", 10**9),
                            "cannot read the file as a .dta dataset file"),
        "truncated .xpt": (_cut(files["xpt5"], folder / "cut.xpt", start + 2 * width + 5),
                           "the transport file is truncated or damaged"),
        # whole 80-byte records (4 rows of 37 bytes and 12 bytes of the 5th): the part row
        # is neither a row nor the closing blanks
        "truncated .xpt at a record's end": (_cut(files["xpt5"], folder / "cut80.xpt",
                                                  start + 160),
                                             "the transport file is truncated or damaged"),
        "truncated .xpt v8": (_cut(files["xpt8"], folder / "cut8.xpt",
                                   len(files["xpt8"].read_bytes()) - 80),
                              "truncated or damaged"),
        "truncated .sav": (_cut(files["sav"], folder / "cut.sav",
                                files["sav"].stat().st_size // 2), "truncated or damaged"),
        "truncated .sas7bdat": (_cut(the_file(files, "sas7bdat"), folder / "cut.sas7bdat", 5000),
                                "truncated or damaged"),
        "truncated .dta": (_cut(files["dta"], folder / "cut.dta",
                                files["dta"].stat().st_size - 300), "truncated or damaged"),
        "empty .zsav": (_cut(files["zsav"], folder / "empty.zsav", 0), "the data file is empty"),
    }


def test_a_transport_file_of_two_datasets_is_refused(study: dict[str, Any],
                                                     tmp_path: Path) -> None:
    """A second member (its header records, then its rows) after the first one's rows: the
    reader would read the first alone, so the file is refused."""
    raw = study["files"]["xpt5"].read_bytes()
    member = raw[raw.index(b"HEADER RECORD*******MEMBER"):]
    path = tmp_path / "two.xpt"
    path.write_bytes(raw + member)
    for engine in ("pandas", "duckdb"):
        with pytest.raises(DataError, match=r"two\.xpt: the transport file holds more than "
                                            "one dataset; give prespec a file with one$"):
            count_source(study["plan"], DataSource("file", str(path), "two.xpt"),
                         engine=engine)


@pytest.mark.parametrize("engine", ["pandas", "duckdb"])
def test_a_file_that_is_not_what_its_extension_says_is_one_line(
        study: dict[str, Any], tmp_path: Path, engine: str) -> None:
    for what, (path, message) in bad_files(study, tmp_path).items():
        with pytest.raises(DataError) as caught:
            count_source(study["plan"], DataSource("file", str(path), path.name), engine=engine)
        assert message in str(caught.value), what
        assert str(caught.value).split(": ")[0].endswith(path.name), what
        assert "\n" not in str(caught.value), what


def test_the_command_exits_2_and_writes_nothing(study: dict[str, Any], tmp_path: Path,
                                                capsys: pytest.CaptureFixture[str]) -> None:
    plan = tmp_path / "reminders.yaml"
    plan.write_text(PLAN, encoding="utf-8")
    assert cli.main(["lock", str(plan)]) == 0
    log = tmp_path / "reminders.audit.jsonl"
    before = log.read_bytes()
    capsys.readouterr()
    (tmp_path / "bad").mkdir()
    bad = bad_files(study, tmp_path / "bad")
    for what, (path, message) in bad.items():
        for engine in ("pandas", "duckdb"):
            assert cli.main(["run", str(plan), str(path), "--engine", engine]) == 2, what
            err = capsys.readouterr().err
            assert message in err and err.count("\n") == 1, (what, err)
    assert cli.main(["rehearse", str(plan), str(bad["truncated .xpt"][0])]) == 2
    assert "truncated" in capsys.readouterr().err
    assert log.read_bytes() == before
    assert not (tmp_path / "reports").exists()


def test_the_sql_and_spark_engines_refuse_a_dataset_file(study: dict[str, Any]) -> None:
    path = study["files"]["xpt5"]
    source = DataSource("file", str(path), "v5.xpt")
    with pytest.raises(BadInput, match=r"^--engine spark: reads CSV or Parquet files; v5\.xpt "
                                       r"is a \.xpt file: use --engine pandas or duckdb$"):
        open_engine("spark", source)
    with pytest.raises(BadInput, match=r"^--engine sql: reads a database URL; v5\.xpt is a "
                                       "file$"):
        open_engine("sql", source)


def test_a_glob_of_dataset_files_and_an_unknown_extension_are_one_line(
        study: dict[str, Any], tmp_path: Path) -> None:
    pattern = str(study["folder"] / "*.xpt")
    with pytest.raises(DataError, match=r"a glob reads CSV or Parquet files; name one \.xpt "
                                        "file at a time$"):
        count_source(study["plan"], DataSource("glob", pattern, pattern), engine="duckdb")
    odd = tmp_path / "rows.xlsx"
    odd.write_bytes(b"PK\x03\x04")
    for engine in ("pandas", "duckdb"):
        with pytest.raises(DataError, match=r"unknown data format '\.xlsx' \(use \.csv, "
                                            r"\.parquet, \.xpt, \.sas7bdat, \.sav, \.zsav or "
                                            r"\.dta\)$"):
            count_source(study["plan"], DataSource("file", str(odd), str(odd)), engine=engine)


def test_open_data_file_opens_every_format_for_either_engine(study: dict[str, Any],
                                                             tmp_path: Path) -> None:
    """The one door to a data file: the frame for pandas, a scannable file for SQL."""
    import duckdb

    for name, path in study["files"].items():
        opened = open_data_file(path)
        kind, scanned = opened.scannable(tmp_path, ["SUBJID", "ATTEND"])
        reader = "read_csv" if kind == "csv" else "read_parquet"
        got = duckdb.connect().execute(
            f"SELECT count(*), count(DISTINCT SUBJID) FROM {reader}($p)",
            {"p": str(scanned)}).fetchall()
        assert got == [(240, 240)], name
        assert len(opened.frame({"SUBJID": "data.id"}).index) == 240
    assert open_data_file(study["files"]["sav"]).labels().values["ATTEND"] == {
        "1": "attended", "0": "did not attend"}
    assert open_data_file(study["files"]["csv"]).labels() == datasets.Labels()


def test_a_transport_file_runs_and_verifies(study: dict[str, Any], tmp_path: Path,
                                            monkeypatch: pytest.MonkeyPatch,
                                            capsys: pytest.CaptureFixture[str]) -> None:
    """``prespec lock``, ``run`` and ``verify --rerun`` on an .xpt file (the notebook is not
    executed here; tests/e2e runs it); the report records the file's SHA-256."""
    import json

    import prespec.report

    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)
    plan = tmp_path / "reminders.yaml"
    plan.write_text(PLAN, encoding="utf-8")
    data = tmp_path / "rows.xpt"
    data.write_bytes(study["files"]["xpt5"].read_bytes())
    assert cli.main(["lock", str(plan)]) == 0
    assert cli.main(["run", str(plan), str(data), "--engine", "duckdb", "--out",
                     str(tmp_path / "out")]) == 0
    doc = json.loads((tmp_path / "out" / "results.json").read_text("utf-8"))
    assert doc["data"] == "sha256:" + hashlib.sha256(data.read_bytes()).hexdigest()
    assert doc["data_file"] == "rows.xpt"
    assert doc["data_labels"] == [{"column": "ATTEND", "role": "outcomes.attended.column",
                                   "label": "Attended the screening visit", "values": []},
                                  {"column": "ITTFL", "role": "data.include[1]",
                                   "label": "Randomised population", "values": []}][::-1]
    capsys.readouterr()
    assert cli.main(["verify", str(plan), "--rerun", str(data)]) == 0
    assert "differ" not in capsys.readouterr().out
