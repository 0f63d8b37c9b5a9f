"""The blinding of `prespec rehearse`, through the command, on data that carry the real labels.

For several plans (two arms, three arms with `all` and follow-ups, a stratified test, a
one-group hypothesis), invented data are written whose per-group counts are distinctive: every
per-group number is at least 100 and none equals a pooled number that the rehearsal may show.
The rehearsal runs as a user runs it; then every file of its report folder (the text chunks of
each PNG, the notebook, the HTML, CSV, JSON and the manifest), its log entry, and what it
printed are searched for every per-group count, and for every per-group rate in the forms a
report prints (4 decimals, 4 and 3 significant digits, percent with 1 and 2 decimals, repr).
None may appear; the pooled figures must. The five rehearsals run at once to save time.
"""

from __future__ import annotations

import base64
import csv
import io
import json
import os
import re
import subprocess
import sys
import zlib
from collections import Counter
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pytest

PRESPEC = [sys.executable, "-m", "prespec"]


@dataclass(frozen=True)
class Block:
    """``count`` rows of one group (and site) holding one consent and one outcome value."""

    group: str
    outcome: str  # "1", "0" or "" (blank)
    count: int
    consented: str = "yes"
    site: str = "north"


def cell(group: str, events: int, no_events: int, missing: int = 0, site: str = "north",
         excluded: int = 0) -> list[Block]:
    """The rows of one group (in one site): analysed events and no events, blank outcomes,
    and rows left out by the population filter (their outcome is 0)."""
    return [b for b in (Block(group, "1", events, site=site),
                        Block(group, "0", no_events, site=site),
                        Block(group, "", missing, site=site),
                        Block(group, "0", excluded, consented="no", site=site)) if b.count]


HEAD = """\
prespec: 1
title: {title} (invented)
data:
  id: participant
  group: arm
  groups: [{groups}]
  include:
    - {{column: consented, in: ["yes"]}}
{planned}outcomes:
  infection: {{column: infected, event: [1], no_event: [0], missing: exclude}}
alpha: 0.05
multiplicity: holm
hypotheses:
"""

PLANS: dict[str, tuple[str, list[Block]]] = {
    "two-arm": (
        HEAD.format(title="Two dressings", groups="foam, film",
                    planned="  planned_n: {foam: 450, film: 450}\n")
        + """\
  - id: H1
    outcome: infection
    compare: [foam, film]
    test: pearson-chi-square
""",
        cell("foam", 137, 275, missing=121, excluded=117)
        + cell("film", 106, 291, missing=104, excluded=163),
    ),
    "three-arm": (
        HEAD.format(title="Three dressings", groups="foam, film, gel", planned="")
        + """\
  - id: H1
    outcome: infection
    compare: all
    test: pearson-chi-square
    then: {pairwise: reference, multiplicity: holm}
  - id: H2
    outcome: infection
    compare: [gel, film]
    test: fisher-exact
    role: secondary
""",
        cell("foam", 137, 275, excluded=131) + cell("film", 106, 291, missing=119)
        + cell("gel", 161, 272, missing=113, excluded=127),
    ),
    "stratified": (
        HEAD.format(title="Two dressings in two sites", groups="foam, film", planned="")
        + """\
  - id: H1
    outcome: infection
    compare: [foam, film]
    test: cochran-mantel-haenszel
    strata: [site]
  - id: H2
    outcome: infection
    compare: [foam, film]
    test: two-proportion-z
    role: secondary
""",
        cell("foam", 107, 149, site="north") + cell("foam", 126, 185, site="south")
        + cell("film", 103, 195, site="north") + cell("film", 117, 227, site="south"),
    ),
    "one-group": (
        HEAD.format(title="A dressing against a fixed rate", groups="foam, film", planned="")
        + """\
  - id: H1
    outcome: infection
    compare: [foam]
    test: binomial-exact
    null_rate: 0.25
  - id: H2
    outcome: infection
    compare: [foam, film]
    test: fisher-exact
    role: exploratory
""",
        cell("foam", 137, 275) + cell("film", 106, 291),
    ),
}


def rows_of(blocks: list[Block], *, with_group: bool = True) -> list[dict[str, str]]:
    rows = [{"arm": b.group, "site": b.site, "consented": b.consented, "infected": b.outcome}
            for b in blocks for _ in range(b.count)]
    order = np.random.default_rng(20270301).permutation(len(rows))
    out = []
    for i, k in enumerate(order):
        row = {"participant": f"WD-{i + 1:05d}", **rows[k]}
        if not with_group:
            del row["arm"]
        out.append(row)
    return out


