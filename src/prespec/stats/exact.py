"""Exact tests that are not Fisher's 2×2 test: unconditional 2×2 tests and the k×2 Fisher test.

Barnard's and Boschloo's tests do not condition on the total number of events. Their p-value is
the largest probability, over the common event rate π (the nuisance parameter), of the tables at
least as extreme as the observed one; it is found on a fine grid of π and refined by a bounded
local optimiser around the best grid points. The support is handled all at once with numpy: every
table (a, b) of the (n1 + 1)(n2 + 1) is classified, and the probability of the extreme region is
a polynomial in π, Σ_s c_s π^s (1 − π)^(N − s), whose coefficients c_s (sums of binomial
coefficient products over the region's tables with a + b = s) are computed once in log space.

The k×2 Fisher (Freeman–Halton) test enumerates the tables with the observed margins, pruned by
bounds on the probability that the remaining groups can reach, or draws them at random.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from fractions import Fraction
from numbers import Integral

import numpy as np
from scipy import special

from prespec.stats import _checks
from prespec.stats._lazy import minimize_scalar
from prespec.stats.results import TestResult

#: Relative tolerance for a table as probable (Fisher) or as extreme (Boschloo) as the observed one.
TIE_TOLERANCE = 1e-7
#: Points of the grid of the nuisance parameter π (at least this many, more for large N).
GRID_POINTS = 1024
#: How many of the best local maxima on the grid are refined by the local optimiser.
REFINED_MAXIMA = 5
#: The largest support, (n1 + 1)(n2 + 1) tables, of Barnard's and Boschloo's tests (memory).
MAX_UNCONDITIONAL_TABLES = 1001 * 1001
#: Default cap on the number of k×2 tables with the observed margins that are enumerated.
MAX_TABLES = 10_000_000

#: Absolute margin (log scale) on the completion bounds used for pruning.
BOUND_MARGIN = 1e-9

_LOG_TIE = math.log1p(TIE_TOLERANCE)


# --- the unconditional tests (Barnard, Boschloo) ------------------------------------------------


def _log_binomial(n: int) -> np.ndarray:
    """log C(n, a) for a = 0..n."""
    a = np.arange(n + 1, dtype=float)
    return special.gammaln(n + 1.0) - special.gammaln(a + 1.0) - special.gammaln(n - a + 1.0)


def _region_log_coefficients(region: np.ndarray, n1: int, n2: int) -> np.ndarray:
    """log c_s, s = 0..N: log Σ C(n1, a) C(n2, b) over the region's tables with a + b = s."""
    total = n1 + n2
    log_mass = _log_binomial(n1)[:, None] + _log_binomial(n2)[None, :]
    s = np.add.outer(np.arange(n1 + 1), np.arange(n2 + 1))
    values = log_mass[region]
    sums = s[region]
    peak = np.full(total + 1, -np.inf)
    np.maximum.at(peak, sums, values)
    scaled = np.zeros(total + 1)
    np.add.at(scaled, sums, np.exp(values - peak[sums]))
    with np.errstate(divide="ignore"):
        return np.where(scaled > 0.0, peak + np.log(scaled), -np.inf)


def _log_p_of_rate(log_coef: np.ndarray, rates: np.ndarray) -> np.ndarray:
    """log P(region | π) for interior rates 0 < π < 1 (a vector)."""
    total = log_coef.size - 1
    keep = np.isfinite(log_coef)
    s = np.arange(total + 1, dtype=float)[keep]
    terms = (
        log_coef[keep][:, None]
        + s[:, None] * np.log(rates)[None, :]
        + (total - s)[:, None] * np.log1p(-rates)[None, :]
    )
    return special.logsumexp(terms, axis=0)


