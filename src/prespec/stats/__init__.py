"""The statistics room: pure functions on counts, frozen result objects out.

No I/O and no plan objects: tests of equal proportions, confidence intervals, expected counts
and multiplicity adjustment, each validated on its input and citing its published source.
"""

from prespec.stats.intervals import newcombe_difference, wald_difference, wilson
from prespec.stats.multiplicity import ADJUSTMENT_METHODS, adjust
from prespec.stats.proportions import fisher_exact, pearson_chi_square, two_proportion_z
from prespec.stats.results import Estimate, TestResult
from prespec.stats.tables import expected_counts, smallest_expected

__all__ = [
    "ADJUSTMENT_METHODS",
    "Estimate",
    "TestResult",
    "adjust",
    "expected_counts",
    "fisher_exact",
    "newcombe_difference",
    "pearson_chi_square",
    "smallest_expected",
    "two_proportion_z",
    "wald_difference",
    "wilson",
]
