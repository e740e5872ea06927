"""Censored lognormal fits, their comparison and Kaplan–Meier medians (stats/censored.py).

Sources, named beside each check:

* scipy: ``stats.CensoredData`` with ``stats.lognorm.fit(data, floc=0)``, an independent
  censored likelihood and optimiser (shape = sigma, log(scale) = mu); ``stats.ttest_ind``
  for the t-tests; ``stats.ecdf`` on right-censored data for the product-limit curve.
* lifelines (test-only): ``LogNormalFitter`` (left and interval censoring; ``summary`` gives
  the standard errors of mu_ and sigma_ from the inverse observed information),
  ``LogNormalAFTFitter`` (a common sigma with a group covariate) and ``KaplanMeierFitter``.
* numpy: ``mean``, ``std`` and ``median`` for data without censoring.
* Helsel, Statistics for Censored Environmental Data Using Minitab and R (2012), and the US
  EPA Unified Guidance (2009), ch. 15, from memory: the method (censored ML; Kaplan–Meier on
  flipped data) and the rule that substitution biases a comparison whose groups have
  different limits.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import optimize
from scipy import stats as sps

from foldsift.stats.censored import (
    ALL_CENSORED,
    EMPTY,
    KM_BELOW_LIMITS,
    NO_SPREAD,
    REASONS,
    TOO_CENSORED,
    TOO_FEW_DETECTED,
    CensoredFit,
    compare_censored,
    compare_pooled,
    fit_censored_lognormal,
    fit_censored_pooled,
    kaplan_meier_median,
)
from foldsift.stats.ttest import log_t_test


def censored_groups(
    seed: int, sizes: list[int], right_at: float | None = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Lognormal groups, each with its own mu, sigma and three or four limits (one drawn per
    entry), optionally right-censored above ``right_at``: (values, left, right, group ids)."""
    rng = np.random.default_rng(seed)
    parts: list[tuple[np.ndarray, ...]] = []
    for group, n in enumerate(sizes):
        mu, sigma = rng.uniform(-1, 2), rng.uniform(0.4, 1.5)
        logs = rng.normal(mu, sigma, n)
        limits = mu + sigma * rng.uniform(-1.2, 0.3, rng.integers(3, 5))
        limit = rng.choice(limits, n)
        left = logs < limit
        top = np.inf if right_at is None else mu + right_at * sigma
        right = logs > top
        values = np.exp(np.where(left, limit, np.where(right, top, logs)))
        parts.append((values, left, right, np.full(n, group)))
    values, left, right, ids = (np.concatenate(column) for column in zip(*parts, strict=True))
    return values, left, right, ids


def scipy_fit(values: np.ndarray, left: np.ndarray, right: np.ndarray) -> tuple[float, float]:
    """(mu, sigma) by scipy's censored lognormal likelihood, with a tight Nelder–Mead."""
    data = sps.CensoredData(
        uncensored=values[~left & ~right], left=values[left], right=values[right]
    )

    def tight(func, x0, args=(), disp=0):
        options = {"xatol": 1e-10, "fatol": 1e-12, "maxiter": 20_000, "maxfev": 40_000}
        return optimize.minimize(func, x0, args=args, method="Nelder-Mead", options=options).x

    shape, _, scale = sps.lognorm.fit(data, floc=0, optimizer=tight)
    return float(np.log(scale)), float(shape)


# -- the fit --------------------------------------------------------------------------------