def _maximum_over_rate(log_coef: np.ndarray) -> float:
    """sup over π in [0, 1] of P(region | π): a grid, then a bounded refinement of its maxima."""
    if not np.any(np.isfinite(log_coef)):
        return 0.0
    total = log_coef.size - 1
    # At π = 0 only the table (0, 0) has probability (1); at π = 1 only (n1, n2).
    best = max(math.exp(min(0.0, log_coef[0])), math.exp(min(0.0, log_coef[-1])))
    points = max(GRID_POINTS, 4 * total)
    grid = np.linspace(0.0, 1.0, points + 1)[1:-1]
    chunk = max(1, 4_000_000 // (total + 1))
    log_p = np.concatenate(
        [_log_p_of_rate(log_coef, grid[i : i + chunk]) for i in range(0, grid.size, chunk)]
    )
    padded = np.concatenate([[-np.inf], log_p, [-np.inf]])
    peaks = np.flatnonzero((padded[1:-1] >= padded[:-2]) & (padded[1:-1] >= padded[2:]))
    peaks = peaks[np.argsort(log_p[peaks])[::-1][:REFINED_MAXIMA]]
    best = max(best, math.exp(min(0.0, float(log_p.max()))))
    step = 1.0 / points
    for i in peaks:
        low, high = max(grid[i] - step, 1e-300), min(grid[i] + step, 1.0 - 1e-16)
        found = minimize_scalar(
            lambda r: -float(_log_p_of_rate(log_coef, np.array([r]))[0]),
            bounds=(low, high),
            method="bounded",
            options={"xatol": 1e-12},
        )
        best = max(best, math.exp(min(0.0, -float(found.fun))))
    return min(1.0, best)


def _two_groups(
    method: str, x1: object, n1: object, x2: object, n2: object
) -> tuple[int, int, int, int]:
    """Validate the two groups, and the size of the support the unconditional tests hold."""
    a, m = _checks.events_of_total("x1", x1, "n1", n1)
    b, n = _checks.events_of_total("x2", x2, "n2", n2)
    support = (m + 1) * (n + 1)
    if support > MAX_UNCONDITIONAL_TABLES:
        raise ValueError(
            f"{method}: (n1 + 1)(n2 + 1) = {support} tables, more than the "
            f"{MAX_UNCONDITIONAL_TABLES} (1000 per group) this test handles"
        )
    return a, m, b, n


def _wald_order(n1: int, n2: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Pooled Wald statistics of every table, with the exact integers that order them.

    Returns (w, d, q): w = (p1 − p2)/sqrt(p(1 − p)(1/n1 + 1/n2)), 0 where p1 = p2;
    d = a·n2 − b·n1 (the sign of p1 − p2) and q = s(N − s), so that w² ∝ d²/q.
    """
    total = n1 + n2
    a = np.arange(n1 + 1, dtype=np.int64)[:, None]
    b = np.arange(n2 + 1, dtype=np.int64)[None, :]
    d = a * n2 - b * n1
    s = a + b
    q = s * (total - s)
    with np.errstate(divide="ignore", invalid="ignore"):
        w = d * math.sqrt(total) / np.sqrt(float(n1 * n2) * q)
    w = np.where(d == 0, 0.0, w)
    return w, d, q


def _wald_region(n1: int, n2: int, x1: int, x2: int, alternative: str) -> np.ndarray:
    """Tables whose pooled Wald statistic is at least as extreme as the observed one.

    Ties are decided exactly: |w| is compared through d²·q_obs against d_obs²·q in integers
    (exact while they fit in 63 bits, up to about 1400 per group; beyond that in floating
    point with a relative tolerance of 1e-12).
    """
    w, d, q = _wald_order(n1, n2)
    d_obs, q_obs = int(d[x1, x2]), int(q[x1, x2])
    if d_obs == 0:  # w_obs = 0
        not_smaller, not_larger = np.ones_like(d, dtype=bool), d == 0
    elif (n1 * n2) ** 2 * (n1 + n2) ** 2 < 2**62:
        # q = 0 only where d = 0 (no events or all events), a table with w = 0
        lhs, rhs = (d * d) * q_obs, (d_obs * d_obs) * q
        not_smaller, not_larger = (lhs >= rhs) & (d != 0), lhs <= rhs
    else:
        size, size_obs = np.abs(w), abs(float(w[x1, x2]))
        not_smaller = size >= size_obs * (1.0 - 1e-12)
        not_larger = size <= size_obs * (1.0 + 1e-12)
    if alternative == "two-sided":
        return not_smaller
    if alternative == "less":  # w <= w_obs is -w >= -w_obs
        d, d_obs = -d, -d_obs
    # w >= w_obs: for w_obs > 0 the tables with w > 0 and |w| >= |w_obs|; for w_obs <= 0 every
    # table with w >= 0 and those with w < 0 and |w| <= |w_obs|.
    if d_obs > 0:
        return (d > 0) & not_smaller
    return (d >= 0) | not_larger


def barnard_exact(x1: int, n1: int, x2: int, n2: int, *, alternative: str) -> TestResult:
    """Barnard's unconditional exact test of p1 = p2 with the pooled Wald statistic.

    The tables are ordered by w = (p1 − p2)/sqrt(p(1 − p)(1/n1 + 1/n2)), p the pooled proportion
    (w = 0 when p1 = p2). The p-value is the largest, over the common rate π in [0, 1], of the
    probability of the tables with w >= w_obs (``greater``), w <= w_obs (``less``) or
    |w| >= |w_obs| (``two-sided``), each group binomial. Ties are decided exactly in integers.
    The supremum is searched on a grid of max(1024, 4N) rates and refined by a bounded scalar
    optimiser around the five best local maxima of the grid. ``statistic`` is w_obs, the same
    value scipy.stats.barnard_exact reports; ``df`` is ``None``. The support is held in memory:
    more than 1001² tables ((n1 + 1)(n2 + 1), about 1000 per group) is a ValueError.

    References
    ----------
    Barnard GA. Significance tests for 2×2 tables. Biometrika 1947;34:123–138.
    Suissa S, Shuster JJ. Exact unconditional sample sizes for the 2×2 binomial trial. Journal
    of the Royal Statistical Society, Series A 1985;148:317–327 (the pooled z ordering).
    Mehta CR, Senchaudhuri P. Conditional versus unconditional exact tests for comparing two
    binomials. Technical report, 2003.
    """
    a, m, b, n = _two_groups("barnard-exact", x1, n1, x2, n2)
    alt = _checks.alternative(alternative)
    w, _, _ = _wald_order(m, n)
    region = _wald_region(m, n, a, b, alt)
    p = _maximum_over_rate(_region_log_coefficients(region, m, n))
    return TestResult("barnard-exact", float(w[a, b]), None, p, alt)


def _fisher_one_sided_log(n1: int, n2: int, side: str) -> np.ndarray:
    """log of Fisher's one-sided p-value for every table (a, b), shape (n1 + 1, n2 + 1).

    ``less``: log P(X1 <= a | a + b), ``greater``: log P(X1 >= a | a + b), X1 hypergeometric.
    Computed along each margin s with cumulative log-sum-exp, so it never underflows.
    """
    total = n1 + n2
    s = np.arange(total + 1)[:, None]
    a = np.arange(n1 + 1)[None, :]
    b = s - a
    valid = (b >= 0) & (b <= n2)
    log_c1, log_c2 = _log_binomial(n1), _log_binomial(n2)
    log_pmf = np.where(
        valid,
        log_c1[a] + log_c2[np.clip(b, 0, n2)] - _log_binomial(total)[s],
        -np.inf,
    )
    if side == "less":
        tail = np.logaddexp.accumulate(log_pmf, axis=1)
    else:
        tail = np.logaddexp.accumulate(log_pmf[:, ::-1], axis=1)[:, ::-1]
    by_table = np.full((n1 + 1, n2 + 1), -np.inf)
    rows, cols = np.nonzero(valid)
    by_table[cols, rows - cols] = tail[rows, cols]
    return np.minimum(by_table, 0.0)


def _fisher_one_sided_exact(n1: int, n2: int, side: str) -> Callable[[int, int], Fraction]:
    """Fisher's one-sided p-value of the table (a, b) as an exact fraction, from the integer
    tail Σ C(n1, j)C(n2, s − j) over j >= a (``greater``) or j <= a (``less``), s = a + b,
    over C(n1 + n2, s); the tails of each margin s are formed once."""
    tails: dict[int, list[int]] = {}

    def p_value(a: int, b: int) -> Fraction:
        s = a + b
        if s not in tails:
            low, high = max(0, s - n2), min(s, n1)
            terms = [math.comb(n1, j) * math.comb(n2, s - j) for j in range(low, high + 1)]
            if side == "greater":
                terms.reverse()
            running, cumulative = 0, []
            for term in terms:
                running += term
                cumulative.append(running)
            if side == "greater":
                cumulative.reverse()
            tails[s] = [low, *cumulative]
        low, *cumulative = tails[s]
        return Fraction(cumulative[a - low], math.comb(n1 + n2, s))

    return p_value


def _boschloo_region(a: int, m: int, b: int, n: int, side: str) -> tuple[np.ndarray, float]:
    """(the tables whose Fisher one-sided p-value is at most the observed one, the observed
    log p-value). The log p-values order the tables to about 1e-13; those within a relative
    TIE_TOLERANCE of the observed one, where that is too coarse to tell a tie from a table
    just less extreme, are decided by exact integer arithmetic."""
    log_fisher = _fisher_one_sided_log(m, n, side)
    observed = log_fisher[a, b]
    region = log_fisher <= observed - _LOG_TIE
    close = np.argwhere(~region & (log_fisher <= observed + _LOG_TIE))
    exact = _fisher_one_sided_exact(m, n, side)
    target = exact(a, b)
    for i, j in close:
        region[i, j] = exact(int(i), int(j)) <= target
    return region, float(observed)


def _boschloo_one_sided(a: int, m: int, b: int, n: int, side: str) -> tuple[float, float]:
    """(p-value, Fisher's one-sided p of the observed table) for one side of Boschloo's test."""
    region, observed = _boschloo_region(a, m, b, n, side)
    return _maximum_over_rate(_region_log_coefficients(region, m, n)), math.exp(observed)


def boschloo_exact(x1: int, n1: int, x2: int, n2: int, *, alternative: str) -> TestResult:
    """Boschloo's unconditional exact test: Barnard's construction ordered by Fisher's p-value.

    For ``greater`` the tables are ordered by Fisher's one-sided p-value P(X1 >= a | a + b)
    (``less``: P(X1 <= a | a + b)); the p-value is the largest, over the common rate π, of the
    probability of the tables whose Fisher p-value is at most the observed one, ties decided
    exactly (tables within a relative 1e-7 of the observed p-value are compared in exact
    integer arithmetic, so a table just less extreme is not counted as a tie). The
    two-sided p-value is twice the smaller one-sided p-value, at most 1, as in
    scipy.stats.boschloo_exact. ``statistic`` is the observed Fisher one-sided p-value (of the
    side with the smaller p-value when two-sided), as scipy reports it; ``df`` is ``None``.
    The supremum is found as in :func:`barnard_exact`, with the same limit on the support.

    References
    ----------
    Boschloo RD. Raised conditional level of significance for the 2×2-table when testing the
    equality of two probabilities. Statistica Neerlandica 1970;24:1–9.
    Lydersen S, Fagerland MW, Laake P. Recommended tests for association in 2×2 tables.
    Statistics in Medicine 2009;28:1159–1175.
    """
    a, m, b, n = _two_groups("boschloo-exact", x1, n1, x2, n2)
    alt = _checks.alternative(alternative)
    if alt != "two-sided":
        p, fisher = _boschloo_one_sided(a, m, b, n, alt)
        return TestResult("boschloo-exact", fisher, None, p, alt)
    p_less, fisher_less = _boschloo_one_sided(a, m, b, n, "less")
    p_greater, fisher_greater = _boschloo_one_sided(a, m, b, n, "greater")
    p, fisher = (p_less, fisher_less) if p_less < p_greater else (p_greater, fisher_greater)
    return TestResult("boschloo-exact", fisher, None, min(1.0, 2.0 * p), alt)


# --- Fisher's exact test on a k×2 table (Freeman–Halton) ---------------------------------------


@dataclass(frozen=True)
class FisherK:
    """The k×2 Fisher test with how its p-value was obtained.

    ``tables_enumerated`` is the number of tables with the observed margins, all of which the
    exact p-value accounts for, one by one or in pruned blocks (``None`` for a Monte Carlo
    p-value); ``monte_carlo_se`` is the standard error of a Monte Carlo p-value (``None`` when
    exact).
    """

    result: TestResult
    tables_enumerated: int | None
    monte_carlo_se: float | None


def _table_count(totals: list[int], events: int) -> int:
    """The number of k×2 tables with row totals ``totals`` and ``events`` in the event column."""
    ways = [1] + [0] * events  # ways[t]: tables of the groups so far with t events
    for n in totals:
        prefix = [0]
        for w in ways:
            prefix.append(prefix[-1] + w)
        ways = [prefix[t + 1] - prefix[max(0, t - n)] for t in range(events + 1)]
    return ways[events]


#: Above this many steps (Σ group size × events) the smallest-completion bound is not computed
#: by dynamic programming and the weaker bound 0 is used instead (still valid, prunes less).
LOWER_BOUND_STEPS = 20_000_000


def _completion_bounds(totals: list[int], events: int) -> tuple[np.ndarray, np.ndarray]:
    """Largest and smallest Σ log C(n_i, a_i) over the groups j..k−1 with Σ a_i = t.

    Arrays of shape (k + 1, events + 1); row k is the empty completion (0 at t = 0). Each
    log C(n, a) is concave in a, so the largest sum for t events takes the t largest of the
    groups' increments log((n − a)/(a + 1)) (a greedy merge); it is summed from the groups'
    own log C values so that it rounds as the tables themselves do. The smallest sum is found
    by dynamic programming when that is cheap enough, else bounded below by 0.
    """
    k = len(totals)
    high = np.full((k + 1, events + 1), -np.inf)
    high[k, 0] = 0.0
    increments = np.empty(0)
    owners = np.empty(0, dtype=np.int64)
    log_c = [_log_binomial(n) for n in totals]
    for j in range(k - 1, -1, -1):
        a = np.arange(totals[j], dtype=float)
        increments = np.concatenate([increments, np.log(totals[j] - a) - np.log(a + 1.0)])
        owners = np.concatenate([owners, np.full(totals[j], j, dtype=np.int64)])
        order = np.argsort(-increments, kind="stable")
        increments, owners = increments[order], owners[order]
        upto = min(events, increments.size)
        total = np.zeros(upto + 1)
        for i in range(j, k):
            taken = np.concatenate([[0], np.cumsum(owners[:upto] == i)])
            total += log_c[i][taken]
        high[j, : upto + 1] = total
    low = np.zeros((k + 1, events + 1))
    if sum(min(n, events) + 1 for n in totals) * (events + 1) <= LOWER_BOUND_STEPS:
        low[:] = np.inf
        low[k, 0] = 0.0
        for j in range(k - 1, -1, -1):
            for a in range(min(totals[j], events) + 1):
                low[j, a:] = np.minimum(low[j, a:], log_c[j][a] + low[j + 1, : events + 1 - a])
    return high, low


class _TooManyTables(Exception):
    """The pruned walk would visit more partial tables than it is allowed to."""


class _PrunedWalk:
    """Depth-first walk over the groups summing the tables no more probable than the observed.

    A node is a batch of partial tables (events so far, Σ log C(n_i, a_i) so far) for the first
    j groups. A partial table whose most probable completion is no more probable than the
    observed table adds its whole completion mass at once (Vandermonde: Σ Π C(n_i, a_i) over
    its completions is C(N_rest, t)); one whose least probable completion is more probable is
    dropped; the others are extended by the next group, in batches of at most ``BATCH`` so that
    memory stays small. ``budget`` caps the number of partial tables visited.
    """

    BATCH = 1_000_000

    def __init__(self, ev: list[int], tot: list[int], budget: float) -> None:
        self.tot, self.k, self.events = tot, len(tot), sum(ev)
        self.log_c = [_log_binomial(n) for n in tot]
        self.log_all = float(_log_binomial(sum(tot))[self.events])
        # the observed table's unnormalised log probability, widened for ties
        self.limit = sum(float(self.log_c[i][ev[i]]) for i in range(self.k)) + _LOG_TIE
        self.high, self.low = _completion_bounds(tot, self.events)
        self.rest = [sum(tot[j:]) for j in range(self.k + 1)]
        self.log_rest = [_log_binomial(r) for r in self.rest]
        self.budget, self.visited = budget, 0
        self.parts: list[float] = []

    def p_value(self) -> float:
        self.visit(0, np.zeros(1, dtype=np.int64), np.zeros(1))
        return min(1.0, math.fsum(self.parts))

    def visit(self, j: int, taken: np.ndarray, log_so_far: np.ndarray) -> None:
        t = self.events - taken
        # a margin on the bounds of partial tables: one that close to the limit is extended,
        # and its tables are compared one by one (exactly, at the last level)
        margin = 0.0 if j == self.k else BOUND_MARGIN
        whole = log_so_far + self.high[j, t] <= self.limit - margin
        if np.any(whole):
            mass = log_so_far[whole] + self.log_rest[j][t[whole]] - self.log_all
            self.parts.append(float(np.exp(mass).sum()))
        open_ = ~whole & (log_so_far + self.low[j, t] <= self.limit + margin)
        if j == self.k or not np.any(open_):
            return
        taken, log_so_far = taken[open_], log_so_far[open_]
        # the next group takes a in [first, last]: the later groups hold at most rest[j + 1]
        first = np.maximum(0, self.events - taken - self.rest[j + 1])
        last = np.minimum(self.tot[j], self.events - taken)
        width = last - first + 1
        ends = np.cumsum(width)
        self.visited += int(ends[-1])
        if self.visited > self.budget:
            raise _TooManyTables
        cuts = np.searchsorted(ends, np.arange(self.BATCH, int(ends[-1]), self.BATCH))
        for lo, hi in zip(np.concatenate([[0], cuts]), np.concatenate([cuts, [taken.size]])):
            if lo == hi:
                continue
            w = width[lo:hi]
            owner = np.repeat(np.arange(lo, hi), w)
            offset = np.arange(owner.size) - np.repeat(np.cumsum(w) - w, w)
            a = first[owner] + offset
            self.visit(j + 1, taken[owner] + a, log_so_far[owner] + self.log_c[j][a])


def _monte_carlo_option(value: object) -> tuple[int, int]:
    """Validate ``monte_carlo=(tables, seed)``: a positive number of tables, a seed >= 0."""
    if isinstance(value, (str, bytes)) or not isinstance(value, Sequence) or len(value) != 2:
        raise ValueError(f"monte_carlo must be (tables, seed), got {value!r}")
    tables, seed = value
    for name, number, smallest in (("tables", tables, 1), ("seed", seed, 0)):
        if isinstance(number, bool) or not isinstance(number, Integral) or number < smallest:
            raise ValueError(f"monte_carlo {name} must be an integer >= {smallest}, got {number!r}")
    return int(tables), int(seed)


def _fisher_k_monte_carlo(
    ev: list[int], tot: list[int], tables: int, seed: int
) -> tuple[float, float]:
    """Monte Carlo p-value (1 + hits)/(tables + 1) and its standard error sqrt(p(1 − p)/tables).

    The tables are drawn from the multivariate hypergeometric law of the events given the
    margins (numpy Generator(PCG64(seed)), method "marginals"); a hit is a table no more
    probable than the observed one within a relative 1e-7.
    """
    rng = np.random.Generator(np.random.PCG64(seed))
    log_c = [_log_binomial(n) for n in tot]
    limit = sum(float(log_c[i][ev[i]]) for i in range(len(tot))) + _LOG_TIE
    colours = np.asarray(tot, dtype=np.int64)
    hits, drawn = 0, 0
    while drawn < tables:
        size = min(100_000, tables - drawn)
        sample = rng.multivariate_hypergeometric(colours, sum(ev), size=size, method="marginals")
        log_p = sum(log_c[i][sample[:, i]] for i in range(len(tot)))
        hits += int(np.count_nonzero(log_p <= limit))
        drawn += size
    p = (1 + hits) / (tables + 1)
    return p, math.sqrt(p * (1.0 - p) / tables)


def fisher_exact_k(
    events: Sequence[int],
    totals: Sequence[int],
    *,
    monte_carlo: tuple[int, int] | None = None,
    max_tables: int = MAX_TABLES,
) -> FisherK:
    """Fisher's exact test of equal proportions in a k×2 table (the Freeman–Halton test).

    Conditional on the group totals and the total number of events, the table has the
    multivariate hypergeometric law P = Π C(n_i, a_i) / C(N, m). The p-value is the sum of the
    probabilities of the tables no more probable than the observed one (within a relative 1e-7,
    for ties). The exact p-value comes from a pruned enumeration: whole blocks of tables are
    added or skipped at once when bounds on their probabilities decide them. Margins that admit
    at most ``max_tables`` tables are always enumerated; larger ones as long as the walk visits
    at most ``max_tables`` partial tables, beyond which a ValueError suggests a Monte Carlo
    p-value. ``tables_enumerated`` is the number of tables with the observed margins (all of
    them accounted for, one by one or in blocks). With ``monte_carlo=(tables, seed)`` the
    p-value is (1 + hits)/(tables + 1) over random tables with the observed margins, and its
    standard error sqrt(p(1 − p)/tables) is returned. For k = 2 the exact p-value is the
    two-sided p-value of Fisher's 2×2 test. Two-sided only; ``statistic`` and ``df`` are
    ``None``.

    References
    ----------
    Freeman GH, Halton JH. Note on an exact treatment of contingency, goodness of fit and other
    problems of significance. Biometrika 1951;38:141–149.
    Mehta CR, Patel NR. A network algorithm for performing Fisher's exact test in r×c
    contingency tables. Journal of the American Statistical Association 1983;78:427–434 (the
    pruning by bounds on the completions).
    Agresti A. Categorical Data Analysis, 3rd ed. Wiley, 2013, chapter 16 (exact inference).
    """
    ev, tot = _checks.table(events, totals)
    if isinstance(max_tables, bool) or not isinstance(max_tables, Integral) or max_tables < 1:
        raise ValueError(f"max_tables must be an integer >= 1, got {max_tables!r}")
    method = "fisher-exact"
    if monte_carlo is not None:
        draws, seed = _monte_carlo_option(monte_carlo)
        p, se = _fisher_k_monte_carlo(ev, tot, draws, seed)
        return FisherK(TestResult(method, None, None, p, "two-sided"), None, se)
    count = _table_count(tot, sum(ev))
    # A reference set within the cap is always enumerated; a larger one as long as the pruned
    # walk visits at most max_tables partial tables.
    budget = math.inf if count <= max_tables else float(max_tables)
    try:
        p = _PrunedWalk(ev, tot, budget).p_value()
    except _TooManyTables:
        raise ValueError(
            f"the {len(tot)}x2 table has {count} tables with its margins, too many to enumerate "
            f"within max_tables = {max_tables}; ask for a Monte Carlo p-value instead, "
            "e.g. monte_carlo: {tables: 100000, seed: 1}"
        ) from None
    return FisherK(TestResult(method, None, None, p, "two-sided"), count, None)
