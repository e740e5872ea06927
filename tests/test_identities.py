"""Algebraic identities of the ratio of geometric means, on random lognormal data.

These follow from the definitions (ratio = exp(mean log b - mean log a), CI = exp of the
t-interval of that difference; NIST/SEMATECH e-Handbook 1.3.5.3 for the t-interval) by
elementary algebra of logarithms; there is no separate outside source for them. The data are
random (hypothesis/numpy). The log-base check computes the log10 answer by hand with numpy
and scipy's t quantile, independently of the package.
"""

from __future__ import annotations

import math

import numpy as np
import polars as pl
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats as sps

from foldsift.stats.load import load_table
from foldsift.stats.scan import Reference, ScanSettings, run_scan

RTOL = 1e-9

group = st.tuples(
    st.integers(0, 2**32 - 1), st.integers(2, 30), st.floats(-3, 3), st.floats(0.05, 2.0)
)
tests = st.sampled_from(["welch", "pooled"])


def draw(spec) -> np.ndarray:
    seed, n, mu, sigma = spec
    return np.random.default_rng(seed).lognormal(mu, sigma, size=n)


def scan(a: np.ndarray, b: np.ndarray, test: str, **options) -> dict:
    """One comparison of level 'a' (denominator by default) with level 'b'."""
    frame = pl.DataFrame({"grp": ["a"] * a.size + ["b"] * b.size, "y": np.concatenate([a, b])})
    table = load_table(frame=frame, groupings=["grp"], outcomes=["y"])
    comparisons = run_scan(table, ScanSettings(test=test, **options)).comparisons
    assert comparisons.height == 1
    return comparisons.row(0, named=True)


def close(x: float, y: float, abs_tol: float = 0.0) -> bool:
    return math.isclose(x, y, rel_tol=RTOL, abs_tol=abs_tol)


@settings(max_examples=30, deadline=None)
@given(a=group, b=group, test=tests)
def test_swapping_groups_inverts_ratio_and_ci(a, b, test):
    """Identity: exchanging A and B negates the log difference, so the ratio becomes its
    reciprocal and the CI (low, high) becomes (1/high, 1/low); p is unchanged."""
    x, y = draw(a), draw(b)
    forward = scan(x, y, test)
    backward = scan(x, y, test, pairs="reference", reference=(Reference.of("b"),))
    assert (backward["level_a"], backward["level_b"]) == ("b", "a")
    assert close(backward["ratio"], 1 / forward["ratio"])
    assert close(backward["ci_low"], 1 / forward["ci_high"])
    assert close(backward["ci_high"], 1 / forward["ci_low"])
    assert close(backward["p_value"], forward["p_value"], abs_tol=1e-12)


@settings(max_examples=30, deadline=None)
@given(a=group, b=group, test=tests, exponent=st.floats(-6, 6))
def test_common_scale_leaves_every_ratio_unchanged(a, b, test, exponent):
    """Identity: multiplying every value by c adds log c to both groups' mean logs, so the
    ratio, the CI, t and p do not change (a change of units cannot change the answer)."""
    x, y = draw(a), draw(b)
    c = 10.0**exponent
    plain = scan(x, y, test)
    scaled = scan(c * x, c * y, test)
    for name in ("ratio", "ci_low", "ci_high"):
        assert close(scaled[name], plain[name]), name
    assert close(scaled["df"], plain["df"])
    assert close(scaled["p_value"], plain["p_value"], abs_tol=1e-12)


@settings(max_examples=30, deadline=None)
@given(a=group, b=group, test=tests, exponent=st.floats(-3, 3))
def test_scaling_group_b_scales_ratio_and_bounds(a, b, test, exponent):
    """Identity: multiplying group B by k adds log k to mean log B only, so the ratio and
    both CI bounds are multiplied by k, and the CI's width on the log scale is unchanged."""
    x, y = draw(a), draw(b)
    k = 10.0**exponent
    plain = scan(x, y, test)
    shifted = scan(x, k * y, test)
    for name in ("ratio", "ci_low", "ci_high"):
        assert close(shifted[name], k * plain[name]), name
    assert close(shifted["ci_fold"], plain["ci_fold"])
    assert close(shifted["se_log"], plain["se_log"])


@settings(max_examples=30, deadline=None)
@given(a=group, b=group, test=tests, confidence=st.sampled_from([0.9, 0.95, 0.99]))
def test_log_base_does_not_matter(a, b, test, confidence):
    """Identity: log10 x = ln x / ln 10 rescales every log by one constant, which cancels in
    t and df; back-transforming with 10**(.) gives the same ratio and CI. The log10 answer is
    computed here by hand (numpy, scipy.stats.t.ppf; t-interval formulas of NIST e-Handbook
    1.3.5.3)."""
    x, y = draw(a), draw(b)
    la, lb = np.log10(x), np.log10(y)
    va, vb = la.var(ddof=1), lb.var(ddof=1)
    na, nb = la.size, lb.size
    if test == "welch":
        se = math.sqrt(va / na + vb / nb)
        df = (va / na + vb / nb) ** 2 / ((va / na) ** 2 / (na - 1) + (vb / nb) ** 2 / (nb - 1))
    else:
        df = na + nb - 2
        se = math.sqrt(((na - 1) * va + (nb - 1) * vb) / df * (1 / na + 1 / nb))
    difference = lb.mean() - la.mean()
    half = sps.t.ppf(0.5 + confidence / 2, df) * se
    row = scan(x, y, test, confidence=confidence)
    assert close(row["ratio"], 10**difference)
    assert close(row["ci_low"], 10 ** (difference - half))
    assert close(row["ci_high"], 10 ** (difference + half))
    assert close(row["t"], difference / se)
    assert close(row["df"], df)
    assert close(row["log2_ratio"], difference / math.log10(2))
