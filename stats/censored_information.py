"""Expected information of a singly left-censored normal sample, and from it the variance of
the maximum-likelihood mean of the logs when a summary table gives only n, the number of
censored entries and the fitted SD of the logs.

Model. The logs y_i of n entries are a sample from Normal(mu, sigma); there is one detection
limit, ln L on the log scale, and an entry below it is only known to be below it (Type I
single left censoring). With the standardised censoring point xi = (ln L - mu) / sigma,
phi = pdf(xi), Phi = cdf(xi), Q = 1 - Phi and lam = phi / Phi, one entry contributes

    detected (z = (y - mu) / sigma > xi):  -ln sigma - z^2 / 2,
    censored (probability Phi):            ln Phi(xi).

Derivation (per entry, in (mu, sigma), multiplied by sigma^2). A detected entry has negative
second derivatives 1, 2z and 3z^2 - 1 (mu-mu, mu-sigma, sigma-sigma); over z > xi their
expectations are Q, 2 phi and 2Q + 3 xi phi, from E[z; z > xi] = phi and
E[z^2; z > xi] = Q + xi phi. For a censored entry, with g = ln Phi, g' = lam,
g'' = -lam (lam + xi) and d xi / d mu = -1 / sigma, d xi / d sigma = -xi / sigma, the
negative second derivatives are -g'', -(g' + xi g'') and -(2 xi g' + xi^2 g''); weighted by
Phi they are phi (lam + xi), phi xi (lam + xi) - phi and phi xi^2 (lam + xi) - 2 xi phi.
The sum is the expected information

    I_mumu   = Q + phi (lam + xi)
    I_musig  = phi + phi xi (lam + xi)
    I_sigsig = 2Q + xi phi + phi xi^2 (lam + xi)

which runs to (1, 0, 2), the information of an uncensored normal sample, as xi -> -inf.
Its determinant, expanded so that the leading terms cancel on paper rather than in
floating point, is

    det = 2Q^2 + Q phi xi + Q phi (lam + xi) (xi^2 + 2) - phi^2 (1 + xi (lam + xi)),

and the variance of the ML estimate of mu is approximately [I^-1]_mumu sigma^2 / n with
[I^-1]_mumu = I_sigsig / det, the factor by which censoring inflates sigma^2 / n.

Use (``variance_of_mean_log``). From a summary (n, n_censored, sd_log) xi is estimated by
Phi^-1(n_censored / n) and sigma by sd_log. This is an approximation: it is the asymptotic
(expected-information) variance at an estimated censoring point and assumes a single limit.
Where a group was measured against several limits, or the raw values are at hand, the
inverse observed information of the fit itself (``censored.fit_censored_lognormal``) is
exact for those data and preferred. A single upper limit (right censoring) gives the same
variance of mu by the mirror image y -> -y.

Numerics: Q from ``ndtr(-xi)``, lam as exp(ln phi - ln Phi) with ``log_ndtr`` (finite far
in the left tail, where phi and Phi both underflow), and xi clipped to [-40, 40], beyond
which every tail term is below the smallest double, so infinite xi gives the limits
exactly. For xi > 0 the inflation factor is computed with every term divided by phi (or
phi^2), through the Mills ratio Q / phi, so that it stays finite until it overflows.

References (from memory): Cohen, A. C. (1959), "Simplified estimators for the normal
distribution when samples are singly censored or truncated", Technometrics 1, 217-237;
Cohen, A. C. (1991), Truncated and Censored Samples: Theory and Applications, Marcel Dekker.
"""

from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt
from scipy import special

FloatArray = npt.NDArray[np.float64]

_LOG_ROOT_2PI = 0.5 * math.log(2 * math.pi)
#: Beyond |xi| = 40, phi(xi) and the tail probability are below the smallest double.
_XI_LIMIT = 40.0


def _tail_quantities(
    xi: FloatArray,
) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray, FloatArray]:
    """x (clipped), ln phi, phi, Q = 1 - Phi and lam + x, elementwise (NaN stays NaN)."""
    x = np.clip(xi, -_XI_LIMIT, _XI_LIMIT)
    log_phi = -0.5 * x * x - _LOG_ROOT_2PI
    phi = np.exp(log_phi)
    q = special.ndtr(-x)
    lam = np.exp(log_phi - special.log_ndtr(x))
    return x, log_phi, phi, q, lam + x


def censored_normal_information(
    xi: npt.ArrayLike,
) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Expected information per entry of a normal sample left-censored at the standardised
    point ``xi``, in (mu, sigma) with sigma = 1 (multiply by n / sigma^2 for a sample):
    I_mumu, I_musig, I_sigsig (see the module docstring). Vectorised; -inf gives (1, 0, 2),
    +inf (0, 0, 0), NaN gives NaN."""
    x, _, phi, q, a = _tail_quantities(np.asarray(xi, dtype=np.float64))
    i_mumu = q + phi * a
    i_musig = phi + phi * x * a
    i_sigsig = 2 * q + x * phi + phi * x * x * a
    return (
        np.asarray(i_mumu, dtype=np.float64),
        np.asarray(i_musig, dtype=np.float64),
        np.asarray(i_sigsig, dtype=np.float64),
    )


def _mean_variance_factor(xi: FloatArray) -> FloatArray:
    """[I^-1]_mumu at ``xi``: the variance of the ML mean times n / sigma^2. 1 at -inf,
    increasing, infinite at +inf."""
    x, log_phi, phi, q, a = _tail_quantities(xi)
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        # xi <= 0: as written in the module docstring.
        det = 2 * q * q + q * phi * x + q * phi * a * (x * x + 2) - phi * phi * (1 + x * a)
        left = (2 * q + x * phi + phi * x * x * a) / det
        # xi > 0: numerator / phi, determinant / phi^2, with the Mills ratio r = Q / phi.
        r = np.exp(special.log_ndtr(-x) - log_phi)
        det_scaled = 2 * r * r + r * x + r * a * (x * x + 2) - (1 + x * a)
        right = (2 * r + x + x * x * a) / det_scaled / phi
    return np.asarray(np.where(x <= 0, left, right), dtype=np.float64)


def variance_of_mean_log(
    n: npt.ArrayLike, n_censored: npt.ArrayLike, sd_log: npt.ArrayLike
) -> FloatArray:
    """Approximate variance of the censored ML mean of the logs of a group with ``n`` entries,
    ``n_censored`` of them below one detection limit, and fitted SD of the logs ``sd_log``:
    [I^-1]_mumu(xi) sd_log^2 / n with xi = Phi^-1(n_censored / n). Exactly sd_log^2 / n where
    nothing is censored. Vectorised (the arguments broadcast); NaN where n < 2, n_censored < 0,
    n_censored >= n, or sd_log is not finite and positive (and where any input is NaN)."""
    count = np.asarray(n, dtype=np.float64)
    censored = np.asarray(n_censored, dtype=np.float64)
    sd = np.asarray(sd_log, dtype=np.float64)
    count, censored, sd = np.broadcast_arrays(count, censored, sd)
    valid = (
        np.isfinite(count)
        & (count >= 2)
        & np.isfinite(censored)
        & (censored >= 0)
        & (censored < count)
        & np.isfinite(sd)
        & (sd > 0)
    )
    safe_count = np.where(valid, count, 2.0)
    share = np.where(valid, censored, 0.0) / safe_count
    plain = np.where(valid, sd, 1.0) ** 2 / safe_count
    factor = _mean_variance_factor(special.ndtri(share))
    variance = np.where(share == 0, plain, factor * plain)
    return np.asarray(np.where(valid, variance, np.nan), dtype=np.float64)
