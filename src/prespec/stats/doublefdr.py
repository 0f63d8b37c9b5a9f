"""The double false discovery rate of Mehrotra and Heyse (2004) for terms grouped by body system.

Adverse-event terms are tested one 2×2 comparison each, and the terms fall into groups (body
systems). The double FDR adjusts twice with Benjamini–Hochberg: once across the groups, through
one representative p-value per group, and once within each group.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from numbers import Real

from prespec.stats.multiplicity import adjust


@dataclass(frozen=True)
class DoubleFdr:
    """The double FDR of a family of terms, per term (input order) and per group.

    ``groups`` lists the distinct groups in the order they are first seen; ``group_p`` and
    ``group_flagged`` follow it. The per-term fields follow the input order.
    """

    p_group: tuple[float, ...]  # per term: its group's representative p adjusted across groups
    p_adjusted: tuple[float, ...]  # per term: BH-adjusted within its group
    flagged: tuple[bool, ...]  # per term
    groups: tuple[str, ...]  # the distinct groups, first-seen order
    group_p: tuple[float, ...]  # per group: representative p adjusted across groups
    group_flagged: tuple[bool, ...]


def _level(name: str, value: object) -> float:
    if isinstance(value, bool) or not isinstance(value, Real):
        raise ValueError(f"{name} must be a number, got {value!r}")  # noqa: TRY004 (the interface raises ValueError)
    number = float(value)
    if not (math.isfinite(number) and 0.0 < number < 1.0):
        raise ValueError(f"{name} must be strictly between 0 and 1, got {number!r}")
    return number


def _group_names(groups: Sequence[str], size: int) -> list[str]:
    if isinstance(groups, (str, bytes)):
        raise ValueError("groups must be a sequence of group names, not one string")  # noqa: TRY004 (the interface raises ValueError)
    names = list(groups)
    if len(names) != size:
        raise ValueError(f"p has {size} values but groups has {len(names)}")
    for i, name in enumerate(names):
        if not isinstance(name, str):
            raise ValueError(f"groups[{i}] must be text, got {name!r}")  # noqa: TRY004 (the interface raises ValueError)
        if not name.strip():
            raise ValueError(f"groups[{i}] is an empty group name")
    return names


def double_fdr(
    p: Sequence[float], groups: Sequence[str], *, level_groups: float, level_terms: float
) -> DoubleFdr:
    """Mehrotra and Heyse's double false discovery rate, with Benjamini–Hochberg at both steps.

    What is computed (written from memory of the paper, as follows):

    1. Within each group g, the terms' p-values are adjusted by Benjamini–Hochberg over the
       m_g terms of that group (``p_adjusted``). The group's representative p-value is the
       smallest of its adjusted p-values (equivalently min over i of m_g·p(i)/i, the Simes
       combination of the group's p-values).
    2. The G representatives are adjusted by Benjamini–Hochberg across the G groups
       (``group_p``; ``p_group`` repeats it on each term of the group).
    3. A group is flagged when its adjusted representative is <= ``level_groups``; a term is
       flagged when its group is flagged and its within-group adjusted p-value is
       <= ``level_terms``.

    Later variants (Mehrotra and Adewale 2012, which adjust the terms of the flagged groups
    differently) are not this. A group name is text that is not blank; terms of one group need
    not be adjacent. Empty input gives an empty result. Raises ValueError (one line) for a
    p-value not in [0, 1], lengths that differ, a blank group name or a level outside (0, 1).

    References
    ----------
    Cited from memory, as is the description of the method above.

    Mehrotra DV, Heyse JF. Use of the false discovery rate for evaluating clinical safety data.
    Statistical Methods in Medical Research 2004;13:227–238.
    Benjamini Y, Hochberg Y. Controlling the false discovery rate. JRSS B 1995;57:289–300.
    Mehrotra DV, Adewale AJ. Flagging clinical adverse experiences: reducing false discoveries
    without materially compromising power for detecting true signals. Statistics in Medicine
    2012;31:1918–1930 (a later variant, not implemented here).
    """
    alpha_groups = _level("level_groups", level_groups)
    alpha_terms = _level("level_terms", level_terms)
    if isinstance(p, (str, bytes)):
        raise ValueError("p must be a sequence of numbers")  # noqa: TRY004 (the interface raises ValueError)
    values = list(p)
    names = _group_names(groups, len(values))
    # adjust() checks every p-value is a number in [0, 1]; check them all before grouping so
    # that the message names the position in the input
    adjust(values, "none")
    order: dict[str, list[int]] = {}
    for i, name in enumerate(names):
        order.setdefault(name, []).append(i)
    within = [0.0] * len(values)
    representatives: list[float] = []
    for members in order.values():
        adjusted = adjust([values[i] for i in members], "benjamini-hochberg")
        for i, value in zip(members, adjusted):
            within[i] = value
        representatives.append(min(adjusted))
    across = adjust(representatives, "benjamini-hochberg")
    group_flagged = tuple(value <= alpha_groups for value in across)
    index = {name: g for g, name in enumerate(order)}
    return DoubleFdr(
        p_group=tuple(across[index[name]] for name in names),
        p_adjusted=tuple(within),
        flagged=tuple(
            group_flagged[index[name]] and within[i] <= alpha_terms for i, name in enumerate(names)
        ),
        groups=tuple(order),
        group_p=tuple(across),
        group_flagged=group_flagged,
    )
