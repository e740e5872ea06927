"""The bootstrap-median sampler against the definition of the bootstrap.

Definition (Efron & Tibshirani, An Introduction to the Bootstrap, 1993, ch. 6): a bootstrap
replicate is the statistic of n draws with replacement from the sample. The sampler in
stats/robust.py draws the median of such a resample from its exact distribution instead of
building the resample; these checks compare it with full enumeration of every resample
(small n) and with brute-force resampling (scipy's two-sample Kolmogorov-Smirnov test as
the independent judge).
"""

from __future__ import annotations

import itertools
from collections import Counter

import numpy as np
import pytest
from scipy import stats as sps

from foldsift.stats.robust import bootstrap_medians


@pytest.mark.parametrize("values", [[1.0, 3.0], [1.0, 2.0, 7.0], [1.0, 2.0, 2.0, 9.0]])
def test_matches_enumeration_of_every_resample(values):
    """All n^n resamples are equally likely: the exact law of the bootstrap median."""
    x = np.array(values)
    n = x.size
    law = Counter(
        float(np.median(x[list(picks)])) for picks in itertools.product(range(n), repeat=n)
    )
    draws = 200_000
    sampled = Counter(bootstrap_medians(x, draws, np.random.default_rng(3)).tolist())
    assert set(sampled) <= set(law)
    for value, count in law.items():
        expected = count / n**n
        # 5 binomial standard errors of a frequency from 200,000 draws
        tolerance = 5 * np.sqrt(expected * (1 - expected) / draws)
        assert abs(sampled[value] / draws - expected) <= tolerance, (value, expected)


