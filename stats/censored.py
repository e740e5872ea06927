"""Censored lognormal fits by maximum likelihood, their comparison, and Kaplan–Meier medians
of left-censored values.

Model and method: ln X ~ Normal(mu, sigma) in each group. A detected value x contributes the
normal density of ln x; an entry below a limit L (left-censored) contributes
Phi((ln L - mu) / sigma); an entry above a limit U (right-censored, above the range)
contributes 1 - Phi((ln U - mu) / sigma). This is the censored maximum-likelihood method of
Helsel, Statistics for Censored Environmental Data Using Minitab and R (2nd ed., 2012) and
of the US EPA Unified Guidance (2009), ch. 15 (both from memory).

Fitting. The likelihood is maximised in Olsen's parametrisation alpha = mu / sigma,
beta = 1 / sigma (Olsen, Econometrica 46, 1978, 1211-1215), in which the log-likelihood is
concave: ln Phi is concave and its argument beta * y - alpha is affine, and the density terms
give ln beta - (beta * y - alpha)^2 / 2. Newton's method with step halving therefore reaches
the one maximum from any start; the start is the mean and SD of the detected logs, and the
logs are standardised by them so that every group starts at alpha = 0, beta = 1. All groups
are iterated at once with per-group sums (numpy ``bincount``); each group has its own
convergence flag. Standard errors come from the inverse observed information at the
optimum, carried to (mu, sigma) by the Jacobian of the reparametrisation (exact at a
stationary point).

Groups without censoring are not iterated: mu is the mean of the logs and sigma the ML SD
(divisor n). The comparison uses the sample SD (divisor n - 1) for them, so that data without
censoring give exactly the Welch (or pooled) t-test on the logs.

Which groups are fitted: at least ``MIN_DETECTED`` (2) detected values, not all of them equal
where the group has censored entries, and at most ``MAX_CENSORED_SHARE`` (80%) of the entries
censored. Two distinct detected values make the likelihood bounded with a unique maximum;
above about 80% nondetects Helsel (2012, from memory) advises against estimating a mean and
SD at all, a threshold in common practice. Other groups get NaN and a reason (``REASONS``).

Comparison (``compare_censored``). d = mu_b - mu_a; each group's variance of mu is its inverse
observed information times n / (n - 1), the small-sample factor that turns the ML variance of
the logs into the sample variance, so that the rule runs continuously into the t-test as
censoring goes to zero; SE^2 is the sum of the two. The reference distribution is Student's t
with the Welch–Satterthwaite df of those two variances and the group sizes,
df = SE^4 / sum(v_i^2 / (n_i - 1)): without censoring exactly Welch's t-test on the logs.

Why this rule: the coverage study in tests/study_censored_coverage.py (ln X ~ N(mu, 1), each
entry given one of three limits at the quantiles share * (0.5, 1, 1.5) of group a's
distribution and shared by group b; 20,000 replicates per cell, Monte Carlo SE 0.15 points;
seed 20240610). Coverage (%) of the nominal 95% CI of the ratio, true ratio 1 / 2; k = detected
counts, "n/n-1" = ML variances times n / (n - 1), * = implemented:

     n cens    normal,ML     t(k),ML  t(k),n/n-1     t(n),ML t(n),n/n-1*     pooled*  DL/2+Welch
    10  10%    92.6/92.2   94.9/94.5   95.8/95.6   94.5/94.2   95.5/95.4   95.1/95.1   95.0/95.0
    10  30%    94.8/93.8   97.5/96.2   98.0/97.0   96.5/95.6   97.3/96.4   96.0/95.6   95.4/95.2
    10  50%    96.6/94.9   98.9/97.6   99.2/98.0   97.7/96.4   98.3/97.2   96.4/95.7   95.3/94.3
    20  10%    93.7/93.8   94.8/94.7   95.4/95.3   94.6/94.6   95.3/95.2   95.1/95.1   95.0/95.1
    20  30%    95.1/94.2   96.3/95.3   96.8/95.9   95.8/94.9   96.3/95.6   95.4/95.2   95.2/94.9
    20  50%    96.5/95.4   98.3/96.9   98.6/97.2   97.2/96.2   97.6/96.6   95.7/95.4   95.1/93.7
    50  10%    94.6/94.5   95.0/94.9   95.2/95.1   94.9/94.8   95.2/95.0   95.1/95.1   95.1/94.9
    50  30%    94.9/94.6   95.3/95.0   95.6/95.2   95.2/94.9   95.4/95.1   95.2/95.0   95.1/94.9
    50  50%    95.9/95.1   96.5/95.7   96.7/95.9   96.2/95.4   96.4/95.6   95.4/95.0   95.2/90.8

The normal quantile undercovers at n = 10 (92-93%); every t rule covers at least 94% there.
Of the t rules, df from the group sizes is closest to nominal; the ML variances times
n / (n - 1) add 0.2 to 1.2 points over the plain ML variances and make the rule continuous
with the t-test. The remaining error is conservative and comes from heavy censoring at small n
(97.6% at n = 20 with half the entries censored): the ML estimate of mu is then skewed and
heavy-tailed and its SE grows with its error, which a Wald interval cannot follow (a
likelihood-ratio interval could). False-positive rate (%) at alpha = 0.05, equal
distributions, group a 10% and group b 50% censored (b measured with higher limits):

    n per group          10    20    50   100
    t(n),n/n-1*         3.8   3.7   4.4   4.6
    pooled*             4.4   4.7   4.8   4.7
    DL/2 + Welch        5.8   6.6  10.1  16.4

Pooled comparison (``fit_censored_pooled`` and ``compare_pooled``, for ``--test pooled``): the
two groups of each comparison are fitted jointly with their own mu and a common sigma; the
variance of d is its inverse observed information times N / (N - 2), N = n_a + n_b, and
df = N - 2: without censoring exactly the pooled t-test on the logs (study figures above).

Kaplan–Meier median (``kaplan_meier_median``): left-censored values are flipped
(x -> M - x, M above every value) into right-censored ones, the product-limit estimator is
applied (Kaplan & Meier, JASA 53, 1958; Helsel 2012), and the median is flipped back.
The median of a survival curve is the first time at which it is at most one half; where it
equals one half exactly over an interval, the midpoint (the convention of R's ``survival``
package, which Helsel's NADA uses), so that data without censoring give the ordinary median.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, fields
from typing import NamedTuple

import numpy as np
import numpy.typing as npt
from scipy import special

from .distributions import t_ppf, t_sf

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]
BoolArray = npt.NDArray[np.bool_]

#: A group needs at least this many detected values to be fitted.
MIN_DETECTED = 2
#: A group with a larger share of censored entries is not fitted (common practice).
MAX_CENSORED_SHARE = 0.8
#: Newton stops when no parameter (on the standardised scale) moves more than this.
TOLERANCE = 1e-10
MAX_ITERATIONS = 100
MAX_HALVINGS = 60

EMPTY = "no values"
ALL_CENSORED = "all censored"
TOO_FEW_DETECTED = f"fewer than {MIN_DETECTED} detected values"
NO_SPREAD = "detected values all equal"
TOO_CENSORED = f"more than {MAX_CENSORED_SHARE:.0%} censored"
NOT_CONVERGED = "fit did not converge"
#: Every reason a group is not fitted (the empty string means it was).
REASONS = (EMPTY, ALL_CENSORED, TOO_FEW_DETECTED, NO_SPREAD, TOO_CENSORED, NOT_CONVERGED)

_DETECTED, _LEFT, _RIGHT = 0, 1, 2
_LOG_ROOT_2PI = 0.5 * math.log(2 * math.pi)


@dataclass(frozen=True)
class CensoredFit:
    """Arrays, one entry per group; NaN (and a non-empty ``reason``) where a group is not
    fitted. ``mu``, ``sigma`` are the ML estimates of the mean and SD of the logs; ``var_mu``,
    ``var_sigma``, ``cov_mu_sigma`` the inverse observed information at the optimum (for a
    group without censoring: sigma^2 / n, sigma^2 / (2n), 0); ``ss_log`` the sum of squared
    deviations of the logs about ``mu`` (groups without censoring; NaN otherwise)."""

    mu: FloatArray
    sigma: FloatArray
    se_mu: FloatArray
    var_mu: FloatArray
    var_sigma: FloatArray
    cov_mu_sigma: FloatArray
    ss_log: FloatArray
    n: IntArray
    n_detected: IntArray
    n_left: IntArray
    n_right: IntArray
    converged: BoolArray
    iterations: IntArray
    reason: npt.NDArray[np.str_]

    @property
    def n_censored(self) -> IntArray:
        censored: IntArray = self.n_left + self.n_right
        return censored

    @property
    def has_censoring(self) -> BoolArray:
        return np.asarray(self.n_censored > 0)

    @property
    def censored_share(self) -> FloatArray:
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.asarray(self.n_censored / self.n, dtype=np.float64)

    def take(self, index: npt.ArrayLike) -> CensoredFit:
        """The fits of the groups at ``index`` (e.g. the a side of every comparison)."""
        rows = np.asarray(index, dtype=np.int64)
        parts = {f.name: getattr(self, f.name)[rows] for f in fields(self)}
        return CensoredFit(**parts)


class CensoredComparison(NamedTuple):
    """Arrays, one entry per comparison; d is the difference of log-scale means (b - a), so
    exp(d) is the ratio of geometric means; the CI is for d."""

    d: FloatArray
    se: FloatArray
    df: FloatArray
    ci_low: FloatArray
    ci_high: FloatArray
    p: FloatArray


class KaplanMeierMedian(NamedTuple):
    """``median`` is NaN with a ``reason`` when the curve never reaches one half; then
    ``at_most`` is the smallest value or limit that at least half the entries are known to be
    at or below (shown as "< limit")."""

    median: float
    reason: str
    at_most: float


# -- the likelihood on standardised logs ----------------------------------------------------


def _sum_by(codes: IntArray, weights: FloatArray, size: int) -> FloatArray:
    """Sum of ``weights`` per code 0..size-1."""
    return np.asarray(np.bincount(codes, weights, size), dtype=np.float64)


@dataclass(frozen=True)
class _Problem:
    """Observations on a standardised log scale u. Each unit has one scale parameter beta and
    ``k`` location parameters alpha (cells ``unit * k + j``); z = beta * u - alpha.

    Detected observations enter through their sufficient statistics per cell (count, sum of
    u, sum of u^2): their terms are quadratic in (alpha, beta). Censored observations are
    kept one per distinct (cell, limit, side) with its count as a weight, so a group's cost
    per iteration grows with its distinct limits, not its size."""

    cell: IntArray  # per censored entry (distinct)
    u: FloatArray
    sign: FloatArray  # +1 left-censored, -1 right-censored
    weight: FloatArray  # how many entries share that cell, limit and side
    n_units: int
    k: int
    count: FloatArray  # per cell: detected observations, their sum of u and of u^2
    s1: FloatArray
    s2: FloatArray

    @property
    def unit(self) -> IntArray:
        unit: IntArray = self.cell // self.k
        return unit

    @property
    def detected(self) -> FloatArray:
        """Detected observations per unit."""
        return np.asarray(self.count.reshape(self.n_units, self.k).sum(axis=1), dtype=np.float64)


def _censored_terms(
    problem: _Problem, alpha: FloatArray, beta: FloatArray
) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Per distinct censored entry: ln Phi(w) and its first and second derivatives with
    respect to z (w = sign * z)."""
    z = beta[problem.unit] * problem.u - alpha[problem.cell]
    w = problem.sign * z
    log_cdf = special.log_ndtr(w)
    mills = np.exp(-0.5 * w * w - _LOG_ROOT_2PI - log_cdf)
    return log_cdf, problem.sign * mills, -np.clip(mills * (w + mills), 0.0, 1.0)


