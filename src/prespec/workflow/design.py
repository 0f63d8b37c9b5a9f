"""``design``: sample size and power per hypothesis of the plan file, and on request the
simulated operating characteristics of its whole decision rule; a ``design`` entry records
them (docs/files.md)."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

from prespec import audit
from prespec.analysis.families import ordinary_plan
from prespec.audit.record import commit_entry
from prespec.errors import BadInput
from prespec.workflow.base import finish_stopped_writes, plain_errors, resolve_actor


@plain_errors
def design(plan: str | Path, *, simulate: int | None = None, seed: int | None = None,
           actor: str | None = None,
           progress: Callable[[str, int, int], None] | None = None) -> dict[str, Any]:
    """Sample size and power per hypothesis of the plan file as written; with ``simulate``,
    the operating characteristics of the plan's whole decision rule over that many trials per
    scenario (``seed``: default 1). Appends a ``design`` entry to the log; returns the design
    document (docs/files.md, "Design output"). ``progress(scenario, done, total)`` is
    called after each chunk of simulated trials.
    """
    from prespec.common.canonical import canonical_json, sha256_tag
    from prespec.design import design_document
    from prespec.design.document import designed_n_line
    from prespec.design.planned import load_for_design, refuse_unsimulated

    if simulate is not None and simulate < 1:
        raise BadInput(f"--simulate: the number of trials must be at least 1, got {simulate}")
    if seed is not None and seed < 0:
        raise BadInput(f"--seed must be 0 or more, got {seed}")
    loaded, designed_n = load_for_design(Path(plan))  # designed_n: for a missing planned_n
    sized = ordinary_plan(loaded.model)  # families are flagged, not sized
    if simulate is not None:
        refuse_unsimulated(loaded.path, loaded.model)
    if not sized.hypotheses:
        raise BadInput(f"{loaded.path}: design sizes the plan's ordinary hypotheses, and this "
                       "plan has only families (over), which are not sized")
    doc = design_document(sized, where=str(loaded.path),
                          fingerprint=loaded.fingerprint,
                          simulate_trials=simulate, seed=seed, progress=progress)
    if designed_n is not None:
        doc["planned_n_from_design"] = designed_n
        doc["notes"].insert(0, designed_n_line(designed_n))
        if doc["simulation"] is not None:
            doc["simulation"]["sizes_from"] = "the designed sizes; the plan has no data.planned_n"
    sim = doc["simulation"]
    details = {
        "plan_file_sha256": loaded.file_sha256,
        "simulate": None if sim is None else sim["trials"],
        "seed": None if sim is None else sim["seed"],
        "hypotheses": [{k: h[k] for k in ("id", "alpha", "n_per_group", "n_enrol_per_group",
                                          "power")} for h in doc["hypotheses"]],
        "scenarios": [{k: s[k] for k in ("name", "trials", "fwer", "fdr", "any", "all")}
                      for s in doc["scenarios"]],
        "document": sha256_tag(canonical_json(doc)),
    }
    if designed_n is not None:
        details["planned_n_from_design"] = designed_n
    with audit.guard.hold(loaded.path.parent, exclusive=True):
        finish_stopped_writes(loaded.path)
        commit_entry(loaded.path, actor=resolve_actor(actor), action="design",
                     fingerprint=loaded.fingerprint, data=None, details=details)
    return doc
