"""The fingerprint: SHA-256 of the RFC 8785 canonical JSON of the resolved plan.

It must not move with comments, key order, layout or quoting, and must move with any change of
meaning, a default written out to a non-default value included.
"""

from __future__ import annotations

import hashlib
import re
from pathlib import Path

import pytest
import rfc8785
from test_plan_load import GOOD

from prespec.plan import fingerprint, load_plan, plan_from_resolved, resolve


def swap(old: str, new: str, text: str = GOOD) -> str:
    assert text.count(old) == 1, old
    return text.replace(old, new)


def fp(tmp_path: Path, text: str, name: str = "plan.yaml") -> str:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return load_plan(path).fingerprint


def test_canonical_json_bytes() -> None:
    # RFC 8785 §3.2.2 (literals, numbers as ECMAScript writes them, strings: UTF-8, short
    # escapes, other controls as lowercase \u00xx) and §3.2.3 (keys sorted by UTF-16 code
    # units, so U+1F600, stored as D83D DE00, sorts before U+FB33).  # common practice
    value = {
        "z": 1.0,
        "a": [True, None, 0.5, 1e21, 1e20, 1e-7, 0.000001, -0.0, 100],
        "\ufb33": "h",
        "\U0001f600": "e",
        "\u00f6": "o",
        "s": 'line\nbreak\u001f"\\',
    }
    expected = (
        b'{"a":[true,null,0.5,1e+21,100000000000000000000,1e-7,0.000001,0,100],'
        b'"s":"line\\nbreak\\u001f\\"\\\\","z":1,'
        + "\"\u00f6\":\"o\",\"\U0001f600\":\"e\",\"\ufb33\":\"h\"}".encode()
    )
    assert rfc8785.dumps(value) == expected
    assert fingerprint(value) == "sha256:" + hashlib.sha256(expected).hexdigest()


def test_canonical_key_order_of_the_rfc_example() -> None:
    # RFC 8785 §3.2.3, the sorting example  # from memory
    value = {"\u20ac": "Euro Sign", "\r": "Carriage Return",
             "\ufb33": "Hebrew Letter Dalet With Dagesh", "1": "One",
             "\U0001f600": "Emoji: Grinning Face", "\u0080": "Control",
             "\u00f6": "Latin Small Letter O With Diaeresis"}
    text = rfc8785.dumps(value).decode()
    order = [text.index(f'"{name}"') for name in
             ["Carriage Return", "One", "Control", "Latin Small Letter O With Diaeresis",
              "Euro Sign", "Emoji: Grinning Face", "Hebrew Letter Dalet With Dagesh"]]
    assert order == sorted(order)


def test_fingerprint_of_a_small_dict() -> None:
    # {"b": [1, 2], "a": "x"} canonicalises to {"a":"x","b":[1,2]}  # common practice
    expected = hashlib.sha256(b'{"a":"x","b":[1,2]}').hexdigest()
    assert fingerprint({"b": [1, 2], "a": "x"}) == f"sha256:{expected}"


def test_fingerprint_is_of_the_resolved_plan(tmp_path: Path) -> None:
    path = tmp_path / "plan.yaml"
    path.write_text(GOOD, encoding="utf-8")
    loaded = load_plan(path)
    assert re.fullmatch(r"sha256:[0-9a-f]{64}", loaded.fingerprint)
    digest = hashlib.sha256(rfc8785.dumps(loaded.resolved)).hexdigest()
    assert loaded.fingerprint == f"sha256:{digest}"
    assert fingerprint(resolve(plan_from_resolved(loaded.resolved))) == loaded.fingerprint


REORDERED = """\
hypotheses:
  - role: primary
    sparse: {test: fisher-exact, min_expected: 5}
    interval: newcombe
    measure: risk-difference
    alternative: two-sided
    test: pearson-chi-square
    compare: [negative-pressure, gauze]
    outcome: infection
    title: Negative-pressure vs gauze, 30-day infection
    id: H1
  - role: secondary
    interval: wald
    test: two-proportion-z
    compare: [alginate, gauze]
    outcome: infection
    id: H2
  - {role: exploratory, test: pearson-chi-square, compare: all, outcome: infection, id: H3}
multiplicity: holm
alpha: 0.05
outcomes:
  infection: {missing: exclude, no_event: [0], event: [1], column: infected_30d}
data:
  planned_n: {negative-pressure: 300, alginate: 300, gauze: 300}
  include:
    - {in: ["yes"], column: consented}
  reference: gauze
  groups: [gauze, alginate, negative-pressure]
  group: arm
  id: participant
protocol: WD-2027-01
title: Dressing regimens and 30-day wound infection
prespec: 1
"""

