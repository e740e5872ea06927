"""The filter words added or changed with the number display: ``fold`` (the ratio either
way), ``ciwidth`` (the CI's upper/lower ratio), and the errors that replace silent empty
lists (unknown ``name:`` words, malformed or out-of-range numbers, plain words no name
contains). Expected rows are computed here with numpy from the frame's own columns, not
by the parser. FILTER_WORDS (the help's text) is checked to list every word and to hold
only words that parse.
"""

from __future__ import annotations

import re

import numpy as np
import polars as pl
import pytest

from foldsift.stats.diagnostics import WARNINGS
from foldsift.tui import filtering
from foldsift.tui.filtering import (
    FILTER_WORDS,
    METHOD_WORDS,
    NUMERIC_FIELDS,
    PREFIXES,
    FilterError,
    parse_filter,
    searchable_names,
)

RATIOS = [2.5, 2.0, 1.1, 1.0, 0.95, 0.5, 0.4, 0.1, None]
CI_FOLDS = [1.5, 2.0, 3.0, 1.2, 2.99, 3.01, 8.0, 40.0, None]


@pytest.fixture(scope="module")
def frame() -> pl.DataFrame:
    count = len(RATIOS)
    return pl.DataFrame(
        {
            "key": [f"k{i}" for i in range(count)],
            "outcome": [f"metal{i}_mg_per_kg" for i in range(count)],
            "outcome_label": [f"metal{i} (mg/kg)" for i in range(count)],
            "grouping": ["field"] * 5 + ["time"] * 4,
            "stratum": [None] * count,
            "level_a": ["ashgrove"] * 5 + ["time:am"] * 4,
            "level_b": ["north_meadow"] * 5 + ["time:pm"] * 4,
            "ratio": RATIOS,
            "ci_fold": CI_FOLDS,
            "q_bh": [0.01] * count,
            "p_value": [0.01] * count,
            "p_holm": [0.02] * count,
            "percent_change": [None if r is None else 100 * (r - 1) for r in RATIOS],
            "n_a": [10] * count,
            "n_b": [12] * count,
            "censored_share_a": [0.0] * count,
            "censored_share_b": [0.2] * count,
            "n_censored_a": [0] * count,
            "n_censored_b": [2] * count,
            "method": ["censored ML"] * count,
            "warnings": [["log-skew"]] + [[]] * (count - 1),
            "flagged": [False] * count,
            "decision": [None] * count,
            "note": [""] * count,
            "on_earlier_data": [False] * count,
            "band_class": ["different"] * count,
        },
        schema_overrides={"stratum": pl.String, "decision": pl.String},
    )


def keys(frame: pl.DataFrame, text: str, **options: object) -> list[str]:
    expression = parse_filter(text, frame.columns, **options)  # type: ignore[arg-type]
    assert expression is not None
    return frame.filter(expression)["key"].to_list()


def expected(frame: pl.DataFrame, mask: np.ndarray) -> list[str]:
    return [key for key, keep in zip(frame["key"], mask, strict=True) if keep]


OPERATORS = {
    "<": np.less,
    "<=": np.less_equal,
    ">": np.greater,
    ">=": np.greater_equal,
    "=": np.equal,
}


@pytest.mark.parametrize("operator", list(OPERATORS))
@pytest.mark.parametrize("value", [1.0, 1.05, 1.5, 2.0, 2.5, 10.0])
def test_fold_is_the_ratio_either_way(frame: pl.DataFrame, operator: str, value: float) -> None:
    """fold = max(ratio, 1/ratio): fold>=2 keeps ratios >= 2 and <= 0.5; a missing ratio
    never matches."""
    ratio = np.array([np.nan if r is None else r for r in RATIOS])
    with np.errstate(invalid="ignore"):
        fold = np.maximum(ratio, 1 / ratio)
        mask = OPERATORS[operator](fold, value) & ~np.isnan(ratio)
    assert keys(frame, f"fold{operator}{value:g}") == expected(frame, mask)


def test_fold_at_least_two_by_hand(frame: pl.DataFrame) -> None:
    # ratios 2.5, 2.0 (up) and 0.5, 0.4, 0.1 (down); 1.1, 1.0 and 0.95 are within 2-fold
    assert keys(frame, "fold>=2") == ["k0", "k1", "k5", "k6", "k7"]
    assert keys(frame, "fold<1.5") == ["k2", "k3", "k4"]
    assert keys(frame, "-fold>=2") == ["k2", "k3", "k4", "k8"]