def _log_likelihood(problem: _Problem, alpha: FloatArray, beta: FloatArray) -> FloatArray:
    ok = beta > 0
    safe = np.where(ok, beta, 1.0)
    k, units = problem.k, problem.n_units
    b = np.repeat(safe, k)
    quadratic = -0.5 * (b * b * problem.s2 - 2 * alpha * b * problem.s1 + problem.count * alpha**2)
    total = quadratic.reshape(units, k).sum(axis=1) + problem.detected * np.log(safe)
    if problem.cell.size:
        log_cdf, _, _ = _censored_terms(problem, alpha, safe)
        total = total + _sum_by(problem.unit, problem.weight * log_cdf, units)
    return np.asarray(np.where(ok & np.isfinite(total), total, -np.inf), dtype=np.float64)


def _gradient_hessian(
    problem: _Problem, alpha: FloatArray, beta: FloatArray
) -> tuple[FloatArray, FloatArray]:
    """Gradient (units, k + 1) and Hessian (units, k + 1, k + 1) in (alpha_1..alpha_k, beta)."""
    k, units = problem.k, problem.n_units
    b = np.repeat(beta, k)
    # Detected terms -(beta u - alpha)^2 / 2, summed per cell.
    g_alpha = b * problem.s1 - problem.count * alpha
    g_beta_cell = -(b * problem.s2 - alpha * problem.s1)
    h_alpha = -problem.count
    h_cross = problem.s1
    h_beta_cell = -problem.s2
    if problem.cell.size:
        _, first, second = _censored_terms(problem, alpha, beta)
        w, u, cells = problem.weight, problem.u, units * k
        g_alpha = g_alpha - _sum_by(problem.cell, w * first, cells)
        g_beta_cell = g_beta_cell + _sum_by(problem.cell, w * u * first, cells)
        h_alpha = h_alpha + _sum_by(problem.cell, w * second, cells)
        h_cross = h_cross - _sum_by(problem.cell, w * u * second, cells)
        h_beta_cell = h_beta_cell + _sum_by(problem.cell, w * u * u * second, cells)
    gradient = np.empty((units, k + 1))
    gradient[:, :k] = g_alpha.reshape(units, k)
    gradient[:, k] = g_beta_cell.reshape(units, k).sum(axis=1) + problem.detected / beta
    hessian = np.zeros((units, k + 1, k + 1))
    diagonal, cross = h_alpha.reshape(units, k), h_cross.reshape(units, k)
    for j in range(k):
        hessian[:, j, j] = diagonal[:, j]
        hessian[:, j, k] = cross[:, j]
        hessian[:, k, j] = cross[:, j]
    hessian[:, k, k] = h_beta_cell.reshape(units, k).sum(axis=1) - problem.detected / beta**2
    return gradient, hessian


