"""Peto–Prentice test of left-censored groups (stats/peto.py).

Sources, named beside each check:

* lifelines (test-only): ``lifelines.statistics.logrank_test(M - a, M - b,
  event_observed_A=~censored_a, event_observed_B=~censored_b, weightings="peto")``, the
  weighted log-rank test with Peto weights on the flipped (right-censored) data. Its
  ``test_statistic`` is the chi-square on 1 df (= z^2) and ``p_value`` the chi-square tail.
* scipy: ``stats.norm.sf`` for the two-sided normal p-value; ``stats.mannwhitneyu`` for the
  direction of a difference without censoring.
* Prentice (Biometrika 65, 1978) and Peto & Peto (JRSS A 135, 1972), from memory: without
  censoring or ties the Peto–Prentice scores are linear in the ranks, (2 r - N - 1) / (N + 1)
  for rank r of N, so U is 2 / (N + 1) times the centred Wilcoxon rank sum of group b and z
  has the sign of the Mann–Whitney statistic minus n_a n_b / 2; the test uses ranks only.
* Helsel, Statistics for Censored Environmental Data (2012), from memory: left-censored
  values are compared by flipping x -> M - x, and "<L" counts as at risk at a detected L.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pytest
from scipy import stats as sps

from foldsift.stats.peto import PetoPrentice, peto_prentice

RTOL = 1e-10


def _lifelines(
    a: np.ndarray,
    ca: np.ndarray,
    b: np.ndarray,
    cb: np.ndarray,
    flip: float | None = None,
) -> Any:
    """lifelines' Peto-weighted log-rank test on the flipped values (M - x)."""
    statistics = pytest.importorskip("lifelines.statistics")
    m = 2.0 * float(max(a.max(), b.max())) + 1.0 if flip is None else flip
    return statistics.logrank_test(
        m - a,
        m - b,
        event_observed_A=~ca,
        event_observed_B=~cb,
        weightings="peto",
    )


def _left_censored(
    rng: np.random.Generator,
    n: int,
    shift: float,
    limits: tuple[float, ...],
    decimals: int | None,
) -> tuple[np.ndarray, np.ndarray]:
    """Lognormal values, rounded (ties) if asked; each entry gets one of ``limits`` at random
    and is reported as that limit, censored, when it falls below it."""
    x = rng.lognormal(shift, 1.0, n)
    if decimals is not None:
        x = np.maximum(np.round(x, decimals), 10.0**-decimals)
    limit = rng.choice(np.asarray(limits), n)
    below = x < limit
    return np.where(below, limit, x), below


def _check_against_lifelines(
    a: np.ndarray, ca: np.ndarray, b: np.ndarray, cb: np.ndarray
) -> PetoPrentice:
    mine = peto_prentice(a, ca, b, cb)
    ref = _lifelines(a, ca, b, cb)
    # lifelines logrank_test(weightings="peto"): chi-square on 1 df and its p-value.
    assert mine.chi_square == pytest.approx(ref.test_statistic, rel=RTOL)
    assert mine.p_value == pytest.approx(ref.p_value, rel=RTOL)
    # scipy.stats.norm.sf: p is the two-sided normal tail of z.
    assert mine.p_value == pytest.approx(2.0 * sps.norm.sf(abs(mine.z)), rel=1e-12)
    assert (mine.n_a, mine.n_b) == (a.size, b.size)
    return mine


# (n_a, n_b, shift of b, limits of a, limits of b, decimals): ties come from rounding, and on
# rounded data some limits coincide with detected values (asserted in the test).
CASES = [
    (30, 30, 0.0, (0.5, 1.0), (0.5, 1.0), 1),
    (40, 25, 0.4, (0.5, 1.0, 1.5), (0.5, 1.0, 2.0), 1),
    (8, 50, -0.3, (1.0,), (0.3, 0.7), 1),
    (200, 15, 0.2, (0.2, 0.5), (1.0, 2.0), 2),
    (120, 90, 0.1, (0.3, 0.6, 1.2), (0.3, 0.6, 1.2), None),
    (60, 60, 0.0, (1.0, 2.0), (2.0,), 0),  # rounding to integers: heavy ties
]


@pytest.mark.parametrize("seed", [1, 2, 3])
@pytest.mark.parametrize("case", CASES)
def test_matches_lifelines_on_left_censored_data(case, seed):
    """Random left-censored groups with several limits, ties and unequal sizes: z^2 and p as
    lifelines' Peto-weighted log-rank test on the flipped data, to 1e-10 (lifelines)."""
    n_a, n_b, shift, limits_a, limits_b, decimals = case
    rng = np.random.default_rng(seed)
    a, ca = _left_censored(rng, n_a, 0.0, limits_a, decimals)
    b, cb = _left_censored(rng, n_b, shift, limits_b, decimals)
    assert ca.any() or cb.any()
    if decimals is not None:  # rounded data: some limit equals a detected value
        pooled, below = np.r_[a, b], np.r_[ca, cb]
        assert np.isin(pooled[below], pooled[~below]).any()
    _check_against_lifelines(a, ca, b, cb)


