"""A blinded rehearsal: the whole run on a dummy allocation, reported as pooled figures only.

Before unblinding, a statistician wants to know that the data conform to the plan and that
every step of the run will execute, without learning anything about the groups. A rehearsal
therefore never reads the group column: it is dropped as soon as the file is read (it may be
masked, hold the real labels, or be absent). Each row is given a dummy group by a random
permutation (in the proportions of ``planned_n`` when it names every group, else equal sizes;
the generator is seeded from ``os.urandom`` and the seed is kept nowhere), and the whole run is
computed on that allocation and rendered into a temporary folder that is deleted afterwards.
What the rehearsal writes is pooled over the groups and so depends on no allocation: the
overall event rate of each outcome with its Wilson interval, the missingness, the population
counts, the departures that do not depend on the groups, whether each hypothesis executed,
and the data dictionary (:mod:`prespec.data.dictionary`).
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from prespec import audit
from prespec.analysis.families import (
    analyse_families,
    ordinary_plan,
    prepare_run,
    rehearsal_families,
    templates,
)
from prespec.analysis.hypotheses import analyse, compute_hypothesis
from prespec.analysis.results import finish
from prespec.common.caution import CAUTION
from prespec.common.departures import Departure, Note
from prespec.common.environment import environment
from prespec.data import Prepared
from prespec.data.dictionary import data_dictionary, uses
from prespec.data.engines.base import DataSource
from prespec.data.families import FamilyData
from prespec.errors import BadInput
from prespec.plan import load_plan
from prespec.plan.followups import follow_ups
from prespec.stats import intervals
from prespec.workflow.base import (
    check_out_path,
    environment_departures,
    finish_stopped_writes,
    plain_errors,
    resolve_actor,
    still_as_read,
    with_lock_history,
)
from prespec.workflow.execute import (
    build_results,
    default_folder,
    family_file,
    provenance,
    with_engine,
)
from prespec.workflow.publish import RunOutcome

if TYPE_CHECKING:
    from prespec.plan.model import Hypothesis, Plan

# The codes of the rehearsal's own notes.
NOTE_NOT_LOCKED = "rehearsal-without-lock"
NOTE_DIFFERS_FROM_LOCK = "rehearsal-of-unlocked-change"
NOTE_STEP_FAILED = "rehearsal-step-failed"
NOTE_ONE_GROUP = "rehearsal-one-group"
NOTE_GROUPS_NOT_READ = "rehearsal-groups-not-read"

# Notes of the data preparation that count rows regardless of their group (kept); every other
# note of the dummy run depends on the dummy allocation and is dropped.
_POOLED_NOTE_CODES = frozenset({"blank-stratum"})
# Departures of the data preparation that do not depend on the groups (kept).
_POOLED_DEPARTURE_CODES = frozenset({"unmapped-outcome-value"})


@dataclass(frozen=True)
class Pooled:
    """One outcome over all analysed rows: events, total, missing, and the Wilson interval."""

    outcome: str
    events: int
    total: int  # analysed, after the missing rule
    missing: int  # blank or unmapped outcome cells among the analysed rows
    rate: float | None
    low: float | None
    high: float | None
    level: float

    def to_json(self) -> dict[str, Any]:
        return {"events": self.events, "total": self.total, "missing": self.missing,
                "rate": self.rate, "ci": [self.low, self.high], "ci_method": "wilson",
                "level": self.level}


@dataclass(frozen=True)
class Executed:
    """Whether one hypothesis's computation ran on the dummy allocation, and what stopped it."""

    id: str
    executed: bool
    problem: str | None


def blinded_frame(frame: pd.DataFrame, plan: Plan, plan_file: str) -> pd.DataFrame:
    """The rows without the group column; a plan that reads the group column elsewhere is
    bad input, since a rehearsal must not read it."""
    group = plan.data.group
    for use in uses(plan):
        if use.column == group:
            raise BadInput(f"{plan_file}: {use.role}: column {group!r} is the group column "
                           "(data.group), which a rehearsal never reads")
    return frame.drop(columns=[group]) if group in frame.columns else frame