def csv_text(rows: list[dict[str, str]]) -> str:
    out = io.StringIO()
    w = csv.DictWriter(out, fieldnames=list(rows[0]))
    w.writeheader()
    w.writerows(rows)
    return out.getvalue()


# --- what is secret, what is pooled ----------------------------------------------------------


def _sum(blocks: list[Block], **match: str) -> Counter[str]:
    """Counts of analysed events, no events, blanks and filtered rows over matching blocks."""
    c: Counter[str] = Counter()
    for b in blocks:
        if all(getattr(b, k) == v for k, v in match.items()):
            kind = ("excluded" if b.consented != "yes" else
                    {"1": "events", "0": "no_events", "": "missing"}[b.outcome])
            c[kind] += b.count
            c["rows"] += b.count
    c["total"] = c["events"] + c["no_events"]
    return c


def secrets(blocks: list[Block]) -> tuple[set[int], set[float]]:
    """Every per-group (and per group and site) count, and every per-group rate."""
    numbers: set[int] = set()
    rates: set[float] = set()
    groups = sorted({b.group for b in blocks})
    parts = [{"group": g} for g in groups]
    parts += [{"group": g, "site": s} for g in groups for s in sorted({b.site for b in blocks})]
    for match in parts:
        c = _sum(blocks, **match)
        numbers |= {v for v in c.values() if v}
        if c["total"]:
            rates.add(c["events"] / c["total"])
    by_group = {g: _sum(blocks, group=g) for g in groups}
    for a in groups:
        for b in groups:
            if a != b:  # the risk difference of every ordered pair
                rates.add(by_group[a]["events"] / by_group[a]["total"]
                          - by_group[b]["events"] / by_group[b]["total"])
    return numbers, rates


def pooled_numbers(blocks: list[Block], plan_text: str) -> set[int]:
    """Every whole number the rehearsal may show legitimately: pooled counts and the
    dictionary's value counts over all rows."""
    c = _sum(blocks)
    shown = set(c.values()) | {c["rows"] - c["excluded"]}
    for key in ("consented", "infected", "site"):
        values: Counter[str] = Counter()
        for b in blocks:
            value = {"consented": b.consented, "infected": b.outcome, "site": b.site}[key]
            values[value] += b.count
        shown |= set(values.values())
    shown |= {int(n) for n in re.findall(r"\b\d{3,}\b", plan_text)}
    # a pooled 1,137 holds 137 as written with a thousands separator
    return shown | {int(part) for n in shown for part in f"{n:,}".split(",")}


def style_numbers(html: str) -> set[int]:
    """The whole numbers in the page's fixed style sheets (colours, sizes), which hold no data."""
    sheets = " ".join(re.findall(r"<style.*?</style>", html, flags=re.DOTALL))
    return {int(n) for n in re.findall(r"(?<![0-9A-Za-z])(?<![0-9]\.)(\d+)(?![0-9A-Za-z])"
                                       r"(?!\.[0-9])", sheets)}


def forms_of_rate(rate: float) -> set[str]:
    return {f"{rate:.4f}", f"{rate:.4g}", f"{rate:.3g}", f"{rate:#.4g}", f"{rate * 100:.1f}%",
            f"{rate * 100:.2f}%", f"{rate:.1%}", repr(rate), f"{rate:.6f}"}


def found_number(number: int, text: str) -> bool:
    """The integer standing alone (not inside a longer number, a decimal, a word or a hash),
    as written or with thousands separators (``1,025``)."""
    for shown in {str(number), f"{number:,}"}:
        pattern = rf"(?<![0-9A-Za-z])(?<![0-9]\.){shown}(?![0-9A-Za-z])(?!\.[0-9])"
        if re.search(pattern, text) is not None:
            return True
    return False


def found_form(form: str, text: str) -> bool:
    pattern = rf"(?<![0-9.]){re.escape(form)}(?![0-9])"
    return re.search(pattern, text) is not None


# --- reading every file as text ---------------------------------------------------------------


def png_text(data: bytes) -> str:
    """The text chunks (tEXt, zTXt, iTXt) of a PNG: where text could hide in an image."""
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    pos, out = 8, []
    while pos < len(data):
        length = int.from_bytes(data[pos:pos + 4], "big")
        kind, body = data[pos + 4:pos + 8], data[pos + 8:pos + 8 + length]
        pos += 12 + length
        if kind == b"tEXt":
            out.append(body.replace(b"\0", b" ").decode("latin-1"))
        elif kind == b"zTXt":
            key, _, rest = body.partition(b"\0")
            out.append(key.decode("latin-1") + " " + zlib.decompress(rest[1:]).decode("latin-1"))
        elif kind == b"iTXt":
            key, _, rest = body.partition(b"\0")
            compressed, rest = rest[0], rest[2:]
            _lang, _, rest = rest.partition(b"\0")
            _trans, _, text = rest.partition(b"\0")
            out.append(key.decode("latin-1") + " "
                       + (zlib.decompress(text) if compressed else text).decode("utf-8"))
    return "\n".join(out)