@pytest.mark.parametrize("seed", [4, 5, 6])
def test_heavy_censoring_matches_lifelines(seed):
    """About 60% of the entries below their limits (limits at the 50%, 60% and 70% quantiles of
    the standard lognormal), data rounded so that limits meet detected values (lifelines)."""
    rng = np.random.default_rng(seed)
    limits = tuple(float(np.round(np.exp(sps.norm.ppf(q)), 1)) for q in (0.5, 0.6, 0.7))
    a, ca = _left_censored(rng, 70, 0.0, limits, 1)
    b, cb = _left_censored(rng, 45, 0.3, limits, 1)
    share = (ca.sum() + cb.sum()) / (a.size + b.size)
    assert 0.45 < share < 0.75
    mine = _check_against_lifelines(a, ca, b, cb)
    assert math.isfinite(mine.z)


def test_limit_equal_to_detected_value_counts_as_at_risk():
    """Entries "<1" next to detected 1s: the censored entries are at risk at the detected 1
    (flipped: censored at t is at risk at t). lifelines gives the same statistic with that
    convention and a different one if the censored entries left the risk set just before the
    detected ones (lifelines; convention from Helsel 2012, from memory)."""
    a = np.array([1.0, 1.0, 1.0, 2.0, 3.0, 0.5, 4.0, 1.0])
    ca = np.array([False, True, True, False, False, True, False, False])
    b = np.array([1.0, 1.0, 2.0, 5.0, 6.0, 1.0, 0.5])
    cb = np.array([False, True, False, False, False, False, True])
    mine = _check_against_lifelines(a, ca, b, cb)
    # lifelines with each flipped limit moved just before its flipped value (so not at risk at
    # a detected value equal to the limit): a different statistic, so the convention matters.
    m = 10.0
    fa = np.where(ca, m - a - 1e-6, m - a)
    fb = np.where(cb, m - b - 1e-6, m - b)
    statistics = pytest.importorskip("lifelines.statistics")
    other = statistics.logrank_test(
        fa, fb, event_observed_A=~ca, event_observed_B=~cb, weightings="peto"
    )
    assert abs(other.test_statistic - mine.chi_square) > 1e-6


@pytest.mark.parametrize("seed", [7, 8])
def test_no_censoring_matches_lifelines(seed):
    """Nothing censored, with and without ties (lifelines, all events observed)."""
    rng = np.random.default_rng(seed)
    a = rng.lognormal(0.0, 1.0, 35)
    b = rng.lognormal(0.5, 1.0, 28)
    none_a, none_b = np.zeros(a.size, bool), np.zeros(b.size, bool)
    _check_against_lifelines(a, none_a, b, none_b)
    _check_against_lifelines(np.round(a, 1) + 0.1, none_a, np.round(b, 1) + 0.1, none_b)


@pytest.mark.parametrize("seed", range(10, 20))
def test_no_censoring_sign_follows_rank_sum(seed):
    """Without censoring or ties, U is 2 / (N + 1) times the centred rank sum of group b
    (Prentice 1978 scores, from memory), so z has the sign of the Mann–Whitney statistic of b
    against a minus n_a n_b / 2 (scipy.stats.mannwhitneyu)."""
    rng = np.random.default_rng(seed)
    a = rng.lognormal(0.0, 1.0, 20)
    b = rng.lognormal(0.2, 1.0, 23)
    mine = peto_prentice(a, np.zeros(a.size, bool), b, np.zeros(b.size, bool))
    centred = sps.mannwhitneyu(b, a).statistic - a.size * b.size / 2.0
    assert centred != 0.0
    assert np.sign(mine.z) == np.sign(centred)


def test_group_b_higher_gives_positive_z_and_swap_flips_sign():
    """b three times a (in distribution), with censoring: z > 0 and small p; swapping the
    groups negates z and keeps p (the statistic is antisymmetric in the groups, Peto & Peto
    1972, from memory; lifelines' chi-square is the same either way)."""
    rng = np.random.default_rng(21)
    a, ca = _left_censored(rng, 50, 0.0, (0.5, 1.0), 1)
    b, cb = _left_censored(rng, 50, math.log(3.0), (0.5, 1.0), 1)
    forward = _check_against_lifelines(a, ca, b, cb)
    backward = _check_against_lifelines(b, cb, a, ca)
    assert forward.z > 0.0
    assert forward.p_value < 0.01
    assert backward.z == pytest.approx(-forward.z, rel=1e-12)
    assert backward.p_value == pytest.approx(forward.p_value, rel=1e-12)
    assert (backward.n_a, backward.n_b) == (b.size, a.size)


