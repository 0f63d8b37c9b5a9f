"""Reading data, matching values, and reducing rows to count tables."""

from prespec.common.canonical import file_sha256
from prespec.common.matching import ValueSet, as_number, as_text, is_blank, value_key

from .prepare import (
    GroupCounts,
    HypothesisCounts,
    IntercurrentCount,
    OutcomeCounts,
    Prepared,
    Stratum,
    prepare,
)
from .read import read_data

__all__ = [
    "GroupCounts",
    "HypothesisCounts",
    "IntercurrentCount",
    "OutcomeCounts",
    "Prepared",
    "Stratum",
    "ValueSet",
    "as_number",
    "as_text",
    "file_sha256",
    "is_blank",
    "prepare",
    "read_data",
    "value_key",
]