@pytest.mark.parametrize("right_at", [None, 1.2])
def test_fits_match_scipy_censored_lognormal(right_at):
    """mu and sigma agree with scipy's CensoredData + lognorm.fit(floc=0) to 1e-6, for groups
    with several limits each, with and without right-censoring (scipy, independent)."""
    sizes = [12, 20, 33, 47, 60, 25]
    values, left, right, ids = censored_groups(5, sizes, right_at)
    fit = fit_censored_lognormal(values, left, ids, len(sizes), right=right)
    assert left.any() and (right_at is None or right.any())
    for group in range(len(sizes)):
        mine = ids == group
        if fit.reason[group]:
            continue
        mu, sigma = scipy_fit(values[mine], left[mine], right[mine])
        assert fit.mu[group] == pytest.approx(mu, abs=1e-6)
        assert fit.sigma[group] == pytest.approx(sigma, abs=1e-6)
    assert fit.converged[fit.reason == ""].all() and (fit.reason == "").sum() >= 5


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_standard_errors_match_lifelines_left_censoring(seed):
    """se of mu and of sigma agree with lifelines' LogNormalFitter.fit_left_censoring (its
    summary: inverse observed information) to 1e-4 (lifelines, independent)."""
    lifelines = pytest.importorskip("lifelines")
    sizes = [15, 30, 50]
    values, left, right, ids = censored_groups(seed, sizes)
    fit = fit_censored_lognormal(values, left, ids, len(sizes))
    for group in range(len(sizes)):
        mine = ids == group
        other = lifelines.LogNormalFitter().fit_left_censoring(values[mine], ~left[mine])
        se = other.summary["se(coef)"]
        assert fit.se_mu[group] == pytest.approx(se["mu_"], abs=1e-4)
        assert np.sqrt(fit.var_sigma[group]) == pytest.approx(se["sigma_"], abs=1e-4)
        assert fit.mu[group] == pytest.approx(other.mu_, abs=1e-4)


def test_standard_errors_with_right_censoring_match_lifelines_interval_censoring():
    """With entries above the range as well: lifelines' fit_interval_censoring with (0, L]
    for below a limit and [U, inf) for above, to 1e-4 (lifelines, independent)."""
    lifelines = pytest.importorskip("lifelines")
    values, left, right, ids = censored_groups(9, [40], right_at=1.0)
    fit = fit_censored_lognormal(values, left, ids, 1, right=right)
    lower = np.where(left, 0.0, values)
    upper = np.where(right, np.inf, values)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        other = lifelines.LogNormalFitter().fit_interval_censoring(lower, upper)
    se = other.summary["se(coef)"]
    assert right.any() and left.any()
    assert fit.se_mu[0] == pytest.approx(se["mu_"], abs=1e-4)
    assert np.sqrt(fit.var_sigma[0]) == pytest.approx(se["sigma_"], abs=1e-4)


def test_no_censoring_gives_the_mean_of_logs_and_the_ml_sd():
    """Without censoring: mu is the mean of the logs and sigma their SD with divisor n, to
    rounding (numpy mean and std(ddof=0)); the variance of mu is sigma^2 / n."""
    rng = np.random.default_rng(4)
    sizes = [2, 5, 17, 100]
    values = rng.lognormal(3.0, 0.7, sum(sizes))
    ids = np.repeat(np.arange(len(sizes)), sizes)
    fit = fit_censored_lognormal(values, np.zeros(values.size, bool), ids, len(sizes))
    for group in range(len(sizes)):
        logs = np.log(values[ids == group])
        assert fit.mu[group] == pytest.approx(np.mean(logs), rel=1e-15, abs=1e-15)
        assert fit.sigma[group] == pytest.approx(np.std(logs, ddof=0), rel=1e-13)
        assert fit.var_mu[group] == pytest.approx(np.var(logs) / logs.size, rel=1e-12)
    assert (fit.iterations == 0).all() and fit.converged.all() and (fit.reason == "").all()


def test_no_censoring_gives_exactly_the_welch_and_pooled_t_tests():
    """Data without censoring: compare_censored is Welch's t-test on the logs and
    compare_pooled the pooled one, identical to the project's log_t_test and equal to scipy's
    ttest_ind (equal_var False / True) to 1e-12 (scipy, independent)."""
    rng = np.random.default_rng(8)
    a, b = rng.lognormal(1.0, 0.5, 9), rng.lognormal(1.4, 0.9, 14)
    values = np.concatenate([a, b])
    none = np.zeros(values.size, bool)
    side = np.repeat([0, 1], [a.size, b.size])
    fit = fit_censored_lognormal(values, none, side, 2)
    welch = compare_censored(fit.take([0]), fit.take([1]))
    pooled = compare_pooled(fit_censored_pooled(values, none, side, np.zeros(values.size, int), 1))
    for test, result in (("welch", welch), ("pooled", pooled)):
        mine = log_t_test(
            fit.n[[0]],
            fit.mu[[0]],
            fit.ss_log[[0]],
            fit.n[[1]],
            fit.mu[[1]],
            fit.ss_log[[1]],
            test=test,
        )
        assert result.d[0] == mine.difference[0] and result.se[0] == mine.standard_error[0]
        assert result.df[0] == mine.df[0] and result.p[0] == mine.p_value[0]
        assert result.ci_low[0] == mine.ci_low[0] and result.ci_high[0] == mine.ci_high[0]
        reference = sps.ttest_ind(np.log(b), np.log(a), equal_var=test == "pooled")
        interval = reference.confidence_interval(0.95)
        assert result.p[0] == pytest.approx(reference.pvalue, rel=1e-12)
        assert result.df[0] == pytest.approx(reference.df, rel=1e-12)
        assert result.d[0] / result.se[0] == pytest.approx(reference.statistic, rel=1e-12)
        assert result.ci_low[0] == pytest.approx(interval.low, rel=1e-12)
        assert result.ci_high[0] == pytest.approx(interval.high, rel=1e-12)


