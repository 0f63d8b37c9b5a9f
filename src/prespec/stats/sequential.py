"""Group-sequential boundaries for interim looks at one hypothesis.

The z statistic at look k is modelled as ``Z_k ~ N(θ·sqrt(I_k), 1)`` with independent
increments of the score ``Z_k·sqrt(I_k)`` (the canonical joint distribution, Jennison &
Turnbull 2000, ch. 3). Fractions ``t_k = I_k / I_max``; the drift ``δ = θ·sqrt(I_max)``.
Probabilities of crossing are computed by the recursive numerical integration of Armitage,
McPherson & Rowe (1969) on the grid of Jennison & Turnbull (2000, ch. 19).

References
----------
Armitage P, McPherson CK, Rowe BC. Repeated significance tests on accumulating data. Journal
of the Royal Statistical Society A 1969; 132: 235-244.
Jennison C, Turnbull BW. Group Sequential Methods with Applications to Clinical Trials.
Chapman & Hall/CRC, 2000.
Lan KKG, DeMets DL. Discrete sequential boundaries for clinical trials. Biometrika 1983; 70:
659-663.
Hwang IK, Shih WJ, DeCani JS. Group sequential designs using a family of type I error
probability spending functions. Statistics in Medicine 1990; 9: 1439-1445.
Pocock SJ. Group sequential methods in the design and analysis of clinical trials.
Biometrika 1977; 64: 191-199.
O'Brien PC, Fleming TR. A multiple testing procedure for clinical trials. Biometrics 1979;
35: 549-556.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from numbers import Real

import numpy as np
from numpy.typing import ArrayLike
from scipy import special

from prespec.stats._lazy import brentq
from prespec.stats._normal import upper_quantile

EFFICACY: tuple[str, ...] = (
    "lan-demets-obrien-fleming",
    "lan-demets-pocock",
    "hwang-shih-decani",
    "obrien-fleming",
    "pocock",
)
FUTILITY: tuple[str, ...] = ("lan-demets-obrien-fleming", "lan-demets-pocock", "hwang-shih-decani")
CLASSICAL: tuple[str, ...] = ("obrien-fleming", "pocock")

#: Grid density of the numerical integration (Jennison & Turnbull 2000, ch. 19 use r = 16;
#: r = 32 brings exit probabilities to about 1e-10 of the multivariate normal route).
GRID_R = 32
#: The finest grid density used for looks close together (about 12·r points per grid); looks
#: closer than (GRID_R / (2·MAX_GRID_R))² of the information lose some accuracy, and beyond
#: (GRID_R / (8·MAX_GRID_R))² they are refused.
MAX_GRID_R = 500
#: Kernel widths (on the Z scale) below which the grid is refined.
_REFINE_BELOW = 0.5
#: Rows of the kernel matrix computed at once (bounds the memory of fine grids).
_BLOCK = 1 << 21
#: How far fractions may stray from k/K·t_K and still count as equally spaced.
SPACING_TOLERANCE = 1e-6
#: The root finders' tolerance on the z scale and on the drift.
_XTOL = 1e-11
#: A boundary far enough out to stand for "never crossed" in the root searches.
_FAR = 40.0


@dataclass(frozen=True)
class Boundaries:
    """Efficacy (and optional futility) boundaries on the z scale at each look.

    ``z`` is the upper efficacy boundary (two-sided: reject when |Z_k| >= z_k);
    ``nominal_p`` its nominal p-value (two-sided 2·(1 − Φ(z)), one-sided 1 − Φ(z));
    ``alpha_spent`` the cumulative P_0(crossing by look k), both sides together, computed
    without futility (non-binding). ``futility_z`` the lower boundary on the same scale: the
    trial may stop for futility when Z_k <= futility_z[k] (two-sided: the continuation
    region is then (max(futility_z, −z), z)); ``beta_spent`` the cumulative probability of
    that exit at ``drift``, the drift θ·sqrt(I_max) of the planned design.
    """

    fractions: tuple[float, ...]
    z: tuple[float, ...]
    nominal_p: tuple[float, ...]
    alpha_spent: tuple[float, ...]
    futility_z: tuple[float, ...] | None
    beta_spent: tuple[float, ...] | None
    alpha: float
    sides: int
    efficacy: str
    gamma: float | None
    drift: float | None
    futility: str | None = None
    futility_gamma: float | None = None
    power: float | None = None


@dataclass(frozen=True)
class SequentialDesign:
    """A planned group-sequential design: boundaries, inflation and expected sample size."""

    boundaries: Boundaries
    inflation: float
    expected_fraction_null: float
    expected_fraction_alternative: float
    power: float
    drift: float
    #: True when the expected sample sizes assume the futility boundary is followed.
    expected_with_futility: bool
    #: P(stop at look k) under θ = 0 and under the design drift.
    stop_null: tuple[float, ...]
    stop_alternative: tuple[float, ...]


@dataclass(frozen=True)
class Adjusted:
    """Inference adjusted for the stopping rule, after stopping at ``look``."""

    p_value: float
    estimate: float
    ci: tuple[float, float]
    look: int
    level: float = 0.95
    sides: int = 2


# --------------------------------------------------------------------------- validation


def _real(name: str, value: object) -> float:
    if isinstance(value, bool) or not isinstance(value, Real):
        raise ValueError(f"{name} must be a number, got {value!r}")  # noqa: TRY004 (the interface raises ValueError)
    number = float(value)
    if not math.isfinite(number):
        raise ValueError(f"{name} must be finite, got {value!r}")
    return number


def _fractions(fractions: Sequence[float]) -> np.ndarray:
    if isinstance(fractions, (str, bytes)) or not isinstance(fractions, Sequence | np.ndarray):
        raise ValueError("fractions must be a sequence of numbers")  # noqa: TRY004 (the interface raises ValueError)
    t = [_real(f"fractions[{i}]", v) for i, v in enumerate(fractions)]
    if not t:
        raise ValueError("fractions must name at least one look")
    for i, v in enumerate(t):
        if not 0.0 < v <= 1.0:
            raise ValueError(f"fractions[{i}] must be in (0, 1], got {v!r}")
        if i and v <= t[i - 1]:
            raise ValueError(f"fractions must increase: fractions[{i}] = {v!r} after {t[i - 1]!r}")
    return np.asarray(t, dtype=float)


def _probability(name: str, value: object) -> float:
    number = _real(name, value)
    if not 0.0 < number < 1.0:
        raise ValueError(f"{name} must be in (0, 1), got {value!r}")
    return number


def _sides(sides: object) -> int:
    if sides not in (1, 2) or isinstance(sides, bool):
        raise ValueError(f"sides must be 1 or 2, got {sides!r}")
    return int(sides)  # type: ignore[call-overload]


def _spending_name(what: str, name: object, allowed: tuple[str, ...]) -> str:
    if name not in allowed:
        raise ValueError(f"unknown {what} {name!r}; expected one of {', '.join(allowed)}")
    return str(name)


def _gamma(what: str, name: str, gamma: object) -> float | None:
    if name == "hwang-shih-decani":
        if gamma is None:
            raise ValueError(f"{what} hwang-shih-decani needs gamma")
        return _real(f"{what} gamma", gamma)
    if gamma is not None:
        raise ValueError(f"{what} gamma applies to hwang-shih-decani only, not {name}")
    return None


def equally_spaced(fractions: Sequence[float], tol: float = SPACING_TOLERANCE) -> bool:
    """True when ``t_k = k·t_K / K`` for every look, within ``tol``."""
    t = np.asarray(fractions, dtype=float)
    k = len(t)
    if k == 0:
        return False
    planned = t[-1] * np.arange(1, k + 1) / k
    return bool(np.all(np.abs(t - planned) <= tol))


# --------------------------------------------------------------------------- spending


def spent(name: str, t: ArrayLike, total: float, gamma: float | None = None) -> np.ndarray:
    """Cumulative error spent at information fractions ``t`` (``t >= 1`` spends all of total).

    ``lan-demets-obrien-fleming``: 2 − 2Φ(z_{total/2}/√t); ``lan-demets-pocock``:
    total·log(1 + (e − 1)t) (Lan & DeMets 1983); ``hwang-shih-decani``:
    total·(1 − e^{−γt})/(1 − e^{−γ}), total·t at γ = 0 (Hwang, Shih & DeCani 1990).
    """
    name = _spending_name("spending function", name, FUTILITY)
    g = _gamma("spending", name, gamma)
    total = _probability("total", total)
    x = np.clip(np.asarray(t, dtype=float), 0.0, 1.0)
    if np.any(np.isnan(x)):
        raise ValueError("information fractions must not be nan")
    with np.errstate(divide="ignore"):
        if name == "lan-demets-obrien-fleming":
            c = upper_quantile(total / 2.0)
            out = 2.0 * special.ndtr(-c / np.sqrt(x))
        elif name == "lan-demets-pocock":
            out = total * np.log1p((math.e - 1.0) * x)
        elif g == 0.0:
            out = total * x
        else:
            assert g is not None
            out = total * np.expm1(-g * x) / math.expm1(-g)
    out = np.where(x >= 1.0, total, np.where(x <= 0.0, 0.0, out))
    return np.minimum(out, total)


# --------------------------------------------------------------------------- integration


@functools.lru_cache(maxsize=64)
def _offsets(r: int) -> np.ndarray:
    """The 6r − 1 grid offsets from the mean (Jennison & Turnbull 2000, section 19.2)."""
    i = np.arange(1, 6 * r)
    x = np.empty(len(i))
    left, mid, right = i < r, (i >= r) & (i <= 5 * r), i > 5 * r
    x[left] = -3.0 - 4.0 * np.log(r / i[left])
    x[mid] = -3.0 + 3.0 * (i[mid] - r) / (2.0 * r)
    x[right] = 3.0 + 4.0 * np.log(r / (6 * r - i[right]))
    x.flags.writeable = False
    return x


def _grid(mean: float, lo: float, hi: float, r: int = GRID_R) -> tuple[np.ndarray, np.ndarray]:
    """Grid points and Simpson weights on (lo, hi) for a density centred near ``mean``.

    Jennison & Turnbull (2000), section 19.2: 6r − 1 points, uniform on mean ± 3, spreading
    logarithmically to mean ± (3 + 4·log r); trimmed to the interval with its ends added, then
    the midpoints inserted so that Simpson's rule applies.
    """
    x = _offsets(r) + mean
    inner = x[(x > lo) & (x < hi)]
    first = max(lo, x[0])
    last = min(hi, x[-1])
    if last <= first:
        return np.empty(0), np.empty(0)
    odd = np.concatenate(([first], inner[(inner > first) & (inner < last)], [last]))
    n = len(odd)
    z = np.empty(2 * n - 1)
    z[0::2] = odd
    z[1::2] = 0.5 * (odd[:-1] + odd[1:])
    d = np.diff(odd)
    w = np.zeros(2 * n - 1)
    w[1::2] = 4.0 * d / 6.0
    w[0:-1:2] += d / 6.0
    w[2::2] += d / 6.0
    return z, w


@dataclass(frozen=True)
class _State:
    """The sub-density of Z at the last look on the continuation region, times the weights."""

    z: np.ndarray
    c: np.ndarray
    t: float


_START = _State(np.zeros(1), np.ones(1), 0.0)


def _moments(state: _State, t: float, drift: float) -> tuple[np.ndarray, float]:
    """Mean of the next score given each grid point, and the increment's standard deviation."""
    step = t - state.t
    return state.z * math.sqrt(state.t) + drift * step, math.sqrt(step)