_DATA_URI = re.compile(r"data:image/png;base64,([A-Za-z0-9+/=\s]+)")


def readable(path: Path) -> str:
    """A file as the text a reader could find in it; embedded images by their text chunks."""
    data = path.read_bytes()
    if path.suffix == ".png":
        return png_text(data)
    text = data.decode("utf-8")
    if path.suffix == ".html":
        return _DATA_URI.sub(lambda m: png_text(base64.b64decode(m.group(1))), text)
    if path.suffix == ".ipynb":
        nb = json.loads(text)
        for c in nb["cells"]:
            for o in c.get("outputs", []):
                if "image/png" in o.get("data", {}):
                    o["data"]["image/png"] = png_text(base64.b64decode(o["data"]["image/png"]))
        return json.dumps(nb, ensure_ascii=False)
    return text


@dataclass(frozen=True)
class Done:
    name: str
    folder: Path
    study: Path
    plan: Path
    results: dict[str, Any]
    entry: dict[str, Any]
    stdout: str
    stderr: str
    scratch: Path


@pytest.fixture(scope="module")
def rehearsals(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Done]:
    """Each plan rehearsed through the command on data with the real labels, all at once;
    ``unlabelled`` is the two-arm plan on the same rows with no group column at all."""
    jobs = {name: (text, blocks, True) for name, (text, blocks) in PLANS.items()}
    jobs["unlabelled"] = (PLANS["two-arm"][0], PLANS["two-arm"][1], False)
    running = {}
    for name, (text, blocks, labelled) in jobs.items():
        study = tmp_path_factory.mktemp(name)
        plan = study / "trial.yaml"
        plan.write_text(text)
        (study / "data.csv").write_text(csv_text(rows_of(blocks, with_group=labelled)))
        scratch = study / "scratch"
        scratch.mkdir()
        env = {**os.environ, "PRESPEC_ACTOR": "data-manager", "TMPDIR": str(scratch)}
        if name == "two-arm":  # locked first: the rehearsal must leave the lock alone
            subprocess.run([*PRESPEC, "lock", "trial.yaml"], cwd=study, env=env, check=True,
                           capture_output=True, timeout=120)
        proc = subprocess.Popen([*PRESPEC, "rehearse", "trial.yaml", "data.csv"], cwd=study,
                                env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                text=True)
        running[name] = (proc, study, plan, scratch)
    done = {}
    for name, (proc, study, plan, scratch) in running.items():
        out, err = proc.communicate(timeout=600)
        assert proc.returncode == 0, f"{name}: {err}"
        folder = study / out.strip().splitlines()[-1]
        log = [json.loads(line) for line in (study / "trial.audit.jsonl").read_text()
               .splitlines()]
        done[name] = Done(name, folder, study, plan,
                          json.loads((folder / "results.json").read_text()), log[-1], out, err,
                          scratch)
    return done


@pytest.mark.parametrize("name", list(PLANS))
def test_no_group_level_figure_is_written_printed_or_logged(
        rehearsals: dict[str, Done], name: str) -> None:
    text, blocks = PLANS[name]
    done = rehearsals[name]
    numbers, rates = secrets(blocks)
    assert min(numbers) >= 100  # the test's own premise: no number that could be a time
    assert not numbers & pooled_numbers(blocks, text), "the data make a secret look pooled"
    css = style_numbers((done.folder / "report.html").read_text())
    assert not numbers & css, f"secret numbers also in the page's style sheet: {numbers & css}"
    pooled = _sum(blocks)
    analysed = pooled["rows"] - pooled["excluded"]
    assert not {pooled["total"], analysed} & css, "a pooled count is also in the style sheet"
    places = {p.relative_to(done.folder).as_posix(): readable(p)
              for p in sorted(done.folder.rglob("*")) if p.is_file()}
    places |= {"log entry": json.dumps(done.entry, ensure_ascii=False),
               "stdout": done.stdout, "stderr": done.stderr}
    assert {"results.json", "report.ipynb", "report.html", "manifest.json",
            "tables/pooled.csv", "tables/data-dictionary.csv"} <= set(places)
    leaks = [(where, n) for where, body in places.items() for n in sorted(numbers)
             if found_number(n, body)]
    leaks += [(where, form) for where, body in places.items() for r in sorted(rates)
              for form in sorted(forms_of_rate(r)) if found_form(form, body)]
    assert leaks == []

    shown = done.results["pooled"]["infection"]
    assert (shown["events"], shown["total"], shown["missing"]) == (
        pooled["events"], pooled["total"], pooled["missing"])
    rate = f"{pooled['events'] / pooled['total']:.4f}"
    assert f"{pooled['events']} events of {pooled['total']} analysed, rate {rate}" in done.stdout
    assert done.results["population"]["excluded_by_filter"] == pooled["excluded"]
    for where in ("results.json", "tables/pooled.csv", "stdout", "report.html"):
        assert found_number(pooled["total"], places[where]), where
        assert found_number(pooled["events"], places[where]), where
        shown_rate = rate if where in ("stdout", "report.html") else repr(
            pooled["events"] / pooled["total"])
        assert found_form(shown_rate, places[where]), where
    assert found_number(analysed, places["report.html"])
    assert done.results["kind"] == "rehearsal" and done.results["blinded"] is True
    assert "groups" not in done.results
    assert not (done.folder / "figures").exists()  # no proportions per group, no estimates
    assert done.entry["action"] == "rehearse"
    assert done.entry["details"]["report"] == done.folder.relative_to(done.study).as_posix()
    assert "Blinded rehearsal" in places["report.html"]
    assert all(h["executed"] for h in done.results["hypotheses"])
    assert not [p for p in done.scratch.iterdir() if p.name.startswith("prespec-rehearsal")]