def allocation_sizes(rows: int, groups: list[str], planned_n: dict[str, int] | None
                     ) -> list[int]:
    """Group sizes summing to ``rows``: proportional to ``planned_n`` when it names every
    group, else as equal as possible (largest remainders, ties to the earlier group)."""
    weights = ([float(planned_n[g]) for g in groups]
               if planned_n and all(g in planned_n for g in groups) else [1.0] * len(groups))
    total = sum(weights)
    exact = [rows * w / total for w in weights]
    sizes = [int(x) for x in exact]
    order = sorted(range(len(groups)), key=lambda i: (-(exact[i] - sizes[i]), i))
    for i in order[: rows - sum(sizes)]:
        sizes[i] += 1
    return sizes


def dummy_allocation(rows: int, groups: list[str], planned_n: dict[str, int] | None,
                     rng: np.random.Generator) -> np.ndarray:
    """A random permutation of the group labels over ``rows`` rows, in the sizes above."""
    labels = np.repeat(np.array(groups, dtype=object),
                       allocation_sizes(rows, groups, planned_n))
    return rng.permutation(labels)


def _fresh_generator() -> np.random.Generator:
    """A generator seeded from the operating system; the seed is not kept."""
    return np.random.default_rng(int.from_bytes(os.urandom(32), "big"))


def _one_line(exc: BaseException) -> str:
    words = " ".join(str(exc).split())
    return f"{type(exc).__name__}: {words}" if words else type(exc).__name__


def pooled_outcomes(prepared: Prepared, level: float) -> list[Pooled]:
    """Each outcome summed over every group: it does not depend on how rows were allocated."""
    out = []
    for name, counts in prepared.outcomes.items():
        events = sum(gc.events for gc in counts.groups)
        total = sum(gc.total for gc in counts.groups)
        missing = sum(gc.blank + gc.unmapped for gc in counts.groups)
        if total > 0:
            est = intervals.wilson(events, total, level)
            rate, low, high = est.value, est.low, est.high
        else:
            rate = low = high = None
        out.append(Pooled(name, events, total, missing, rate, low, high, level))
    return out


def _missing_notes(plan: Plan, pooled: list[Pooled]) -> list[Note]:
    action = {"exclude": "left out of the analysis", "event": "counted as events",
              "no-event": "counted as no event", "error": "an error"}
    notes = []
    for p in pooled:
        rule = plan.outcomes[p.outcome].missing
        if p.missing:
            what = "missing outcome" if p.missing == 1 else "missing outcomes"
            notes.append(Note(f"missing-{rule}", f"outcome {p.outcome!r}: {p.missing} {what} "
                              f"{action[rule]} (missing: {rule}), all groups together"))
    return notes


def _shortfalls(plan: Plan, pooled: list[Pooled]) -> tuple[list[Departure], int | None]:
    planned_n = plan.data.planned_n
    if not planned_n:
        return [], None
    planned = sum(planned_n.values())
    if not all(g in planned_n for g in plan.data.groups):
        return [], planned
    found = [Departure("sample-size-shortfall",
                       f"outcome {p.outcome!r}, all groups together: {p.total} analysed, "
                       f"{planned} planned (a rehearsal does not read the groups, so it checks "
                       "the overall size only)", str(planned), str(p.total))
             for p in pooled if p.total < planned]
    return found, planned


def _diagnose(plan: Plan, prepared: Prepared) -> list[Executed]:
    """Compute each hypothesis and follow-up on its own, to name the ones that fail."""
    out = []
    for hyp in plan.hypotheses:
        subs = [hyp, *(follow_ups(hyp, plan) if hyp.then is not None else [])]
        for sub in subs:
            try:
                compute_hypothesis(sub, plan, prepared, [])
                out.append(Executed(sub.id, True, None))
            except Exception as exc:  # noqa: BLE001 - any failure is the rehearsal's finding
                out.append(Executed(sub.id, False, _one_line(exc)))
    return out


def _shown(values: Any) -> str:
    return "[" + ", ".join(json.dumps(v, ensure_ascii=False) for v in values or []) + "]"