def _exit_above(state: _State, t: float, drift: float, b: float) -> float:
    if b == math.inf or state.c.size == 0:
        return 0.0
    m, s = _moments(state, t, drift)
    return float(np.dot(state.c, special.ndtr((m - b * math.sqrt(t)) / s)))


def _exit_below(state: _State, t: float, drift: float, a: float) -> float:
    if a == -math.inf or state.c.size == 0:
        return 0.0
    m, s = _moments(state, t, drift)
    return float(np.dot(state.c, special.ndtr((a * math.sqrt(t) - m) / s)))


def _grid_r(r: int, t_prev: float, t: float, t_next: float) -> int:
    """The grid density at look t that resolves the kernels into and out of it.

    On the Z_k scale the step from look k − 1 smooths the density over sqrt(Δ_k / t_k) (so
    the density has shoulders of that width at the earlier boundaries) and the step to look
    k + 1 has a kernel of width sqrt(Δ_{k+1} / t_k); the ch. 19 grid (spacing about 1.5/r
    for widths near 1) is refined in proportion when either is small, so that close looks
    keep their accuracy. Widths down to _REFINE_BELOW keep r (errors near 1e-9 at r = 32).
    """
    width = math.sqrt(min(t - t_prev, t_next - t) / t) / _REFINE_BELOW
    if width >= 1.0:
        return r
    if MAX_GRID_R * width < r / 4.0:
        pair = (t_prev, t) if t - t_prev < t_next - t else (t, t_next)
        raise ValueError(
            f"looks at fractions {pair[0]:.6g} and {pair[1]:.6g} are too close together for the "
            f"numerical integration (the increment must be at least "
            f"{(_REFINE_BELOW * r / (4.0 * MAX_GRID_R)) ** 2:.2g} of the fraction)"
        )
    return min(math.ceil(r / width), MAX_GRID_R)