def _newton_step(gradient: FloatArray, hessian: FloatArray) -> FloatArray:
    """-H^-1 g where H is negative definite; the gradient itself (ascent) elsewhere."""
    negative = np.linalg.eigvalsh(hessian).max(axis=1) < 0
    safe = np.where(negative[:, None, None], hessian, -np.eye(hessian.shape[1]))
    step = -np.linalg.solve(safe, gradient[:, :, None])[:, :, 0]
    return np.asarray(np.where(negative[:, None], step, gradient), dtype=np.float64)


def _split(problem: _Problem, theta: FloatArray) -> tuple[FloatArray, FloatArray]:
    return theta[:, : problem.k].reshape(-1), theta[:, problem.k]


def _line_search(
    problem: _Problem, theta: FloatArray, step: FloatArray, current: FloatArray
) -> tuple[FloatArray, FloatArray]:
    """Halve each unit's step until its log-likelihood does not decrease (beyond rounding);
    a unit that finds no such step stays where it is."""
    scale = np.ones(problem.n_units)
    slack = 1e-12 * (1.0 + np.abs(current))
    pending = np.any(step != 0, axis=1)
    new_theta, new_value = theta.copy(), current.copy()
    for _ in range(MAX_HALVINGS):
        if not pending.any():
            break
        trial = theta + scale[:, None] * step
        value = _log_likelihood(problem, *_split(problem, trial))
        accept = pending & (value >= current - slack)
        new_theta[accept], new_value[accept] = trial[accept], value[accept]
        pending &= ~accept
        scale[pending] *= 0.5
    return new_theta, new_value


def _maximise(problem: _Problem, theta: FloatArray) -> tuple[FloatArray, BoolArray, IntArray]:
    """Damped Newton over all units at once; returns the optimum, a convergence flag and the
    iterations used, per unit."""
    value = _log_likelihood(problem, *_split(problem, theta))
    done = np.zeros(problem.n_units, dtype=bool)
    iterations = np.zeros(problem.n_units, dtype=np.int64)
    for _ in range(MAX_ITERATIONS):
        gradient, hessian = _gradient_hessian(problem, *_split(problem, theta))
        step = _newton_step(gradient, hessian)
        small = np.abs(step).max(axis=1) <= TOLERANCE * (1.0 + np.abs(theta).max(axis=1))
        done |= small & np.isfinite(value)
        step[done] = 0.0
        if done.all():
            break
        iterations += ~done
        theta, value = _line_search(problem, theta, step, value)
    return theta, done, iterations