SAME_MEANING = {
    "comments and blank lines": "# header\n\n" + GOOD.replace(
        "alpha: 0.05", "alpha: 0.05   # two-sided overall\n\n# the hypotheses follow"),
    "key order and flow style": REORDERED,
    "block instead of flow": swap(
        "  groups: [gauze, alginate, negative-pressure]",
        "  groups:\n    - gauze\n    - alginate\n    - negative-pressure"),
    "wider indentation": re.sub(r"(?m)^(?= )", "  ", GOOD),
    "quoting style": swap("  groups: [gauze, alginate, negative-pressure]",
                          "  groups: ['gauze', \"alginate\", negative-pressure]").replace(
        "title: Dressing regimens and 30-day wound infection",
        "title: 'Dressing regimens and 30-day wound infection'"),
    "0.05 as 5e-2": swap("alpha: 0.05", "alpha: 5e-2"),
    "5 as 5.0": swap("min_expected: 5,", "min_expected: 5.0,"),
    "defaults written out": swap(
        "    role: secondary\n",
        "    role: secondary\n    alternative: two-sided\n    comparison: superiority\n"
        "    continuity: false\n    measure: risk-difference\n    margin: null\n"),
    "defaults left out": GOOD.replace("  reference: gauze\n", "").replace(
        "    alternative: two-sided\n    measure: risk-difference\n    interval: newcombe\n",
        "").replace("    role: primary\n", ""),
}


@pytest.mark.parametrize("name", list(SAME_MEANING))
def test_fingerprint_unchanged_by_form(tmp_path: Path, name: str) -> None:
    base = fp(tmp_path, GOOD, "base.yaml")
    assert fp(tmp_path, SAME_MEANING[name], "variant.yaml") == base


def test_file_hash_moves_when_the_fingerprint_does_not(tmp_path: Path) -> None:
    (tmp_path / "a.yaml").write_text(GOOD, encoding="utf-8")
    (tmp_path / "b.yaml").write_text(SAME_MEANING["comments and blank lines"], encoding="utf-8")
    a, b = load_plan(tmp_path / "a.yaml"), load_plan(tmp_path / "b.yaml")
    assert a.fingerprint == b.fingerprint
    assert a.file_sha256 != b.file_sha256


NEW_MEANING = {
    "alpha": swap("alpha: 0.05", "alpha: 0.025"),
    "a group added": swap("[gauze, alginate, negative-pressure]",
                          "[gauze, alginate, negative-pressure, foam]"),
    "a group renamed": GOOD.replace("alginate", "calcium-alginate"),
    "group order": swap("[gauze, alginate, negative-pressure]",
                        "[gauze, negative-pressure, alginate]"),
    "a test": swap("test: two-proportion-z", "test: fisher-exact"),
    "the sparse test": swap("test: fisher-exact}", "test: two-proportion-z}"),
    "the sparse bound": swap("min_expected: 5,", "min_expected: 10,"),
    "continuity written true": swap("    role: secondary\n",
                                    "    role: secondary\n").replace(
        "    role: primary\n", "    role: primary\n    continuity: true\n"),
    "alternative written one-sided": swap("    role: secondary\n",
                                          "    role: secondary\n    alternative: greater\n"),
    "reference written as another group": swap("reference: gauze", "reference: alginate"),
    "role written as non-default": swap("    role: primary\n", "    role: secondary\n"),
    "interval": swap("interval: wald", "interval: newcombe"),
    "multiplicity": swap("multiplicity: holm", "multiplicity: bonferroni"),
    "missing rule": swap("missing: exclude", "missing: no-event"),
    "population": swap('in: ["yes"]', 'in: ["yes", "pending"]'),
    "planned n": swap("{gauze: 300,", "{gauze: 310,"),
    "title": swap("30-day wound infection", "30-day wound infections"),
    "protocol left out": swap("protocol: WD-2027-01\n", ""),
    "hypothesis order": GOOD.replace("  - id: H2", "  - id: HX").replace(
        "  - id: H1", "  - id: H2").replace("  - id: HX", "  - id: H1"),
}


@pytest.mark.parametrize("name", list(NEW_MEANING))
def test_fingerprint_changed_by_meaning(tmp_path: Path, name: str) -> None:
    base = fp(tmp_path, GOOD, "base.yaml")
    assert fp(tmp_path, NEW_MEANING[name], "variant.yaml") != base


def test_distinct_meanings_have_distinct_fingerprints(tmp_path: Path) -> None:
    prints = [fp(tmp_path, text, f"v{i}.yaml") for i, text in enumerate(NEW_MEANING.values())]
    assert len(set(prints)) == len(prints)
