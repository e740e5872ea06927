"""The Shapiro–Wilk W test of normality, computed in numpy (no ``scipy.stats`` import).

Royston's algorithm AS R94 (Royston, Statistics and Computing 5, 1995, 117-119; the
approximations of Royston, Applied Statistics 41, 1992, 115-124), as in the Fortran routine
``swilk`` that ``scipy.stats.shapiro`` and R's ``shapiro.test`` wrap — the constants below are
from that published algorithm, written here from memory and checked against
``scipy.stats.shapiro`` in ``tests/test_diagnostics.py`` (W to about 1e-8 relative, p to
about 1e-5: scipy's routine keeps some quantities in single precision, this one in double).

- Coefficients: m_i = Φ⁻¹((i − 3/8)/(n + 1/4)); the two most extreme coefficients from
  Royston's polynomials in 1/√n (only the most extreme one for n ≤ 5), the others m_i
  scaled so that Σa² = 1; n = 3 uses the exact a = (−√½, 0, √½).
- W = (Σ a_i x_(i))² / Σ(x − x̄)².
- p: n = 3 exactly, 6/π (asin √W − asin √¾); 4 ≤ n ≤ 11 from a normalising transformation
  of −ln(γ − ln(1 − W)); n ≥ 12 of ln(1 − W), each with Royston's mean and SD polynomials.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import numpy.typing as npt
from scipy import special

__all__ = ["shapiro_wilk"]

_C1 = (0.0, 0.221157, -0.147981, -2.071190, 4.434685, -2.706056)
_C2 = (0.0, 0.042981, -0.293762, -1.752461, 5.682633, -3.582633)
_C3 = (0.5440, -0.39978, 0.025054, -6.714e-4)
_C4 = (1.3822, -0.77857, 0.062767, -0.0020322)
_C5 = (-1.5861, -0.31082, -0.083751, 0.0038915)
_C6 = (-0.4803, -0.082676, 0.0030302)
_GAMMA = (-2.273, 0.459)


def _poly(coefficients: Sequence[float], x: float) -> float:
    total = 0.0
    for coefficient in reversed(coefficients):
        total = total * x + coefficient
    return total


def _coefficients(n: int) -> npt.NDArray[np.float64]:
    if n == 3:
        return np.array([-math.sqrt(0.5), 0.0, math.sqrt(0.5)])
    m = special.ndtri((np.arange(1, n + 1) - 0.375) / (n + 0.25))
    summ2 = float(np.sum(m * m))
    root = math.sqrt(summ2)
    rsn = 1 / math.sqrt(n)
    last = m[-1] / root + _poly(_C1, rsn)
    if n > 5:
        second = m[-2] / root + _poly(_C2, rsn)
        scale = math.sqrt(
            (summ2 - 2 * m[-1] ** 2 - 2 * m[-2] ** 2) / (1 - 2 * last**2 - 2 * second**2)
        )
        a = m / scale
        a[-2], a[1] = second, -second
    else:
        scale = math.sqrt((summ2 - 2 * m[-1] ** 2) / (1 - 2 * last**2))
        a = m / scale
    a[-1], a[0] = last, -last
    return np.asarray(a, dtype=np.float64)


def _p_value(w: float, n: int) -> float:
    if n == 3:
        p = 6 / math.pi * (math.asin(math.sqrt(w)) - math.asin(math.sqrt(0.75)))
        return max(p, 0.0)
    if n <= 11:
        mean, sd = _poly(_C3, n), math.exp(_poly(_C4, n))
        z = (-math.log(_poly(_GAMMA, n) - math.log1p(-w)) - mean) / sd
    else:
        log_n = math.log(n)
        mean, sd = _poly(_C5, log_n), math.exp(_poly(_C6, log_n))
        z = (math.log1p(-w) - mean) / sd
    return float(special.ndtr(-z))


def shapiro_wilk(values: npt.ArrayLike) -> tuple[float, float]:
    """(W, p) for 3 ≤ n ≤ 5000 values with some spread; NaN, NaN otherwise."""
    x = np.sort(np.asarray(values, dtype=np.float64).reshape(-1))
    n = x.size
    centred = x - x.mean() if n else x
    spread = float(np.sum(centred * centred))
    if not 3 <= n <= 5000 or not spread > 0 or not np.all(np.isfinite(x)):
        return math.nan, math.nan
    w = min(float(np.dot(_coefficients(n), x)) ** 2 / spread, 1.0)
    if w >= 1.0:
        return 1.0, 1.0
    return w, _p_value(w, n)