def test_degenerate_groups_give_nan_and_a_reason_without_warnings(capfd):
    """All censored, one detected, equal detected values with censoring, more than 80%
    censored, an empty group: NaN and the named reason, nothing raised, warned or printed
    (the thresholds are the module's stated rules; Helsel 2012 from memory for 80%)."""
    values = np.array(
        [1.0, 2.0, 3.0] + [5.0, 1.0, 2.0] + [4.0, 4.0, 4.0, 2.0] + [3.0] * 9 + [7.0, 8.0]
    )
    left = np.array([1, 1, 1] + [0, 1, 1] + [0, 0, 0, 1] + [1] * 9 + [0, 0], bool)
    ids = np.repeat([0, 1, 2, 3], [3, 3, 4, 11])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        fit = fit_censored_lognormal(values, left, ids, 5)
        comparison = compare_censored(fit.take([0, 1, 2, 3, 4]), fit.take([3, 3, 3, 0, 1]))
    assert list(fit.reason) == [ALL_CENSORED, TOO_FEW_DETECTED, NO_SPREAD, TOO_CENSORED, EMPTY]
    assert set(fit.reason) <= set(REASONS)
    assert np.isnan(fit.mu).all() and np.isnan(fit.se_mu).all() and not fit.converged.any()
    assert np.isnan(comparison.p).all() and np.isnan(comparison.ci_low).all()
    captured = capfd.readouterr()
    assert captured.out == "" and captured.err == ""


# scipy's own reference computation warns about the SD-0 group; foldsift's does not.
@pytest.mark.filterwarnings("ignore:Precision loss:RuntimeWarning")
def test_equal_values_without_censoring_are_kept_as_the_t_test_keeps_them():
    """A group of equal values without censoring has SD 0, like the t-test: compared with a
    group that has spread it gives scipy's Welch result (scipy ttest_ind)."""
    values = np.array([2.0, 2.0, 2.0, 1.0, 3.0, 4.0, 6.0])
    ids = np.repeat([0, 1], [3, 4])
    fit = fit_censored_lognormal(values, np.zeros(7, bool), ids, 2)
    result = compare_censored(fit.take([0]), fit.take([1]))
    reference = sps.ttest_ind(np.log(values[3:]), np.log(values[:3]), equal_var=False)
    assert fit.sigma[0] == 0 and fit.reason[0] == ""
    assert result.p[0] == pytest.approx(reference.pvalue, rel=1e-12)


def test_bad_input_is_refused():
    """Limits must be positive; an entry cannot be censored both ways; codes in range (the
    lognormal model needs positive values: Helsel 2012)."""
    one = np.zeros(2, int)
    with pytest.raises(ValueError, match="positive"):
        fit_censored_lognormal([1.0, 0.0], [False, True], one, 1)
    with pytest.raises(ValueError, match="both"):
        fit_censored_lognormal([1.0, 2.0], [True, False], one, 1, right=[True, False])
    with pytest.raises(ValueError, match="codes"):
        fit_censored_lognormal([1.0, 2.0], [False, False], [0, 1], 1)


# -- vectorisation ----------------------------------------------------------------------------


