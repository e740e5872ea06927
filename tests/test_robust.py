"""Tests for foldsift.stats.robust against definitions, brute force and scipy.

Sources named beside each check:
- Hodges-Lehmann two-sample shift: the median of all pairwise differences y_j - x_i, with
  the CI from the order statistics of those differences at ranks C and nm + 1 - C,
  C = nm/2 - z sqrt(nm(n+m+1)/12) (Hollander, Wolfe & Chicken, Nonparametric Statistical
  Methods, 3rd ed., 2014, sec. 4.3; the rounding down to an integer, at least 1, is the
  module's stated choice, so the brute force below uses it too).
- Mann-Whitney: scipy.stats.mannwhitneyu (independent library) and the exact permutation
  distribution of U enumerated from its definition.
- Jackknife: leave-one-out medians by brute force (np.delete + np.median).
- BCa: Efron & Tibshirani, An Introduction to the Bootstrap (1993), ch. 14, and
  scipy.stats.bootstrap(method="BCa") as an independent implementation; on tied count data
  a brute-force bootstrap (real resamples, np.median) with the acceleration of eq. 14.15
  worked out in exact rational arithmetic.
"""

from __future__ import annotations

import itertools
import math
from fractions import Fraction

import numpy as np
import polars as pl
import pytest
from scipy import stats as sps

from foldsift.stats import robust
from foldsift.stats.load import load_table
from foldsift.stats.scan import run_scan


def _brute_hl(x: np.ndarray, y: np.ndarray, confidence: float = 0.95):
    """Hodges-Lehmann shift of y over x and its CI, straight from the definition."""
    differences = np.sort((y[:, None] - x[None, :]).ravel())
    total = differences.size
    rank = robust.hl_rank(x.size, y.size, confidence)  # checked on its own in test_hl_rank*
    # 1-based ranks rank and total + 1 - rank (Hollander, Wolfe & Chicken 2014, sec. 4.3)
    if rank < 1:
        return float(np.median(differences)), math.nan, math.nan
    return float(np.median(differences)), differences[rank - 1], differences[total - rank]


def _samples(n: int, m: int, seed: int, ties: bool = False):
    rng = np.random.default_rng(seed)
    x = rng.normal(0.0, 1.0, n)
    y = rng.normal(0.4, 1.3, m)
    if ties:
        x, y = np.round(x, 1), np.round(y, 1)
    return x, y


CASES = [(5, 7, False), (6, 8, False), (1, 9, False), (2, 2, False), (40, 33, False)]
CASES += [(25, 30, True), (120, 97, True), (301, 250, False)]


@pytest.mark.parametrize(("n", "m", "ties"), CASES)
@pytest.mark.parametrize("confidence", [0.95, 0.90])
def test_hodges_lehmann_brute_force_path(n, m, ties, confidence):
    """Small samples go through the full sort of all differences: compare with the
    definition (HWC 2014 sec. 4.3) exactly."""
    x, y = _samples(n, m, seed=n * m, ties=ties)
    assert n * m <= robust._BRUTE_FORCE_PAIRS
    got = robust.hodges_lehmann(x, y, confidence)
    expected = _brute_hl(x, y, confidence)
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-15)


