"""Tests for the filter line parser (foldsift.tui.filtering), on a small hand-made frame.

Every word kind in the module docstring is applied to five rows whose expected matches are
worked out by hand in each test, so a test fails if a word selects one row too many or too few.
"""

from __future__ import annotations

import polars as pl
import pytest

from foldsift.stats.diagnostics import WARNINGS
from foldsift.tui.filtering import FilterError, parse_filter

ALL = ["k0", "k1", "k2", "k3", "k4"]


@pytest.fixture(scope="module")
def frame() -> pl.DataFrame:
    return pl.DataFrame(
        {
            "key": ALL,
            "outcome": [
                "copper_mg_per_kg",
                "lead_mg_per_kg",
                "zinc_mg_per_kg",
                "nitrate_mg_per_kg",
                "boron_mg_per_kg",
            ],
            "grouping": ["field", "field", "season", "season", "field"],
            "level_a": ["ashgrove", "ashgrove", "autumn", "autumn", "brook_end"],
            "level_b": ["north_meadow", "willow_carr", "spring", "spring", "long_acre"],
            "q_bh": [0.001, 0.04, 0.5, 0.05, None],
            "p_value": [0.0001, 0.01, 0.3, 0.05, None],
            "p_holm": [0.003, 0.2, 1.0, 0.6, None],
            "ratio": [2.5, 1.1, 0.95, 0.4, None],
            "percent_change": [150.0, 10.0, -5.0, -60.0, None],
            "n_a": [24, 8, 48, 10, 1],
            "n_b": [24, 30, 48, 12, 20],
            "ci_fold": [1.5, 2.0, 1.2, 3.0, None],
            "warnings": [[], ["small-n", "log-skew"], [], ["log-skew"], ["too-few"]],
            "stratum": [None, None, None, None, None],
            "flagged": [True, False, False, True, False],
            "decision": ["keep", "doubt", None, "drop", None],
            "note": ["check the lab sheet", "", "", "odd", ""],
            "on_earlier_data": [False, True, False, False, False],
            "band_class": ["different", "inconclusive", "equivalent", "minor-difference", None],
        },
        schema_overrides={"stratum": pl.String},
    )


def keys(frame: pl.DataFrame, text: str) -> list[str]:
    expression = parse_filter(text)
    assert expression is not None, f"{text!r} gave no expression"
    return frame.filter(expression)["key"].to_list()


@pytest.mark.parametrize("text", ["", "   ", "\t"])
def test_empty_line_means_no_filter(text: str) -> None:
    assert parse_filter(text) is None


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("copper", ["k0"]),  # outcome name
        ("COPPER", ["k0"]),  # case-insensitive
        ("season", ["k2", "k3"]),  # grouping name
        ("ashgrove", ["k0", "k1"]),  # level a
        ("Meadow", ["k0"]),  # part of level b
        ("_mg_", ALL),  # literal text, not a pattern
        ("cobalt", []),
    ],
)
def test_plain_words_search_names(frame: pl.DataFrame, text: str, expected: list[str]) -> None:
    assert keys(frame, text) == expected


def test_plain_word_is_literal_not_regex(frame: pl.DataFrame) -> None:
    # "." and "*" would match everything as a regular expression.
    assert keys(frame, ".*") == []


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("q<0.05", ["k0", "k1"]),  # 0.05 itself is not below 0.05; a missing q never matches
        ("q<=0.05", ["k0", "k1", "k3"]),
        ("q<5e-2", ["k0", "k1"]),
        ("q<.05", ["k0", "k1"]),
        ("Q<0.05", ["k0", "k1"]),
        ("p<=0.01", ["k0", "k1"]),
        ("holm<0.05", ["k0"]),
        ("ratio>2", ["k0"]),
        ("ratio<0.5", ["k3"]),
        ("ratio=2.5", ["k0"]),
        ("ratio>=0.95", ["k0", "k1", "k2"]),
        ("change>=10", ["k0", "k1"]),
        ("change<-10", ["k3"]),
        ("ciwidth>2", ["k3"]),  # the CI's upper/lower ratio
        # n is the smaller group: k1 has 8/30, k4 has 1/20
        ("n>=10", ["k0", "k2", "k3"]),
        ("n<10", ["k1", "k4"]),
    ],
)
def test_numeric_conditions(frame: pl.DataFrame, text: str, expected: list[str]) -> None:
    assert keys(frame, text) == expected


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("outside:0.8,1.25", ["k0", "k3"]),
        ("inside:0.8,1.25", ["k1", "k2"]),  # a missing ratio is neither inside nor outside
        ("outside:0.9,1.2", ["k0", "k3"]),
        ("inside:0.96,1.2", ["k1"]),
    ],
)
def test_band_words(frame: pl.DataFrame, text: str, expected: list[str]) -> None:
    assert keys(frame, text) == expected


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("warned", ["k1", "k3", "k4"]),
        ("clean", ["k0", "k2"]),
        ("warn:log-skew", ["k1", "k3"]),
        ("warn:small-n", ["k1"]),
        ("warn:too-few", ["k4"]),
        ("warn:no-spread", []),
    ],
)
def test_warning_words(frame: pl.DataFrame, text: str, expected: list[str]) -> None:
    assert keys(frame, text) == expected