def would_not_compute(hyp: Hypothesis, plan: Plan, prepared: Prepared) -> str | None:
    """Why a hypothesis would have no result in the run, from pooled figures only (no unit
    in the population, or none analysed for its outcome), or None. The dummy allocation
    cannot change these: they hold whatever the groups."""
    if prepared.rows_read == 0:
        return "the data hold no rows"
    if prepared.analysed == 0:
        return (f"the population is empty: the population filter (data.include) leaves out "
                f"all {prepared.rows_read} rows read")
    counts = prepared.counts_for(hyp.id, hyp.outcome).groups
    if sum(gc.total for gc in counts) > 0:
        return None
    outcome = plan.outcomes[hyp.outcome]
    unmapped, blank = sum(gc.unmapped for gc in counts), sum(gc.blank for gc in counts)
    if unmapped:
        return (f"outcome {hyp.outcome!r} maps no value of column {outcome.column!r}: none of "
                f"its {unmapped} non-blank values in the population is in event "
                f"{_shown(outcome.event)} or no_event {_shown(outcome.no_event)}"
                + (f" ({blank} more blank)" if blank else ""))
    if blank:
        return (f"outcome {hyp.outcome!r}: all {blank} outcomes in the population are blank "
                f"(missing: {outcome.missing})")
    return f"outcome {hyp.outcome!r}: no unit analysed"


def _hypothesis_rows(plan: Plan, executed: dict[str, Executed],
                     prepared: Prepared | None = None) -> list[dict[str, Any]]:
    """One row per hypothesis and follow-up; one that executed but would have no result in
    the run (``would_not_compute``) is marked as not executed, with the reason."""
    rows = []
    for hyp in plan.hypotheses:
        subs = [hyp, *(follow_ups(hyp, plan) if hyp.then is not None else [])]
        empty = would_not_compute(hyp, plan, prepared) if prepared is not None else None
        for sub in subs:
            done = executed.get(sub.id, Executed(sub.id, False, "not reached"))
            if done.executed and empty is not None:
                done = Executed(sub.id, False, f"would not compute: {empty}")
            rows.append({"id": sub.id, "title": sub.title, "role": sub.role,
                         "outcome": sub.outcome, "compare": sub.compare, "test": sub.test,
                         "parent": hyp.id if sub is not hyp else None,
                         "executed": done.executed, "problem": done.problem})
    return rows


def _event_labels(event_table: dict[str, Any], plan: Any, labels: Any) -> None:
    """The labels an event table (a transport or dataset file) declares: its columns' beside
    the columns read, each level's beside the level (matched as the plan matches values)."""
    from prespec.common.matching import value_key

    spec = plan.data.events
    read = [(spec.id, "data.events.id"), (spec.level, "data.events.level")]
    if spec.within:
        read.append((spec.within, "data.events.within"))
    declared = {value_key(k): v for k, v in labels.values.get(spec.level, {}).items()}
    for level in event_table["levels"]:
        if value_key(level["level"]) in declared:
            level["label"] = declared[value_key(level["level"])]
    if labels.columns or declared:
        event_table["columns"] = [
            {"column": c, "role": r, **({"label": labels.columns[c]}
                                        if c in labels.columns else {})} for c, r in read]


def _dummy_looks(plan: Any, hypotheses: list[dict[str, Any]], notes: list[Note]) -> None:
    """The step of interim looks on the dummy allocation, as the final analysis with no
    earlier looks (the rehearsal has no log of looks); its departures are discarded."""
    from prespec.analysis.looks import LookRun, apply_looks, number_of_looks

    count = number_of_looks(plan)
    if count is not None:
        apply_looks(plan, hypotheses, LookRun(count, count, (), (), ()), notes)


