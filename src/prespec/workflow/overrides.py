"""Overrides: a run that changes the locked analysis from the command line.

Each change is an ``override`` departure that needs ``--accept-deviation``; the results mark
every hypothesis the change reaches as not pre-specified, and verify recomputes such a run with
the same overrides (docs/departures.md).
"""

from __future__ import annotations

import copy
from collections.abc import Mapping
from typing import Any

from prespec.common.departures import Departure
from prespec.errors import BadInput, IntegrityStop


def _hypothesis_index(resolved: dict[str, Any], ident: str, key: str) -> int:
    ids = [h.get("id") for h in resolved.get("hypotheses", [])]
    if ident not in ids:
        raise BadInput(f"{key}: the plan has no hypothesis {ident!r} (it has: "
                       f"{', '.join(str(i) for i in ids)})")
    return ids.index(ident)


def apply_overrides(resolved: dict[str, Any], overrides: Mapping[str, Any]
                    ) -> tuple[dict[str, Any], list[dict[str, Any]]]:
    """The resolved plan with ``overrides`` applied, and the keys whose value changed.

    Keys are ``alpha``, ``multiplicity`` and ``hypotheses.<id>.<key>`` (e.g.
    ``hypotheses.H1.test``). A value equal to the locked one changes nothing and is not
    listed. Each change is ``{"key", "locked", "used"}``. A hypothesis's ``sparse`` switch to
    the very test now used no longer applies: it is removed, and listed as a change too.
    """
    plan = copy.deepcopy(resolved)
    changed: list[dict[str, Any]] = []
    for key, value in overrides.items():
        parts = key.split(".")
        if parts[0] == "hypotheses" and len(parts) == 3:
            target = plan["hypotheses"][_hypothesis_index(plan, parts[1], key)]
            name = parts[2]
            if name == "id":
                raise BadInput(f"{key}: a hypothesis id cannot be overridden")
        elif len(parts) == 1 and parts[0] in ("alpha", "multiplicity"):
            target, name = plan, parts[0]
        else:
            raise BadInput(f"{key}: not a key that can be overridden (alpha, multiplicity, "
                           "hypotheses.<id>.<key>)")
        locked = target.get(name)
        if locked == value and type(locked) is type(value):
            continue
        target[name] = value
        changed.append({"key": key, "locked": locked, "used": value})
        sparse = target.get("sparse") if name == "test" else None
        if isinstance(sparse, dict) and sparse.get("test") == value:
            # the pre-specified switch would switch to the test now used: it no longer applies
            target["sparse"] = None
            changed.append({"key": key.rsplit(".", 1)[0] + ".sparse", "locked": sparse,
                            "used": None})
        if name == "test":
            changed += _leave_test(target, str(locked), value, key.rsplit(".", 1)[0])
    return plan, changed


#: The keys only a test uses: they no longer apply when an override leaves it.
_OWN_KEYS = {
    "g-computation": ("covariates", "variance", "randomisation_strata", "covariate_missing",
                      "fallback"),
    "stratified-score": ("weights", "strata"),
    "cochran-mantel-haenszel": ("strata",),
    # a Bayesian rule's margin goes with comparison: superiority, which no other test takes
    "posterior-probability": ("prior", "threshold", "credible", "sceptical_prior", "margin"),
}


def _leave_test(target: dict[str, Any], old: str, new: Any, where: str
                ) -> list[dict[str, Any]]:
    """An override from ``old`` to ``new`` test: the keys only ``old`` used are dropped (a
    stratified test keeps its strata for another stratified one), and a measure or interval
    that ``new`` does not take becomes its default; each is listed as a change."""
    from prespec.plan import vocabulary as v
    from prespec.plan.model import default_interval, default_measure, kind_of

    changes: list[dict[str, Any]] = []

    def change(name: str, used: Any) -> None:
        if target.get(name) != used:
            changes.append({"key": f"{where}.{name}", "locked": target.get(name), "used": used})
            target[name] = used

    for name in _OWN_KEYS.get(old, ()):
        if name == "strata" and new in v.STRATIFIED_TESTS:
            continue
        change(name, None)
    kind = kind_of(target.get("compare"))
    own = v.OWN_INTERVALS.get(new)
    measures = tuple(own) if own else v.MEASURES_BY_KIND.get(kind or "", ())
    if target.get("measure") is not None and target.get("measure") not in measures:
        change("measure", default_measure(kind, new))
    measure = target.get("measure")
    if measure is not None:
        intervals = (own or {}).get(measure) or v.INTERVALS_BY_MEASURE.get(measure, ())
        if target.get("interval") not in intervals:
            change("interval", default_interval(kind, new, measure))
    return changes


def _show(value: Any) -> str:
    from prespec.audit.history import show

    return show(value)


def override_departures(changes: list[dict[str, Any]], accept: str | None) -> list[Departure]:
    if not changes:
        return []
    if accept is None:
        listed = ", ".join(f"{c['key']} {_show(c['locked'])} → {_show(c['used'])}"
                           for c in changes)
        raise IntegrityStop(
            f"the command line changes the locked analysis ({listed}); give "
            "--accept-deviation \"REASON\" to run it, recorded as override and marked as not "
            "pre-specified"
        )
    return [Departure("override", f"{c['key']}: {_show(c['locked'])} as locked, "
                      f"{_show(c['used'])} used (set on the command line; not pre-specified)",
                      _show(c["locked"]), _show(c["used"]), accepted=accept) for c in changes]
