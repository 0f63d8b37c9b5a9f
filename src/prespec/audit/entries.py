"""The entries of the audit log, declared once as typed models, one per kind of ``details``.

Every entry has the same envelope (``seq``, ``at``, ``actor``, ``action``, ``plan``, ``data``,
``details``, ``deviations``, ``prev``, an optional ``signature``, ``hash``; see ``log.py``);
what ``details`` holds depends on the action:

- ``lock`` and ``amend``: the version locked, the plan file's SHA-256, the reason, the digest of
  the lock record, and for an amend the changes in meaning (:class:`VersionDetails`);
  with ``--timestamp``, the time-stamp token's digest and file (:class:`TimestampDetails`);
- ``run``, ``look`` and ``rehearse``: the report folder and its manifest, the look, the family
  members and the engine (:class:`ReportDetails`);
- ``design``: the sizes and the simulated operating characteristics (:class:`DesignDetails`).

:func:`checked` builds the details of an entry through its model before it is written; verify
reads entries through :func:`read_entry`, leniently (keys of another prespec are ignored).
``prespec schema --of log-entry`` prints the JSON Schema of :class:`LogEntry`.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import Discriminator, Field, RootModel, Tag

from prespec.common.records import (
    LENIENT,
    TAG,
    Count,
    DataFile,
    Departure,
    Flag,
    Number,
    Part,
    Text,
    draft_2020_12,
)

Hex64 = Annotated[str, Field(pattern=r"^[0-9a-f]{64}$", strict=True)]
Tagged = Annotated[str, Field(pattern=r"^sha256:[0-9a-f]{64}$", strict=True)]
Members = dict[Text, list[Text]]  # per family id, its member ids


class TimestampDetails(Part):
    """An RFC 3161 time-stamp of the entry (``audit/timestamp.py``), present only when one was
    asked for: the SHA-256 of the token's DER, its file (relative to the plan's folder, in
    ``<stem>.timestamps/``) and the authority's URL (without any credential)."""

    token: Tagged
    file: Text
    authority: Text


class VersionDetails(Part):
    """A ``lock`` or ``amend``: the version now in force and how to check its lock record."""

    version: Count
    plan_file_sha256: Tagged
    reason: Text | None  # an amend's --reason; null for the first lock
    record: Tagged  # sha256 of the canonical form of the whole lock version
    changes: list[Text] | None = None  # an amend: the changes in meaning
    families: Members | None = None  # families with declared levels
    timestamp: TimestampDetails | None = None  # lock/amend --timestamp: stamps ``record``


class LookHypothesis(Part):
    """What a look recorded of one hypothesis with looks (the next look's history)."""

    id: Text
    analysed: Count | None
    fraction: Number | None
    z: Number | None = None  # a Bayesian rule records none
    information: Number | None = None
    estimate: Number | None
    crossed: Flag | None
    posterior_probability: Number | None = None  # a Bayesian rule
    predictive_probability: Number | None = None


class ReportDetails(Part):
    """A ``run``, ``look`` or ``rehearse``: its report folder (relative to the plan's folder)
    and the SHA-256 of its manifest, then what verify compares with the report."""

    report: Text
    manifest: Tagged
    look: Count | None = None  # a plan with interim looks
    of: Count | None = None
    hypotheses: list[LookHypothesis] | None = None
    data_files: list[DataFile] | None = None  # a glob: every file read
    families: Members | None = None
    engine: Text | None = None  # added with the engines
    engine_library: Text | None = None
    query: Text | None = None
    timestamp: TimestampDetails | None = None  # run --timestamp: stamps results.json


class DesignHypothesis(Part):
    id: Text
    alpha: Number | None
    n_per_group: dict[Text, Count] | None
    n_enrol_per_group: dict[Text, Count] | None
    power: Number | None


class DesignScenario(Part):
    """The operating characteristics of the whole decision rule under one scenario."""

    name: Text
    trials: Count
    fwer: Number | None
    fdr: Number | None
    any: Number | None
    all: Number | None


class DesignDetails(Part):
    """A ``design``: the plan file designed, the sizes, the simulation and its document."""

    plan_file_sha256: Tagged
    simulate: Count | None
    seed: Count | None
    hypotheses: list[DesignHypothesis]
    scenarios: list[DesignScenario]
    document: Tagged  # sha256 of the canonical form of the design document
    planned_n_from_design: dict[Text, Count] | None = None


class Signature(Part):
    """An Ed25519 signature of a lock or amend entry's content (``audit/signing.py``)."""

    algorithm: Literal["ed25519"]
    key: Text
    value: Text


class Entry(Part):
    """The envelope every entry shares, in the order it is written."""

    seq: Annotated[int, Field(ge=1, strict=True)]
    at: Text
    actor: Text
    action: Literal["lock", "amend", "run", "look", "rehearse", "design"]
    plan: Tagged
    data: Text | None  # the data's SHA-256; null for a lock, an amend, a design
    details: dict[str, Any]
    deviations: list[Departure]
    prev: Hex64
    signature: Signature | None = None
    hash: Hex64


class VersionEntry(Entry):
    action: Literal["lock", "amend"]
    details: VersionDetails


class ReportEntry(Entry):
    action: Literal["run", "look", "rehearse"]
    details: ReportDetails


class DesignEntry(Entry):
    action: Literal["design"]
    details: DesignDetails


DETAILS: dict[str, type[Part]] = {"lock": VersionDetails, "amend": VersionDetails,
                                  "run": ReportDetails, "look": ReportDetails,
                                  "rehearse": ReportDetails, "design": DesignDetails}


def _family(value: Any) -> str:
    action = value.get("action") if isinstance(value, dict) else getattr(value, "action", None)
    return TAG + {"lock": "version", "amend": "version", "design": "design"}.get(str(action),
                                                                              "report")


class LogEntry(RootModel[Annotated[
    Annotated[VersionEntry, Tag(TAG + "version")] | Annotated[ReportEntry, Tag(TAG + "report")]
    | Annotated[DesignEntry, Tag(TAG + "design")],
    Discriminator(_family),
]]):
    """One line of the audit log: the envelope, and the details of its action."""


def checked(action: str, details: dict[str, Any], deviations: list[dict[str, Any]]
            ) -> dict[str, Any]:
    """The ``details`` of an ``action`` entry built through their model (the same keys, order
    and values), after checking them and each departure: a key or a value the models do not
    hold is a programming error, raised before the entry is written."""
    model = DETAILS.get(action)
    if model is None:
        raise ValueError(f"unknown log action {action!r}")
    for deviation in deviations:
        Departure.model_validate(deviation)
    return model.model_validate(details).dumped()


def read_entry(entry: Any) -> VersionEntry | ReportEntry | DesignEntry:
    """An entry read back: keys another prespec wrote and this one does not know are ignored.
    Raises ``pydantic.ValidationError`` for one that is not an entry."""
    return LogEntry.model_validate(entry, context={LENIENT: True}).root


def json_schema() -> dict[str, Any]:
    """The JSON Schema (draft 2020-12) of one log entry, from the models."""
    return draft_2020_12(LogEntry.model_json_schema(by_alias=True, mode="validation"),
                         "prespec audit log entry")