def test_no_group_column_gives_the_same_pooled_document(rehearsals: dict[str, Done]) -> None:
    moment = {"data", "created", "locked"}  # locked: the lock history of a locked plan
    labelled, unlabelled = rehearsals["two-arm"].results, rehearsals["unlabelled"].results
    assert labelled["plan_version"] == 1 and unlabelled["plan_version"] is None
    assert [v["version"] for v in labelled["locked"]["versions"]] == [1]
    assert "locked" not in unlabelled
    same = {k: v for k, v in labelled.items() if k not in moment | {"plan_version", "notes"}}
    assert same == {k: v for k, v in unlabelled.items()
                    if k not in moment | {"plan_version", "notes"}}
    assert [d["code"] for d in labelled["deviations"]] == ["sample-size-shortfall"]


def test_the_lock_is_untouched_and_verify_passes(rehearsals: dict[str, Done]) -> None:
    done = rehearsals["two-arm"]
    lock = json.loads((done.study / "trial.lock.json").read_text())
    assert len(lock["versions"]) == 1
    log = [json.loads(line) for line in (done.study / "trial.audit.jsonl").read_text()
           .splitlines()]
    assert [e["action"] for e in log] == ["lock", "rehearse"]
    assert log[1]["plan"] == lock["versions"][0]["fingerprint"] == done.results["plan"]
    verified = subprocess.run([*PRESPEC, "verify", "trial.yaml", "--expect",
                               lock["versions"][0]["fingerprint"]], cwd=done.study,
                              capture_output=True, text=True, timeout=120, check=False)
    assert verified.returncode == 0, verified.stdout + verified.stderr
    assert "reports: 1 folder(s) match their manifests and log entries" in verified.stdout


def test_the_search_finds_the_figures_of_a_run(tmp_path: Path,
                                               monkeypatch: pytest.MonkeyPatch) -> None:
    """The control: the same search on an ordinary run of the same data finds every group's
    counts and rates, so a rehearsal that wrote them would fail the test above."""
    import prespec.report
    from prespec import api

    monkeypatch.setattr(prespec.report, "render_notebook", lambda folder: None)
    text, blocks = PLANS["two-arm"]
    plan = tmp_path / "trial.yaml"
    plan.write_text(text)
    (tmp_path / "data.csv").write_text(csv_text(rows_of(blocks)))
    out = api.run(plan, tmp_path / "data.csv", out=tmp_path / "run", accept_deviation="control")
    body = readable(out.folder / "results.json") + readable(out.folder / "tables" /
                                                           "groups-infection.csv")
    numbers, rates = secrets(blocks)
    by_hand = {137, 275, 121, 412, 106, 291, 104, 397}  # each group's events, no events,
    assert by_hand <= numbers and {137 / 412, 106 / 397} <= rates  # missing, analysed
    for n in by_hand:
        assert found_number(n, body), n
    assert all(any(found_form(f, body) for f in forms_of_rate(r))
               for r in (137 / 412, 106 / 397))
    assert not found_number(137, "sha256:9f137ab 2027-01-15T10:13:37Z 0.137 1137 137.5")
    assert found_number(137, "events: 137.") and found_form("0.3325", "(0.3325, 0.4)")
    assert found_number(1025, "analysed 1,025") and found_number(1025, "1025,7")
