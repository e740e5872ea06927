"""Peto–Prentice generalized Wilcoxon test of two groups of left-censored values.

Data. Each entry is a detected value, or a detection limit L with the true value somewhere
below it (``censored`` True), the way laboratory results "<L" are reported.

Method. Left-censored values become right-censored ones by the flip x -> M - x (M above every
value): large values come first and "<L" becomes "survived past M - L". The test is then the
weighted log-rank test of the flipped samples with Peto–Prentice weights (Peto & Peto, JRSS A
135, 1972; Prentice, Biometrika 65, 1978; the weighted log-rank form as in Klein &
Moeschberger, Survival Analysis, 2nd ed., 2003, sec. 7.3; its use for nondetects as in Helsel,
Statistics for Censored Environmental Data Using Minitab and R, 2nd ed., 2012; all from
memory). The flip is never computed: going down the distinct values of the pooled sample,
largest first, gives the flipped time order exactly, without the rounding of M - x.

At the j-th distinct value t_j (largest first) let d_j be the detected entries equal to t_j
and n_j the entries at risk, i.e. all entries (values or limits) at or below t_j; d_bj and
n_bj the same counts in group b. A limit equal to a detected value is at risk there: "<L" lies
below L, which after the flip is the survival convention that an entry censored at t is at
risk at t. The weight is the modified (Peto) Kaplan–Meier estimate of the pooled sample up to
and including t_j,

    w_j = prod over i <= j of (1 - d_i / (n_i + 1)),

and

    U = sum_j w_j (d_bj - n_bj d_j / n_j),
    V = sum_j w_j^2 n_aj n_bj d_j (n_j - d_j) / (n_j^2 (n_j - 1))   (hypergeometric, with ties;
                                                                      terms with n_j = 1 are 0),
    z = U / sqrt(V),   p = 2 (1 - Phi(|z|)),   chi-square = z^2 on 1 df.

This is the convention of ``lifelines.statistics.logrank_test(..., weightings="peto")``
(the weight includes the current level: S~(t_j), not S~(t_j-)), which the tests reproduce to
rounding.

Sign: z > 0 when group b tends to be HIGHER than group a on the original scale (after the flip
b's entries then fail early, more often than expected). The test uses ranks only, so any
increasing transform of the values (their logs, a change of unit) gives the same result.

z and p are NaN when a group is empty, when no entry is detected, or when V = 0 (no distinct
level has a detection while both groups are at risk with some entry remaining). Cost: one sort
of the pooled sample and cumulative sums, O(N log N) with no Python loop.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
import numpy.typing as npt

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]
BoolArray = npt.NDArray[np.bool_]


class PetoPrentice(NamedTuple):
    """Result of ``peto_prentice``: z (> 0 when group b tends to be higher), its two-sided
    p-value and the group sizes (all entries, detected or not)."""

    z: float
    p_value: float
    n_a: int
    n_b: int

    @property
    def chi_square(self) -> float:
        """z squared, the statistic on 1 df."""
        return self.z * self.z


def _group(
    values: npt.ArrayLike, censored: npt.ArrayLike, name: str
) -> tuple[FloatArray, BoolArray]:
    x = np.asarray(values, dtype=np.float64).reshape(-1)
    below = np.asarray(censored, dtype=bool).reshape(-1)
    if x.shape != below.shape:
        raise ValueError(f"values_{name} and censored_{name} must have the same length")
    if x.size and not (np.all(np.isfinite(x)) and np.all(x > 0)):
        raise ValueError(f"values_{name} must be positive and finite")
    return x, below


def _cumulative(flags: BoolArray) -> IntArray:
    """Counts of True before each position, and the total at the end (length n + 1)."""
    out = np.zeros(flags.size + 1, dtype=np.int64)
    np.cumsum(flags, out=out[1:])
    return out


class _Levels(NamedTuple):
    """Counts at the distinct values that have a detection, largest value first."""

    d: FloatArray  # detected entries equal to the value
    d_b: FloatArray  # of them in group b
    n: FloatArray  # entries at risk: values or limits at or below the value
    n_b: FloatArray  # of them in group b


def _levels(x: FloatArray, detected: BoolArray, n_a: int) -> _Levels:
    """Per-level counts by one sort of the pooled sample (group a first, then group b)."""
    in_b = np.zeros(x.size, dtype=bool)
    in_b[n_a:] = True
    order = np.argsort(-x)  # largest first: the flipped time order (ties in any order)
    xs = x[order]
    detected_s = detected[order]
    in_b_s = in_b[order]

    new_level = np.empty(xs.size, dtype=bool)
    new_level[0] = True
    np.not_equal(xs[1:], xs[:-1], out=new_level[1:])
    start = np.flatnonzero(new_level)
    end = np.append(start[1:], xs.size)

    events = _cumulative(detected_s)
    events_b = _cumulative(detected_s & in_b_s)
    members_b = _cumulative(in_b_s)
    d = events[end] - events[start]
    keep = d > 0
    first, last = start[keep], end[keep]
    return _Levels(
        d=d[keep].astype(np.float64),
        d_b=(events_b[last] - events_b[first]).astype(np.float64),
        n=(x.size - first).astype(np.float64),  # everything from this level down
        n_b=(members_b[-1] - members_b[first]).astype(np.float64),
    )


def peto_prentice(
    values_a: npt.ArrayLike,
    censored_a: npt.ArrayLike,
    values_b: npt.ArrayLike,
    censored_b: npt.ArrayLike,
) -> PetoPrentice:
    """Peto–Prentice test of group b against group a; ``censored`` marks entries whose value is
    a detection limit with the true value below it. See the module docstring."""
    xa, ca = _group(values_a, censored_a, "a")
    xb, cb = _group(values_b, censored_b, "b")
    n_a, n_b = int(xa.size), int(xb.size)
    nan = PetoPrentice(math.nan, math.nan, n_a, n_b)
    if n_a == 0 or n_b == 0:
        return nan
    lv = _levels(np.concatenate([xa, xb]), ~np.concatenate([ca, cb]), n_a)
    if lv.d.size == 0:  # nothing detected
        return nan
    d, n = lv.d, lv.n
    w = np.cumprod(1.0 - d / (n + 1.0))
    u = float(np.sum(w * (lv.d_b - lv.n_b * d / n)))
    several = n > 1.0
    spread = np.where(several, (n - d) / np.where(several, n - 1.0, 1.0), 0.0)
    v = float(np.sum(w * w * (n - lv.n_b) * lv.n_b * d * spread / (n * n)))
    if not v > 0.0:
        return nan
    z = u / math.sqrt(v)
    return PetoPrentice(z, math.erfc(abs(z) / math.sqrt(2.0)), n_a, n_b)