@pytest.mark.parametrize(("n", "m", "ties"), CASES)
@pytest.mark.parametrize("confidence", [0.95, 0.80])
def test_hodges_lehmann_bisection_path(monkeypatch, n, m, ties, confidence):
    """Forcing the large-sample path (bisection on the value of the k-th difference) must
    give the same order statistics as brute force, to rounding."""
    monkeypatch.setattr(robust, "_BRUTE_FORCE_PAIRS", 0)
    x, y = _samples(n, m, seed=n + m, ties=ties)
    got = robust.hodges_lehmann(x, y, confidence)
    expected = _brute_hl(x, y, confidence)
    np.testing.assert_allclose(got, expected, rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("force_bisection", [False, True])
def test_hodges_lehmann_recovers_exact_shift(monkeypatch, force_bisection):
    """If y = x + c the pairwise differences x_j - x_i + c are symmetric about c, so the
    median of them is c (definition of the HL estimator) and c lies inside the CI."""
    if force_bisection:
        monkeypatch.setattr(robust, "_BRUTE_FORCE_PAIRS", 0)
    x = np.random.default_rng(3).normal(size=41)
    shift, low, high = robust.hodges_lehmann(x, x + 0.75)
    assert shift == pytest.approx(0.75, abs=1e-12)
    assert low < 0.75 < high


def _exact_mann_whitney_p(a: np.ndarray, b: np.ndarray) -> float:
    """Two-sided exact p of U = #{b_j > a_i} by enumerating every split of the pooled
    values (no ties), p = min(1, 2 min(P(U <= u), P(U >= u)))."""
    pooled = np.concatenate([a, b])
    u_observed = np.sum(b[:, None] > a[None, :])
    values = []
    for chosen in itertools.combinations(range(pooled.size), b.size):
        mask = np.zeros(pooled.size, dtype=bool)
        mask[list(chosen)] = True
        values.append(np.sum(pooled[mask][:, None] > pooled[~mask][None, :]))
    values = np.array(values)
    return min(1.0, 2 * min(np.mean(values <= u_observed), np.mean(values >= u_observed)))


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_mann_whitney_p_matches_exact_permutation(seed):
    """Small samples without ties: the exact permutation p from the definition of U."""
    rng = np.random.default_rng(seed)
    a = rng.lognormal(0.0, 1.0, 5)
    b = rng.lognormal(0.8, 1.0, 6)
    check = robust.robust_check(a, b, resamples=200)
    assert check.mann_whitney_p == pytest.approx(_exact_mann_whitney_p(a, b), rel=1e-12)


@pytest.mark.parametrize(("n", "m", "ties"), [(5, 6, False), (30, 45, False), (60, 40, True)])
def test_mann_whitney_p_matches_scipy(n, m, ties):
    """scipy.stats.mannwhitneyu (independent library) on the raw values and on their logs:
    the rank test does not change under the log."""
    rng = np.random.default_rng(n * m)
    a = rng.lognormal(0.0, 1.0, n)
    b = rng.lognormal(0.3, 1.0, m)
    if ties:
        a, b = np.round(a, 1) + 0.1, np.round(b, 1) + 0.1
    check = robust.robust_check(a, b, resamples=200)
    for transform in (np.asarray, np.log):
        expected = sps.mannwhitneyu(transform(b), transform(a), alternative="two-sided").pvalue
        assert check.mann_whitney_p == pytest.approx(expected, rel=1e-12)


def test_robust_check_hl_ratio_is_exp_of_log_shift():
    """The HL ratio is exp of the HL shift of the logs (definition), brute force."""
    rng = np.random.default_rng(11)
    a, b = rng.lognormal(1.0, 0.7, 17), rng.lognormal(1.5, 0.9, 23)
    check = robust.robust_check(a, b, resamples=200)
    shift, low, high = _brute_hl(np.log(a), np.log(b))
    np.testing.assert_allclose(
        [check.hl_ratio, check.hl_ci_low, check.hl_ci_high], np.exp([shift, low, high]), 1e-13
    )
    assert check.median_ratio == pytest.approx(np.median(b) / np.median(a), rel=1e-15)


@pytest.mark.parametrize("n", [*range(2, 22), 57, 100, 101])
@pytest.mark.parametrize("ties", [False, True])
def test_jackknife_medians_match_leave_one_out(n, ties):
    """Brute-force leave-one-out medians, odd and even n, with and without ties."""
    rng = np.random.default_rng(n)
    values = rng.lognormal(0.0, 1.0, n)
    if ties:
        values = np.round(values * 2) / 2 + 0.5
    expected = np.array([np.median(np.delete(values, i)) for i in range(n)])
    np.testing.assert_array_equal(robust.jackknife_medians(values), expected)


def test_bootstrap_reproducible_with_seed():
    """Same seed, same resamples: identical results; another seed gives other bounds."""
    rng = np.random.default_rng(8)
    a, b = rng.lognormal(0.0, 1.0, 30), rng.lognormal(0.4, 1.0, 25)
    first = robust.robust_check(a, b, resamples=500, seed=123)
    again = robust.robust_check(a, b, resamples=500, seed=123)
    other = robust.robust_check(a, b, resamples=500, seed=124)
    assert first == again
    assert (first.median_ratio_ci_low, first.median_ratio_ci_high) != (
        other.median_ratio_ci_low,
        other.median_ratio_ci_high,
    )


@pytest.mark.parametrize("n", [7, 8])
def test_bootstrap_medians_are_medians_of_resamples(n):
    """Each bootstrap median is the median of n values drawn from the sample: a sample
    value (n odd) or the midpoint of two sample values (n even) — from the definition."""
    values = np.random.default_rng(n).lognormal(size=n)
    reps = robust.bootstrap_medians(values, 400, np.random.default_rng(1))
    allowed = values if n % 2 else ((values[:, None] + values[None, :]) / 2).ravel()
    assert reps.shape == (400,)
    assert np.all(np.isin(reps, allowed))
    assert np.unique(reps).size > 1


@pytest.mark.parametrize("confidence", [0.95, 0.90])
def test_bca_interval_matches_scipy_bootstrap(confidence):
    """For a one-sample statistic (the mean, continuous, so no ties at the estimate) our
    BCa from scipy's own bootstrap replicates and the leave-one-out jackknife equals
    scipy.stats.bootstrap(method='BCa') (independent implementation of Efron &
    Tibshirani 1993, eq. 14.9-14.15)."""
    x = np.random.default_rng(5).lognormal(0.0, 1.0, 25)
    result = sps.bootstrap(
        (x,),
        np.mean,
        method="BCa",
        n_resamples=3000,
        confidence_level=confidence,
        rng=np.random.default_rng(1),
    )
    jackknife = np.array([np.delete(x, i).mean() for i in range(x.size)])
    low, high = robust.bca_interval(x.mean(), result.bootstrap_distribution, jackknife, confidence)
    expected = result.confidence_interval
    np.testing.assert_allclose([low, high], [expected.low, expected.high], rtol=1e-12)


def test_bca_reduces_to_percentile_without_bias_or_skew():
    """With z0 = 0 (half the replicates below the estimate) and acceleration 0 (symmetric
    jackknife), BCa is the percentile interval (Efron & Tibshirani 1993, sec. 14.3)."""
    replicates = np.random.default_rng(2).normal(10.0, 1.0, 4001)
    estimate = float(np.median(replicates))
    jackknife = np.array([9.9, 10.0, 10.1, 9.8, 10.2])
    low, high = robust.bca_interval(estimate, replicates, jackknife, 0.95)
    np.testing.assert_allclose([low, high], np.quantile(replicates, [0.025, 0.975]), rtol=1e-14)


# ---------------------------------------------------------------- BCa on tied count data

# Small invented count samples with many ties. Every leave-one-out median of TIED_A is 14
# and of TIED_B is 5; those of UNEVEN take two values, 16 (5 times) and 15.5 (6 times).
TIED_A = np.array([10, 7, 20, 14, 14, 12, 10, 23, 17, 20, 14, 13], dtype=float)
TIED_B = np.array([3, 5, 12, 6, 4, 3, 5, 5, 5, 5, 2, 4], dtype=float)
UNEVEN = np.array([9, 15, 22, 11, 16, 13, 18, 16, 19, 24, 8], dtype=float)


def _brute_jackknife(reference: np.ndarray, other: np.ndarray) -> list[np.ndarray]:
    """Leave-one-out values of median(other) / median(reference), leaving one value out of
    either sample (np.delete + np.median, from the definition)."""
    median_ref, median_other = np.median(reference), np.median(other)
    leave_ref = [np.median(np.delete(reference, i)) for i in range(reference.size)]
    leave_other = [np.median(np.delete(other, i)) for i in range(other.size)]
    return [median_other / np.array(leave_ref), np.array(leave_other) / median_ref]


def _textbook_acceleration(jackknife: list[np.ndarray]) -> float:
    """Efron & Tibshirani (1993) eq. 14.15 per sample, summed over samples as
    scipy.stats.bootstrap does: U_ji = (n_j - 1)(mean_j - theta_ji),
    a = sum U^3 / n_j^3 / (6 (sum U^2 / n_j^2)^(3/2)); worked out exactly on the float
    values (Fraction) so no rounding enters before the final division."""
    cubes = squares = Fraction(0)
    for values in jackknife:
        exact = [Fraction(float(v)) for v in values]
        n = len(exact)
        mean = sum(exact, Fraction(0)) / n
        influence = [(n - 1) * (mean - v) for v in exact]
        cubes += sum((u**3 for u in influence), Fraction(0)) / n**3
        squares += sum((u**2 for u in influence), Fraction(0)) / n**2
    if squares == 0:
        return 0.0
    return float(cubes) / (6 * float(squares) ** 1.5)


def _brute_medians(values: np.ndarray, resamples: int, rng: np.random.Generator) -> np.ndarray:
    """Medians of real bootstrap resamples (numpy draws with replacement)."""
    return np.median(values[rng.integers(0, values.size, (resamples, values.size))], axis=1)


def _brute_bca(estimate, replicates, acceleration, confidence):
    """BCa ends (Efron & Tibshirani 1993, eq. 14.10-14.14): z0 from the share of replicates
    below the estimate, ties counted half (scipy.stats.percentileofscore, kind="mean");
    alpha_i = Phi(z0 + (z0 + z_i) / (1 - a (z0 + z_i))); ends are those quantiles of the
    replicates (np.quantile, linear, as scipy.stats.bootstrap uses)."""
    z0 = sps.norm.ppf(sps.percentileofscore(replicates, estimate, kind="mean") / 100)
    ends = []
    for z in sps.norm.ppf([(1 - confidence) / 2, (1 + confidence) / 2]):
        ends.append(
            np.quantile(replicates, sps.norm.cdf(z0 + (z0 + z) / (1 - acceleration * (z0 + z))))
        )
    return ends


@pytest.mark.parametrize(("reference", "other"), [(TIED_A, TIED_B), (TIED_B, TIED_A)])
def test_bca_acceleration_is_exactly_zero_when_jackknife_values_are_equal(reference, other):
    """When every leave-one-out median is the same, every influence value is 0 and so is
    the acceleration (Efron & Tibshirani 1993, eq. 14.15), exactly, not rounding noise."""
    jackknife = _brute_jackknife(reference, other)
    assert all(np.unique(values).size == 1 for values in jackknife)
    assert _textbook_acceleration(jackknife) == 0.0
    assert robust.bca_acceleration(jackknife) == 0.0
    # the module's own fast jackknife gives the same equal values
    fast = [np.median(other) / robust.jackknife_medians(reference)]
    assert robust.bca_acceleration(fast) == 0.0


@pytest.mark.parametrize("value", [0.1, 5 / 14, 2.8, 1e-300, 7.3e12])
@pytest.mark.parametrize("n", [3, 11, 12, 49, 1000])
def test_bca_acceleration_zero_for_constant_jackknife_of_any_size(value, n):
    """Equal jackknife values have no influence (eq. 14.15): 0.0 for values whose float mean
    is not exact (0.1 and 5/14 repeated)."""
    assert robust.bca_acceleration([np.full(n, value)]) == 0.0
    assert robust.bca_acceleration([np.full(n, value), np.full(n + 1, 2 * value)]) == 0.0


@pytest.mark.parametrize(
    ("reference", "other"),
    [(TIED_A, TIED_B), (TIED_B, TIED_A), (TIED_A, UNEVEN), (UNEVEN, TIED_B)],
)
@pytest.mark.parametrize("confidence", [0.95, 0.90])
def test_bca_on_tied_counts_matches_brute_force_bootstrap(reference, other, confidence):
    """Brute force: real resamples of each sample (numpy), the ratio of their medians, the
    jackknife from np.median of each leave-one-out sample, the acceleration of eq. 14.15
    in exact arithmetic and the BCa ends of Efron & Tibshirani (1993) ch. 14. The module,
    given the same replicates, gives the same interval."""
    rng = np.random.default_rng(reference.size * 100 + other.size)
    reps_ref = _brute_medians(reference, 2000, rng)
    reps_other = _brute_medians(other, 2000, rng)
    estimate = np.median(other) / np.median(reference)
    jackknife = _brute_jackknife(reference, other)
    acceleration = _textbook_acceleration(jackknife)
    assert robust.bca_acceleration(jackknife) == pytest.approx(acceleration, rel=1e-12, abs=0)
    expected = _brute_bca(estimate, reps_other / reps_ref, acceleration, confidence)
    share_below = np.mean(reps_other / reps_ref < estimate)
    assert 0 < share_below < 1  # the module's clamp of z0 at the extremes is not in play
    check = robust.robust_check(
        reference, other, confidence=confidence, replicates_a=reps_ref, replicates_b=reps_other
    )
    assert check.median_ratio == estimate
    np.testing.assert_allclose(
        [check.median_ratio_ci_low, check.median_ratio_ci_high], expected, rtol=1e-12
    )


@pytest.mark.parametrize(("reference", "other"), [(TIED_A, UNEVEN), (UNEVEN, TIED_A)])
def test_bca_acceleration_with_unequal_jackknife_values(reference, other):
    """Where the leave-one-out medians differ the acceleration is not 0 and equals eq. 14.15
    worked out by hand (exactly); the whole interval equals scipy.stats.bootstrap's BCa
    from its own replicates (independent implementation)."""
    jackknife = _brute_jackknife(reference, other)
    assert any(np.unique(values).size > 1 for values in jackknife)
    acceleration = _textbook_acceleration(jackknife)
    assert acceleration != 0.0
    assert robust.bca_acceleration(jackknife) == pytest.approx(acceleration, rel=1e-12, abs=0)

    def ratio(x, y, axis=-1):
        return np.median(y, axis=axis) / np.median(x, axis=axis)

    result = sps.bootstrap(
        (reference, other),
        ratio,
        method="BCa",
        n_resamples=3000,
        rng=np.random.default_rng(3),
        vectorized=True,
    )
    low, high = robust.bca_interval(
        float(ratio(reference, other)), result.bootstrap_distribution, jackknife, 0.95
    )
    expected = result.confidence_interval
    np.testing.assert_allclose([low, high], [expected.low, expected.high], rtol=1e-12)


# ---------------------------------------------------------------- robust_all on a table


def _table():
    rng = np.random.default_rng(99)
    groups = {
        "alder": rng.lognormal(1.0, 0.6, 14),
        "birch": rng.lognormal(1.4, 0.6, 11),
        "cedar": rng.lognormal(0.8, 0.9, 9),
        "lonely": np.array([3.3]),  # one usable value: nothing can be computed
    }
    frame = pl.DataFrame(
        {
            "site": [name for name, values in groups.items() for _ in values],
            "zinc": np.concatenate(list(groups.values())),
            "lead": np.concatenate([v[::-1] * 2 for v in groups.values()]),
        }
    )
    return load_table(frame=frame, groupings=["site"], outcomes=["zinc", "lead"]), groups


def test_robust_all_adds_columns_and_calls_progress():
    """Every comparison gets the robust columns; HL and Mann-Whitney agree with brute
    force and scipy on the group values; comparisons with a 1-value group are empty
    (null after NaN is cleared); progress reaches (total, total)."""
    table, groups = _table()
    result = run_scan(table)
    calls: list[tuple[int, int]] = []
    out = robust.robust_all(result, resamples=199, progress=lambda i, n: calls.append((i, n)))
    assert out.height == result.comparisons.height
    assert set(robust.ROBUST_COLUMNS) <= set(out.columns)
    assert set(result.comparisons.columns) <= set(out.columns)
    total = out.height
    assert calls and calls[-1] == (total, total)
    assert all(n == total for _, n in calls)
    assert [i for i, _ in calls] == sorted({i for i, _ in calls})
    for row in out.iter_rows(named=True):
        values = groups[row["level_a"]], groups[row["level_b"]]
        if row["outcome"] == "lead":
            values = tuple(v[::-1] * 2 for v in values)
        a, b = values
        if a.size < 2 or b.size < 2:
            assert all(row[name] is None for name in robust.ROBUST_COLUMNS), row
            continue
        shift, low, high = _brute_hl(np.log(a), np.log(b))
        np.testing.assert_allclose(
            [row["hl_ratio"], row["hl_ci_low"], row["hl_ci_high"]], np.exp([shift, low, high])
        )
        expected_p = sps.mannwhitneyu(b, a, alternative="two-sided").pvalue
        assert row["mann_whitney_p"] == pytest.approx(expected_p, rel=1e-12)
        assert row["boot_median_ratio_low"] < row["boot_median_ratio_high"]


def test_robust_all_reproducible_and_cancellable():
    """Same seed, same frame; cancelling after the first row leaves the rest empty."""
    table, _ = _table()
    result = run_scan(table)
    first = robust.robust_all(result, resamples=199, seed=5)
    assert first.equals(robust.robust_all(result, resamples=199, seed=5))
    assert not first.equals(robust.robust_all(result, resamples=199, seed=6))
    asked = []

    def cancelled() -> bool:
        asked.append(True)
        return len(asked) > 1

    partial = robust.robust_all(result, resamples=199, cancelled=cancelled)
    assert partial.height == result.comparisons.height
    assert partial["hl_ratio"].slice(1).null_count() == partial.height - 1