def _covariance(problem: _Problem, theta: FloatArray) -> FloatArray:
    """Inverse observed information in (alpha_1..alpha_k, beta), per unit; NaN where the
    information is not positive definite."""
    _, hessian = _gradient_hessian(problem, *_split(problem, theta))
    negative = np.linalg.eigvalsh(hessian).max(axis=1) < 0
    safe = np.where(negative[:, None, None], hessian, -np.eye(problem.k + 1))
    covariance = np.linalg.inv(-safe)
    covariance[~negative] = np.nan
    return np.asarray(covariance, dtype=np.float64)


# -- input and per-group statistics ------------------------------------------------------


def _kinds(
    values: npt.ArrayLike,
    censored: npt.ArrayLike,
    right: npt.ArrayLike | None,
    group_ids: npt.ArrayLike,
    n_groups: int,
) -> tuple[FloatArray, IntArray, IntArray]:
    """Logs, observation kinds and group codes, checked."""
    x = np.asarray(values, dtype=np.float64).reshape(-1)
    left = np.asarray(censored, dtype=bool).reshape(-1)
    above = np.zeros_like(left) if right is None else np.asarray(right, dtype=bool).reshape(-1)
    groups = np.asarray(group_ids).reshape(-1)
    if not (x.shape == left.shape == above.shape == groups.shape):
        raise ValueError("values, censored, right and group_ids must have the same length")
    if x.size and not (np.all(np.isfinite(x)) and np.all(x > 0)):
        raise ValueError("values (and limits) must be positive and finite")
    if np.any(left & above):
        raise ValueError("an entry cannot be censored both below and above")
    if groups.size and (groups.min() < 0 or groups.max() >= n_groups):
        raise ValueError(f"group_ids must be integer codes 0..{n_groups - 1}")
    kind = np.where(left, _LEFT, np.where(above, _RIGHT, _DETECTED)).astype(np.int64)
    return np.log(x), kind, groups.astype(np.int64)


def _mean_and_ss(
    y: FloatArray, groups: IntArray, weight: FloatArray, count: FloatArray
) -> tuple[FloatArray, FloatArray]:
    """Per-group mean (two-pass, corrected) and sum of squared deviations of the weighted
    observations (weight 1 or 0)."""
    size = count.size
    with np.errstate(divide="ignore", invalid="ignore"):
        first = _sum_by(groups, weight * y, size) / count
        centred = np.where(weight > 0, y - first[groups], 0.0)
        mean = first + _sum_by(groups, centred, size) / count
        deviation = np.where(weight > 0, y - mean[groups], 0.0)
    return mean, _sum_by(groups, deviation * deviation, size)


