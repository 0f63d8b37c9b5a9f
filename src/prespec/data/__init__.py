"""Reading data, matching values, and reducing rows to count tables."""

from ..canonical import file_sha256
from .prepare import GroupCounts, OutcomeCounts, Prepared, prepare
from .read import read_data
from .values import ValueSet, as_number, as_text, is_blank

__all__ = [
    "GroupCounts",
    "OutcomeCounts",
    "Prepared",
    "ValueSet",
    "as_number",
    "as_text",
    "file_sha256",
    "is_blank",
    "prepare",
    "read_data",
]
