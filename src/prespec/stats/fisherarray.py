"""Fisher's exact test and the exact conditional odds-ratio interval for many 2×2 tables at once.

A safety table holds one 2×2 comparison per adverse-event term, hundreds of them, and many
share their margins. Given both margins, the first cell of a table [[a, b], [c, d]] is
hypergeometric on the support lo..hi, lo = max(0, m − n2), hi = min(n1, m) (n1 = a + b,
n2 = c + d, m = a + c), and Fisher's noncentral hypergeometric law with odds ratio ψ on the same
support. The tables are grouped by their margins: one support row serves every table that shares
them, and rows of different lengths are padded to a common length per chunk.

The probabilities are held relative to the mode, built from the exact ratios
P(x + 1)/P(x) = (n1 − x)(m − x) / ((x + 1)(n2 − m + x + 1)) by running products in extended
precision (numpy's ``longdouble``), so that tables as probable as the observed one are
recognised as such (ties) and tail sums keep their relative precision far into the tails.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from functools import cached_property
from numbers import Real

import numpy as np

from prespec.stats import _checks

#: scipy.stats.fisher_exact (scipy 1.17) counts a table as no more probable than the observed
#: one when its probability is at most the observed one times (1 + 1e-14).
SCIPY_TIE_TOLERANCE = 1e-14
#: Support points (tables × support length) held at once per chunk.
CHUNK_POINTS = 1 << 18
#: The root searches stop when the step on the log odds ratio is below this.
LOG_TOLERANCE = 1e-12
#: The largest table total handled (its support, up to half of it, is held in memory).
MAX_TOTAL = 2_000_000
#: Iterations of the safeguarded Newton search before giving up (a bug if ever reached).
MAX_ITERATIONS = 200

_ld = np.longdouble


@dataclass(frozen=True)
class FisherMany:
    """Fisher's exact test of many 2×2 tables: p-values and conditional MLE odds ratios.

    Both arrays have the shape of the input and are read-only. ``odds_ratio`` is the
    conditional maximum likelihood estimate (0 or ``inf`` at the ends of the support, ``nan``
    when a margin is zero).
    """

    p_value: np.ndarray
    odds_ratio: np.ndarray


# --- input ---------------------------------------------------------------------------------


def _cells(a: object, b: object, c: object, d: object) -> tuple[np.ndarray, ...]:
    """The four cells as int64 arrays of one shape; ValueError (one line) on bad input."""
    arrays = []
    for name, value in (("a", a), ("b", b), ("c", c), ("d", d)):
        try:
            array = np.asarray(value)
        except (TypeError, ValueError):
            raise ValueError(f"{name} must be an array of counts") from None
        if array.dtype == bool or not (
            np.issubdtype(array.dtype, np.integer) or np.issubdtype(array.dtype, np.floating)
        ):
            raise ValueError(f"{name} must be an array of integer counts, got dtype {array.dtype}")
        if np.issubdtype(array.dtype, np.floating):
            if not np.all(np.isfinite(array)) or np.any(array != np.round(array)):
                raise ValueError(f"{name} must hold whole numbers (counts)")
            if np.any(np.abs(array) > 2**52):
                raise ValueError(f"{name} holds counts too large to be exact")
        arrays.append(array)
    shapes = {array.shape for array in arrays}
    if len(shapes) != 1:
        listed = ", ".join(f"{n} {x.shape}" for n, x in zip("abcd", arrays))
        raise ValueError(f"a, b, c and d must have the same shape, got {listed}")
    cells = [array.astype(np.int64) for array in arrays]
    for name, array in zip("abcd", cells):
        if array.size and int(array.min()) < 0:
            raise ValueError(f"{name} must hold counts >= 0, got {int(array.min())}")
        if array.size and int(array.max()) > MAX_TOTAL:
            raise ValueError(f"{name} holds {int(array.max())}, more than the {MAX_TOTAL} handled")
    n = cells[0] + cells[1] + cells[2] + cells[3]
    if n.size and int(n.max()) > MAX_TOTAL:
        raise ValueError(f"a table of {int(n.max())} is larger than the {MAX_TOTAL} handled")
    return tuple(cells)


def _tie_tolerance(value: object) -> float:
    if isinstance(value, bool) or not isinstance(value, Real):
        raise ValueError(f"tie_tolerance must be a number, got {value!r}")  # noqa: TRY004 (the interface raises ValueError)
    number = float(value)
    if not (math.isfinite(number) and 0.0 <= number < 1e-3):
        raise ValueError(f"tie_tolerance must be in [0, 1e-3), got {number!r}")
    return number


# --- the supports --------------------------------------------------------------------------


@dataclass(frozen=True)
class _Supports:
    """The hypergeometric laws of a chunk of distinct margins, padded to one length.

    ``w`` holds P(lo + j)/P(mode) (0 beyond the support), ``below``/``above`` the running sums
    Σ_{i<=j} w_i and Σ_{i>=j} w_i, ``total`` Σ w, ``mode`` the index of the (upper) mode.
    """

    lo: np.ndarray
    length: np.ndarray
    mode: np.ndarray
    w: np.ndarray
    below: np.ndarray
    above: np.ndarray
    total: np.ndarray
    up: np.ndarray  # r_j = up/down = P(lo + j + 1)/P(lo + j), 1/1 beyond the support
    down: np.ndarray

    @cached_property
    def log_w(self) -> np.ndarray:
        """log w in double precision (−inf beyond the support), from the binary exponent and
        mantissa of the extended-precision values (cheaper than their logarithm). Where w
        underflowed even there (below about 1e-4900 of the mode, far tails of very large
        tables) the row is summed from the logarithms of the ratios instead."""
        mantissa, exponent = np.frexp(self.w)
        with np.errstate(divide="ignore"):
            log_w = np.log(mantissa.astype(float)) + exponent * math.log(2.0)
        inside = np.arange(self.w.shape[1])[None, :] < self.length[:, None]
        lost = np.flatnonzero(np.any((self.w == 0) & inside, axis=1))
        if lost.size:
            j = np.arange(self.w.shape[1])[None, :]
            mode = self.mode[lost][:, None]
            log_r = np.log(self.up[lost].astype(float)) - np.log(self.down[lost].astype(float))
            rising = np.zeros(log_r.shape)
            rising[:, 1:] = np.where(j[:, 1:] > mode, log_r[:, :-1], 0.0)
            falling = np.where(j < mode, -log_r, 0.0)
            direct = np.cumsum(rising, axis=1) + np.cumsum(falling[:, ::-1], axis=1)[:, ::-1]
            log_w[lost] = np.where(inside[lost], direct, -np.inf)
        return log_w


def _supports(n1: np.ndarray, n2: np.ndarray, m: np.ndarray) -> _Supports:
    lo = np.maximum(0, m - n2)
    hi = np.minimum(n1, m)
    length = hi - lo + 1
    # the upper mode of the hypergeometric law: floor((m + 1)(n1 + 1)/(N + 2))
    mode = np.clip((m + 1) * (n1 + 1) // (n1 + n2 + 2), lo, hi) - lo
    width = int(length.max())
    j = np.arange(width)
    x = lo[:, None] + j[None, :]
    # r_j = P(x_j + 1)/P(x_j) = up/down, exact integers (below 2^63, and exact in longdouble);
    # defined for j < length − 1, and 1/1 elsewhere (never used there)
    step = j[None, :] < (length - 1)[:, None]
    up = np.where(step, (n1[:, None] - x) * (m[:, None] - x), 1).astype(_ld)
    down = np.where(step, (x + 1) * (n2[:, None] - m[:, None] + x + 1), 1).astype(_ld)
    # w_j = Π r_i over mode <= i < j above the mode, Π 1/r_i over j <= i < mode below it
    rising = np.ones((lo.size, width), dtype=_ld)
    np.divide(up[:, :-1], down[:, :-1], out=rising[:, 1:], where=(j > mode[:, None])[:, 1:])
    falling = np.ones((lo.size, width), dtype=_ld)
    np.divide(down, up, out=falling, where=j < mode[:, None])
    w = np.cumprod(rising, axis=1) * np.cumprod(falling[:, ::-1], axis=1)[:, ::-1]
    w = np.where(j[None, :] < length[:, None], w, _ld(0))
    below = np.cumsum(w, axis=1)
    above = np.cumsum(w[:, ::-1], axis=1)[:, ::-1]
    return _Supports(lo, length, mode, w, below, above, below[:, -1], up, down)


def _chunks(margins: np.ndarray) -> list[np.ndarray]:
    """Indices of the distinct margins, shortest supports first, in chunks of at most
    CHUNK_POINTS padded support points (a chunk is as wide as its longest support)."""
    n1, n2, m = margins.T
    length = np.minimum(n1, m) - np.maximum(0, m - n2) + 1
    order = np.argsort(length, kind="stable")
    chunks, start = [], 0
    for stop in range(1, order.size + 1):
        if stop == order.size or (stop + 1 - start) * int(length[order[stop]]) > CHUNK_POINTS:
            chunks.append(order[start:stop])
            start = stop
    return chunks


def _last_at_most(w: np.ndarray, rows: np.ndarray, first: np.ndarray, last: np.ndarray,
                  limit: np.ndarray) -> np.ndarray:
    """Per table, the last index in [first, last] of its non-decreasing row with w <= limit
    (first − 1 if none), by one binary search over all tables."""
    left, right = first.copy(), last + 1
    while True:
        active = left < right
        if not active.any():
            return left - 1
        mid = (left + right) // 2
        above = w[rows, np.minimum(mid, w.shape[1] - 1)] > limit
        right = np.where(active & above, mid, right)
        left = np.where(active & ~above, mid + 1, left)


def _first_at_most(w: np.ndarray, rows: np.ndarray, first: np.ndarray, last: np.ndarray,
                   limit: np.ndarray) -> np.ndarray:
    """Per table, the first index in [first, last] of its non-increasing row with w <= limit
    (last + 1 if none)."""
    left, right = first.copy(), last + 1
    while True:
        active = left < right
        if not active.any():
            return left
        mid = (left + right) // 2
        at_most = w[rows, np.minimum(mid, w.shape[1] - 1)] <= limit
        right = np.where(active & at_most, mid, right)
        left = np.where(active & ~at_most, mid + 1, left)


def _p_values(s: _Supports, rows: np.ndarray, at: np.ndarray, alternative: str,
              tolerance: float) -> np.ndarray:
    """Fisher p-values of the tables whose first cell is support index ``at`` of row ``rows``."""
    total = s.total[rows]
    if alternative == "less":
        return np.minimum(1.0, (s.below[rows, at] / total).astype(float))
    if alternative == "greater":
        return np.minimum(1.0, (s.above[rows, at] / total).astype(float))
    # the running products carry a relative error of about (support length)·eps: a tolerance
    # below that could not tell ties (it only binds where longdouble is a plain double)
    floor = 8.0 * s.w.shape[1] * float(np.finfo(_ld).eps)
    limit = s.w[rows, at] * (_ld(1) + _ld(max(tolerance, floor)))
    mode, length = s.mode[rows], s.length[rows]
    left = _last_at_most(s.w, rows, np.zeros_like(mode), mode, limit)
    right = _first_at_most(s.w, rows, mode + 1, length - 1, limit)
    width = s.w.shape[1] - 1
    tail_low = np.where(left >= 0, s.below[rows, np.clip(left, 0, width)], _ld(0))
    tail_high = np.where(right < length, s.above[rows, np.clip(right, 0, width)], _ld(0))
    p = ((tail_low + tail_high) / total).astype(float)
    # the mode itself (w = 1) no more probable than the observed table: every table counts
    return np.where(limit >= 1, 1.0, np.minimum(1.0, p))


# --- the noncentral law and its root searches ------------------------------------------------


class _Noncentral:
    """Fisher's noncentral hypergeometric laws of a set of tables, on the log odds ratio u.

    ``d`` holds log P0(x) − log P0(a) (P0 the central law; −inf beyond the support) and ``k``
    the offsets x − a, so that log P(x; u) = d + k·u − log Σ exp(d + k·u): centred on the
    observed cell, the terms that matter near a root are small numbers.
    """

    def __init__(self, s: _Supports, rows: np.ndarray, at: np.ndarray) -> None:
        log_w = s.log_w[rows]
        self.d = log_w - log_w[np.arange(rows.size), at][:, None]
        self.k = (np.arange(log_w.shape[1])[None, :] - at[:, None]).astype(float)

    def _weights(self, u: np.ndarray, idx: np.ndarray) -> np.ndarray:
        t = self.d[idx] + self.k[idx] * u[:, None]
        return np.exp(t - t.max(axis=1, keepdims=True))

    def mean(self, u: np.ndarray, idx: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """E[X − a; u] and its derivative Var[X; u]."""
        e, k = self._weights(u, idx), self.k[idx]
        total = e.sum(axis=1)
        first = (e * k).sum(axis=1) / total
        second = (e * k * k).sum(axis=1) / total
        return first, np.maximum(second - first * first, 0.0)

    def log_tail(self, u: np.ndarray, idx: np.ndarray, upper: bool
                 ) -> tuple[np.ndarray, np.ndarray]:
        """log P(X >= a; u) (``upper``) or log P(X <= a; u), and its derivative in u."""
        e, k = self._weights(u, idx), self.k[idx]
        part = np.where(k >= 0, e, 0.0) if upper else np.where(k <= 0, e, 0.0)
        total, tail = e.sum(axis=1), part.sum(axis=1)
        mean_all = (e * k).sum(axis=1) / total
        mean_tail = (part * k).sum(axis=1) / tail
        return np.log(tail / total), mean_tail - mean_all


def _increasing_root(function: Callable[[np.ndarray, np.ndarray],
                                        tuple[np.ndarray, np.ndarray]],
                     start: np.ndarray) -> np.ndarray:
    """Roots of increasing functions of u, one per table, by a safeguarded Newton search.

    ``function(u, idx)`` returns the values and derivatives of the tables ``idx`` at ``u``.
    A bracket [low, high] with f(low) < 0 < f(high) is kept for each table: the ends start at
    ±inf and are widened by doubling steps from ``start`` until the sign changes; inside a
    finite bracket a Newton step that falls outside it (or has no slope) is replaced by
    bisection. A table is done when its step is below LOG_TOLERANCE.
    """
    u = start.astype(float).copy()
    low = np.full(u.size, -np.inf)
    high = np.full(u.size, np.inf)
    stride = np.ones(u.size)
    active = np.arange(u.size)
    for _ in range(MAX_ITERATIONS):
        if active.size == 0:
            return u
        here = u[active]
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            f, slope = function(here, active)
            newton = here - f / slope
        negative, positive = f < 0, f > 0
        low[active] = np.where(negative, here, low[active])
        high[active] = np.where(positive, here, high[active])
        lo, hi = low[active], high[active]
        with np.errstate(invalid="ignore"):
            middle = 0.5 * (lo + hi)  # nan or ±inf while a bracket end is still open
        bracketed = np.isfinite(lo) & np.isfinite(hi)
        ok = np.isfinite(newton) & (slope > 0) & (newton >= lo) & (newton <= hi)
        # without a finite bracket, a Newton step may not leap further than the widening
        ok &= bracketed | (np.abs(newton - here) <= 2.0 * stride[active])
        widen = np.where(negative, here + stride[active], here - stride[active])
        stride[active] *= np.where(ok | bracketed, 1.0, 2.0)
        step = np.where(ok, newton, np.where(bracketed, middle, widen))
        step = np.where(f == 0, here, step)
        u[active] = step
        finished = (f == 0) | (ok & (np.abs(step - here) < LOG_TOLERANCE))
        finished |= bracketed & (hi - lo < LOG_TOLERANCE)
        finished |= np.abs(step) > 745.0  # beyond the range of a double odds ratio
        active = active[~finished]
    raise ArithmeticError("the odds-ratio root search did not converge")  # pragma: no cover


def _start(a: np.ndarray, b: np.ndarray, c: np.ndarray, d: np.ndarray) -> np.ndarray:
    """log of the sample odds ratio with 0.5 added to every cell: a start for the searches."""
    return np.log((a + 0.5) * (d + 0.5) / ((b + 0.5) * (c + 0.5)))


# --- the work, by distinct table -----------------------------------------------------------


#: Bits of one margin in the sort keys (every margin is at most MAX_TOTAL < 2^21).
_BITS = 21
assert MAX_TOTAL < 1 << _BITS


def _margin_keys(n1: np.ndarray, n2: np.ndarray, m: np.ndarray) -> np.ndarray:
    """One int64 per (n1, n2, m), ordered as the triples are lexicographically."""
    return (n1 << (2 * _BITS)) | (n2 << _BITS) | m


def _distinct(cells: tuple[np.ndarray, ...]) -> tuple[np.ndarray, np.ndarray]:
    """The distinct tables (rows a, b, c, d) and, per input table, the index of its own.

    A table is its margins and a: both are sorted as int64 keys (a sort of rows of four
    columns costs several times more)."""
    a, b, c, d = (x.ravel() for x in cells)
    if a.size == 0:
        return np.zeros((0, 4), dtype=np.int64), np.zeros(0, dtype=np.int64)
    margins, which = np.unique(_margin_keys(a + b, c + d, a + c), return_inverse=True)
    keys, inverse = np.unique((which.ravel() << _BITS) | a, return_inverse=True)
    mask = (1 << _BITS) - 1
    key = margins[keys >> _BITS]
    n1, n2, m = key >> (2 * _BITS), (key >> _BITS) & mask, key & mask
    first = keys & mask
    tables = np.stack([first, n1 - first, m - first, n2 - m + first], axis=1)
    return tables, inverse.ravel()


def _by_margins(tables: np.ndarray
                ) -> Iterator[tuple[np.ndarray, _Supports, np.ndarray, np.ndarray]]:
    """Per chunk of distinct margins: (table indices, supports, support row, index of a),
    one chunk at a time so that only one chunk's supports are held."""
    a, b, c, d = tables.T
    keys, which = np.unique(_margin_keys(a + b, c + d, a + c), return_inverse=True)
    which = which.ravel()
    mask = (1 << _BITS) - 1
    unique = np.stack([keys >> (2 * _BITS), (keys >> _BITS) & mask, keys & mask], axis=1)
    chunks = _chunks(unique)
    chunk_of, position = np.empty(unique.shape[0], np.int64), np.empty(unique.shape[0], np.int64)
    for k, chunk in enumerate(chunks):
        chunk_of[chunk], position[chunk] = k, np.arange(chunk.size)
    order = np.argsort(chunk_of[which], kind="stable")
    bounds = np.searchsorted(chunk_of[which][order], np.arange(len(chunks) + 1))
    for k, chunk in enumerate(chunks):
        members = order[bounds[k] : bounds[k + 1]]
        s = _supports(unique[chunk, 0], unique[chunk, 1], unique[chunk, 2])
        rows = position[which[members]]
        yield members, s, rows, a[members] - s.lo[rows]