def _reasons(n: IntArray, n_detected: IntArray, distinct: BoolArray) -> npt.NDArray[np.str_]:
    """Why each group is not fitted ("" where it is). Without censoring, equal values are no
    obstacle: the t-test takes them as they are (SD 0)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        share = (n - n_detected) / n
    censored = n_detected < n
    return np.select(
        [
            n == 0,
            n_detected == 0,
            n_detected < MIN_DETECTED,
            censored & ~distinct,
            share > MAX_CENSORED_SHARE,
        ],
        [EMPTY, ALL_CENSORED, TOO_FEW_DETECTED, NO_SPREAD, TOO_CENSORED],
        "",
    ).astype(np.str_)


def _spread(y: FloatArray, groups: IntArray, detected: BoolArray, n_groups: int) -> BoolArray:
    """Whether each group has at least two distinct detected values."""
    low = np.full(n_groups, np.inf)
    high = np.full(n_groups, -np.inf)
    np.minimum.at(low, groups[detected], y[detected])
    np.maximum.at(high, groups[detected], y[detected])
    return np.asarray(high > low)


def _compress(
    cell: IntArray, u: FloatArray, kind: IntArray
) -> tuple[IntArray, FloatArray, IntArray, FloatArray]:
    """Censored entries as distinct (cell, u, kind) with their counts."""
    order = np.lexsort((u, kind, cell))
    cell, u, kind = cell[order], u[order], kind[order]
    new = np.ones(cell.size, dtype=bool)
    new[1:] = (np.diff(cell) != 0) | (np.diff(kind) != 0) | (np.diff(u) != 0)
    first = np.flatnonzero(new)
    counts = np.diff(np.append(first, cell.size)).astype(np.float64)
    return cell[first], u[first], kind[first], counts


def _solve(
    u: FloatArray, kind: IntArray, cell: IntArray, k: int, n_units: int
) -> tuple[FloatArray, FloatArray, BoolArray, IntArray]:
    """Maximise from alpha = 0, beta = 1 (the standardised start): optimum (units, k + 1),
    its covariance (units, k + 1, k + 1), convergence flags and iterations."""
    cells = n_units * k
    detected = kind == _DETECTED
    censored = _compress(cell[~detected], u[~detected], kind[~detected])
    count = np.bincount(cell[detected], minlength=cells).astype(np.float64)
    s1 = _sum_by(cell[detected], u[detected], cells)
    s2 = _sum_by(cell[detected], u[detected] ** 2, cells)
    return _solve_parts((count, s1, s2), censored, k, n_units)


def _solve_parts(
    detected: tuple[FloatArray, FloatArray, FloatArray],
    censored: tuple[IntArray, FloatArray, IntArray, FloatArray],
    k: int,
    n_units: int,
) -> tuple[FloatArray, FloatArray, BoolArray, IntArray]:
    """``_solve`` from the detected values' sufficient statistics per cell (count, sum of u,
    sum of u^2) and the distinct censored entries (cell, u, kind, count)."""
    count, s1, s2 = detected
    c_cell, c_u, c_kind, c_weight = censored
    problem = _Problem(
        cell=c_cell,
        u=c_u,
        sign=np.where(c_kind == _LEFT, 1.0, -1.0),
        weight=c_weight,
        n_units=n_units,
        k=k,
        count=count,
        s1=s1,
        s2=s2,
    )
    start = np.zeros((n_units, k + 1))
    start[:, k] = 1.0
    with np.errstate(over="ignore", under="ignore"):
        theta, done, iterations = _maximise(problem, start)
        covariance = _covariance(problem, theta)
    return theta, covariance, done, iterations


@dataclass(frozen=True)
class _Groups:
    """Per-group counts and detected-value statistics."""

    n: IntArray
    n_detected: IntArray
    n_left: IntArray
    n_right: IntArray
    mean: FloatArray  # of the detected logs
    ss: FloatArray  # their sum of squared deviations
    distinct: BoolArray  # at least two distinct detected values
    reason: npt.NDArray[np.str_]


def _groups(y: FloatArray, kind: IntArray, groups: IntArray, n_groups: int) -> _Groups:
    detected = kind == _DETECTED

    def count(mask: BoolArray) -> IntArray:
        return np.bincount(groups[mask], minlength=n_groups).astype(np.int64)

    n = np.bincount(groups, minlength=n_groups).astype(np.int64)
    n_detected = count(detected)
    mean, ss = _mean_and_ss(y, groups, detected.astype(np.float64), n_detected.astype(float))
    distinct = _spread(y, groups, detected, n_groups)
    return _Groups(
        n=n,
        n_detected=n_detected,
        n_left=count(kind == _LEFT),
        n_right=count(kind == _RIGHT),
        mean=mean,
        ss=ss,
        distinct=distinct,
        reason=_reasons(n, n_detected, distinct),
    )


def _units_of(chosen: BoolArray, groups: IntArray) -> tuple[IntArray, BoolArray, int]:
    """Compact codes 0..m-1 for the chosen groups, per observation, and which observations
    belong to a chosen group."""
    code = np.full(chosen.size, -1, dtype=np.int64)
    code[chosen] = np.arange(int(chosen.sum()))
    per_obs = code[groups]
    return per_obs, per_obs >= 0, int(chosen.sum())


_ESTIMATES = ("mu", "sigma", "var_mu", "var_sigma", "cov", "ss")


def _closed_form(g: _Groups) -> dict[str, FloatArray]:
    """The ML fit of every group as if it had no censoring: mean of the logs, SD with divisor
    n, and the inverse observed information sigma^2 / n, sigma^2 / (2n), 0."""
    with np.errstate(divide="ignore", invalid="ignore"):
        variance = g.ss / g.n
        return {
            "mu": g.mean,
            "sigma": np.sqrt(variance),
            "var_mu": variance / g.n,
            "var_sigma": variance / (2 * g.n),
            "cov": np.zeros_like(g.mean),
            "ss": g.ss,
        }


def fit_censored_lognormal(
    values: npt.ArrayLike,
    censored: npt.ArrayLike,
    group_ids: npt.ArrayLike,
    n_groups: int,
    *,
    right: npt.ArrayLike | None = None,
) -> CensoredFit:
    """Fit ln X ~ Normal(mu, sigma) to every group by maximum likelihood.

    ``values`` are positive: the measurement, or the limit where ``censored`` (below it) or
    ``right`` (above it) is set; ``group_ids`` are codes 0..n_groups-1. Groups without
    censoring get the mean of their logs and the ML SD (divisor n) without iterating;
    ``compare_censored`` then uses the sample SD (divisor n - 1, from ``ss_log``) for them, so
    that data without censoring give exactly the Welch t-test on the logs. Groups that cannot
    be fitted get NaN and a reason; nothing is raised for them."""
    y, kind, groups = _kinds(values, censored, right, group_ids, n_groups)
    g = _groups(y, kind, groups, n_groups)

    def iterate(chosen: BoolArray) -> tuple[dict[str, FloatArray], BoolArray, IntArray]:
        return _fit_chosen(y, kind, groups, g, chosen)

    return _finish(g, iterate)


def fit_censored_summarised(
    detected: tuple[npt.ArrayLike, npt.ArrayLike, npt.ArrayLike, npt.ArrayLike],
    censored: tuple[npt.ArrayLike, npt.ArrayLike, npt.ArrayLike, npt.ArrayLike],
    n_groups: int,
) -> CensoredFit:
    """``fit_censored_lognormal`` from what a group-by gives, without the raw values: per
    group ``detected`` = (count, mean of the logs, sum of squared deviations of the logs,
    whether at least two detected values differ); and the censored entries as distinct rows
    ``censored`` = (group code, limit, kind 1 below / 2 above, how many entries). The same
    estimates as from the raw values (the detected values enter the likelihood only through
    these sums)."""
    n_det = np.asarray(detected[0], dtype=np.int64).reshape(-1)
    mean = np.asarray(detected[1], dtype=np.float64).reshape(-1)
    ss = np.asarray(detected[2], dtype=np.float64).reshape(-1)
    distinct = np.asarray(detected[3], dtype=bool).reshape(-1)
    c_group = np.asarray(censored[0], dtype=np.int64).reshape(-1)
    c_limit = np.asarray(censored[1], dtype=np.float64).reshape(-1)
    c_kind = np.asarray(censored[2], dtype=np.int64).reshape(-1)
    c_count = np.asarray(censored[3], dtype=np.float64).reshape(-1)
    if c_limit.size and not (np.all(np.isfinite(c_limit)) and np.all(c_limit > 0)):
        raise ValueError("limits must be positive and finite")
    left = np.bincount(c_group[c_kind == _LEFT], c_count[c_kind == _LEFT], n_groups)
    right = np.bincount(c_group[c_kind == _RIGHT], c_count[c_kind == _RIGHT], n_groups)
    n_left, n_right = left.astype(np.int64), right.astype(np.int64)
    n = n_det + n_left + n_right
    g = _Groups(
        n=n,
        n_detected=n_det,
        n_left=n_left,
        n_right=n_right,
        mean=np.where(n_det > 0, mean, np.nan),
        ss=np.where(n_det > 0, ss, np.nan),
        distinct=distinct,
        reason=_reasons(n, n_det, distinct),
    )
    c_y = np.log(c_limit)

    def iterate(chosen: BoolArray) -> tuple[dict[str, FloatArray], BoolArray, IntArray]:
        unit_of = np.full(n_groups, -1, dtype=np.int64)
        unit_of[chosen] = np.arange(int(chosen.sum()))
        keep = unit_of[c_group] >= 0
        units = unit_of[c_group[keep]]
        centre = g.mean[chosen]
        scale = np.sqrt(g.ss[chosen] / (g.n_detected[chosen] - 1))
        u = (c_y[keep] - centre[units]) / scale[units]
        # Standardised detected values: sum 0 and sum of squares n - 1, exactly.
        count = g.n_detected[chosen].astype(np.float64)
        stats = (count, np.zeros_like(count), count - 1)
        parts = (units, u, c_kind[keep], c_count[keep])
        return _from_standard(centre, scale, _solve_parts(stats, parts, 1, int(chosen.sum())))

    return _finish(g, iterate)


def _finish(
    g: _Groups,
    iterate: Callable[[BoolArray], tuple[dict[str, FloatArray], BoolArray, IntArray]],
) -> CensoredFit:
    """Closed forms for groups without censoring, ``iterate`` for the censored ones."""
    n_groups = g.n.size
    fit = {name: np.full(n_groups, np.nan) for name in _ESTIMATES}
    converged = np.zeros(n_groups, dtype=bool)
    iterations = np.zeros(n_groups, dtype=np.int64)
    reason = g.reason.astype(object)
    plain = (g.reason == "") & (g.n_detected == g.n)
    for name, column in _closed_form(g).items():
        fit[name][plain] = column[plain]
    converged[plain] = True
    chosen = (g.reason == "") & ~plain
    if chosen.any():
        fitted, done, steps = iterate(chosen)
        for name, column in fitted.items():
            fit[name][chosen] = np.where(done, column, np.nan)
        converged[chosen], iterations[chosen] = done, steps
        reason[np.flatnonzero(chosen)[~done]] = NOT_CONVERGED
    return CensoredFit(
        mu=fit["mu"],
        sigma=fit["sigma"],
        se_mu=np.sqrt(fit["var_mu"]),
        var_mu=fit["var_mu"],
        var_sigma=fit["var_sigma"],
        cov_mu_sigma=fit["cov"],
        ss_log=fit["ss"],
        n=g.n,
        n_detected=g.n_detected,
        n_left=g.n_left,
        n_right=g.n_right,
        converged=converged,
        iterations=iterations,
        reason=reason.astype(np.str_),
    )


def _fit_chosen(
    y: FloatArray, kind: IntArray, groups: IntArray, g: _Groups, chosen: BoolArray
) -> tuple[dict[str, FloatArray], BoolArray, IntArray]:
    """Iterate the chosen groups (censored, fittable); estimates in the original log scale."""
    unit, member, m = _units_of(chosen, groups)
    centre = g.mean[chosen]
    scale = np.sqrt(g.ss[chosen] / (g.n_detected[chosen] - 1))
    cell = unit[member]
    u = (y[member] - centre[cell]) / scale[cell]
    return _from_standard(centre, scale, _solve(u, kind[member], cell, 1, m))


def _from_standard(
    centre: FloatArray,
    scale: FloatArray,
    solved: tuple[FloatArray, FloatArray, BoolArray, IntArray],
) -> tuple[dict[str, FloatArray], BoolArray, IntArray]:
    """Estimates and their covariance on the original log scale from the standardised fit."""
    theta, c, done, iterations = solved
    alpha, beta = theta[:, 0], theta[:, 1]
    # (mu, sigma) = (centre + scale * alpha / beta, scale / beta); Jacobian rows (j00, j01), (0, j11)
    j00, j01, j11 = scale / beta, -scale * alpha / beta**2, -scale / beta**2
    fitted = {
        "mu": centre + scale * alpha / beta,
        "sigma": scale / beta,
        "var_mu": j00**2 * c[:, 0, 0] + 2 * j00 * j01 * c[:, 0, 1] + j01**2 * c[:, 1, 1],
        "var_sigma": j11**2 * c[:, 1, 1],
        "cov": j00 * j11 * c[:, 0, 1] + j01 * j11 * c[:, 1, 1],
    }
    return fitted, done & np.isfinite(fitted["var_mu"]), iterations


# -- comparisons ---------------------------------------------------------------------------


def _t_result(
    d: FloatArray, se2: FloatArray, df: FloatArray, confidence: float
) -> CensoredComparison:
    """CI and two-sided p for d from its squared SE and Student's t with ``df``; NaN where the
    SE or df is not usable. Same formulas, in the same order, as ``ttest.log_t_test``."""
    if not 0 < confidence < 1:
        raise ValueError(f"confidence must be between 0 and 1, got {confidence}")
    with np.errstate(divide="ignore", invalid="ignore"):
        se = np.sqrt(se2)
        valid = (se > 0) & np.isfinite(se) & (df > 0) & np.isfinite(d)
        se = np.where(valid, se, np.nan)
        df = np.where(valid, df, np.nan)
        d = np.where(valid, d, np.nan)
        t = d / se
        p = 2 * t_sf(np.abs(t), df)
        t_critical = t_ppf(0.5 + confidence / 2, df)
    return CensoredComparison(
        d=d,
        se=se,
        df=df,
        ci_low=d - t_critical * se,
        ci_high=d + t_critical * se,
        p=np.asarray(p, dtype=np.float64),
    )


def _share_of_variance(fit: CensoredFit) -> FloatArray:
    """Each group's variance of mu as the comparison uses it: s^2 / n (sample variance of the
    logs) without censoring, the inverse observed information times n / (n - 1) with it."""
    n = fit.n.astype(np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        plain = (fit.ss_log / (n - 1)) / n
        censored = fit.var_mu * (n / (n - 1))
    return np.asarray(np.where(fit.has_censoring, censored, plain), dtype=np.float64)


def compare_censored(
    fit_a: CensoredFit, fit_b: CensoredFit, *, confidence: float = 0.95
) -> CensoredComparison:
    """Compare group b with group a for each position of the two (equal-length) fits, e.g.
    ``compare_censored(fit.take(index_a), fit.take(index_b))``: d = mu_b - mu_a, ratio of
    geometric means exp(d), the CI and p from Student's t with the Welch–Satterthwaite df of
    the two variances (see the module docstring for why). Without censoring this is exactly
    the Welch t-test on the logs; NaN where either group is not fitted."""
    share_a, share_b = _share_of_variance(fit_a), _share_of_variance(fit_b)
    n_a = fit_a.n.astype(np.float64)
    n_b = fit_b.n.astype(np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        d = fit_b.mu - fit_a.mu
        se2 = share_a + share_b
        df = se2**2 / (share_a**2 / (n_a - 1) + share_b**2 / (n_b - 1))
    return _t_result(d, se2, df, confidence)


# -- a common sigma for the two groups of each comparison -------------------------------------


@dataclass(frozen=True)
class PooledCensoredFit:
    """Arrays, one entry per comparison: the joint ML fit of its two groups with their own mu
    and a common sigma. ``var_d`` is the inverse observed information of mu_b - mu_a;
    ``ss_a``, ``ss_b`` the sums of squared deviations of the logs for comparisons without
    censoring (NaN otherwise)."""

    mu_a: FloatArray
    mu_b: FloatArray
    sigma: FloatArray
    var_d: FloatArray
    ss_a: FloatArray
    ss_b: FloatArray
    n_a: IntArray
    n_b: IntArray
    n_detected_a: IntArray
    n_detected_b: IntArray
    n_censored_a: IntArray
    n_censored_b: IntArray
    converged: BoolArray
    reason: npt.NDArray[np.str_]


def _pair_reasons(g: _Groups) -> npt.NDArray[np.str_]:
    """Each side's reason except equal values, then equal values on both sides of a censored
    comparison (a common sigma needs spread on one side only)."""
    side = np.where(g.reason == NO_SPREAD, "", g.reason).reshape(-1, 2)
    censored = (g.n_detected < g.n).reshape(-1, 2).any(axis=1)
    flat = ~g.distinct.reshape(-1, 2).any(axis=1)
    first = np.where(side[:, 0] != "", side[:, 0], side[:, 1])
    return np.where((first == "") & censored & flat, NO_SPREAD, first).astype(np.str_)


def fit_censored_pooled(
    values: npt.ArrayLike,
    censored: npt.ArrayLike,
    side: npt.ArrayLike,
    pair_ids: npt.ArrayLike,
    n_pairs: int,
    *,
    right: npt.ArrayLike | None = None,
) -> PooledCensoredFit:
    """Fit both groups of every comparison jointly: ln X ~ Normal(mu_a or mu_b, sigma).

    Each observation carries its comparison (``pair_ids``, codes 0..n_pairs-1) and its
    ``side`` (0 for group a, 1 for group b); a group in several comparisons is passed once per
    comparison. The per-group rules of ``fit_censored_lognormal`` apply to each side."""
    sides = np.asarray(side, dtype=np.int64).reshape(-1)
    if sides.size and (sides.min() < 0 or sides.max() > 1):
        raise ValueError("side must be 0 (group a) or 1 (group b)")
    cells = 2 * np.asarray(pair_ids, dtype=np.int64).reshape(-1) + sides
    y, kind, cells = _kinds(values, censored, right, cells, 2 * n_pairs)
    g = _groups(y, kind, cells, 2 * n_pairs)
    reason = _pair_reasons(g).astype(object)
    n, k = g.n.reshape(-1, 2), g.n_detected.reshape(-1, 2)
    out = {name: np.full(n_pairs, np.nan) for name in ("mu_a", "mu_b", "sigma", "var_d")}
    ss = np.full((n_pairs, 2), np.nan)
    plain = (reason == "") & (k == n).all(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        mean, within = g.mean.reshape(-1, 2), g.ss.reshape(-1, 2)
        sigma = np.sqrt(within.sum(axis=1) / n.sum(axis=1))
        out["mu_a"][plain], out["mu_b"][plain] = mean[plain, 0], mean[plain, 1]
        out["sigma"][plain] = sigma[plain]
        out["var_d"][plain] = sigma[plain] ** 2 * (1 / n[plain, 0] + 1 / n[plain, 1])
    ss[plain] = within[plain]
    converged = plain.copy()
    chosen = (reason == "") & ~plain
    if chosen.any():
        fitted, done = _fit_pairs(y, kind, cells, g, chosen)
        for name, column in fitted.items():
            out[name][chosen] = np.where(done, column, np.nan)
        converged[chosen] = done
        reason[np.flatnonzero(chosen)[~done]] = NOT_CONVERGED
    censored_count = (g.n_left + g.n_right).reshape(-1, 2)
    return PooledCensoredFit(
        **out,
        ss_a=ss[:, 0],
        ss_b=ss[:, 1],
        n_a=n[:, 0],
        n_b=n[:, 1],
        n_detected_a=k[:, 0],
        n_detected_b=k[:, 1],
        n_censored_a=censored_count[:, 0],
        n_censored_b=censored_count[:, 1],
        converged=converged,
        reason=reason.astype(np.str_),
    )


def _fit_pairs(
    y: FloatArray, kind: IntArray, cells: IntArray, g: _Groups, chosen: BoolArray
) -> tuple[dict[str, FloatArray], BoolArray]:
    """Iterate the chosen comparisons: logs centred on each side's detected mean and scaled by
    the pooled SD of the detected logs."""
    unit, member, m = _units_of(chosen, cells // 2)
    centre = g.mean.reshape(-1, 2)[chosen]
    within = g.ss.reshape(-1, 2)[chosen].sum(axis=1)
    scale = np.sqrt(within / (g.n_detected.reshape(-1, 2)[chosen].sum(axis=1) - 2))
    side = cells[member] % 2
    pair = unit[member]
    u = (y[member] - centre[pair, side]) / scale[pair]
    theta, c, done, _ = _solve(u, kind[member], 2 * pair + side, 2, m)
    alpha_a, alpha_b, beta = theta[:, 0], theta[:, 1], theta[:, 2]
    # d = (centre_b - centre_a) + scale * (alpha_b - alpha_a) / beta: its gradient (-j, j, jb)
    j, jb = scale / beta, -scale * (alpha_b - alpha_a) / beta**2
    var_d = (
        j**2 * (c[:, 0, 0] + c[:, 1, 1] - 2 * c[:, 0, 1])
        + 2 * j * jb * (c[:, 1, 2] - c[:, 0, 2])
        + jb**2 * c[:, 2, 2]
    )
    fitted = {
        "mu_a": centre[:, 0] + scale * alpha_a / beta,
        "mu_b": centre[:, 1] + scale * alpha_b / beta,
        "sigma": scale / beta,
        "var_d": var_d,
    }
    return fitted, done & np.isfinite(var_d)


def compare_pooled(fit: PooledCensoredFit, *, confidence: float = 0.95) -> CensoredComparison:
    """d = mu_b - mu_a with a common sigma: without censoring exactly the pooled t-test on the
    logs (df = n_a + n_b - 2); with it, the inverse observed information of d times
    N / (N - 2), N = n_a + n_b, with the same df (the choice of ``compare_censored``)."""
    n_a, n_b = fit.n_a.astype(np.float64), fit.n_b.astype(np.float64)
    censored = (fit.n_censored_a + fit.n_censored_b) > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        d = fit.mu_b - fit.mu_a
        df_plain = n_a + n_b - 2
        pooled = (fit.ss_a + fit.ss_b) / df_plain
        se2_plain = pooled * (1 / n_a + 1 / n_b)
        total = n_a + n_b
        se2_censored = fit.var_d * (total / (total - 2))
    se2 = np.where(censored, se2_censored, se2_plain)
    return _t_result(d, se2, df_plain, confidence)


# -- Kaplan–Meier median of left-censored values ---------------------------------------------

#: Why a Kaplan–Meier median is undefined.
KM_BELOW_LIMITS = "median below the detection limits"
#: Survival equal to one half within this counts as exactly one half (rounding in products).
_HALF_TOLERANCE = 1e-9


def kaplan_meier_median(values: npt.ArrayLike, censored: npt.ArrayLike) -> KaplanMeierMedian:
    """Kaplan–Meier median of one group's values, ``censored`` marking entries below their
    limit (the value is the limit).

    Equivalent to flipping x -> M - x and taking the right-censored product-limit median, but
    computed on the original values (no rounding from the flip): going down from the largest
    detected value x_j, the estimated P(X < x_j) is the product of (1 - d_i / r_i) over the
    detected values x_i >= x_j, with d_i detected entries equal to x_i and r_i entries (values
    or limits) at or below x_i; a limit equal to a detected value counts as at risk there."""
    x = np.asarray(values, dtype=np.float64).reshape(-1)
    below = np.asarray(censored, dtype=bool).reshape(-1)
    if x.shape != below.shape:
        raise ValueError("values and censored must have the same length")
    if x.size == 0:
        return KaplanMeierMedian(math.nan, EMPTY, math.nan)
    ordered = np.sort(x)
    at_most = float(ordered[math.ceil(x.size / 2) - 1])
    levels, events = np.unique(x[~below], return_counts=True)
    levels, events = levels[::-1], events[::-1]  # largest first: the flipped time order
    at_risk = np.searchsorted(ordered, levels, side="right")
    survival = np.cumprod(1.0 - events / at_risk)
    reached = np.flatnonzero(survival <= 0.5 + _HALF_TOLERANCE)
    if reached.size == 0:
        return KaplanMeierMedian(math.nan, KM_BELOW_LIMITS, at_most)
    j = int(reached[0])
    median = float(levels[j])
    if abs(survival[j] - 0.5) <= _HALF_TOLERANCE and j + 1 < levels.size:
        median = float((levels[j] + levels[j + 1]) / 2)
    return KaplanMeierMedian(median, "", at_most)
