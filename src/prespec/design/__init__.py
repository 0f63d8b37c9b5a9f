"""Design: sample size and power per hypothesis, and the simulated operating characteristics
of the plan's whole decision rule.

Public interface: :func:`design_document` and :func:`design_text` (``prespec design``),
:func:`planned_vs_achieved` (the ``design`` entry of results.json), and the modules
``samplesize`` (closed forms), ``exactpower`` (exact power by enumeration) and ``simulate``
(whole trials on arrays).
"""

from prespec.design.document import (
    alpha_shares,
    design_document,
    design_text,
    planned_vs_achieved,
    scenarios_of,
    size_plan,
)

__all__ = [
    "alpha_shares",
    "design_document",
    "design_text",
    "planned_vs_achieved",
    "scenarios_of",
    "size_plan",
]