def _dummy_run(*, plan: Any, prepared: Prepared, common: dict[str, Any], full: Any = None,
               family_data: list[FamilyData] | None = None
               ) -> tuple[dict[str, Executed], list[Note]]:
    """The statistics and the whole report on the dummy allocation, in a temporary folder
    that is deleted afterwards; which hypotheses executed, and notes on failed steps.

    ``plan`` holds the ordinary hypotheses; the families of ``full`` run on ``family_data``
    (each family's id is marked as executed or not)."""
    from prespec.workflow.publish import build_report

    notes: list[Note] = []
    families: list[dict[str, Any]] = []
    family_executed: dict[str, Executed] = {}
    for data in family_data or []:
        try:
            families += analyse_families(full, [data], [])
            family_executed[data.hypothesis] = Executed(data.hypothesis, True, None)
        except Exception as exc:  # noqa: BLE001 - a failed step is the rehearsal's finding
            family_executed[data.hypothesis] = Executed(data.hypothesis, False, _one_line(exc))
    try:
        hypotheses, stat_notes = analyse(plan, prepared)
        _dummy_looks(plan, hypotheses, stat_notes)
    except Exception as exc:  # noqa: BLE001 - recorded; name the hypotheses that fail
        found = _diagnose(plan, prepared)
        if all(e.executed for e in found):
            notes.append(Note(NOTE_STEP_FAILED, f"the multiplicity step failed: "
                              f"{_one_line(exc)}"))
        notes.append(Note(NOTE_STEP_FAILED, "the report step was not reached"))
        return {**{e.id: e for e in found}, **family_executed}, notes
    executed = {h["id"]: Executed(h["id"], True, None) for h in hypotheses}
    executed.update(family_executed)
    scratch = Path(tempfile.mkdtemp(prefix="prespec-rehearsal-"))
    try:
        results = build_results(kind="run", plan=plan, prepared=prepared,
                                hypotheses=hypotheses, deviations=list(prepared.deviations),
                                notes=[*prepared.notes, *stat_notes], **common)
        if families:
            results["families"] = families
        build_report(scratch / "dummy-run", results)
    except Exception as exc:  # noqa: BLE001 - a failed step is the rehearsal's finding
        notes.append(Note(NOTE_STEP_FAILED, f"the report step failed on the dummy allocation: "
                          f"{_one_line(exc)}"))
    finally:
        shutil.rmtree(scratch, ignore_errors=True)
    return executed, notes


def _numeric_summary(values: np.ndarray, weights: np.ndarray) -> dict[str, float] | None:
    units = np.repeat(values.astype(float), weights)
    if not len(units):
        return None
    return {"mean": float(units.mean()),
            "sd": float(units.std(ddof=1)) if len(units) > 1 else None,
            "min": float(units.min()), "median": float(np.median(units)),
            "max": float(units.max())}


def covariate_figures(frame: pd.DataFrame, plan: Plan, source: str, prepared: Prepared
                      ) -> tuple[list[dict[str, Any]] | None, list[dict[str, Any]] | None]:
    """Per covariate-adjusted hypothesis: each covariate's missingness and distribution pooled
    over the groups, and whether its working model fits on the dummy allocation (never a
    risk, never a coefficient); (None, None) when the plan adjusts nothing.

    The pooled units are those of the hypothesis with every row given its first group, so
    they are the whole analysed population whatever the dummy allocation; a summary is over
    the units with every covariate recorded."""
    from prespec.analysis.adjusted import fit
    from prespec.data.prepare import prepare
    from prespec.stats.adjusted import ModelFailure

    ordinary = ordinary_plan(plan)
    adjusted = [h for h in ordinary.hypotheses if h.covariates is not None]
    if not adjusted:
        return None, None
    figures: list[dict[str, Any]] = []
    checks: list[dict[str, Any]] = []
    for hyp in adjusted:
        everyone = frame.assign(**{plan.data.group: hyp.compare[0]})
        units = prepare(everyone, ordinary, source).units[hyp.id]
        missing = units.missing_covariate.get(hyp.compare[0], {})
        analysed = int(units.weights.sum())
        for column, kind, values in units.covariates:
            row: dict[str, Any] = {"hypothesis": hyp.id, "column": column, "kind": kind,
                                   "analysed": analysed, "missing": missing.get(column, 0),
                                   "summary": None, "levels": None}
            if kind == "numeric":
                row["summary"] = _numeric_summary(values, units.weights)
            else:
                row["levels"] = [{"level": str(level),
                                  "count": int(units.weights[values == level].sum())}
                                 for level in sorted(set(values))]
            figures.append(row)
        try:
            fit(hyp, prepared.units[hyp.id], 0.95)
            checks.append({"hypothesis": hyp.id, "fits": True, "reason": None})
        except ModelFailure as exc:
            checks.append({"hypothesis": hyp.id, "fits": False, "reason": str(exc)})
    return figures, checks


