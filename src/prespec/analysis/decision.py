"""The plan's decision rule, written once: which test runs, which hypotheses are rejected, and
their adjusted p-values.

The rule has three parts, each a function here and nowhere else:

- **which test** (:func:`has_sparse_switch`, :func:`sparse_fires`, :func:`test_chosen`,
  :func:`chosen_p_values`): the planned test, or the pre-specified ``sparse`` test where the
  smallest expected count of the table is below ``min_expected``;
- **reject or not** (:func:`rejects`): a p-value rejects at a level when it is a number at most
  that level; a p-value that could not be computed rejects nothing;
- **the plan's procedure** (:func:`decide`): the main family (the non-exploratory hypotheses)
  adjusted by the plan's ``multiplicity``, in plan order, a p-value that could not be computed
  entering as 1; exploratory hypotheses at the nominal alpha; the pairwise follow-ups of a
  k-group hypothesis (``then``) tested, with their own adjustment, only where their parent is
  rejected (gatekeeping).

Everything works on arrays with one row per table: the run is the case of one row
(``analysis.hypotheses``), the design simulation decides thousands of simulated trials at once
(``design.simulate``), and the tipping point decides every cell of its grid
(``analysis.sensitivity``). The statistics themselves (the tests, the smallest expected count,
the multiplicity procedures) are computed by the kernels in ``stats``; this module only
chooses and compares.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from prespec.stats.graphical import graphical_adjust_many
from prespec.stats.multiplicity import adjust_many

if TYPE_CHECKING:
    from prespec.plan.model import Hypothesis, Plan

#: The family of the plan's non-exploratory hypotheses, adjusted by its ``multiplicity``.
MAIN_FAMILY = "main"


# --- which test ---

def has_sparse_switch(hyp: Any) -> bool:
    """Whether the hypothesis can switch test: it pre-specifies ``sparse`` and compares at
    least two groups (a one-group test has no table of expected counts)."""
    return getattr(hyp, "sparse", None) is not None and getattr(hyp, "kind", None) != "single"


def sparse_fires(hyp: Hypothesis, smallest: Any) -> np.ndarray:
    """Where the pre-specified switch applies: the smallest expected count (row total ×
    column total / grand total, one per table) is below ``sparse.min_expected``. A boolean
    array of the shape of ``smallest``; False everywhere for a hypothesis without a switch."""
    smallest = np.asarray(smallest, dtype=float)
    if not has_sparse_switch(hyp):
        return np.zeros(smallest.shape, dtype=bool)
    return smallest < hyp.sparse.min_expected


def test_chosen(hyp: Hypothesis, fired: bool) -> str:
    """The test that runs: the switched-to test where the switch fired, else the planned one."""
    return hyp.sparse.test if fired else hyp.test


def chosen_p_values(hyp: Any, fired: Any,
                    p_of: Callable[[str, np.ndarray], np.ndarray]) -> np.ndarray:
    """The p-value of each table by the test chosen for it.

    ``fired`` is :func:`sparse_fires` per table; ``p_of(test, where)`` returns the p-values of
    ``test`` on the tables selected by the boolean mask ``where`` (in their order; nan where
    the test gives none). Each test runs only on the tables it was chosen for.
    """
    fired = np.asarray(fired, dtype=bool)
    p = np.full(fired.shape, np.nan)
    for switched in (False, True):
        where = fired if switched else ~fired
        if where.any():
            p[where] = p_of(test_chosen(hyp, switched), where)
    return p


# --- reject or not ---

def rejects(p: Any, level: Any) -> np.ndarray:
    """Whether each p-value rejects at ``level``: a number (not nan) at most the level."""
    p = np.asarray(p, dtype=float)
    with np.errstate(invalid="ignore"):
        return ~np.isnan(p) & (p <= level)


# --- the plan's procedure over its hypotheses ---

@dataclass(frozen=True)
class Unit:
    """A hypothesis as the rule sees it: its id, its family (:data:`MAIN_FAMILY`,
    ``"<parent> pairwise"`` for follow-ups, None for exploratory ones) and its parent."""

    id: str
    family: str | None
    parent: str | None = None


def family_of(hyp: Hypothesis, parent: Any = None) -> str | None:
    """The family of a plan hypothesis, or of a follow-up of ``parent``: None when it (or its
    parent) is exploratory, or when it is a Bayesian rule (outside the multiplicity family)."""
    if parent is None:
        return None if hyp.outside_multiplicity else MAIN_FAMILY
    return None if parent.role == "exploratory" else f"{parent.id} pairwise"


@dataclass(frozen=True)
class Decision:
    """The rule's decisions, one row per table (trial), one column per unit.

    ``adjusted``: the multiplicity-adjusted p-value, nan where there is none (exploratory,
    no p-value, follow-up behind a closed gate); ``reject``: the decision (exploratory at the
    nominal alpha; no p-value or a closed gate: False); ``gate_open``: for a follow-up,
    whether its parent was rejected (True for the others); ``computable``: whether the raw
    p-value is a number.
    """

    adjusted: np.ndarray
    reject: np.ndarray
    gate_open: np.ndarray
    computable: np.ndarray


def adjusted_p_values(p: np.ndarray, method: Any, ids: Sequence[str]) -> np.ndarray:
    """Adjusted p-values of each row (a family in plan order) by a named method or the
    graphical procedure (weights and transitions looked up by id; absent ones are 0)."""
    if isinstance(method, str):
        return adjust_many(p, method)
    weights = [float(method.weights.get(i, 0.0)) for i in ids]
    transitions = [[float(method.transitions.get(a, {}).get(b, 0.0)) for b in ids] for a in ids]
    return graphical_adjust_many(p, weights, transitions)


def decide(plan: Plan, units: Sequence[Unit], raw: Any) -> Decision:
    """The plan's decisions on raw p-values (rows × units, nan: not computable).

    The main family is adjusted by ``plan.multiplicity``; each follow-up family by its parent's
    ``then.multiplicity``, and only where the parent is rejected; exploratory units at
    ``plan.alpha``. A p-value that could not be computed enters its family's adjustment as 1
    (it can never be rejected and does not make the others easier to reject).
    """
    raw = np.atleast_2d(np.asarray(raw, dtype=float))
    computable = ~np.isnan(raw)
    filled = np.where(computable, raw, 1.0)
    adjusted = np.full(raw.shape, np.nan)
    reject = np.zeros(raw.shape, dtype=bool)
    gate_open = np.ones(raw.shape, dtype=bool)
    index = {u.id: i for i, u in enumerate(units)}
    families: dict[str, list[int]] = {MAIN_FAMILY: []}
    for i, unit in enumerate(units):
        if unit.family is None:
            reject[:, i] = rejects(raw[:, i], plan.alpha)
        else:
            families.setdefault(unit.family, []).append(i)
    for members in families.values():  # the main family first: it opens the gates
        if not members:
            continue
        parent = units[members[0]].parent
        if parent is None:
            method = plan.multiplicity
        else:
            method = plan.hypothesis(parent).then.multiplicity
            gate_open[:, members] = reject[:, index[parent]][:, None]
        values = adjusted_p_values(filled[:, members], method, [units[i].id for i in members])
        tested = gate_open[:, members] & computable[:, members]
        adjusted[:, members] = np.where(tested, values, np.nan)
        reject[:, members] = tested & rejects(values, plan.alpha)
    return Decision(adjusted, reject, gate_open, computable)
