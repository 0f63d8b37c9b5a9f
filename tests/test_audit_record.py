"""audit.record: the commit point every step records through (DEVELOPERS.md, The audit trail).

An entry whose details its model does not hold is refused before anything is written, and what
the step made is undone; a refusal by ``before`` likewise; once the entry is in, ``finish``
runs and the entry counts."""

from __future__ import annotations

from pathlib import Path

import pytest
from pydantic import ValidationError

from prespec import audit
from prespec.audit.record import commit_entry, settle

FP = "sha256:" + "a" * 64
DETAILS = {"report": "reports/p/r1", "manifest": "sha256:" + "b" * 64}


def study(tmp_path: Path) -> Path:
    plan = tmp_path / "p.yaml"
    plan.write_text("prespec: 1\n", encoding="utf-8")
    return plan


def test_an_entry_whose_details_its_model_refuses_writes_nothing(tmp_path: Path) -> None:
    plan = study(tmp_path)
    undone: list[str] = []
    with pytest.raises(ValidationError):
        commit_entry(plan, actor="a", action="run", fingerprint=FP, data=FP,
                     details={**DETAILS, "unheard_of": 1},
                     undo=lambda: undone.append("undo"), finish=lambda: undone.append("finish"))
    assert undone == ["undo"]
    assert not audit.log_path(plan).exists() and not audit.head_path(plan).exists()


def test_before_may_refuse_the_entry(tmp_path: Path) -> None:
    plan = study(tmp_path)
    steps: list[str] = []

    def refuse() -> None:
        raise RuntimeError("the lock changed while this ran")

    with pytest.raises(RuntimeError):
        commit_entry(plan, actor="a", action="run", fingerprint=FP, data=FP, details=DETAILS,
                     before=refuse, undo=lambda: steps.append("undo"),
                     finish=lambda: steps.append("finish"))
    assert steps == ["undo"] and not audit.log_path(plan).exists()


def test_an_entry_that_counts_is_finished_and_settles(tmp_path: Path) -> None:
    plan = study(tmp_path)
    steps: list[str] = []
    entry = commit_entry(plan, actor="a", action="run", fingerprint=FP, data=FP,
                         details=DETAILS, undo=lambda: steps.append("undo"),
                         finish=lambda: steps.append("finish"))
    assert steps == ["finish"]
    assert (entry["seq"], entry["details"], entry["deviations"]) == (1, DETAILS, [])
    assert settle(plan) == [entry]  # the chain and the head as written