def compute_rehearsal(
    *,
    plan_path: Path,
    plan: Plan,
    fingerprint: str,
    version: int | None,
    data_path: Path | None,
    actor: str,
    environment: dict[str, str],
    deviations: list[Departure],
    notes: list[Note],
    source: DataSource | None = None,
    engine: str = "auto",
) -> dict[str, Any]:
    """Read the data without the group column, rehearse the run, and build the pooled
    results.json document of a rehearsal (not written). ``source`` (default: the file
    ``data_path``) is read by ``engine``; no engine is asked for the group column."""
    from prespec.data.engines.pipeline import blinded_rows, event_rows, unit_plan
    from prespec.data.engines.sources import (
        data_file_field,
        data_files_field,
        file_stamps,
        resolve_events_source,
    )
    from prespec.data.events import event_data, event_templates, tally_frames

    if source is None:
        source = DataSource("file", str(data_path), str(data_path))
    events = resolve_events_source(plan_path, plan, source) if event_templates(plan) else None
    units = unit_plan(plan) if events is not None else plan  # the unit table's part
    blinded_frame(pd.DataFrame(), units, str(plan_path))  # refuses a plan that reads the group
    if templates(units):
        family_file(source, engine)  # families: one file, the pandas engine
    before = file_stamps(source)
    read = blinded_rows(units, source, engine=engine)
    files = data_files_field(plan_path, source, before)
    frame = blinded_frame(read.frame, units, str(plan_path))
    data_hash = read.data_hash
    source_name = source.shown
    from prespec.data.engines.sources import source_labels

    dictionary = data_dictionary(frame, units, source_name, source_labels(source))
    groups = list(plan.data.groups)
    frame = frame.assign(**{plan.data.group: dummy_allocation(
        len(frame.index), groups, plan.data.planned_n, _fresh_generator())})
    prepared, family_data = prepare_run(frame, units, source_name)
    event_table: dict[str, Any] | None = None
    event_departures: list[Departure] = []
    event_notes: list[Note] = []
    if events is not None:  # joined in-process: the counts per level pooled over the groups
        ev = event_rows(plan, events, engine=engine)
        joined = event_data(tally_frames(frame, ev.frame, plan), plan, prepared, ev.shown)
        family_data = list(joined.families)
        event_departures, event_notes = list(joined.deviations), list(joined.notes)
        summary = joined.summary
        event_table = {"data_file": data_file_field(plan_path, events), "data": ev.data_hash,
                       **{k: summary[k] for k in ("rows", "unmatched_rows", "unmatched_ids",
                                                  "blank_level_rows", "outside_rows")},
                       "levels": [{"level": k, "rows": v}
                                  for k, v in sorted(summary["levels"].items())]}
        _event_labels(event_table, plan, source_labels(events))
    covariates, model_checks = covariate_figures(frame, plan, source_name, prepared)
    del frame  # the dummy labels go no further than the dummy run

    level = 1.0 - plan.alpha
    pooled = pooled_outcomes(prepared, level)
    shortfalls, planned_total = _shortfalls(plan, pooled)
    data_file = data_file_field(plan_path, source)
    common = {"fingerprint": fingerprint, "version": version, "data_hash": data_hash,
              "data_file": data_file, "actor": actor, "environment": environment}
    executed, step_notes = _dummy_run(plan=ordinary_plan(plan), prepared=prepared,
                                      common=common, full=plan, family_data=family_data)

    all_deviations = [*deviations,
                      *(d for d in prepared.deviations if d.code in _POOLED_DEPARTURE_CODES),
                      *(d for f in family_data for d in f.deviations
                        if d.code in _POOLED_DEPARTURE_CODES),
                      *shortfalls, *event_departures]
    all_notes = [*notes, Note(NOTE_GROUPS_NOT_READ, f"column {plan.data.group!r} (data.group) "
                              "was not read; every figure here is pooled over the groups")]
    if len(groups) == 1:
        all_notes.append(Note(NOTE_ONE_GROUP, f"data.groups has one group ({groups[0]}), so "
                              "the pooled figures are that group's"))
    all_notes += _missing_notes(plan, pooled)
    all_notes += [n for n in prepared.notes if n.code in _POOLED_NOTE_CODES]
    all_notes += step_notes
    all_notes += event_notes
    return finish({
        **with_engine(provenance(kind="rehearsal", plan=plan, fingerprint=fingerprint,
                                 version=version, data_hash=data_hash, data_file=data_file,
                                 actor=actor, environment=environment), read.engine, read.query,
                     files),
        "blinded": True,
        "population": {
            "rows_read": prepared.rows_read,
            "excluded_by_filter": prepared.excluded_by_filter,
            "excluded_group": 0,
            "analysed": prepared.analysed,
        },
        "planned_total": planned_total,
        "analysed_total": prepared.analysed,
        "pooled": {p.outcome: p.to_json() for p in pooled},
        "hypotheses": _hypothesis_rows(ordinary_plan(plan), executed, prepared),
        **({"families": rehearsal_families(plan, family_data, executed)}
           if family_data else {}),
        **({"event_table": event_table} if event_table is not None else {}),
        "data_dictionary": dictionary,
        **({"covariates": covariates, "model_checks": model_checks} if covariates is not None
           else {}),
        "deviations": [d.to_json() for d in all_deviations],
        "notes": [n.to_json() for n in all_notes],
        "caution": CAUTION,
    })