def test_warn_matches_whole_names_only(frame: pl.DataFrame) -> None:
    # "log-skew" must not match as a substring of another name, nor "skew" of "log-skew".
    assert "skew" not in WARNINGS
    with pytest.raises(FilterError):
        parse_filter("warn:skew")


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("flagged", ["k0", "k3"]),
        ("unflagged", ["k1", "k2", "k4"]),
        ("undecided", ["k2", "k4"]),
        ("keep", ["k0"]),
        ("doubt", ["k1"]),
        ("drop", ["k3"]),
        ("noted", ["k0", "k3"]),
        ("earlier", ["k1"]),
        ("Flagged", ["k0", "k3"]),
    ],
)
def test_review_words(frame: pl.DataFrame, text: str, expected: list[str]) -> None:
    assert keys(frame, text) == expected


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("class:equivalent", ["k2"]),
        ("class:different", ["k0"]),
        ("class:minor-difference", ["k3"]),
        ("class:inconclusive", ["k1"]),
    ],
)
def test_class_words(frame: pl.DataFrame, text: str, expected: list[str]) -> None:
    assert keys(frame, text) == expected


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("field q<0.05", ["k0", "k1"]),
        ("copper q<0.05", ["k0"]),
        ("flagged warned", ["k3"]),
        ("season ratio<1 noted", ["k3"]),
        ("  copper   flagged  ", ["k0"]),
    ],
)
def test_all_words_must_hold(frame: pl.DataFrame, text: str, expected: list[str]) -> None:
    assert keys(frame, text) == expected


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("-warned", ["k0", "k2"]),
        ("-warn:small-n", ["k0", "k2", "k3", "k4"]),
        ("-copper", ["k1", "k2", "k3", "k4"]),
        ("-flagged ratio>1", ["k1"]),
        ("-keep -drop", ["k1", "k2", "k4"]),
        ("-class:equivalent season", ["k3"]),
        ("-outside:0.8,1.25", ["k1", "k2", "k4"]),
        # the negation of a condition includes rows where the value is missing
        ("-q<0.05", ["k2", "k3", "k4"]),
    ],
)
def test_leading_minus_negates(frame: pl.DataFrame, text: str, expected: list[str]) -> None:
    assert keys(frame, text) == expected


def test_minus_before_a_digit_is_not_negation(frame: pl.DataFrame) -> None:
    # "-5" is text to search for, so it matches nothing here rather than everything.
    assert keys(frame, "-5") == []


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("x<1", "unknown field 'x'"),
        ("size>=3", "use one of q, p, holm, ratio"),
        ("q<1e", "'1e' is not a number"),
        ("q<1.2.3", "is not a number"),
        ("q<", "write conditions like q<0.05"),
        ("ratio>>2", "write conditions like q<0.05"),
        ("<0.05", "write conditions like q<0.05"),
        ("outside:0.8", "write the band as LOW,HIGH"),
        ("inside:a,b", "write the band as LOW,HIGH"),
        ("outside:1.25,0.8", "0 < LOW < HIGH"),
        ("outside:0,1.25", "0 < LOW < HIGH"),
        ("class:maybe", "classes are different, minor-difference, equivalent, inconclusive"),
        ("warn:log_skew", "warnings are"),
        ("-x<1", "unknown field 'x'"),
    ],
)
def test_bad_words_raise_clear_errors(text: str, fragment: str) -> None:
    with pytest.raises(FilterError) as caught:
        parse_filter(f"copper {text}")
    message = str(caught.value)
    assert fragment in message
    # The message names the word at fault (without its minus sign).
    assert repr(text.removeprefix("-")) in message


def test_filter_error_is_a_value_error() -> None:
    with pytest.raises(ValueError):
        parse_filter("q<")
