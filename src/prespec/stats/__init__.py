"""The statistics room: pure functions on counts, frozen result objects out.

No I/O and no plan objects: tests of equal proportions on 2×2 and k×2 tables, exact and
unconditional tests, the trend test, one-group tests, tests at a margin, stratified methods,
confidence intervals for proportions, differences, ratios and odds ratios, expected counts and
multiplicity adjustment, each validated on its input and citing its published source.
"""

from prespec.stats.exact import FisherK, barnard_exact, boschloo_exact, fisher_exact_k
from prespec.stats.graphical import graphical_adjust, graphical_rejections
from prespec.stats.intervals import (
    agresti_caffo_difference,
    miettinen_nurminen_difference,
    newcombe_difference,
    wald_difference,
    wilson,
)
from prespec.stats.margins import farrington_manning, tost, wald_margin_z
from prespec.stats.multiplicity import ADJUSTMENT_METHODS, adjust
from prespec.stats.proportions import (
    fisher_exact,
    likelihood_ratio,
    pearson_chi_square,
    two_proportion_z,
)
from prespec.stats.ratios import (
    exact_conditional_odds_ratio,
    katz_ratio,
    koopman_ratio,
    miettinen_nurminen_odds_ratio,
    woolf_odds_ratio,
)
from prespec.stats.results import Estimate, TestResult
from prespec.stats.single import binomial_exact, clopper_pearson, jeffreys, one_proportion_z
from prespec.stats.stratified import (
    breslow_day_tarone,
    cochran_mantel_haenszel,
    mantel_haenszel_odds_ratio,
    mantel_haenszel_risk_difference,
    mantel_haenszel_risk_ratio,
)
from prespec.stats.tables import expected_counts, smallest_expected
from prespec.stats.trend import cochran_armitage

__all__ = [
    "ADJUSTMENT_METHODS",
    "Estimate",
    "FisherK",
    "TestResult",
    "adjust",
    "agresti_caffo_difference",
    "barnard_exact",
    "binomial_exact",
    "boschloo_exact",
    "breslow_day_tarone",
    "clopper_pearson",
    "cochran_armitage",
    "cochran_mantel_haenszel",
    "exact_conditional_odds_ratio",
    "expected_counts",
    "farrington_manning",
    "fisher_exact",
    "fisher_exact_k",
    "graphical_adjust",
    "graphical_rejections",
    "jeffreys",
    "katz_ratio",
    "koopman_ratio",
    "likelihood_ratio",
    "mantel_haenszel_odds_ratio",
    "mantel_haenszel_risk_difference",
    "mantel_haenszel_risk_ratio",
    "miettinen_nurminen_difference",
    "miettinen_nurminen_odds_ratio",
    "newcombe_difference",
    "one_proportion_z",
    "pearson_chi_square",
    "smallest_expected",
    "tost",
    "two_proportion_z",
    "wald_difference",
    "wald_margin_z",
    "wilson",
    "woolf_odds_ratio",
]