def test_fitting_a_thousand_groups_at_once_equals_fitting_each_alone():
    """Every group's fit is the same whether it is fitted with 999 others or alone (the
    definition of a per-group fit)."""
    rng = np.random.default_rng(12)
    sizes = list(rng.integers(3, 40, 1000))
    values, left, right, ids = censored_groups(12, sizes, right_at=1.5)
    together = fit_censored_lognormal(values, left, ids, len(sizes), right=right)
    assert (together.reason == "").sum() > 900 and together.n_censored.sum() > 0
    for group in range(len(sizes)):
        mine = ids == group
        alone = fit_censored_lognormal(
            values[mine], left[mine], np.zeros(mine.sum(), int), 1, right=right[mine]
        )
        assert alone.reason[0] == together.reason[group]
        for name in ("mu", "sigma", "var_mu", "var_sigma", "cov_mu_sigma"):
            np.testing.assert_allclose(
                getattr(alone, name)[0], getattr(together, name)[group], rtol=1e-12, atol=1e-14
            )


def test_take_selects_the_groups_of_each_comparison():
    """take(index) picks rows of every array (numpy fancy indexing as the reference)."""
    values, left, _, ids = censored_groups(3, [10, 20, 30])
    fit = fit_censored_lognormal(values, left, ids, 3)
    part = fit.take([2, 0, 2])
    assert isinstance(part, CensoredFit)
    np.testing.assert_array_equal(part.mu, fit.mu[[2, 0, 2]])
    np.testing.assert_array_equal(part.reason, fit.reason[[2, 0, 2]])


# -- the pooled (common sigma) fit ------------------------------------------------------------


@pytest.mark.parametrize("seed", [21, 22])
def test_pooled_fit_matches_lifelines_lognormal_aft(seed):
    """A common sigma with a group covariate is lifelines' LogNormalAFTFitter with left
    censoring: the covariate's coefficient is d, its se the ML se of d (1e-4), and the log of
    sigma its sigma_ intercept (lifelines, independent)."""
    lifelines = pytest.importorskip("lifelines")
    rng = np.random.default_rng(seed)
    logs = np.concatenate([rng.normal(0.3, 0.8, 25), rng.normal(0.9, 0.8, 35)])
    side = np.repeat([0, 1], [25, 35])
    limit = rng.choice([0.0, 0.4, 0.9], side.size) + 0.3 * side
    left = logs < limit
    values = np.exp(np.where(left, limit, logs))
    fit = fit_censored_pooled(values, left, side, np.zeros(side.size, int), 1)
    frame = pd.DataFrame({"T": values, "E": ~left, "b": side})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        other = lifelines.LogNormalAFTFitter().fit_left_censoring(frame, "T", "E")
    summary = other.summary
    assert left.sum() > 5
    assert fit.mu_b[0] - fit.mu_a[0] == pytest.approx(summary.loc[("mu_", "b"), "coef"], abs=1e-4)
    assert np.sqrt(fit.var_d[0]) == pytest.approx(summary.loc[("mu_", "b"), "se(coef)"], abs=1e-4)
    assert np.log(fit.sigma[0]) == pytest.approx(
        summary.loc[("sigma_", "Intercept"), "coef"], abs=1e-4
    )


def test_pooled_fit_of_many_comparisons_equals_each_alone():
    """Comparisons fitted together equal each fitted alone (definition of a per-comparison
    fit); each side's rules apply (one side all censored gives NaN and its reason)."""
    rng = np.random.default_rng(30)
    sizes = rng.integers(5, 30, (50, 2))
    values, left, _, ids = censored_groups(30, list(sizes.reshape(-1)))
    pair, side = ids // 2, ids % 2
    left[ids == 7] = True
    together = fit_censored_pooled(values, left, side, pair, 50)
    assert together.reason[3] == ALL_CENSORED
    for p in range(50):
        mine = pair == p
        alone = fit_censored_pooled(
            values[mine], left[mine], side[mine], np.zeros(mine.sum(), int), 1
        )
        assert alone.reason[0] == together.reason[p]
        np.testing.assert_allclose(alone.var_d[0], together.var_d[p], rtol=1e-12)
        np.testing.assert_allclose(
            alone.mu_b[0] - alone.mu_a[0],
            together.mu_b[p] - together.mu_a[p],
            rtol=1e-12,
            atol=1e-14,
        )


# -- Kaplan–Meier medians ---------------------------------------------------------------------


