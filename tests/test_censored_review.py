"""Below-detection entries as the reviewer sees them: the filter words for the method and the
censored share, the detail's censored rows (share, limits, Kaplan–Meier median or "< limit",
the DL/2 answer, the reason a group was not fitted), the Peto–Prentice cross-check in the
session, and the chart's limit marks.

Data: simulated lognormal values with a fixed seed (no demo data); the statistics themselves
are checked against lifelines and scipy in test_censored.py, test_censored_scan.py and
test_peto_prentice.py. Here the reference for the Kaplan–Meier median is lifelines'
KaplanMeierFitter on the flipped values (an independent implementation).
"""

from __future__ import annotations

import numpy as np
import polars as pl
import pytest
from lifelines import KaplanMeierFitter
from lifelines.statistics import logrank_test

from foldsift.stats.load import load_table
from foldsift.stats.policy import ValuePolicy
from foldsift.stats.scan import ScanSettings, run_scan
from foldsift.tui.filtering import FilterError, parse_filter
from foldsift.tui.session import ReviewSession, SessionOptions
from foldsift.tui.widgets.facts import facts_text
from foldsift.tui.widgets.histograms import STYLE_A, STYLE_B, Group, draw_groups

SEED = 20261202


def _cells(values: np.ndarray, limits: np.ndarray) -> list[str]:
    return [f"<{lim:g}" if v < lim else f"{v:.4f}" for v, lim in zip(values, limits, strict=True)]


def _table_csv(tmp_path, n: int = 30) -> object:
    """Three sites; ``zinc`` plain, ``lead`` censored (site c mostly below its limit)."""
    rng = np.random.default_rng(SEED)
    sites = np.repeat(["a", "b", "c"], n)
    zinc = np.exp(rng.normal(3.0, 0.5, 3 * n))
    lead = np.exp(rng.normal(np.repeat([1.0, 1.6, 0.2], n), 0.7))
    limits = np.repeat([1.5, 1.5, 2.5], n)
    frame = pl.DataFrame({"site": sites, "zinc": np.round(zinc, 4), "lead": _cells(lead, limits)})
    path = tmp_path / "lab.csv"
    frame.write_csv(path)
    return path


@pytest.fixture
def result(tmp_path):
    return run_scan(load_table(_table_csv(tmp_path)))


def _shown(frame: pl.DataFrame, words: str) -> pl.DataFrame:
    expression = parse_filter(words, frame.columns)
    return frame if expression is None else frame.filter(expression)


def test_method_words_pick_the_rows_of_each_method(result):
    """`method:ml` keeps exactly the censored-ML rows, `method:logs` the rest; `censored`
    keeps rows with any below-detection entry; `below>N` compares the larger share."""
    frame = result.comparisons
    ml = _shown(frame, "method:ml")
    logs = _shown(frame, "method:logs")
    assert ml.height + logs.height == frame.height
    assert set(ml["outcome"]) == {"lead"} and set(logs["outcome"]) == {"zinc"}
    assert _shown(frame, "censored").height == ml.height
    share = frame.select(
        pl.max_horizontal("censored_share_a", "censored_share_b").alias("s"), "key"
    )
    over = set(share.filter(pl.col("s") > 0.5)["key"])
    assert over and set(_shown(frame, "below>50")["key"]) == over
    assert _shown(frame, "-censored").height == logs.height


@pytest.mark.parametrize("word", ["method:mle", "method:", "below>x"])
def test_unknown_method_or_malformed_share_is_an_error(result, word):
    with pytest.raises(FilterError):
        parse_filter(word, result.comparisons.columns)


def test_substitution_policies_have_their_method_words(tmp_path):
    table = load_table(_table_csv(tmp_path))
    for policy, word in (("half-dl", "dl2"), ("dl-root2", "dl-root2"), ("exclude", "left-out")):
        frame = run_scan(table, ScanSettings(policy=ValuePolicy(censored=policy))).comparisons
        assert (
            _shown(frame, f"method:{word}").height
            == frame.filter(pl.col("outcome") == "lead").height
        )


def _flipped_km_median(values: np.ndarray, below: np.ndarray) -> float:
    """lifelines' Kaplan-Meier median of left-censored values, flipped (M - x). lifelines
    takes the first time the curve is at most one half; where it is exactly one half over an
    interval, R's survival package (and foldsift) takes the midpoint to the next event time,
    so that is done here from lifelines' own curve."""
    top = values.max() + 1
    fitter = KaplanMeierFitter().fit(top - values, event_observed=~below)
    median = float(fitter.median_survival_time_)
    curve = fitter.survival_function_.iloc[:, 0]
    if abs(float(curve.loc[median]) - 0.5) < 1e-12:
        events = np.sort(top - values[~below])
        later = events[events > median]
        if later.size:
            median = (median + float(later[0])) / 2
    return float(top - median)


