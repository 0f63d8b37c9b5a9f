"""The names of the CSV files in a report's ``tables/``: unique within a run and reversible.

One rule, used for every table a run writes:

- ``tables/groups-<outcome>.csv``: the groups of one outcome;
- ``tables/<hypothesis id>.csv``: the table of one hypothesis (follow-ups included);
- ``tables/family-<family id>.csv``: the members of one family;
- ``tables/model-<hypothesis id>.csv``: the working model and the marginal risks of one
  covariate-adjusted (g-computation) hypothesis;
- ``tables/bayes-<hypothesis id>.csv``: the priors, posteriors, posterior probability,
  threshold and prior-sensitivity rows of one Bayesian (posterior-probability) hypothesis;
- ``tables/results.csv``: one row per hypothesis, follow-up and family member, with every
  figure of the results table; ``tables/statistics.csv``: the same results in long form, one
  row per statistic; ``tables/flow.csv``: the participant flow by group.

A label is written as it is when made of ASCII letters, digits, ``_``, ``.`` and ``-``; every
other byte of its UTF-8 form is percent-encoded (``%2B``, ``%2F``, ``%20``, ``%25`` for ``%``
itself), and so is a leading ``.`` (no hidden file, never ``.`` or ``..``). So ``H+1``, ``H/1``
and ``H_1`` give ``H%2B1.csv``, ``H%2F1.csv`` and ``H_1.csv``, and
``urllib.parse.unquote`` gives the label back. A hypothesis id that would begin like one of
the other kinds (``groups-…``, ``family-…``, ``model-…``, ``bayes-…``) has that ``-`` encoded
(``groups%2Dx.csv``), and one named like a table of the whole run (``results``,
``statistics``, ``flow``) has its first letter encoded (``%72esults.csv``), so the kinds never
share a name. A stem longer than ``MAX_STEM`` bytes
(file systems stop at 255) is cut and ends in ``~`` and 16 hex digits of the label's SHA-256:
unique still, but no longer reversible; no plan label of ordinary length comes near it.
"""

from __future__ import annotations

import hashlib
import string
from urllib.parse import unquote

TABLES = "tables"
MAX_STEM = 200
_SAFE = frozenset((string.ascii_letters + string.digits + "_.-").encode("ascii"))
_KIND_PREFIXES = ("groups-", "family-", "model-", "bayes-")
RESULTS_TABLE = f"{TABLES}/results.csv"
STATISTICS_TABLE = f"{TABLES}/statistics.csv"
FLOW_TABLE = f"{TABLES}/flow.csv"
_RUN_TABLES = frozenset({"results", "statistics", "flow"})


def encode_label(label: str) -> str:
    """``label`` with every byte outside the safe set (and a leading ``.``) percent-encoded."""
    out = []
    for i, byte in enumerate(label.encode("utf-8")):
        if byte in _SAFE and not (i == 0 and byte == ord(".")):
            out.append(chr(byte))
        else:
            out.append(f"%{byte:02X}")
    return "".join(out)


def decode_stem(stem: str) -> str:
    """The label a (not cut) stem was made from."""
    return unquote(stem, encoding="utf-8", errors="strict")


def _bounded(stem: str, label: str) -> str:
    if len(stem) <= MAX_STEM:
        return stem
    digest = hashlib.sha256(label.encode("utf-8")).hexdigest()[:16]
    cut = stem[:MAX_STEM - 17]
    cut = cut[:cut.rfind("%")] if "%" in cut[-2:] else cut  # never half an escape
    return f"{cut}~{digest}"


def groups_table(outcome: str) -> str:
    """``tables/groups-<outcome>.csv``."""
    return f"{TABLES}/{_bounded('groups-' + encode_label(outcome), outcome)}.csv"


def hypothesis_table(hypothesis_id: str) -> str:
    """``tables/<hypothesis id>.csv``; never the name of a table of another kind."""
    stem = encode_label(hypothesis_id)
    for prefix in _KIND_PREFIXES:
        if stem.startswith(prefix):
            stem = f"{prefix[:-1]}%2D{stem[len(prefix):]}"
    if stem in _RUN_TABLES:
        stem = f"%{ord(stem[0]):02X}{stem[1:]}"
    return f"{TABLES}/{_bounded(stem, hypothesis_id)}.csv"


def family_table(family_id: str) -> str:
    """``tables/family-<family id>.csv``."""
    return f"{TABLES}/{_bounded('family-' + encode_label(family_id), family_id)}.csv"


def model_table(hypothesis_id: str) -> str:
    """``tables/model-<hypothesis id>.csv``: an adjusted hypothesis's working model."""
    return f"{TABLES}/{_bounded('model-' + encode_label(hypothesis_id), hypothesis_id)}.csv"


def bayes_table(hypothesis_id: str) -> str:
    """``tables/bayes-<hypothesis id>.csv``: a Bayesian hypothesis's priors and posteriors."""
    return f"{TABLES}/{_bounded('bayes-' + encode_label(hypothesis_id), hypothesis_id)}.csv"
