"""Holm and Benjamini–Hochberg adjustment against a published example and statsmodels.

Sources, named beside each check:

* Benjamini Y, Hochberg Y (1995), JRSS-B 57:289-300: the 15 p-values of their worked
  example; at q = 0.05 BH rejects 4 and Bonferroni rejects 3 (published). Holm rejects 3
  there as well ("computed" with an independent library, not published).
* Holm S (1979), Scand. J. Statist. 6:65-70: Holm's procedure rejects every hypothesis
  Bonferroni rejects (its adjusted p-values never exceed m * p).
* statsmodels.stats.multitest.multipletests('holm' / 'fdr_bh') as an independent reference
  implementation, on random p-vectors drawn by hypothesis.
"""

from __future__ import annotations

import gc
import math
from unittest import mock

import numpy as np
import polars as pl
from hypothesis import given, settings
from hypothesis import strategies as st
from statsmodels.stats.multitest import multipletests as _multipletests

from foldsift.stats.load import load_table
from foldsift.stats.multiplicity import adjust
from foldsift.stats.scan import ScanSettings, run_scan


def multipletests(p: np.ndarray, method: str):
    """statsmodels' multipletests. Its Holm branch ends with gc.collect(), memory housekeeping
    that does not touch the result but costs ~50 ms a call; it is skipped to keep the suite
    fast."""
    with mock.patch.object(gc, "collect", lambda *args: 0):
        return _multipletests(p, method=method)


#: Benjamini & Hochberg (1995), the 15 p-values of the worked example (published).
BH_1995 = np.array(
    [0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459, 0.3240,
     0.4262, 0.5719, 0.6528, 0.7590, 1.000]
)  # fmt: skip


def test_bh_1995_example_rejections():
    """Benjamini & Hochberg 1995: at q = 0.05 BH rejects 4 of the 15 (published); Holm
    rejects 3 (computed, independent library)."""
    holm, bh = adjust(BH_1995)
    assert int((bh <= 0.05).sum()) == 4
    assert set(np.flatnonzero(bh <= 0.05)) == {0, 1, 2, 3}  # the four smallest p-values
    assert int((holm <= 0.05).sum()) == 3
    assert set(np.flatnonzero(holm <= 0.05)) == {0, 1, 2}


def test_bh_1995_example_holm_is_at_least_bonferroni():
    """Benjamini & Hochberg 1995: Bonferroni (threshold 0.05/15) rejects 3 (published; this
    also checks the p-values were copied right). Holm 1979: Holm's adjusted p never
    exceeds the Bonferroni-adjusted min(1, m p), so it rejects at least those."""
    assert int((0.05 / BH_1995.size >= BH_1995).sum()) == 3
    holm, _ = adjust(BH_1995)
    assert np.all(holm <= np.minimum(1.0, BH_1995.size * BH_1995) + 1e-15)


def test_bh_1995_example_order_does_not_matter():
    """Benjamini & Hochberg 1995 example, shuffled (adjustment depends on ranks, not input
    order): each p-value keeps its statsmodels-adjusted value."""
    order = np.random.default_rng(1995).permutation(BH_1995.size)
    holm, bh = adjust(BH_1995[order])
    np.testing.assert_allclose(holm, multipletests(BH_1995[order], method="holm")[1], rtol=1e-12)
    np.testing.assert_allclose(bh, multipletests(BH_1995[order], method="fdr_bh")[1], rtol=1e-12)


p_value = st.one_of(
    st.floats(0, 1),
    st.sampled_from([0.0, 0.01, 0.05, 0.2, 1.0]),  # ties and the ends of the range
    st.just(math.nan),  # a comparison that could not be computed
)


@settings(max_examples=200, deadline=None)
@given(
    p=st.lists(p_value, min_size=1, max_size=60),
    seed=st.integers(0, 2**32 - 1),
    n_families=st.integers(1, 4),
)
def test_adjust_agrees_with_statsmodels(p, seed, n_families):
    """statsmodels multipletests('holm') and ('fdr_bh') as independent reference, each
    family adjusted alone; NaN p-values belong to no family and stay NaN."""
    p = np.array(p, dtype=float)
    family = np.random.default_rng(seed).integers(0, n_families, size=p.size)
    holm, bh = adjust(p, family if n_families > 1 else None)
    missing = np.isnan(p)
    assert np.all(np.isnan(holm[missing])) and np.all(np.isnan(bh[missing]))
    for code in np.unique(family):
        members = (family == code) & ~missing
        if not members.any():
            continue
        expected_holm = multipletests(p[members], method="holm")[1]
        expected_bh = multipletests(p[members], method="fdr_bh")[1]
        np.testing.assert_allclose(holm[members], expected_holm, rtol=1e-12, atol=1e-300)
        np.testing.assert_allclose(bh[members], expected_bh, rtol=1e-12, atol=1e-300)


def lognormal_frame(seed: int) -> pl.DataFrame:
    """Random lognormal data: 2 groupings (3 and 2 levels), 3 outcomes, a few shifts."""
    rng = np.random.default_rng(seed)
    n = 60
    site = rng.choice(["s1", "s2", "s3"], size=n)
    arm = rng.choice(["control", "treated"], size=n)
    columns = {"site": site, "arm": arm}
    for index in range(3):
        shift = rng.normal(0, 0.4) * (arm == "treated") + rng.normal(0, 0.4) * (site == "s2")
        columns[f"y{index}"] = np.exp(rng.normal(1.0 + shift, rng.uniform(0.2, 1.0), size=n))
    return pl.DataFrame(columns)


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), family=st.sampled_from(["scan", "outcome", "grouping"]))
def test_scan_families_agree_with_statsmodels(seed, family):
    """statsmodels multipletests as reference for the scan's p_holm and q_bh: with
    --family outcome (or grouping) each outcome's (grouping's) p-values form one family;
    with scan, the whole scan is one family."""
    table = load_table(frame=lognormal_frame(seed), groupings=["site", "arm"])
    comparisons = run_scan(table, ScanSettings(family=family)).comparisons
    assert comparisons.height == 3 * (3 + 1)
    groups = [comparisons] if family == "scan" else comparisons.partition_by(family)
    assert len(groups) == {"scan": 1, "outcome": 3, "grouping": 2}[family]
    for part in groups:
        p = part["p_value"].to_numpy()
        np.testing.assert_allclose(
            part["p_holm"].to_numpy(), multipletests(p, method="holm")[1], rtol=1e-12
        )
        np.testing.assert_allclose(
            part["q_bh"].to_numpy(), multipletests(p, method="fdr_bh")[1], rtol=1e-12
        )