def test_detail_shows_share_limits_km_median_and_the_dl2_answer(result):
    row = result.comparisons.filter(
        (pl.col("outcome") == "lead") & (pl.col("level_a") == "a") & (pl.col("level_b") == "b")
    ).row(0, named=True)
    reviewed = {**row, "flagged": False, "decision": None, "note": "", "on_earlier_data": False}
    text = facts_text(reviewed, (0.8, 1.25), None, width=100).plain
    assert "censored ML" in text and "with DL/2 instead" in text
    assert "detection limits  1.5" in text
    assert "median (K-M)" in text
    # The K-M median of group a against lifelines' (an independent implementation).
    values, below, _ = result.entries.entries(("site", None, None, "a", "lead"))
    assert row["median_a"] == pytest.approx(_flipped_km_median(values, below), rel=1e-12)


def test_detail_says_less_than_the_limit_and_why_a_group_is_not_fitted(tmp_path):
    """Site c is mostly below its limit: its K-M median is "< limit"; a site with a single
    detected value gets no fit, its reason in the detail, and no ratio."""
    rng = np.random.default_rng(SEED + 1)
    values = np.exp(rng.normal(0.0, 0.5, 40))
    cells = [f"{v:.3f}" for v in values[:20]]
    cells += [f"<{2.0:g}"] * 14 + [f"{v:.3f}" for v in 2.5 + values[34:40]]  # 70% below
    cells += [f"<{2.0:g}"] * 19 + ["3.1"]  # one detected value
    frame = pl.DataFrame({"site": ["a"] * 20 + ["c"] * 20 + ["d"] * 20, "lead": cells})
    path = tmp_path / "heavy.csv"
    frame.write_csv(path)
    comparisons = run_scan(load_table(path)).comparisons
    c_row = comparisons.filter(pl.col("level_b") == "c").row(0, named=True)
    assert c_row["median_b"] is None and c_row["median_at_most_b"] == pytest.approx(2.0)
    reviewed = {**c_row, "flagged": False, "decision": None, "note": "", "on_earlier_data": False}
    assert "< 2" in facts_text(reviewed, (0.8, 1.25), None, width=100).plain
    d_row = comparisons.filter(pl.col("level_b") == "d").row(0, named=True)
    assert d_row["ratio"] is None and "not-fitted" in d_row["warnings"]
    reviewed = {**d_row, "flagged": False, "decision": None, "note": "", "on_earlier_data": False}
    text = facts_text(reviewed, (0.8, 1.25), None, width=100).plain
    assert "no fit for b" in text and "fewer than 2 detected values" in text
    assert "cannot be compared" in text


def test_session_cross_check_adds_peto_prentice_for_censored_rows(tmp_path):
    """The session's cross-check gives the Peto-Prentice p of lifelines' weighted log-rank
    test (weightings="peto") on the flipped values for a censored row, and none for a
    plain one."""
    path = _table_csv(tmp_path)
    session = ReviewSession.open(SessionOptions(path, reviews_path=tmp_path / "r.sqlite"))
    try:
        view = session.view()
        censored = view.filter((pl.col("outcome") == "lead") & (pl.col("level_b") == "b"))
        plain = view.filter(pl.col("outcome") == "zinc").head(1)
        session.cross_check(censored.head(1))
        session.cross_check(plain)
        check = session.checks[censored["key"][0]]
        row = censored.row(0, named=True)
        group = ("site", None, None)
        a = session.result.entries.entries((*group, row["level_a"], "lead"))
        b = session.result.entries.entries((*group, row["level_b"], "lead"))
        top = max(a[0].max(), b[0].max()) + 1
        reference = logrank_test(top - a[0], top - b[0], ~a[1], ~b[1], weightings="peto").p_value
        assert check.peto_prentice_p == pytest.approx(reference, rel=1e-9)
        assert np.isnan(session.checks[plain["key"][0]].peto_prentice_p)
    finally:
        session.close()


def test_chart_marks_the_detection_limits():
    """The limits widen the axis to include them and are marked in their group's strip."""
    rng = np.random.default_rng(SEED)
    a, b = np.exp(rng.normal(1, 0.3, 50)), np.exp(rng.normal(1.2, 0.3, 50))
    group_a = Group("a", a, STYLE_A)
    plain = draw_groups(group_a, Group("b", b, STYLE_B), width=80, height=10).text.plain
    limited = Group("b", b, STYLE_B, limits=np.array([0.2]))
    marked = draw_groups(group_a, limited, width=80, height=10).text.plain
    assert marked != plain
    assert "0.2" in marked  # the axis now reaches down to the limit
