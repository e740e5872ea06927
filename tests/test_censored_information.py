"""Expected information of a singly left-censored normal sample and the approximate variance
of the ML mean of the logs from a summary (stats/censored_information.py).

Sources, named beside each check:

* scipy (the external reference): ``integrate.quad`` of the outer product of the score over
  the detected range, plus the censored term weighted by its probability; the score of the
  detected density is the textbook normal score ((y - mu) / sigma^2,
  -1 / sigma + (y - mu)^2 / sigma^3), and that of the censored term is taken by central
  finite differences of ``stats.norm.logcdf``, so that no derivative of the module is reused.
  The expected outer product of the score equals the expected negative Hessian (the
  information identity), which is what the module's formulas give.
* Common practice: an uncensored normal sample has information diag(1, 2) / sigma^2 per
  entry in (mu, sigma), and the variance of its mean is sigma^2 / n.
* Consistency only (the fit is the project's own): the inverse observed information of
  ``censored.fit_censored_lognormal`` on large simulated singly-censored samples.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate
from scipy import stats as sps

from foldsift.stats.censored import fit_censored_lognormal
from foldsift.stats.censored_information import (
    censored_normal_information,
    variance_of_mean_log,
)


def _quad_information(xi: float, mu: float = 1.3, sigma: float = 0.7) -> np.ndarray:
    """Per-entry expected information in (mu, sigma) times sigma^2, by scipy quad of the
    outer product of the score (independent of the module's formulas)."""
    limit = mu + sigma * xi  # ln L

    def detected_score(y: float) -> tuple[float, float]:
        z = (y - mu) / sigma
        return z / sigma, -1 / sigma + z * z / sigma

    def integrand(y: float, i: int, j: int) -> float:
        score = detected_score(y)
        return score[i] * score[j] * float(sps.norm.pdf(y, mu, sigma))

    def log_censored(m: float, s: float) -> float:
        return float(sps.norm.logcdf((limit - m) / s))

    h = 1e-5
    censored_score = (
        (log_censored(mu + h, sigma) - log_censored(mu - h, sigma)) / (2 * h),
        (log_censored(mu, sigma + h) - log_censored(mu, sigma - h)) / (2 * h),
    )
    p_censored = float(sps.norm.cdf(xi))
    p_detected = float(sps.norm.sf(xi))
    info = np.empty((2, 2))
    for i in range(2):
        for j in range(2):
            # The detected range, cut 40 SDs above the mean (the rest is below 1e-340); the
            # absolute tolerance is scaled by the detected probability for the right tail.
            detected, _ = integrate.quad(
                integrand,
                limit,
                mu + 40 * sigma,
                args=(i, j),
                epsabs=1e-13 * p_detected,
                epsrel=1e-11,
            )
            info[i, j] = detected + p_censored * censored_score[i] * censored_score[j]
    return info * sigma**2


# -- (1) the information against scipy quad -------------------------------------------------


@pytest.mark.parametrize("xi", [-4.0, -2.5, -1.0, -0.3, 0.0, 0.8, 2.0])
def test_information_matches_quadrature(xi: float) -> None:
    # Reference: scipy.integrate.quad of the expected outer product of the score.
    reference = _quad_information(xi)
    i_mumu, i_musig, i_sigsig = censored_normal_information(xi)
    computed = np.array([[i_mumu, i_musig], [i_musig, i_sigsig]], dtype=float)
    np.testing.assert_allclose(computed, reference, rtol=1e-7, atol=1e-10)


@pytest.mark.parametrize("xi", [-7.0, 4.0, 6.0])
def test_information_in_the_tails_matches_quadrature(xi: float) -> None:
    # Reference: scipy quad as above; relative accuracy where the entries are tiny (xi > 0).
    reference = _quad_information(xi, mu=0.0, sigma=1.0)
    computed = np.array(censored_normal_information(xi), dtype=float)
    expected = np.array([reference[0, 0], reference[0, 1], reference[1, 1]])
    np.testing.assert_allclose(computed, expected, rtol=1e-6, atol=1e-14)


@pytest.mark.parametrize("xi", [-4.0, -1.0, 0.0, 1.0, 2.0, 4.0])
def test_variance_factor_matches_inverse_of_quadrature(xi: float) -> None:
    # Reference: [I^-1]_mumu from inverting the scipy-quad matrix (numpy.linalg.inv); the
    # module computes it through its own determinant formula and, for xi > 0, scaled terms.
    n = 1e9
    n_censored = round(float(sps.norm.cdf(xi)) * n)
    xi_used = float(sps.norm.ppf(n_censored / n))
    factor = np.linalg.inv(_quad_information(xi_used, mu=0.0, sigma=1.0))[0, 0]
    assert variance_of_mean_log(n, n_censored, 1.0) * n == pytest.approx(factor, rel=1e-6)


# -- (2) the uncensored limit -------------------------------------------------------------


def test_no_censoring_limit() -> None:
    # Common practice: an uncensored normal sample has information diag(1, 2) per entry
    # (sigma = 1); as the limit goes far below the data, the censored information runs to it.
    xi = np.array([-np.inf, -1e300, -60.0, -40.0, -12.0])
    i_mumu, i_musig, i_sigsig = censored_normal_information(xi)
    np.testing.assert_allclose(i_mumu, 1.0, rtol=0, atol=1e-15)
    np.testing.assert_allclose(i_musig, 0.0, rtol=0, atol=1e-15)
    np.testing.assert_allclose(i_sigsig, 2.0, rtol=0, atol=1e-15)


def test_everything_censored_limit_and_nan() -> None:
    # Common practice: an entry known only to lie below +inf carries no information.
    i_mumu, i_musig, i_sigsig = censored_normal_information([np.inf, 1e300, np.nan])
    np.testing.assert_array_equal(i_mumu[:2], 0.0)
    np.testing.assert_array_equal(i_musig[:2], 0.0)
    np.testing.assert_array_equal(i_sigsig[:2], 0.0)
    assert np.isnan([i_mumu[2], i_musig[2], i_sigsig[2]]).all()


def test_information_is_positive_definite_everywhere() -> None:
    # Common practice: a Fisher information matrix is positive semi-definite; checked
    # across the range (finite, non-negative diagonal, determinant >= 0).
    xi = np.linspace(-45.0, 45.0, 2001)
    i_mumu, i_musig, i_sigsig = censored_normal_information(xi)
    assert np.isfinite(i_mumu).all() and np.isfinite(i_musig).all()
    assert np.isfinite(i_sigsig).all()
    assert (i_mumu >= 0).all() and (i_sigsig >= 0).all()
    assert (i_mumu * i_sigsig - i_musig**2 >= -1e-15).all()


# -- (3) consistency with the project's own fit --------------------------------------------


def test_consistent_with_observed_information_of_the_fit() -> None:
    # Consistency, not an external reference: the inverse observed information of
    # fit_censored_lognormal on large samples with one limit at the given quantile should
    # agree with the expected-information approximation at the fitted SD within a few %.
    rng = np.random.default_rng(20240611)
    n = 20_000
    shares = np.array([0.1, 0.3, 0.3, 0.5, 0.7])
    mu, sigma = 2.0, 0.8
    logs = rng.normal(mu, sigma, size=(shares.size, n))
    limits = mu + sigma * sps.norm.ppf(shares)
    below = logs < limits[:, None]
    values = np.exp(np.where(below, limits[:, None], logs))
    groups = np.repeat(np.arange(shares.size), n)
    fit = fit_censored_lognormal(values.ravel(), below.ravel(), groups, shares.size)
    assert fit.converged.all()
    approx = variance_of_mean_log(fit.n, fit.n_censored, fit.sigma)
    # Over 30 seeds the largest difference seen was 0.1%.
    np.testing.assert_allclose(approx, fit.var_mu, rtol=0.01)
    # The whole inverse matrix, at the fitted censoring point, agrees as well (largest
    # differences over 30 seeds: 0.5% and 0.7%; the covariance, near zero at light
    # censoring, 3.4%).
    xi = (limits - fit.mu) / fit.sigma
    i_mumu, i_musig, i_sigsig = censored_normal_information(xi)
    scale = fit.sigma**2 / n
    det = i_mumu * i_sigsig - i_musig**2
    np.testing.assert_allclose(scale * i_sigsig / det, fit.var_mu, rtol=0.02)
    np.testing.assert_allclose(scale * i_mumu / det, fit.var_sigma, rtol=0.02)
    np.testing.assert_allclose(-scale * i_musig / det, fit.cov_mu_sigma, rtol=0.08)


# -- (4) variance_of_mean_log: edge cases ---------------------------------------------------


def test_nothing_censored_is_exactly_s2_over_n() -> None:
    # Common practice: the variance of a mean of n uncorrelated values with SD s is s^2 / n.
    n = np.array([2, 3, 10, 17, 1000])
    sd = np.array([0.1, 0.37, 1.0, 2.5, 0.83])
    got = variance_of_mean_log(n, 0, sd)
    expected = np.array([s * s / k for s, k in zip(sd.tolist(), n.tolist(), strict=True)])
    np.testing.assert_array_equal(got, expected)


def test_nan_rules() -> None:
    # The rules of the function's contract: NaN where n < 2, n_censored < 0 or >= n, sd_log
    # not finite and positive, or an input is NaN; a number everywhere else.
    n = [1, 0, 10, 10, 10, 10, 10, 10, 10, np.nan, 10]
    censored = [0, 0, 10, 11, -1, 3, 3, 3, 3, 3, np.nan]
    sd = [1.0, 1.0, 1.0, 1.0, 1.0, 0.0, -1.0, np.inf, np.nan, 1.0, 1.0]
    assert np.isnan(variance_of_mean_log(n, censored, sd)).all()
    ok = variance_of_mean_log([2, 10, 10], [1, 3, 9], [1.0, 1.0, 1.0])
    assert np.isfinite(ok).all() and (ok > 0).all()


def test_broadcasts_and_scales_with_sigma_squared_over_n() -> None:
    # The model: mu and sigma enter only through xi, so at a fixed censored share the variance
    # is proportional to sigma^2 / n (the information of n entries is n / sigma^2 times I(xi)).
    got = variance_of_mean_log(np.array([[100], [400]]), np.array([[30], [120]]), [0.5, 2.0])
    assert got.shape == (2, 2)
    assert got[0, 1] / got[0, 0] == pytest.approx(16.0, rel=1e-12)
    assert got[0, 0] / got[1, 0] == pytest.approx(4.0, rel=1e-12)


# -- (5) monotone in the censored share ---------------------------------------------------


def test_more_censoring_gives_larger_variance() -> None:
    # Every additional censored entry removes information about mu (the detected density
    # is replaced by a coarser event), so at fixed n and sigma the variance grows strictly.
    n = 500
    variance = variance_of_mean_log(n, np.arange(n), 1.3)
    assert np.isfinite(variance).all()
    assert (np.diff(variance) > 0).all()
    assert variance[0] == pytest.approx(1.3**2 / n, rel=1e-15)
    assert math.isfinite(float(variance_of_mean_log(10**12, 10**12 - 1, 1.0)))
