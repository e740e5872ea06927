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

Censored comparisons: the bootstrap, Hodges–Lehmann and Mann–Whitney use the detected values
only (they cannot place an entry below its limit); the Peto–Prentice generalized Wilcoxon
test (``peto.peto_prentice``) uses the detected values and the limits, and is added for
every comparison in which a group has below-detection entries.

``CrossChecker`` is the one place that runs cross-checks for many comparisons: it draws
each group's bootstrap medians once, from a generator seeded by the group's identity.
"""

from __future__ import annotations

import dataclasses
import functools
import hashlib
import math
import threading
from collections.abc import Callable, Collection, Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import numpy.typing as npt
import polars as pl
from scipy.special import gammaln

from .columns import CROSS_CHECK_SCHEMA, ComparisonRow, Side, comparison_row
from .defaults import DEFAULT_RESAMPLES as DEFAULT_RESAMPLES
from .defaults import DEFAULT_SEED as DEFAULT_SEED
from .distributions import norm_cdf, norm_ppf
from .peto import peto_prentice
from .values import GroupId

if TYPE_CHECKING:
    from .scan import ScanResult

_BRUTE_FORCE_PAIRS = 4_000_000

FloatArray = npt.NDArray[np.float64]
#: A group's entries: values (limits where censored), below a limit, above the range.
Entries = tuple[FloatArray, npt.NDArray[np.bool_], npt.NDArray[np.bool_]]


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
    #: Peto–Prentice generalized Wilcoxon p on detected values and limits (censored
    #: comparisons only; NaN otherwise).
    peto_prentice_p: float = math.nan


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


def bootstrap_medians(values: FloatArray, resamples: int, rng: np.random.Generator) -> FloatArray:
    """Medians of ``resamples`` bootstrap resamples of ``values``, drawn exactly without
    building the resamples: O(n + resamples · log n) instead of O(n · resamples).

    Sort the sample. In a resample of n draws the k-th smallest value is x_(K_k), where
    P(K_k <= j) = P(Binomial(n, j/n) >= k) (the count of draws at or below x_(j)). For odd
    n the median is x_(K_(m+1)), m = n // 2, drawn by inverting that distribution. For even
    n the median is (x_(K_m) + x_(K_(m+1))) / 2: given K_m = j, K_(m+1) = j unless exactly m
    draws fell at or below j, and then the other n - m draws are independent and uniform
    over the indices above j, so K_(m+1) - j is the smallest of n - m uniform draws from
    1..n-j. Each replicate has the distribution of np.median of a resample."""
    from scipy import stats as sps  # only the cross-checks need scipy.stats

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
        return np.asarray(ordered[lower], dtype=np.float64)
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
    return np.asarray((ordered[lower] + ordered[upper]) / 2, dtype=np.float64)


def jackknife_medians(values: FloatArray) -> FloatArray:
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
        medians = np.where(rank < k, low_removed, np.where(rank == k, middle_removed, high_removed))
        return np.asarray(medians, dtype=np.float64)
    return np.asarray(np.where(rank <= k, low_removed, high_removed), dtype=np.float64)


def bca_acceleration(jackknife: Sequence[FloatArray]) -> float:
    """Acceleration of the BCa interval from the jackknife values, one array per sample.

    Each sample j of size n_j gives influence values U_ji = (n_j - 1)(mean_j - theta_(j,i))
    and a = sum_j sum_i U^3 / n_j^3 over 6 (sum_j sum_i U^2 / n_j^2)^(3/2) (Efron &
    Tibshirani 1993, eq. 14.15, per sample; the form scipy.stats.bootstrap uses for several
    samples); one sample gives eq. 14.15 itself.

    The mean is taken of the differences from the sample's first value, so a sample whose
    jackknife values are all equal (usual with tied data: every leave-one-out median the
    same) has influence values of exactly 0 instead of rounding noise, whose cube-to-square
    ratio would otherwise be an arbitrary acceleration. No spread at all gives 0."""
    cubes = squares = 0.0
    for values in jackknife:
        n = values.size
        if n == 0:
            continue
        shifted = values - values[0]
        influence = (n - 1) * (shifted.mean() - shifted)
        cubes += float(np.sum(influence**3)) / n**3
        squares += float(np.sum(influence**2)) / n**2
    denominator = 6 * squares**1.5
    return cubes / denominator if denominator > 0 else 0.0


def bca_interval(
    estimate: float,
    replicates: FloatArray,
    jackknife: FloatArray | Sequence[FloatArray],
    confidence: float,
) -> tuple[float, float]:
    """BCa interval from bootstrap replicates and jackknife values of the statistic.

    ``jackknife`` holds the leave-one-out values, one array per sample (a single array for
    one sample); see ``bca_acceleration``. The bias correction is the normal quantile of the
    share of replicates below the estimate (Efron & Tibshirani 1993, eq. 14.14), counting
    replicates equal to it as half below, as scipy.stats.bootstrap does."""
    replicates = replicates[np.isfinite(replicates)]
    if replicates.size < 10:
        return math.nan, math.nan
    below = float(np.mean(replicates < estimate) + 0.5 * np.mean(replicates == estimate))
    below = min(max(below, 1 / (2 * replicates.size)), 1 - 1 / (2 * replicates.size))
    bias = float(norm_ppf(below))
    samples = [jackknife] if isinstance(jackknife, np.ndarray) else list(jackknife)
    acceleration = bca_acceleration(samples)
    alpha = (1 - confidence) / 2
    bounds = []
    for z in (float(norm_ppf(alpha)), float(norm_ppf(1 - alpha))):
        adjusted = float(norm_cdf(bias + (bias + z) / (1 - acceleration * (bias + z))))
        bounds.append(float(np.quantile(replicates, adjusted)))
    return bounds[0], bounds[1]


def _count_at_most(x: FloatArray, y: FloatArray, value: float) -> int:
    """How many y_j - x_i are <= value (x and y sorted): x_i >= y_j - value."""
    return int(x.size * y.size - np.searchsorted(x, y - value, side="left").sum())


def _kth_difference(x: FloatArray, y: FloatArray, rank: int, enumerate_at: int = 250_000) -> float:
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
def _mann_whitney_null(n: int, m: int) -> FloatArray:
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
    z = norm_ppf(1 - tail)
    return max(int(math.floor(total / 2 - z * math.sqrt(total * (n + m + 1) / 12))), 0)


def hodges_lehmann(
    x_logs: FloatArray, y_logs: FloatArray, confidence: float = 0.95
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


def robust_check(
    a: FloatArray,
    b: FloatArray,
    *,
    confidence: float = 0.95,
    resamples: int = DEFAULT_RESAMPLES,
    seed: int = DEFAULT_SEED,
    replicates_a: FloatArray | None = None,
    replicates_b: FloatArray | None = None,
) -> RobustCheck:
    """All cross-checks for one comparison of positive values a (reference) and b.

    Low level: replicates not given are drawn here from one generator seeded with ``seed``
    (a's first). To check many comparisons use ``CrossChecker``, which passes each group's
    own replicates in."""
    from scipy import stats as sps  # only the cross-checks need scipy.stats

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


#: The cross-check columns of a comparisons frame, in this order (``columns.CrossCheckColumns``).
CROSS_CHECK_COLUMNS = tuple(CROSS_CHECK_SCHEMA)
ROBUST_COLUMNS = CROSS_CHECK_COLUMNS  # the earlier name


def _column_values(check: RobustCheck) -> tuple[float, ...]:
    """The figures of a check in the order of CROSS_CHECK_COLUMNS."""
    return (
        check.median_ratio_ci_low,
        check.median_ratio_ci_high,
        check.hl_ratio,
        check.hl_ci_low,
        check.hl_ci_high,
        check.mann_whitney_p,
        check.peto_prentice_p,
    )


def checks_frame(keys: Sequence[str], checks: Mapping[str, RobustCheck]) -> pl.DataFrame:
    """One row per key, in the order given: ``key`` and the CROSS_CHECK_COLUMNS (Float64),
    null where a figure is NaN or the key has no check."""
    missing = (None,) * len(CROSS_CHECK_COLUMNS)
    rows = [(key, *(_column_values(checks[key]) if key in checks else missing)) for key in keys]
    schema: dict[str, pl.DataType] = {"key": pl.Utf8()}
    schema.update({name: pl.Float64() for name in CROSS_CHECK_COLUMNS})
    frame = pl.DataFrame(rows, schema=schema, orient="row")
    return frame.with_columns(pl.col(CROSS_CHECK_COLUMNS).fill_nan(None))


def group_seed(seed: int, group: GroupId) -> list[int]:
    """Seed words for a group's generator: ``seed`` and 64 bits of the SHA-256 of the
    group's identity (parts joined by the unit separator, None as empty), so the same group
    gets the same replicates in every process and every order of work."""
    text = "\x1f".join("" if part is None else part for part in group)
    digest = hashlib.sha256(text.encode("utf-8")).digest()
    return [seed, int.from_bytes(digest[:8], "big")]


class CrossChecker:
    """Cross-checks for comparisons, with bootstrap replicates drawn once per group and
    seeded from the group's identity, so the result for a comparison does not depend on
    which other comparisons were checked before it, or in what order."""

    def __init__(
        self,
        lookup: Callable[[GroupId], FloatArray],
        *,
        confidence: float = 0.95,
        resamples: int = DEFAULT_RESAMPLES,
        seed: int = DEFAULT_SEED,
        entries: Callable[[GroupId], Entries | None] | None = None,
    ) -> None:
        self._lookup = lookup
        self._entries = entries
        self.confidence = confidence
        self.resamples = resamples
        self.seed = seed
        self._groups: dict[GroupId, tuple[FloatArray, FloatArray | None]] = {}
        self._lock = threading.Lock()

    def _group(self, group: GroupId) -> tuple[FloatArray, FloatArray | None]:
        """The group's values and bootstrap medians (None below 2 values), made once; the
        lookup runs under the lock too, so it need not be thread-safe itself."""
        with self._lock:
            known = self._groups.get(group)
            if known is None:
                values = np.asarray(self._lookup(group), dtype=np.float64)
                replicates = None
                if values.size >= 2:
                    rng = np.random.default_rng(group_seed(self.seed, group))
                    replicates = bootstrap_medians(values, self.resamples, rng)
                known = self._groups[group] = (values, replicates)
            return known

    def check(self, a: GroupId, b: GroupId) -> RobustCheck:
        """Cross-checks of group b against group a (the reference, the denominator)."""
        values_a, replicates_a = self._group(a)
        values_b, replicates_b = self._group(b)
        check = robust_check(
            values_a,
            values_b,
            confidence=self.confidence,
            resamples=self.resamples,
            seed=self.seed,
            replicates_a=replicates_a,
            replicates_b=replicates_b,
        )
        p = self._peto_prentice(a, b)
        return check if math.isnan(p) else dataclasses.replace(check, peto_prentice_p=p)

    def _peto_prentice(self, a: GroupId, b: GroupId) -> float:
        """The Peto–Prentice p where either group has below-detection entries: detected
        values and limits, above-range entries taken at their stated number."""
        if self._entries is None:
            return math.nan
        got_a, got_b = self._entries(a), self._entries(b)
        if got_a is None or got_b is None or not (got_a[1].any() or got_b[1].any()):
            return math.nan
        return peto_prentice(got_a[0], got_a[1], got_b[0], got_b[1]).p_value

    def check_many(
        self,
        jobs: Sequence[tuple[str, GroupId, GroupId]],
        *,
        progress: Callable[[int, int], None] | None = None,
        cancelled: Callable[[], bool] | None = None,
    ) -> dict[str, RobustCheck]:
        """Checks for (key, a, b) jobs in order, by key. Stops before the next job once
        ``cancelled()`` is true. ``progress(done, total)`` comes after jobs 1, 11, 21, ...
        and once more at the end (done < total when cancelled); not at all for no jobs."""
        checks: dict[str, RobustCheck] = {}
        total = len(jobs)
        done = 0
        for key, a, b in jobs:
            if cancelled is not None and cancelled():
                break
            checks[key] = self.check(a, b)
            done += 1
            if progress is not None and done % 10 == 1:
                progress(done, total)
        if progress is not None and total and done % 10 != 1:
            progress(done, total)
        return checks


#: One comparison to cross-check: its key and its two groups (a is the reference).
CheckJob = tuple[str, GroupId, GroupId]


def group_id(row: ComparisonRow, which: Side) -> GroupId:
    """The group of one side of a comparison."""
    level = row["level_a"] if which == "a" else row["level_b"]
    return (row["grouping"], row["within"], row["stratum"], level, row["outcome"])


def check_jobs(frame: pl.DataFrame, skip: Collection[str] = ()) -> list[CheckJob]:
    """The cross-checks the rows of a comparisons frame need, leaving out keys in ``skip``."""
    jobs = []
    for index in range(frame.height):
        row = comparison_row(frame, index)
        if row["key"] not in skip:
            jobs.append((row["key"], group_id(row, "a"), group_id(row, "b")))
    return jobs


def robust_all(
    result: ScanResult,
    *,
    resamples: int = DEFAULT_RESAMPLES,
    seed: int = DEFAULT_SEED,
    progress: Callable[[int, int], None] | None = None,
    cancelled: Callable[[], bool] | None = None,
) -> pl.DataFrame:
    """The comparisons frame of a scan result with the cross-check columns added for every
    row (null where a row was not reached before ``cancelled()`` turned true)."""
    if result.values is None:
        raise ValueError("cross-checks need raw values; a summary table has none")
    comparisons = result.comparisons
    checker = CrossChecker(
        result.values.values,
        confidence=result.settings.confidence,
        resamples=resamples,
        seed=seed,
        entries=result.entries.entries if result.entries is not None else None,
    )
    jobs = check_jobs(comparisons)
    checks = checker.check_many(jobs, progress=progress, cancelled=cancelled)
    frame = checks_frame([key for key, _, _ in jobs], checks)
    return comparisons.with_columns(frame.drop("key").get_columns())