@pytest.mark.parametrize("n", [5, 6, 40, 41, 300, 301])
def test_matches_brute_force_resampling(n):
    """Same distribution as np.median of resamples built with rng.integers (with ties)."""
    x = np.random.default_rng(n).lognormal(size=n)
    x[: n // 5] = x[0]
    brute = np.median(x[np.random.default_rng(1).integers(0, n, (20_000, n))], axis=1)
    exact = bootstrap_medians(x, 20_000, np.random.default_rng(2))
    assert sps.ks_2samp(brute, exact).pvalue > 1e-3
    np.testing.assert_allclose(
        np.quantile(exact, [0.025, 0.5, 0.975]),
        np.quantile(brute, [0.025, 0.5, 0.975]),
        rtol=0.05,
    )


def test_seeded_and_empty():
    x = np.random.default_rng(0).lognormal(size=25)
    first = bootstrap_medians(x, 500, np.random.default_rng(9))
    np.testing.assert_array_equal(first, bootstrap_medians(x, 500, np.random.default_rng(9)))
    assert np.isnan(bootstrap_medians(np.array([]), 3, np.random.default_rng(0))).all()


@pytest.mark.parametrize(("n", "m"), [(1, 9), (2, 2), (7, 9), (50, 61), (300, 250)])
@pytest.mark.parametrize("decimals", [1, 3, None])
@pytest.mark.parametrize("enumerate_at", [0, 10, 250_000])
def test_kth_pairwise_difference_matches_full_sort(n, m, decimals, enumerate_at):
    """The selection used by the large-sample Hodges-Lehmann path equals the k-th value of
    the fully sorted pairwise differences (the definition, Hollander, Wolfe & Chicken 2014,
    sec. 4.3), with heavy ties (rounded data) and every switch between counting and listing."""
    from foldsift.stats.robust import _kth_difference

    rng = np.random.default_rng(n * m)
    x, y = rng.normal(size=n), rng.normal(0.3, 1.2, size=m)
    if decimals is not None:
        x, y = np.round(x, decimals), np.round(y, decimals)
    x, y = np.sort(x), np.sort(y)
    every = np.sort(np.subtract.outer(y, x).ravel())
    for rank in sorted({1, 2, every.size // 2, every.size // 2 + 1, every.size}):
        got = _kth_difference(x, y, rank, enumerate_at=enumerate_at)
        assert got == pytest.approx(every[rank - 1], abs=1e-12)


@pytest.mark.parametrize("confidence", [0.95, 0.90])
def test_two_sample_bca_matches_scipy(confidence):
    """For the ratio of medians of two samples, our BCa interval from scipy's own bootstrap
    replicates and per-sample jackknife values equals scipy.stats.bootstrap(method='BCa')
    (an independent implementation of Efron & Tibshirani 1993, ch. 14, for several samples)."""
    from foldsift.stats.robust import bca_interval, jackknife_medians

    rng = np.random.default_rng(4)
    a, b = rng.lognormal(0.0, 0.6, 25), rng.lognormal(0.4, 0.8, 31)

    def ratio(x, y, axis=-1):
        return np.median(y, axis=axis) / np.median(x, axis=axis)

    result = sps.bootstrap(
        (a, b),
        ratio,
        method="BCa",
        n_resamples=3000,
        confidence_level=confidence,
        rng=np.random.default_rng(1),
        vectorized=True,
    )
    jackknife = [np.median(b) / jackknife_medians(a), jackknife_medians(b) / np.median(a)]
    low, high = bca_interval(ratio(a, b), result.bootstrap_distribution, jackknife, confidence)
    expected = result.confidence_interval
    np.testing.assert_allclose([low, high], [expected.low, expected.high], rtol=1e-12)


@pytest.mark.parametrize(("n", "m"), [(1, 4), (2, 7), (3, 4), (5, 5), (4, 6)])
def test_mann_whitney_null_matches_enumeration(n, m):
    """P(U = u) under the null equals the share of the C(n+m, n) equally likely rank
    splits with that U (Mann & Whitney 1947, definition)."""
    from foldsift.stats.robust import _mann_whitney_null

    counts = Counter()
    splits = list(itertools.combinations(range(n + m), n))
    for x_ranks in splits:
        y_ranks = [r for r in range(n + m) if r not in x_ranks]
        counts[sum(y > x for x in x_ranks for y in y_ranks)] += 1
    expected = np.array([counts[u] / len(splits) for u in range(n * m + 1)])
    np.testing.assert_allclose(_mann_whitney_null(n, m), expected, rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("seed", range(6))
def test_mann_whitney_null_matches_scipy_exact_p(seed):
    """The lower tail P(U <= u) equals scipy.stats.mannwhitneyu(method='exact')'s
    one-sided p for untied data (independent implementation)."""
    from foldsift.stats.robust import _mann_whitney_null

    rng = np.random.default_rng(seed)
    n, m = int(rng.integers(3, 12)), int(rng.integers(3, 12))
    x, y = rng.normal(size=n), rng.normal(0.5, 1.0, size=m)
    u = int(np.sum(y[:, None] > x[None, :]))  # U = #{y_j > x_i}
    scipy_p = sps.mannwhitneyu(y, x, alternative="less", method="exact").pvalue
    ours = float(np.cumsum(_mann_whitney_null(n, m))[u])
    assert ours == pytest.approx(scipy_p, rel=1e-10)


def test_hl_rank_exact_normal_and_unattainable():
    """Exact ranks hold the tail at most (1 - confidence) / 2 and are the largest that do;
    large samples use the normal approximation (Hollander, Wolfe & Chicken 2014, 4.3);
    two values per group cannot reach 95% (the smallest two-sided p is 2/6)."""
    from foldsift.stats.robust import _mann_whitney_null, hl_rank, hodges_lehmann

    for n, m in [(5, 5), (8, 11), (20, 30), (48, 47)]:
        k = hl_rank(n, m, 0.95)
        cumulative = np.cumsum(_mann_whitney_null(n, m))
        assert cumulative[k - 1] <= 0.025 < cumulative[k]
    n, m = 60, 70
    z = sps.norm.ppf(0.975)
    assert hl_rank(n, m) == int(np.floor(n * m / 2 - z * np.sqrt(n * m * (n + m + 1) / 12)))
    assert hl_rank(2, 2) == 0
    shift, low, high = hodges_lehmann(np.array([0.0, 1.0]), np.array([2.0, 3.0]))
    assert shift == 2.0 and np.isnan(low) and np.isnan(high)