@pytest.mark.parametrize("flip", [None, 10.0, 1e3, 1e6])
def test_result_does_not_depend_on_the_flip_constant(flip):
    """lifelines on M - x for several M gives the same statistic as the result here, which
    never forms M - x (lifelines)."""
    rng = np.random.default_rng(31)
    a, ca = _left_censored(rng, 40, 0.0, (0.5, 1.0), 1)
    b, cb = _left_censored(rng, 30, 0.3, (0.5, 1.0), 1)
    mine = peto_prentice(a, ca, b, cb)
    ref = _lifelines(a, ca, b, cb, flip=flip)
    assert mine.chi_square == pytest.approx(ref.test_statistic, rel=RTOL)
    assert mine.p_value == pytest.approx(ref.p_value, rel=RTOL)


@pytest.mark.parametrize("transform", [np.log, np.sqrt, lambda x: 1000.0 * x])
def test_invariant_to_increasing_transforms(transform):
    """The test uses ranks only (Peto & Peto 1972, from memory): logs, square roots and a
    change of unit of values and limits give the same z and p; lifelines on the transformed
    values agrees as well (lifelines)."""
    rng = np.random.default_rng(41)
    a, ca = _left_censored(rng, 45, 0.0, (2.0, 3.0), 1)
    b, cb = _left_censored(rng, 38, 0.4, (2.0, 3.0), 1)
    a, b = a + 1.0, b + 1.0  # above 1, so that the logs stay positive
    plain = peto_prentice(a, ca, b, cb)
    ta, tb = transform(a), transform(b)
    changed = _check_against_lifelines(ta, ca, tb, cb)
    assert changed.z == pytest.approx(plain.z, rel=1e-12)
    assert changed.p_value == pytest.approx(plain.p_value, rel=1e-12)


def _nan(result: PetoPrentice) -> bool:
    return math.isnan(result.z) and math.isnan(result.p_value)


def test_empty_groups_give_nan():
    """No values in a group: nothing to compare (by definition of a two-sample test)."""
    some = np.array([1.0, 2.0, 3.0])
    flags = np.zeros(3, bool)
    empty = np.array([], dtype=float)
    no_flags = np.array([], dtype=bool)
    assert _nan(peto_prentice(empty, no_flags, some, flags))
    assert _nan(peto_prentice(some, flags, empty, no_flags))
    assert _nan(peto_prentice(empty, no_flags, empty, no_flags))
    assert peto_prentice(empty, no_flags, some, flags)[2:] == (0, 3)


def test_all_censored_gives_nan():
    """No detected value anywhere: no events, so lifelines' weighted statistic is 0 with no
    information (lifelines); here NaN instead of a p-value of 1."""
    a, b = np.array([1.0, 2.0, 1.0]), np.array([0.5, 2.0])
    ca, cb = np.ones(3, bool), np.ones(2, bool)
    assert _nan(peto_prentice(a, ca, b, cb))
    assert _lifelines(a, ca, b, cb).test_statistic == 0.0


def test_zero_variance_gives_nan():
    """Every detection happens where one group has no entry at risk (a detected below all of
    b's limits) or where every entry at risk is detected (all values equal): the variance is
    0, lifelines' statistic 0 (lifelines); here NaN."""
    a, ca = np.array([1.0, 2.0]), np.zeros(2, bool)
    b, cb = np.array([5.0, 6.0]), np.ones(2, bool)
    assert _nan(peto_prentice(a, ca, b, cb))
    assert _lifelines(a, ca, b, cb).test_statistic == 0.0
    same = np.full(4, 2.5)
    assert _nan(peto_prentice(same, np.zeros(4, bool), same[:3], np.zeros(3, bool)))
    assert _lifelines(same, np.zeros(4, bool), same[:3], np.zeros(3, bool)).test_statistic == 0.0


def test_one_value_each_matches_lifelines():
    """The smallest defined case: one detected value per group (lifelines)."""
    mine = _check_against_lifelines(
        np.array([1.0]), np.array([False]), np.array([2.0]), np.array([False])
    )
    assert mine.z > 0.0


def test_bad_input_raises():
    """Mismatched lengths and non-positive or non-finite values are input errors (the values
    are positive measurements by the module's contract)."""
    with pytest.raises(ValueError):
        peto_prentice([1.0, 2.0], [False], [1.0], [False])
    with pytest.raises(ValueError):
        peto_prentice([1.0, 0.0], [False, False], [1.0], [False])
    with pytest.raises(ValueError):
        peto_prentice([1.0], [False], [np.nan], [False])


def test_two_groups_of_30000():
    """2 x 30,000 values with ties and two limits run and agree with lifelines (lifelines)."""
    rng = np.random.default_rng(51)
    a, ca = _left_censored(rng, 30_000, 0.0, (0.5, 0.8), 2)
    b, cb = _left_censored(rng, 30_000, 0.02, (0.5, 0.8), 2)
    mine = _check_against_lifelines(a, ca, b, cb)
    assert math.isfinite(mine.z)