def _advance(
    state: _State, t: float, drift: float, lo: float, hi: float, r: int, t_next: float
) -> _State:
    """Propagate the sub-density to look ``t`` and keep the part on (lo, hi) (AMR 1969);
    the grid is fine enough for the step to ``t_next``."""
    if state.c.size == 0 or lo >= hi:
        return _State(np.empty(0), np.empty(0), t)
    z, w = _grid(drift * math.sqrt(t), lo, hi, _grid_r(r, state.t, t, t_next))
    if z.size == 0:
        return _State(z, w, t)
    m, s = _moments(state, t, drift)
    density = np.empty(len(z))
    rows = max(1, _BLOCK // len(m))
    for start in range(0, len(z), rows):
        u = (z[start : start + rows, None] * math.sqrt(t) - m[None, :]) / s
        density[start : start + rows] = np.exp(-0.5 * u * u) @ state.c
    density *= math.sqrt(t) / (s * math.sqrt(2.0 * math.pi))
    return _State(z, w * density, t)


def crossing_probabilities(
    b_upper: ArrayLike,
    b_lower: ArrayLike,
    fractions: ArrayLike,
    drift: float,
    *,
    r: int = GRID_R,
) -> tuple[np.ndarray, np.ndarray]:
    """Per look: P(first exit above) and P(first exit below) at the given drift (AMR recursion).

    ``b_lower`` may hold −inf (no lower boundary) and ``b_upper`` +inf; the process continues
    while ``b_lower[k] < Z_k < b_upper[k]``. Armitage, McPherson & Rowe (1969); Jennison &
    Turnbull (2000), ch. 19.
    """
    up_b = np.asarray(b_upper, dtype=float)
    lo_b = np.asarray(b_lower, dtype=float)
    t = np.asarray(fractions, dtype=float)
    if not (up_b.shape == lo_b.shape == t.shape) or t.ndim != 1:
        raise ValueError("b_upper, b_lower and fractions must be lists of the same length")
    if np.any(np.diff(t) <= 0) or np.any(t <= 0):
        raise ValueError("fractions must be positive and increasing")
    up = np.zeros(len(t))
    low = np.zeros(len(t))
    state = _START
    for k, tk in enumerate(t):
        up[k] = _exit_above(state, float(tk), drift, float(up_b[k]))
        low[k] = _exit_below(state, float(tk), drift, min(float(lo_b[k]), float(up_b[k])))
        if k < len(t) - 1:
            state = _advance(
                state, float(tk), drift, float(lo_b[k]), float(up_b[k]), r, float(t[k + 1])
            )
    return up, low


# --------------------------------------------------------------------------- boundaries


def _solve_upper(state: _State, t: float, target: float, sides: int) -> float:
    """The efficacy boundary b at look t with P_0(exit beyond ±b, or above b) = target."""
    if target <= 0.0:
        return math.inf

    def excess(b: float) -> float:
        out = _exit_above(state, t, 0.0, b)
        if sides == 2:
            out += _exit_below(state, t, 0.0, -b)
        return out - target

    low = 0.0 if sides == 2 else -_FAR
    if excess(low) <= 0.0:
        return low
    return float(brentq(excess, low, _FAR, xtol=_XTOL, rtol=4 * np.finfo(float).eps))


def _efficacy(
    t: np.ndarray, alpha: float, sides: int, name: str, gamma: float | None, final: bool, r: int
) -> np.ndarray:
    """Efficacy boundaries under θ = 0, futility ignored (non-binding)."""
    if name in CLASSICAL:
        return _classical(t, alpha, sides, name, r)
    side_alpha = alpha / sides
    cum = spent(name, t, side_alpha, gamma) * sides
    if final:
        cum[-1] = alpha
    b = np.empty(len(t))
    state = _START
    so_far = 0.0
    for k, tk in enumerate(t):
        b[k] = _solve_upper(state, float(tk), float(cum[k]) - so_far, sides)
        up = _exit_above(state, float(tk), 0.0, b[k])
        low = _exit_below(state, float(tk), 0.0, -b[k]) if sides == 2 else 0.0
        so_far += up + low
        if k < len(t) - 1:
            lo = -b[k] if sides == 2 else -math.inf
            state = _advance(state, float(tk), 0.0, lo, b[k], r, float(t[k + 1]))
    return b


def _classical_shape(t: np.ndarray, name: str) -> np.ndarray:
    k = np.arange(1, len(t) + 1)
    return np.sqrt(len(t) / k) if name == "obrien-fleming" else np.ones(len(t))


def _classical(t: np.ndarray, alpha: float, sides: int, name: str, r: int) -> np.ndarray:
    """b_k = c·shape_k with c such that the total P_0(crossing) is alpha (Pocock 1977;
    O'Brien & Fleming 1979; the constant found by the AMR recursion as in Jennison &
    Turnbull 2000, ch. 2)."""
    if not equally_spaced(t):
        raise ValueError(
            f"{name} boundaries hold only for equally spaced looks; fractions "
            f"{', '.join(f'{v:g}' for v in t)} are not (use a spending function)"
        )
    shape = _classical_shape(t, name)

    def excess(c: float) -> float:
        b = c * shape
        lower = -b if sides == 2 else np.full(len(t), -np.inf)
        up, low = crossing_probabilities(b, lower, t, 0.0, r=r)
        return float(up.sum() + low.sum()) - alpha

    c0 = upper_quantile(alpha / sides)
    c = brentq(excess, c0 * 0.5, c0 + 3.0, xtol=_XTOL)
    return c * shape


def _nominal(b: np.ndarray, sides: int) -> tuple[float, ...]:
    return tuple(float(min(1.0, sides * special.ndtr(-v))) for v in b)


def _futility_at(
    t: np.ndarray,
    b: np.ndarray,
    drift: float,
    sides: int,
    beta: float,
    name: str,
    gamma: float | None,
    r: int,
    last_free: bool,
) -> tuple[np.ndarray, np.ndarray, bool]:
    """Beta-spending futility boundaries a_k at the drift, given the efficacy boundaries.

    At each look a_k solves P_δ(exit below a_k at look k) = β(t_k) − β(t_{k−1}) on the
    continuation region (max(a_j, −b_j), b_j) of the earlier looks (Pampallona & Tsiatis
    1994; Jennison & Turnbull 2000, ch. 7). With ``last_free`` the last a_K spends what is
    left of β without being capped at b_K. Returns (a, cumulative lower exits, met early).
    """
    cum = spent(name, t, beta, gamma)
    a = np.empty(len(t))
    state = _START
    so_far = 0.0
    exits = np.empty(len(t))
    met = False
    for k, tk in enumerate(t):
        tk_f = float(tk)
        floor = -b[k] if sides == 2 else -_FAR
        last = k == len(t) - 1
        target = (beta if (last and last_free) else float(cum[k])) - so_far
        cap = _FAR if (last and last_free) else b[k]

        def excess(
            x: float, state: _State = state, tk_f: float = tk_f, target: float = target
        ) -> float:
            return _exit_below(state, tk_f, drift, x) - target

        if state.c.size == 0:
            a[k] = b[k]
        elif excess(floor) >= 0.0:
            a[k] = floor
        elif excess(cap) <= 0.0:
            a[k] = cap
            met = met or not last
        else:
            a[k] = brentq(excess, floor, cap, xtol=_XTOL)
        so_far += _exit_below(state, tk_f, drift, min(a[k], b[k]))
        exits[k] = so_far
        if not last:
            state = _advance(state, tk_f, drift, a[k], b[k], r, float(t[k + 1]))
    return a, exits, met


def _futility_drift(
    t: np.ndarray, b: np.ndarray, sides: int, beta: float, name: str, gamma: float | None, r: int
) -> float:
    """The drift at which the last futility boundary meets the last efficacy boundary."""

    def gap(drift: float) -> float:
        a, _, met = _futility_at(t, b, drift, sides, beta, name, gamma, r, last_free=True)
        return 1.0 if met else float(a[-1] - b[-1])

    low, high = 1e-6, 2.0 * (float(b[-1]) + upper_quantile(beta)) + 2.0
    if gap(low) >= 0.0:
        raise ValueError(
            "the futility boundary meets the efficacy boundary at zero drift; check alpha and power"
        )
    return float(brentq(gap, low, high, xtol=_XTOL))


def boundaries(
    fractions: Sequence[float],
    *,
    alpha: float,
    sides: int,
    efficacy: str,
    gamma: float | None = None,
    final: bool | None = None,
    futility: str | None = None,
    futility_gamma: float | None = None,
    power: float | None = None,
    drift: float | None = None,
    r: int = GRID_R,
) -> Boundaries:
    """Boundaries at the given (observed or planned) fractions.

    Spending functions (Lan & DeMets 1983): look k spends spent(t_k) − spent(t_{k−1}); with
    ``final`` (default: the last fraction is 1) the last look spends all of alpha. Classical
    ``obrien-fleming`` / ``pocock`` (O'Brien & Fleming 1979; Pocock 1977): b_k = c·sqrt(K/k)
    and b_k = c for K equally spaced looks, ValueError otherwise. Two-sided: symmetric, each
    side spending alpha / 2 with continuation region (−b_k, b_k). Futility (beta spending,
    non-binding: the efficacy boundaries ignore it) needs ``power``; the drift is found so
    that the last futility boundary meets the last efficacy boundary (Jennison & Turnbull
    2000, ch. 7), or taken from ``drift`` (the planned design's) when given, as at looks
    whose observed fractions differ from the plan.
    """
    t = _fractions(fractions)
    alpha = _probability("alpha", alpha)
    sides = _sides(sides)
    efficacy = _spending_name("efficacy boundary", efficacy, EFFICACY)
    gamma = (
        _gamma("efficacy", efficacy, gamma)
        if efficacy not in CLASSICAL
        else _no_gamma(efficacy, gamma)
    )
    if final is None:
        final = bool(t[-1] >= 1.0)
    if not isinstance(r, int) or r < 4:
        raise ValueError(f"r must be an integer >= 4, got {r!r}")
    b = _efficacy(t, alpha, sides, efficacy, gamma, bool(final), r)
    lower = -b if sides == 2 else np.full(len(t), -np.inf)
    up, low = crossing_probabilities(b, lower, t, 0.0, r=r)
    alpha_spent = tuple(float(v) for v in np.cumsum(up + low))
    fut_z = beta_spent = None
    fut_gamma = None
    if futility is not None:
        futility = _spending_name("futility spending", futility, FUTILITY)
        fut_gamma = _gamma("futility", futility, futility_gamma)
        if power is None:
            raise ValueError("a futility boundary needs the power it is planned at")
        power = _probability("power", power)
        beta = 1.0 - power
        if drift is None:
            drift = _futility_drift(t, b, sides, beta, futility, fut_gamma, r)
        else:
            drift = _real("drift", drift)
        a, _, _ = _futility_at(t, b, drift, sides, beta, futility, fut_gamma, r, last_free=False)
        if final:
            a[-1] = b[-1]
        a = np.minimum(a, b)
        fut_lower = np.maximum(a, -b) if sides == 2 else a
        _, low_d = crossing_probabilities(b, fut_lower, t, drift, r=r)
        fut_z = tuple(float(v) for v in a)
        beta_spent = tuple(float(v) for v in np.cumsum(low_d))
    elif futility_gamma is not None:
        raise ValueError("futility_gamma given without a futility spending function")
    elif power is not None:
        power = _probability("power", power)
    return Boundaries(
        fractions=tuple(float(v) for v in t),
        z=tuple(float(v) for v in b),
        nominal_p=_nominal(b, sides),
        alpha_spent=alpha_spent,
        futility_z=fut_z,
        beta_spent=beta_spent,
        alpha=alpha,
        sides=sides,
        efficacy=efficacy,
        gamma=gamma,
        drift=None if drift is None else float(drift),
        futility=futility,
        futility_gamma=fut_gamma,
        power=power,
    )


def _no_gamma(name: str, gamma: object) -> None:
    if gamma is not None:
        raise ValueError(f"efficacy gamma applies to hwang-shih-decani only, not {name}")


# --------------------------------------------------------------------------- design


def _lower_limits(bounds: Boundaries, with_futility: bool) -> np.ndarray:
    """The lower edge of the continuation region at each look."""
    b = np.asarray(bounds.z)
    lower = -b if bounds.sides == 2 else np.full(len(b), -np.inf)
    if with_futility and bounds.futility_z is not None:
        lower = np.maximum(lower, np.asarray(bounds.futility_z))
    return lower


def _stopping(bounds: Boundaries, drift: float, with_futility: bool, r: int) -> np.ndarray:
    """P(stop at look k); the last look takes all that is left."""
    t = np.asarray(bounds.fractions)
    up, low = crossing_probabilities(bounds.z, _lower_limits(bounds, with_futility), t, drift, r=r)
    stop = up + low
    stop[-1] = max(0.0, 1.0 - float(stop[:-1].sum()))
    return stop


def _power_drift(bounds: Boundaries, power: float, r: int) -> float:
    """The drift at which P(cross the upper efficacy boundary) is ``power``."""
    t = np.asarray(bounds.fractions)
    lower = _lower_limits(bounds, with_futility=False)

    def shortfall(drift: float) -> float:
        up, _ = crossing_probabilities(bounds.z, lower, t, drift, r=r)
        return float(up.sum()) - power

    fixed = upper_quantile(bounds.alpha / bounds.sides) + upper_quantile(1.0 - power)
    return float(brentq(shortfall, 0.0, 2.0 * fixed + 2.0, xtol=_XTOL))


def design(
    fractions: Sequence[float],
    *,
    alpha: float,
    sides: int,
    efficacy: str,
    gamma: float | None = None,
    futility: str | None = None,
    futility_gamma: float | None = None,
    power: float,
    r: int = GRID_R,
) -> SequentialDesign:
    """The planned design at ``fractions`` (ending at 1) for the given alpha and power.

    The drift δ = θ·sqrt(I_max) gives the power (with a futility boundary, the drift at which
    it meets the efficacy boundary, so the power is 1 − β exactly); the inflation factor is
    I_max / I_fixed = (δ / (z_{α/sides} + z_β))² and the expected information is reported as
    a fraction of the fixed-sample information, under θ = 0 and under the design drift,
    with the futility boundary followed when there is one (Jennison & Turnbull 2000, ch. 2
    and 7).
    """
    t = _fractions(fractions)
    if t[-1] != 1.0:
        raise ValueError(f"planned fractions must end at 1, got {t[-1]!r}")
    power = _probability("power", power)
    bounds = boundaries(
        list(t),
        alpha=alpha,
        sides=sides,
        efficacy=efficacy,
        gamma=gamma,
        futility=futility,
        futility_gamma=futility_gamma,
        power=power,
        r=r,
    )
    if bounds.alpha / bounds.sides >= power:
        raise ValueError(f"power ({power!r}) must exceed the one-sided alpha")
    drift = bounds.drift if bounds.drift is not None else _power_drift(bounds, power, r)
    fixed = upper_quantile(bounds.alpha / bounds.sides) + upper_quantile(1.0 - power)
    inflation = (drift / fixed) ** 2
    with_futility = bounds.futility_z is not None
    stop_null = _stopping(bounds, 0.0, with_futility, r)
    stop_alt = _stopping(bounds, drift, with_futility, r)
    up, _ = crossing_probabilities(bounds.z, _lower_limits(bounds, with_futility), t, drift, r=r)
    return SequentialDesign(
        boundaries=bounds,
        inflation=float(inflation),
        expected_fraction_null=float(inflation * np.dot(t, stop_null)),
        expected_fraction_alternative=float(inflation * np.dot(t, stop_alt)),
        power=float(up.sum()),
        drift=float(drift),
        expected_with_futility=with_futility,
        stop_null=tuple(float(v) for v in stop_null),
        stop_alternative=tuple(float(v) for v in stop_alt),
    )


# --------------------------------------------------------------------------- inference


def _observed(
    z: Sequence[float], information: Sequence[float], bounds: Boundaries
) -> tuple[np.ndarray, np.ndarray]:
    if isinstance(z, (str, bytes)) or not isinstance(z, Sequence | np.ndarray):
        raise ValueError("z must be a sequence of numbers, one per look")  # noqa: TRY004 (the interface raises ValueError)
    if isinstance(information, (str, bytes)) or not isinstance(information, Sequence | np.ndarray):
        raise ValueError("information must be a sequence of numbers, one per look")  # noqa: TRY004 (the interface raises ValueError)
    zs = np.array([_real(f"z[{i}]", v) for i, v in enumerate(z)])
    info = np.array([_real(f"information[{i}]", v) for i, v in enumerate(information)])
    if len(zs) == 0 or len(zs) != len(info):
        raise ValueError(
            f"z has {len(zs)} entries and information {len(info)}; give one of each per look"
        )
    if len(zs) > len(bounds.z):
        raise ValueError(f"{len(zs)} looks observed but the boundaries have {len(bounds.z)}")
    if info[0] <= 0 or np.any(np.diff(info) <= 0):
        raise ValueError("information must be positive and increase from look to look")
    for j in range(len(zs) - 1):
        edge = abs(zs[j]) if bounds.sides == 2 else zs[j]
        if edge >= bounds.z[j]:
            raise ValueError(
                f"z at look {j + 1} ({zs[j]:.4g}) crossed its boundary ({bounds.z[j]:.4g}); "
                "the trial stopped there"
            )
    return zs, info


def _ordering_tail(
    zs: np.ndarray, info: np.ndarray, bounds: Boundaries, r: int
) -> Callable[[float], float]:
    """δ ↦ P_δ(an outcome at least as high as the observed one, stage-wise ordering)."""
    k = len(zs)
    t = info / info[-1]
    b = np.asarray(bounds.z[:k], dtype=float)
    upper = np.r_[b[:-1], zs[-1]]
    lower = np.r_[-b[:-1] if bounds.sides == 2 else np.full(k - 1, -np.inf), -np.inf]

    def tail(drift: float) -> float:
        up, _ = crossing_probabilities(upper, lower, t, drift, r=r)
        return float(min(1.0, max(0.0, up.sum())))

    return tail


def _invert(tail: Callable[[float], float], target: float, centre: float) -> float:
    """The drift at which the (increasing) tail probability equals ``target``."""
    lo, hi = centre - 8.0, centre + 8.0
    while tail(lo) > target:
        lo -= 8.0
    while tail(hi) < target:
        hi += 8.0
    return float(brentq(lambda d: tail(d) - target, lo, hi, xtol=1e-10))


def stagewise_inference(
    z: Sequence[float],
    information: Sequence[float],
    bounds: Boundaries,
    *,
    level: float,
    r: int = GRID_R,
) -> Adjusted:
    """Adjusted inference after stopping at look len(z), by the stage-wise ordering.

    Outcomes are ordered by the look at which the upper boundary is crossed (earlier is more
    extreme), then by z (Armitage 1957; Fairbanks & Madsen 1982; Tsiatis, Rosner & Mehta 1984;
    Jennison & Turnbull 2000, ch. 8). θ is the effect on the scale where Z_k ~ N(θ·sqrt(I_k), 1),
    ``information`` the absolute I_k (1/variance). The efficacy boundaries alone define the
    ordering (futility is non-binding); a look that did not cross (the final look, or a stop
    for futility) is treated as the last. The p-value is P_0(outcome at least as extreme),
    twice the smaller tail when sides = 2; the estimate is median-unbiased and the interval
    has equal tails of (1 − level) / 2.
    """
    level = _probability("level", level)
    zs, info = _observed(z, information, bounds)
    tail = _ordering_tail(zs, info, bounds, r)
    p_up = tail(0.0)
    p = min(1.0, 2.0 * min(p_up, 1.0 - p_up)) if bounds.sides == 2 else p_up
    scale = math.sqrt(float(info[-1]))
    centre = float(zs[-1])
    half = (1.0 - level) / 2.0
    estimate = _invert(tail, 0.5, centre) / scale
    ci = (_invert(tail, half, centre) / scale, _invert(tail, 1.0 - half, centre) / scale)
    return Adjusted(
        p_value=float(p), estimate=estimate, ci=ci, look=len(zs), level=level, sides=bounds.sides
    )


def stagewise_tail(
    z: Sequence[float],
    information: Sequence[float],
    bounds: Boundaries,
    theta: float = 0.0,
    *,
    r: int = GRID_R,
) -> float:
    """P_θ(an outcome at least as high as the observed one in the stage-wise ordering).

    The one-sided stage-wise p-value of H0: θ = ``theta`` (against larger θ); increasing in θ,
    so that {θ : (1 − level)/2 < tail < (1 + level)/2} is the interval of
    :func:`stagewise_inference` (Jennison & Turnbull 2000, section 8.4). Also the p-value of a
    shifted null such as a non-inferiority margin on the θ scale.
    """
    zs, info = _observed(z, information, bounds)
    theta = _real("theta", theta)
    return _ordering_tail(zs, info, bounds, r)(theta * math.sqrt(float(info[-1])))


def repeated_ci(estimate: float, information: float, bound_z: float) -> tuple[float, float]:
    """Repeated confidence interval at one look: θ̂ ± b_k / sqrt(I_k) (Jennison & Turnbull
    1989, Journal of the Royal Statistical Society B 51: 305-361); the intervals at all looks
    cover θ together with the probability the boundaries were built for."""
    est = _real("estimate", estimate)
    info = _real("information", information)
    if info <= 0:
        raise ValueError(f"information must be positive, got {information!r}")
    if isinstance(bound_z, bool) or not isinstance(bound_z, Real) or not float(bound_z) > 0:
        raise ValueError(f"bound_z must be a positive number, got {bound_z!r}")
    half = float(bound_z) / math.sqrt(info)
    return (est - half, est + half)