def _table_chunks(size: int, width: int) -> list[slice]:
    per = max(1, CHUNK_POINTS // max(1, width))
    return [slice(i, min(size, i + per)) for i in range(0, size, per)]


def _degenerate(tables: np.ndarray) -> np.ndarray:
    """Tables with a zero margin (a zero row or column total): only one table is possible."""
    a, b, c, d = tables.T
    return (a + b == 0) | (c + d == 0) | (a + c == 0) | (b + d == 0)


def _conditional_mle(s: _Supports, rows: np.ndarray, at: np.ndarray,
                     start: np.ndarray) -> np.ndarray:
    value = np.empty(rows.size)
    inner = (at > 0) & (at < s.length[rows] - 1)
    value[at == 0] = 0.0
    value[at == s.length[rows] - 1] = math.inf
    idx = np.flatnonzero(inner)
    if idx.size:
        law = _Noncentral(s, rows[idx], at[idx])
        value[idx] = np.exp(_increasing_root(law.mean, start[idx]))
    return value


def fisher_many(a: object, b: object, c: object, d: object, *, alternative: str = "two-sided",
                tie_tolerance: float = SCIPY_TIE_TOLERANCE) -> FisherMany:
    """Fisher's exact test of each 2×2 table [[a, b], [c, d]] (a, b the events and non-events
    of the first group; c, d of the second), for arrays of tables of one shape.

    Given both margins, a is hypergeometric. ``greater`` (odds ratio > 1) is P(X >= a),
    ``less`` is P(X <= a); ``two-sided`` sums the probabilities of the tables no more probable
    than the observed one, a table counting as such when its probability is at most the
    observed one times (1 + ``tie_tolerance``). The default tolerance is scipy's
    (scipy.stats.fisher_exact, scipy 1.17), with which the p-values agree to 1e-12 relative on
    tables of up to some thousands (on arms of 100,000 scipy's tails drift by about 1e-11,
    where these values equal a 50-digit decimal sum); ``tie_tolerance=1e-7`` gives the rule of
    :func:`prespec.stats.fisher_exact`. Where ``longdouble`` is a plain double (not x86-64
    Linux) ties are told only to about (support length)·1e-15, and the tolerance is raised to
    that. A table with a zero row or column total has p = 1. ``odds_ratio`` is the conditional maximum likelihood
    estimate, the ψ of Fisher's noncentral hypergeometric law with E[X; ψ] = a (0 when a is
    the smallest value of its support, ``inf`` when the largest, ``nan`` with a zero margin),
    as scipy.stats.contingency.odds_ratio(kind="conditional") computes it. Raises ValueError
    (one line) for negative or non-integer counts, shapes that differ or an unknown
    alternative.

    References
    ----------
    Fisher RA. On the interpretation of chi-square from contingency tables, and the
    calculation of P. Journal of the Royal Statistical Society 1922;85:87–94.
    Agresti A. A survey of exact inference for contingency tables. Statistical Science
    1992;7:131–177 (the two-sided rule by probability ordering).
    Cornfield J. A statistical problem arising from retrospective studies. Proceedings of the
    Third Berkeley Symposium on Mathematical Statistics and Probability 1956;4:135–148 (the
    conditional maximum likelihood estimate).
    """
    p, estimate = _fisher(a, b, c, d, alternative, tie_tolerance, estimate=True)
    return FisherMany(_frozen(p), _frozen(estimate))


def fisher_p_values(a: object, b: object, c: object, d: object, *,
                    alternative: str = "two-sided",
                    tie_tolerance: float = SCIPY_TIE_TOLERANCE) -> np.ndarray:
    """The p-values of :func:`fisher_many` alone (no odds ratios), a new array of the input's
    shape: the one Fisher's exact test of prespec. :func:`prespec.stats.fisher_exact` is its
    one-table case with ``tie_tolerance=1e-7``; the tipping-point grid and the exact power of
    the design call it on arrays of tables with the same tolerance."""
    return _fisher(a, b, c, d, alternative, tie_tolerance, estimate=False)[0]


def _fisher(a: object, b: object, c: object, d: object, alternative: str, tie_tolerance: float,
            *, estimate: bool) -> tuple[np.ndarray, np.ndarray]:
    """(p-values, conditional MLE odds ratios or nan when ``estimate`` is false), shaped as
    the input."""
    cells = _cells(a, b, c, d)
    alt = _checks.alternative(alternative)
    tolerance = _tie_tolerance(tie_tolerance)
    shape = cells[0].shape
    tables, inverse = _distinct(cells)
    p = np.ones(tables.shape[0])
    odds = np.full(tables.shape[0], math.nan)
    live = np.flatnonzero(~_degenerate(tables))
    if live.size:
        sub = tables[live]
        start = _start(*(sub[:, i].astype(float) for i in range(4))) if estimate else None
        for members, s, rows, at in _by_margins(sub):
            p[live[members]] = _p_values(s, rows, at, alt, tolerance)
            if start is None:
                continue
            for part in _table_chunks(members.size, s.w.shape[1]):
                odds[live[members[part]]] = _conditional_mle(
                    s, rows[part], at[part], start[members[part]]
                )
    return p[inverse].reshape(shape), odds[inverse].reshape(shape)


def _frozen(array: np.ndarray) -> np.ndarray:
    array.flags.writeable = False
    return array


def conditional_or_ci_many(a: object, b: object, c: object, d: object, *, level: float = 0.95,
                           alternative: str = "two-sided") -> tuple[np.ndarray, np.ndarray]:
    """Cornfield's exact conditional confidence limits for the odds ratio of each 2×2 table.

    With α = 1 − ``level``: ``two-sided`` limits solve P(X >= a; ψL) = α/2 and
    P(X <= a; ψU) = α/2 under Fisher's noncentral hypergeometric law of a given both margins;
    ``greater`` gives [ψL, inf) with P(X >= a; ψL) = α, ``less`` gives (0, ψU] with
    P(X <= a; ψU) = α. A lower limit is 0 when a is the smallest value of its support and an
    upper limit ``inf`` when it is the largest; a table with a zero row or column total has
    the interval [0, inf]. As scipy.stats.contingency.odds_ratio(kind="conditional")
    .confidence_interval(level, alternative), solved on the log odds ratio to 1e-12 by a
    safeguarded Newton search. Returns (low, high), read-only arrays of the input's shape.
    Raises ValueError (one line) for bad counts, shapes that differ, a level outside (0, 1)
    or an unknown alternative.

    References
    ----------
    Cornfield J. A statistical problem arising from retrospective studies. Proceedings of the
    Third Berkeley Symposium on Mathematical Statistics and Probability 1956;4:135–148.
    Agresti A. Categorical Data Analysis, 3rd ed. Wiley, 2013, chapter 16 (conditional
    inference for the odds ratio).
    """
    cells = _cells(a, b, c, d)
    lvl = _checks.level(level)
    alt = _checks.alternative(alternative)
    shape = cells[0].shape
    tables, inverse = _distinct(cells)
    low = np.zeros(tables.shape[0])
    high = np.full(tables.shape[0], math.inf)
    live = np.flatnonzero(~_degenerate(tables))
    tail = (1.0 - lvl) / 2.0 if alt == "two-sided" else 1.0 - lvl
    log_tail = math.log(tail)
    if live.size:
        sub = tables[live]
        start = _start(*(sub[:, i].astype(float) for i in range(4)))
        for members, s, rows, at in _by_margins(sub):
            for part in _table_chunks(members.size, s.w.shape[1]):
                r, x, u0, out = rows[part], at[part], start[members[part]], live[members[part]]
                if alt != "less":
                    low[out] = _limit(s, r, x, u0, upper=True, log_tail=log_tail)
                if alt != "greater":
                    high[out] = _limit(s, r, x, u0, upper=False, log_tail=log_tail)
    return (_frozen(low[inverse].reshape(shape)), _frozen(high[inverse].reshape(shape)))


def _limit(s: _Supports, rows: np.ndarray, at: np.ndarray, start: np.ndarray, *, upper: bool,
           log_tail: float) -> np.ndarray:
    """The lower limit (``upper``: P(X >= a; ψ) = tail) or the upper limit (P(X <= a; ψ) =
    tail) of each table; 0 or inf where a is at the matching end of its support."""
    end = np.zeros_like(at) if upper else s.length[rows] - 1
    value = np.full(rows.size, 0.0 if upper else math.inf)
    idx = np.flatnonzero(at != end)
    if idx.size:
        law = _Noncentral(s, rows[idx], at[idx])

        def equation(u: np.ndarray, which: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
            log_p, slope = law.log_tail(u, which, upper)
            # increasing in u: log P(X >= a) itself; for the lower tail its negative
            return (log_p - log_tail, slope) if upper else (log_tail - log_p, -slope)

        value[idx] = np.exp(_increasing_root(equation, start[idx]))
    return value