@pytest.mark.parametrize("seed", range(8))
def test_kaplan_meier_median_matches_lifelines_on_flipped_data(seed):
    """The median of left-censored values is M minus lifelines' KaplanMeierFitter median on
    the flipped, right-censored data (lifelines, independent). Where lifelines' curve sits
    exactly at one half, R survival's convention (Helsel's NADA, from memory) takes the
    midpoint to the next event time of lifelines' event table."""
    lifelines = pytest.importorskip("lifelines")
    rng = np.random.default_rng(seed)
    n = int(rng.integers(9, 60))
    x = rng.lognormal(0, 1, n).round(2) + 0.01
    limit = rng.choice(np.quantile(x, [0.1, 0.25, 0.4]), n)
    left = x < limit
    values = np.where(left, limit, x)
    flip = values.max() + 1.0
    km = lifelines.KaplanMeierFitter().fit(flip - values, event_observed=~left)
    expected = km.median_survival_time_
    curve = km.survival_function_["KM_estimate"]
    at_half = np.isclose(curve.to_numpy(), 0.5, rtol=0, atol=1e-9)
    if at_half.any():
        events = km.event_table.index[km.event_table["observed"] > 0].to_numpy()
        later = events[events > curve.index[np.argmax(at_half)]]
        expected = (expected + later[0]) / 2 if later.size else expected
    mine = kaplan_meier_median(values, left)
    assert left.any() and mine.reason == ""
    assert mine.median == pytest.approx(flip - expected, abs=1e-12)


def test_kaplan_meier_median_matches_scipy_ecdf_on_flipped_data():
    """The same against scipy's stats.ecdf of CensoredData.right_censored on flipped data:
    the first flipped time where its survival function is at most one half (scipy)."""
    rng = np.random.default_rng(40)
    x = rng.lognormal(0, 1, 41)
    limit = rng.choice([0.4, 0.7, 1.0], 41)
    left = x < limit
    values = np.where(left, limit, x)
    flip = values.max() + 1.0
    curve = sps.ecdf(sps.CensoredData.right_censored(flip - values, left)).sf
    first = curve.quantiles[np.flatnonzero(curve.probabilities <= 0.5)[0]]
    assert kaplan_meier_median(values, left).median == pytest.approx(flip - first, abs=1e-12)


@pytest.mark.parametrize("n", [1, 2, 7, 10, 25])
def test_kaplan_meier_median_without_censoring_is_the_median(n):
    """Without censoring, the median (numpy.median; the midpoint convention for even n)."""
    values = np.random.default_rng(n).lognormal(0, 1, n)
    assert kaplan_meier_median(values, np.zeros(n, bool)).median == pytest.approx(
        np.median(values), rel=1e-15
    )


def test_kaplan_meier_median_is_undefined_when_more_than_half_lie_below_the_limits():
    """More than half below the limits: the flipped curve never reaches one half (scipy
    ecdf agrees), so NaN with a reason and the bound to show ("< 1.0")."""
    values = np.array([1.0, 1.0, 1.0, 1.0, 2.0, 3.0, 5.0])
    left = np.array([True, True, True, True, False, False, False])
    flipped = sps.ecdf(sps.CensoredData.right_censored(6.0 - values, left)).sf
    assert (flipped.probabilities > 0.5).all()
    result = kaplan_meier_median(values, left)
    assert np.isnan(result.median) and result.reason == KM_BELOW_LIMITS
    assert result.at_most == 1.0


# -- coverage and false positives (a small version of tests/study_censored_coverage.py) ---------


def _limited(
    rng: np.random.Generator, reps: int, n: int, shares: tuple[float, float]
) -> tuple[np.ndarray, ...]:
    logs = rng.standard_normal((reps, 2, n))
    limits = np.stack([sps.norm.ppf(s * np.array([0.5, 1.0, 1.5])) for s in shares])
    limit = np.take_along_axis(limits[None], rng.integers(0, 3, (reps, 2, n)), axis=2)
    left = logs < limit
    return np.exp(np.where(left, limit, logs)), left


def _compare_replicates(values: np.ndarray, left: np.ndarray) -> np.ndarray:
    reps, _, n = values.shape
    fit = fit_censored_lognormal(
        values.reshape(-1), left.reshape(-1), np.repeat(np.arange(2 * reps), n), 2 * reps
    )
    return compare_censored(
        fit.take(np.arange(0, 2 * reps, 2)), fit.take(np.arange(1, 2 * reps, 2))
    ).p


