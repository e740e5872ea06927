"""Reviews stay on what they judged: each review carries a stamp of its own comparison's
inputs, so changing one value marks only the reviews of comparisons that value enters.

Data: simulated lognormal values with a fixed seed written to a CSV (nothing from the demo).
The rule checked is the project's own design (a review judges one comparison); the facts it
rests on are plain: a value of group x enters exactly the comparisons that have x as one of
their two groups (common practice).
"""

from __future__ import annotations

import numpy as np
import polars as pl
import pytest

from foldsift.stats.scan import ScanSettings
from foldsift.tui.session import ReviewSession, SessionOptions, comparison_stamps
from foldsift.tui.store import ReviewStore, stamp_identity, stamp_snapshot
from foldsift.tui.widgets.facts import facts_text

SEED = 20261202


def _write(path, frame: pl.DataFrame) -> None:
    frame.write_csv(path)


def _survey(rows: int = 60) -> pl.DataFrame:
    rng = np.random.default_rng(SEED)
    sites = np.array(["north", "south", "east"])[np.arange(rows) % 3]
    return pl.DataFrame(
        {
            "site": sites,
            "sodium": np.round(np.exp(rng.normal(3, 0.5, rows)), 3),
            "cadmium": np.round(np.exp(rng.normal(1, 0.7, rows)), 3),
        }
    )


def _open(data, reviews) -> ReviewSession:
    return ReviewSession.open(SessionOptions(data, reviews_path=reviews))


def _key(session: ReviewSession, outcome: str, a: str, b: str) -> str:
    frame = session.view()
    row = frame.filter(
        (pl.col("outcome") == outcome) & (pl.col("level_a") == a) & (pl.col("level_b") == b)
    )
    return str(row["key"][0])


def test_changing_one_value_marks_only_the_comparisons_it_enters(tmp_path):
    data, reviews = tmp_path / "survey.csv", tmp_path / "r.sqlite"
    survey = _survey()
    _write(data, survey)
    session = _open(data, reviews)
    keys = {
        (outcome, a, b): _key(session, outcome, a, b)
        for outcome in ("sodium", "cadmium")
        for a, b in (("east", "north"), ("east", "south"), ("north", "south"))
    }
    for key in keys.values():
        session.toggle_flag(key)
    session.close()
    # One sodium value of a south sample changes: the file's fingerprint changes for all.
    index = int(np.flatnonzero(survey["site"].to_numpy() == "south")[0])
    changed = survey.with_columns(
        pl.when(pl.int_range(pl.len()) == index)
        .then(pl.col("sodium") * 10)
        .otherwise(pl.col("sodium"))
        .alias("sodium")
    )
    _write(data, changed)
    session = _open(data, reviews)
    try:
        earlier = dict(session.view().select("key", "on_earlier_data").iter_rows())
        for (outcome, a, b), key in keys.items():
            enters = outcome == "sodium" and "south" in (a, b)
            assert earlier[key] is enters, (outcome, a, b)
        # The detail says what changed: the ratio before and after.
        key = keys[("sodium", "north", "south")]
        row = session.view().filter(pl.col("key") == key).row(0, named=True)
        text = facts_text(row, (0.8, 1.25), None, width=120).plain
        assert "review made on earlier data: ratio" in text
        then = stamp_snapshot(row["review_fingerprint"])
        assert then is not None and then[2] != row["ratio"]
    finally:
        session.close()


def test_a_change_of_a_setting_that_moves_the_numbers_marks_the_review(tmp_path):
    """A different confidence level changes every CI: the stamps differ; the adjustment
    family does not change a comparison's own numbers: the stamps are equal."""
    data = tmp_path / "survey.csv"
    _write(data, _survey())
    session = _open(data, tmp_path / "r.sqlite")
    try:
        comparisons = session.result.comparisons
        base = comparison_stamps(comparisons, ScanSettings())
        family = comparison_stamps(comparisons, ScanSettings(family="outcome"))
        level = comparison_stamps(comparisons, ScanSettings(confidence=0.9))
    finally:
        session.close()
    assert base == family
    assert all(stamp_identity(base[k]) != stamp_identity(level[k]) for k in base)


def test_reviews_stamped_with_the_file_fingerprint_stay_current_on_the_same_file(tmp_path):
    """Reviews written before comparisons had stamps carry the data file's fingerprint: they
    count as current while that same file is loaded, as they did before."""
    data, reviews = tmp_path / "survey.csv", tmp_path / "r.sqlite"
    _write(data, _survey())
    session = _open(data, reviews)
    fingerprint = session.result.source.fingerprint
    key = str(session.view()["key"][0])
    session.close()
    with ReviewStore(reviews, fingerprint) as store:  # no stamps: the file's fingerprint
        store.set_flag(key, True)
    session = _open(data, reviews)
    try:
        row = session.view().filter(pl.col("key") == key).row(0, named=True)
        assert row["flagged"] and row["on_earlier_data"] is False
        assert stamp_snapshot(row["review_fingerprint"]) is None
    finally:
        session.close()


@pytest.mark.parametrize("stamp", ["c1:abc|3|4|", "c1:abc|x|4|2.0", "plain-sha"])
def test_snapshots_read_back_or_are_none(stamp):
    snapshot = stamp_snapshot(stamp)
    if stamp == "c1:abc|3|4|":
        assert snapshot == (3, 4, None)
    else:
        assert snapshot is None