@pytest.mark.parametrize("operator", list(OPERATORS))
@pytest.mark.parametrize("value", [1.5, 2.0, 3.0, 10.0])
def test_ciwidth_is_the_ci_upper_over_lower(
    frame: pl.DataFrame, operator: str, value: float
) -> None:
    width = np.array([np.nan if w is None else w for w in CI_FOLDS])
    with np.errstate(invalid="ignore"):
        mask = OPERATORS[operator](width, value) & ~np.isnan(width)
    assert keys(frame, f"ciwidth{operator}{value:g}") == expected(frame, mask)


@pytest.mark.parametrize(
    ("word", "fragment"),
    [
        ("foo:bar", "unknown word 'foo:'"),
        ("warning:log-skew", "unknown word 'warning:'"),
        ("fold>=2x", "write conditions like"),
        ("fold>=", "write conditions like"),
        ("ciwidth<<3", "write conditions like"),
        ("ratio>abc", "write conditions like"),
        ("q<1..5", "is not a number"),
        ("fold>1e", "is not a number"),
        ("q<5", "a q-value is between 0 and 1"),
        ("p>-0.1", "a p-value is between 0 and 1"),
        ("fold>0.5", "a fold is 1 or more"),
        ("ciwidth<0.9", "upper/lower ratio is 1 or more"),
        ("below>150", "below is a percentage"),
        ("ratio<-1", "a ratio is above 0"),
        ("width<3", "unknown field 'width'"),
    ],
)
def test_words_that_cannot_be_read_are_errors(
    frame: pl.DataFrame, word: str, fragment: str
) -> None:
    names = searchable_names(frame)
    for call in ({}, {"names": names}):
        with pytest.raises(FilterError) as caught:
            parse_filter(f"metal1 {word}", frame.columns, **call)  # type: ignore[arg-type]
        assert fragment in str(caught.value)
        assert repr(word) in str(caught.value), "the message names the word"


@pytest.mark.parametrize("word", ["xyz", "-xyz", "coppper", "5.5"])
def test_a_plain_word_no_name_contains_is_an_error(frame: pl.DataFrame, word: str) -> None:
    with pytest.raises(FilterError, match="no outcome, grouping or level name contains"):
        parse_filter(f"field {word}", frame.columns, searchable_names(frame))
    # the old call, without the names, still reads it as a search that matches nothing
    assert keys(frame, word.lstrip("-")) == []


@pytest.mark.parametrize(
    ("text", "wanted"),
    [
        ("metal3", ["k3"]),  # outcome
        ("MG/KG", [f"k{i}" for i in range(9)]),  # the readable outcome name
        ("meadow", ["k0", "k1", "k2", "k3", "k4"]),  # level, part of a name
        ("time:pm", ["k5", "k6", "k7", "k8"]),  # a name with a colon is a name, not a word
        ("-time:am fold>=2", ["k0", "k1"]),
    ],
)
def test_words_a_name_contains_search_as_before(
    frame: pl.DataFrame, text: str, wanted: list[str]
) -> None:
    assert keys(frame, text, names=searchable_names(frame)) == wanted


def test_searchable_names_are_the_names_lower_cased(frame: pl.DataFrame) -> None:
    names = searchable_names(frame)
    assert "metal0_mg_per_kg" in names and "metal0 (mg/kg)" in names
    assert {"field", "time", "ashgrove", "north_meadow", "time:am"} <= names
    assert all(name == name.lower() for name in names)


# -- the help's list of words ---------------------------------------------------------------


def test_filter_words_lists_every_word() -> None:
    for word in (*NUMERIC_FIELDS, *PREFIXES, "censored", "warned", "earlier"):
        assert re.search(rf"`-?{re.escape(word)}[:<>=`]", FILTER_WORDS), word
    for word in METHOD_WORDS:
        assert f"`method:{word}`" in FILTER_WORDS, word
    assert "`fold<3` (the CI" not in FILTER_WORDS, "fold no longer means the CI's width"


def test_every_example_in_filter_words_parses(frame: pl.DataFrame) -> None:
    """Each word written in backticks in the help is read by the parser (operators and
    the bare minus sign aside) and filters the frame without error."""
    examples = re.findall(r"`([^`]+)`", FILTER_WORDS)
    words = [w for w in examples if w not in ("<", "<=", ">", ">=", "=", "-")]
    assert len(words) > 30
    for word in words:
        expression = parse_filter(word, frame.columns)
        assert expression is not None, word
        frame.filter(expression)


def test_warning_names_and_methods_match_their_vocabularies() -> None:
    """Words the help gives as examples of warn: are warning names the scan uses."""
    for name in re.findall(r"`warn:([a-z-]+)`", FILTER_WORDS):
        assert name in WARNINGS
    assert set(filtering.FIELD_RANGES) == set(NUMERIC_FIELDS)