@pytest.mark.parametrize("share", [0.1, 0.3, 0.5])
def test_ci_covers_at_least_93_percent_at_n_10(share):
    """Monte Carlo: 2,000 replicates of two equal lognormal groups of 10 with three limits;
    the 95% CI excludes the true ratio 1 (p < 0.05) in at most 7% of them (the project's
    coverage requirement; binomial SE about 0.5 points; seeded)."""
    rng = np.random.default_rng(100 + int(share * 10))
    p = _compare_replicates(*_limited(rng, 2000, 10, (share, share)))
    assert np.isfinite(p).mean() > 0.95
    assert (p[np.isfinite(p)] < 0.05).mean() <= 0.07


def test_higher_limits_in_one_group_bias_substitution_but_not_the_censored_fit():
    """Equal distributions, group b with higher limits (10% vs 50% censored), n = 100: the
    censored comparison rejects at about 5% (within 3 binomial SEs of 2,000 replicates),
    DL/2 substitution with Welch's t far more often (Helsel 2012 and EPA 2009 ch. 15, from
    memory: substitution biases such comparisons; scipy ttest_ind for the substituted test)."""
    rng = np.random.default_rng(7)
    values, left = _limited(rng, 2000, 100, (0.1, 0.5))
    p = _compare_replicates(values, left)
    substituted = np.log(np.where(left, values / 2, values))
    p_sub = sps.ttest_ind(substituted[:, 1], substituted[:, 0], axis=1, equal_var=False).pvalue
    assert abs((p < 0.05).mean() - 0.05) <= 3 * np.sqrt(0.05 * 0.95 / 2000)
    assert (p_sub < 0.05).mean() > 0.10


def test_a_fit_stopped_before_convergence_is_flagged_not_reported(monkeypatch):
    """With the iteration budget cut to one Newton step, censored groups that need more are
    marked unconverged with NaN and the named reason, and groups without censoring (no
    iteration) are unaffected (the module's stated rule; numpy mean as the reference)."""
    from foldsift.stats import censored

    monkeypatch.setattr(censored, "MAX_ITERATIONS", 1)
    values, left, _, ids = censored_groups(17, [30, 30])
    values = np.concatenate([values, [1.0, 2.0, 4.0]])
    left = np.concatenate([left, [False, False, False]])
    ids = np.concatenate([ids, [2, 2, 2]])
    fit = censored.fit_censored_lognormal(values, left, ids, 3)
    assert list(fit.reason[:2]) == [censored.NOT_CONVERGED] * 2
    assert np.isnan(fit.mu[:2]).all() and not fit.converged[:2].any()
    assert fit.mu[2] == pytest.approx(np.mean(np.log([1.0, 2.0, 4.0])), rel=1e-15)


def test_fit_from_group_by_sums_equals_the_fit_from_the_values():
    """The detected values enter the likelihood only through their count, mean and sum of
    squares of the logs, and censored entries sharing a limit only through their count
    (algebra of the normal likelihood, common practice): fitting from those sums, as the
    scan does, gives the fit from the values (itself checked against lifelines above)."""
    from foldsift.stats.censored import fit_censored_lognormal, fit_censored_summarised

    rng = np.random.default_rng(20261202)
    groups = np.repeat(np.arange(6), 40)
    x = np.exp(rng.normal(1.0 + 0.2 * groups, 0.8))
    limit = np.array([1.5, 2.5, 4.0])[rng.integers(0, 3, groups.size)]
    left = x < limit
    right = (x > 12) & ~left
    values = np.where(left, limit, np.where(right, 12.0, x))
    raw = fit_censored_lognormal(values, left, groups, 6, right=right)
    detected = ~left & ~right
    logs = np.log(values)
    count = np.bincount(groups[detected], minlength=6)
    mean = np.bincount(groups[detected], logs[detected], 6) / count
    ss = np.bincount(groups[detected], (logs[detected] - mean[groups[detected]]) ** 2, 6)
    kinds = np.where(left, 1, 2)
    censored = ~detected
    keys, counts = np.unique(
        np.stack([groups[censored], values[censored], kinds[censored]]), axis=1, return_counts=True
    )
    summarised = fit_censored_summarised(
        (count, mean, ss, np.ones(6, dtype=bool)),
        (keys[0].astype(int), keys[1], keys[2].astype(int), counts),
        6,
    )
    for name in ("mu", "sigma", "var_mu", "var_sigma", "cov_mu_sigma"):
        np.testing.assert_allclose(getattr(summarised, name), getattr(raw, name), rtol=1e-9)
    assert (summarised.n == raw.n).all() and (summarised.n_left == raw.n_left).all()
