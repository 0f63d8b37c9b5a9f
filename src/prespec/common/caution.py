"""The caution that every report and the README carry."""

CAUTION = (
    "prespec computes what the plan asks. It does not judge whether the plan suits the study, "
    "and results that inform clinical or regulatory decisions need review by a qualified "
    "statistician under the applicable guidance (ICH E9 and local requirements)."
)
