"""Robust cross-checks that need the raw values: bootstrap BCa CI for the ratio of sample
medians, and the Hodges–Lehmann shift of the logs with its Mann–Whitney CI and p.

Bootstrap BCa: Efron & Tibshirani, An Introduction to the Bootstrap (1993), ch. 14.
Each group is resampled on its own (two-sample bootstrap). The bootstrap medians of one
group are drawn once and reused for every comparison the group is part of, which is
valid because each comparison only needs its two groups resampled independently.

Hodges–Lehmann: the median of all pairwise differences log(y_j) - log(x_i); CI from the
order statistics of those differences at the normal-approximation critical value of the
Mann–Whitney statistic (Hollander, Wolfe & Chicken, Nonparametric Statistical Methods,
3rd ed., sec. 4.3).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import polars as pl
from scipy import stats as sps
from scipy.special import gammaln

from .policy import USED

DEFAULT_RESAMPLES = 2000
DEFAULT_SEED = 20261201
_BRUTE_FORCE_PAIRS = 4_000_000


@dataclass(frozen=True)
class RobustCheck:
    """Cross-checks of one comparison; NaN with a reason where they cannot be computed."""

    median_ratio: float
    median_ratio_ci_low: float
    median_ratio_ci_high: float
    hl_ratio: float
    hl_ci_low: float
    hl_ci_high: float
    mann_whitney_p: float
    reason: str = ""


NAN_CHECK = RobustCheck(
    median_ratio=math.nan,
    median_ratio_ci_low=math.nan,
    median_ratio_ci_high=math.nan,
    hl_ratio=math.nan,
    hl_ci_low=math.nan,
    hl_ci_high=math.nan,
    mann_whitney_p=math.nan,
    reason="too few values",
)


def bootstrap_medians(values: np.ndarray, resamples: int, rng: np.random.Generator) -> np.ndarray:
    """Medians of ``resamples`` bootstrap resamples of ``values``, drawn exactly without
    building the resamples: O(n + resamples · log n) instead of O(n · resamples).

    Sort the sample. In a resample of n draws the k-th smallest value is x_(K_k), where
    P(K_k <= j) = P(Binomial(n, j/n) >= k) (the count of draws at or below x_(j)). For odd
    n the median is x_(K_(m+1)), m = n // 2, drawn by inverting that distribution. For even
    n the median is (x_(K_m) + x_(K_(m+1))) / 2: given K_m = j, K_(m+1) = j unless exactly m
    draws fell at or below j, and then the other n - m draws are independent and uniform
    over the indices above j, so K_(m+1) - j is the smallest of n - m uniform draws from
    1..n-j. Each replicate has the distribution of np.median of a resample."""
    ordered = np.sort(np.asarray(values, dtype=float))
    n = ordered.size
    if n == 0:
        return np.full(resamples, math.nan)
    positions = np.arange(1, n + 1)
    m = n // 2
    k = m + 1 if n % 2 else m
    cdf = sps.binom.sf(k - 1, n, positions / n)  # P(K_k <= j), j = 1..n
    lower = np.minimum(np.searchsorted(cdf, rng.random(resamples), side="left"), n - 1)
    if n % 2:
        return ordered[lower]
    j = lower + 1
    with np.errstate(divide="ignore", invalid="ignore"):
        chance_here = cdf[lower] - np.where(lower > 0, cdf[np.maximum(lower - 1, 0)], 0.0)
        log_choose = gammaln(n + 1) - gammaln(m + 1) - gammaln(n - m + 1)
        # P(exactly m draws <= j-1 and none at j): then K_m < j, so it is taken off.
        below_too = np.exp(log_choose + m * np.log((j - 1) / n) + (n - m) * np.log((n - j) / n))
        exactly_m = sps.binom.pmf(m, n, j / n) - below_too
        split_chance = np.clip(exactly_m / chance_here, 0.0, 1.0)
        split = rng.random(resamples) < np.nan_to_num(split_chance)
        room = n - j
        step = np.ceil(room * (1 - rng.random(resamples) ** (1 / (n - m))))
    step = np.clip(np.nan_to_num(step), 1, None).astype(np.int64)
    upper = np.where(split & (room > 0), np.minimum(lower + step, n - 1), lower)
    return (ordered[lower] + ordered[upper]) / 2


def jackknife_medians(values: np.ndarray) -> np.ndarray:
    """Leave-one-out medians in O(n log n): removing one value leaves one of two medians."""
    n = values.size
    ordered = np.sort(values)
    order = np.argsort(values, kind="stable")
    rank = np.empty(n, dtype=np.int64)
    rank[order] = np.arange(n)
    m = n - 1  # size after removal
    if m % 2 == 1:
        k = m // 2
        # median of the remaining sorted values is index k of the remainder
        low_removed = ordered[k + 1]  # removed value was at rank <= k
        high_removed = ordered[k]
    else:
        k = m // 2
        low_removed = (ordered[k] + ordered[k + 1]) / 2
        high_removed = (ordered[k - 1] + ordered[k]) / 2
        # removing the middle value itself leaves its two neighbours as the middle pair
        middle_removed = (ordered[k - 1] + ordered[k + 1]) / 2
        return np.where(rank < k, low_removed, np.where(rank == k, middle_removed, high_removed))
    return np.where(rank <= k, low_removed, high_removed)


def bca_interval(
    estimate: float,
    replicates: np.ndarray,
    jackknife: np.ndarray | list[np.ndarray],
    confidence: float,
) -> tuple[float, float]:
    """BCa interval from bootstrap replicates and jackknife values of the statistic.

    ``jackknife`` holds the leave-one-out values, one array per sample. With several
    samples the acceleration combines each sample's jackknife influence values
    U_ji = (n_j - 1)(mean_j - theta_(j,i)) as a = sum_j sum_i U^3 / n_j^3 over
    6 (sum_j sum_i U^2 / n_j^2)^(3/2) (Efron & Tibshirani 1993, eq. 14.15, per sample; the
    form scipy.stats.bootstrap uses for several samples); one sample gives eq. 14.15."""
    replicates = replicates[np.isfinite(replicates)]
    if replicates.size < 10:
        return math.nan, math.nan
    below = np.mean(replicates < estimate) + 0.5 * np.mean(replicates == estimate)
    below = min(max(below, 1 / (2 * replicates.size)), 1 - 1 / (2 * replicates.size))
    bias = sps.norm.ppf(below)
    samples = [jackknife] if isinstance(jackknife, np.ndarray) else list(jackknife)
    cubes = squares = 0.0
    for values in samples:
        n = values.size
        influence = (n - 1) * (values.mean() - values)
        cubes += float(np.sum(influence**3)) / n**3
        squares += float(np.sum(influence**2)) / n**2
    denominator = 6 * squares**1.5
    acceleration = cubes / denominator if denominator > 0 else 0.0
    alpha = (1 - confidence) / 2
    bounds = []
    for z in (sps.norm.ppf(alpha), sps.norm.ppf(1 - alpha)):
        adjusted = sps.norm.cdf(bias + (bias + z) / (1 - acceleration * (bias + z)))
        bounds.append(float(np.quantile(replicates, adjusted)))
    return bounds[0], bounds[1]


def _count_at_most(x: np.ndarray, y: np.ndarray, value: float) -> int:
    """How many y_j - x_i are <= value (x and y sorted): x_i >= y_j - value."""
    return int(x.size * y.size - np.searchsorted(x, y - value, side="left").sum())


def _kth_difference(x: np.ndarray, y: np.ndarray, rank: int, enumerate_at: int = 250_000) -> float:
    """The rank-th smallest (1-based) of all y_j - x_i, for sorted x and y, exactly.

    Bisect on the value, keeping count(low) < rank <= count(high), until at most
    ``enumerate_at`` differences lie in (low, high]; then list those (each row j contributes
    a contiguous run of x) and pick the answer. A random sample of differences gives the
    starting bracket, so only a few O((n + m) log n) counting passes are needed."""
    total = x.size * y.size
    # Padded by 1 so that rounding in the counts cannot put a difference outside.
    low, high = float(y[0] - x[-1]) - 1.0, float(y[-1] - x[0]) + 1.0
    count_low, count_high = 0, total
    rng = np.random.default_rng(rank)
    sample = y[rng.integers(0, y.size, 20_000)] - x[rng.integers(0, x.size, 20_000)]
    share = rank / total
    spread = 6 * math.sqrt(share * (1 - share) / sample.size) + 1 / sample.size
    for guess, is_low in (
        (np.quantile(sample, max(share - spread, 0.0)), True),
        (np.quantile(sample, min(share + spread, 1.0)), False),
    ):
        count = _count_at_most(x, y, float(guess))
        if is_low and count < rank and guess > low:
            low, count_low = float(guess), count
        elif not is_low and count >= rank and guess < high:
            high, count_high = float(guess), count
    while count_high - count_low > enumerate_at:
        middle = (low + high) / 2
        if middle in (low, high):
            # Many tied differences at one value: the answer is the largest one <= high.
            index = np.searchsorted(x, y - high, side="left")
            valid = index < x.size
            return float(np.max(y[valid] - x[index[valid]]))
        count = _count_at_most(x, y, middle)
        if count >= rank:
            high, count_high = middle, count
        else:
            low, count_low = middle, count
    # Differences in (low, high]: for row j, x_i in [y_j - high, y_j - low).
    starts = np.searchsorted(x, y - high, side="left")
    stops = np.searchsorted(x, y - low, side="left")
    lengths = stops - starts
    rows = np.repeat(np.arange(y.size), lengths)
    offsets = np.arange(lengths.sum()) - np.repeat(np.cumsum(lengths) - lengths, lengths)
    inside = np.sort(y[rows] - x[starts[rows] + offsets])
    return float(inside[rank - count_low - 1])


#: Up to this many pairs the CI ranks come from the exact null distribution of the
#: Mann–Whitney statistic; beyond it from its normal approximation.
EXACT_RANK_PAIRS = 2500


@functools.lru_cache(maxsize=256)
def _mann_whitney_null(n: int, m: int) -> np.ndarray:
    """P(U = u), u = 0..n*m, for U = #{y_j > x_i} with no ties, by the recursion
    P_{n,m}(u) = n/(n+m) P_{n-1,m}(u - m) + m/(n+m) P_{n,m-1}(u) (Mann & Whitney 1947)."""
    # row[j] holds P_{i,j} for the current i; start with i = 0: U = 0 surely.
    row = [np.ones(1) for _ in range(m + 1)]
    for i in range(1, n + 1):
        new_row = [np.ones(1)]  # P_{i,0}: U = 0 surely
        for j in range(1, m + 1):
            size = i * j + 1
            probabilities = np.zeros(size)
            shifted = row[j]  # P_{i-1,j}, moved up by j
            probabilities[j : j + shifted.size] += i / (i + j) * shifted
            left = new_row[j - 1]  # P_{i,j-1}
            probabilities[: left.size] += j / (i + j) * left
            new_row.append(probabilities)
        row = new_row
    return row[m]


def hl_rank(n: int, m: int, confidence: float = 0.95) -> int:
    """The rank k of the CI (k-th smallest and k-th largest pairwise difference).

    k is the largest integer with P(U <= k - 1) <= (1 - confidence) / 2 under the null, from
    the exact distribution for small samples (Hollander, Wolfe & Chicken 2014, sec. 4.3) and
    the normal approximation k = floor(nm/2 - z sqrt(nm(n+m+1)/12)) otherwise. 0 means the
    samples are too small for that confidence."""
    total = n * m
    tail = (1 - confidence) / 2
    if total <= EXACT_RANK_PAIRS:
        cumulative = np.cumsum(_mann_whitney_null(n, m))
        # P(U <= k - 1) <= tail for k = 1..K: count the u = k - 1 that qualify.
        return int(np.sum(cumulative <= tail * (1 + 1e-12)))
    z = sps.norm.ppf(1 - tail)
    return max(int(math.floor(total / 2 - z * math.sqrt(total * (n + m + 1) / 12))), 0)


def hodges_lehmann(
    x_logs: np.ndarray, y_logs: np.ndarray, confidence: float = 0.95
) -> tuple[float, float, float]:
    """Hodges–Lehmann shift of y over x (on the scale given) with its CI; the CI is NaN when
    the samples are too small to reach the confidence level."""
    x = np.sort(x_logs)
    y = np.sort(y_logs)
    n, m = x.size, y.size
    total = n * m
    rank = hl_rank(n, m, confidence)
    if total <= _BRUTE_FORCE_PAIRS:
        differences = np.sort(np.subtract.outer(y, x).ravel())
        shift = float(np.median(differences))
        if rank < 1:
            return shift, math.nan, math.nan
        return shift, float(differences[rank - 1]), float(differences[total - rank])
    if total % 2:
        shift = _kth_difference(x, y, total // 2 + 1)
    else:
        shift = (_kth_difference(x, y, total // 2) + _kth_difference(x, y, total // 2 + 1)) / 2
    if rank < 1:
        return shift, math.nan, math.nan
    return shift, _kth_difference(x, y, rank), _kth_difference(x, y, total - rank + 1)


class GroupValues:
    """Usable (policy-applied) values per grouping × level × outcome, read once."""

    def __init__(self, used: pl.DataFrame, groupings: tuple[str, ...], outcomes: tuple[str, ...]):
        self._used = used
        self._outcomes = outcomes
        self._parts: dict[str, dict] = {}
        self._groupings = groupings

    def values(self, grouping: str, level: str, outcome: str) -> np.ndarray:
        if grouping not in self._parts:
            columns = [o + USED for o in self._outcomes]
            parts = self._used.select(grouping, *columns).partition_by(grouping, as_dict=True)
            self._parts[grouping] = {str(key[0]): part for key, part in parts.items()}
        part = self._parts[grouping].get(level)
        if part is None:
            return np.empty(0)
        return part[outcome + USED].drop_nulls().to_numpy()


def robust_check(
    a: np.ndarray,
    b: np.ndarray,
    *,
    confidence: float = 0.95,
    resamples: int = DEFAULT_RESAMPLES,
    seed: int = DEFAULT_SEED,
    replicates_a: np.ndarray | None = None,
    replicates_b: np.ndarray | None = None,
) -> RobustCheck:
    """All cross-checks for one comparison of positive values a (reference) and b."""
    if a.size < 2 or b.size < 2:
        return NAN_CHECK
    rng = np.random.default_rng(seed)
    if replicates_a is None:
        replicates_a = bootstrap_medians(a, resamples, rng)
    if replicates_b is None:
        replicates_b = bootstrap_medians(b, resamples, rng)
    median_a, median_b = float(np.median(a)), float(np.median(b))
    estimate = median_b / median_a
    with np.errstate(divide="ignore", invalid="ignore"):
        replicates = replicates_b / replicates_a
        # jackknife of the two-sample statistic: leave one out of either sample
        jackknife = [median_b / jackknife_medians(a), jackknife_medians(b) / median_a]
    low, high = bca_interval(estimate, replicates, jackknife, confidence)
    shift, shift_low, shift_high = hodges_lehmann(np.log(a), np.log(b), confidence)
    mw = sps.mannwhitneyu(b, a, alternative="two-sided")
    return RobustCheck(
        median_ratio=estimate,
        median_ratio_ci_low=low,
        median_ratio_ci_high=high,
        hl_ratio=math.exp(shift),
        hl_ci_low=math.exp(shift_low),
        hl_ci_high=math.exp(shift_high),
        mann_whitney_p=float(mw.pvalue),
        reason="" if math.isfinite(shift_low) else "too few values for a Hodges-Lehmann CI",
    )


ROBUST_COLUMNS = (
    "boot_median_ratio_low",
    "boot_median_ratio_high",
    "hl_ratio",
    "hl_ci_low",
    "hl_ci_high",
    "mann_whitney_p",
)


def robust_all(
    result,
    *,
    resamples: int = DEFAULT_RESAMPLES,
    seed: int = DEFAULT_SEED,
    progress: Callable[[int, int], None] | None = None,
    cancelled: Callable[[], bool] | None = None,
) -> pl.DataFrame:
    """The comparisons frame of a ScanResult with the robust columns added for every row."""
    comparisons = result.comparisons
    groups = GroupValues(result.used, result.table.groupings, result.table.outcomes)
    cache: dict[tuple[str, str, str], np.ndarray] = {}
    confidence = result.settings.confidence
    rows = comparisons.select("grouping", "outcome", "level_a", "level_b").rows()
    columns: dict[str, list[float]] = {name: [] for name in ROBUST_COLUMNS}
    for index, (grouping, outcome, level_a, level_b) in enumerate(rows):
        if cancelled is not None and cancelled():
            break
        arrays = []
        for level in (level_a, level_b):
            key = (grouping, level, outcome)
            values = groups.values(*key)
            if key not in cache and values.size >= 2:
                # one seed per group so the same group's replicates are reused
                group_seed = [seed, *(ord(c) for c in "|".join(key))]
                cache[key] = bootstrap_medians(values, resamples, np.random.default_rng(group_seed))
            arrays.append((values, cache.get(key)))
        (a, reps_a), (b, reps_b) = arrays
        check = robust_check(
            a,
            b,
            confidence=confidence,
            resamples=resamples,
            seed=seed,
            replicates_a=reps_a,
            replicates_b=reps_b,
        )
        for name, value in zip(
            ROBUST_COLUMNS,
            (
                check.median_ratio_ci_low,
                check.median_ratio_ci_high,
                check.hl_ratio,
                check.hl_ci_low,
                check.hl_ci_high,
                check.mann_whitney_p,
            ),
            strict=True,
        ):
            columns[name].append(value)
        if progress is not None and (index % 10 == 0 or index == len(rows) - 1):
            progress(index + 1, len(rows))
    filled = len(columns[ROBUST_COLUMNS[0]])
    for name in ROBUST_COLUMNS:
        columns[name] += [math.nan] * (len(rows) - filled)
    return comparisons.with_columns(
        [
            pl.Series(name, values, dtype=pl.Float64).fill_nan(None)
            for name, values in columns.items()
        ]
    )