@plain_errors
def rehearse(plan: str | Path, data: str | Path | None = None, *,
             out: str | Path | None = None, actor: str | None = None,
             engine: str = "auto") -> RunOutcome:
    """A blinded dry run of the plan file on ``data``: the group column is never read.

    The plan may be locked or not (a missing or changed lock is a note, never a stop). The
    run is computed on a random dummy allocation and its report rendered and discarded; the
    report folder (default ``reports/<stem>/<time>-rehearsal``) holds pooled figures and the
    data dictionary only, and the log records a ``rehearse`` entry. The lock is not touched.
    ``data`` and ``engine`` as in ``run``; no engine's query names the group column.
    """
    from prespec.data.engines.sources import check_source, resolve_source
    from prespec.workflow.publish import publish

    loaded = load_plan(Path(plan))
    source, source_notes = resolve_source(loaded.path, loaded.model, data)
    check_source(source)
    with audit.guard.hold(loaded.path.parent, exclusive=True):  # the files as one state
        entries = finish_stopped_writes(loaded.path)
        doc = audit.read_lock(audit.lock_path(loaded.path))
    deviations: list[Departure] = []
    notes: list[Note] = []
    version = None
    record = None  # the lock version in force, when the plan file is the locked one
    env = environment()
    notes.extend(source_notes)
    if doc is None:
        notes.append(Note(NOTE_NOT_LOCKED, "the plan is not locked: a rehearsal needs no lock, "
                          "but lock the plan before the run on unblinded data"))
    elif audit.latest(doc).get("fingerprint") != loaded.fingerprint:
        notes.append(Note(NOTE_DIFFERS_FROM_LOCK, "the plan file differs in meaning from its "
                          f"lock (version {audit.latest(doc).get('version')}); the plan file was "
                          "rehearsed; amend the lock before the run on unblinded data"))
    else:
        record = audit.latest(doc)
        version = int(record["version"])
        deviations.extend(environment_departures(record, env))
    out_path = Path(out) if out is not None else default_folder(loaded.path, "rehearsal")
    if out is not None:
        check_out_path(loaded.path, out_path)
    results = compute_rehearsal(
        plan_path=loaded.path, plan=loaded.model, fingerprint=loaded.fingerprint,
        version=version, data_path=None, actor=resolve_actor(actor), environment=env,
        deviations=deviations, notes=notes, source=source, engine=engine,
    )
    if record is not None:  # when locked, by the log
        results = finish(with_lock_history(results, entries, record))
    in_force = audit.latest(doc)["fingerprint"] if doc is not None else None
    return publish(loaded.path, out_path, results, numbered=out is None, action="rehearse",
                   before_entry=lambda: still_as_read(loaded.path, in_force, entries, False))
