"""How ratios, intervals and percent changes read (foldsift.stats.formatting), how outcome
names show their units, and the plain sentence per comparison (foldsift.stats.sentence).

The display rule is the project's own (stated in stats/formatting.py): decimals from 0.01
to 100, a fold beyond (``÷5.3k`` compact, ``5,300× lower`` in words), percent changes from
-90% to +900% only. The checks read each written number back and compare it with the value
it stands for, over 1e-9 .. 1e9, so a rule that writes the wrong digits fails whatever the
examples say. Where the sentence states statistics, they are compared with numpy / scipy
computed on the same simulated values (fixed seeds), not with the scan's own output alone.
"""

from __future__ import annotations

import math
import re
from pathlib import Path
from typing import Any, cast

import numpy as np
import polars as pl
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy import stats as sps

from foldsift.stats import formatting as fmt
from foldsift.stats.columns import ComparisonRow, comparison_row
from foldsift.stats.diagnostics import SYMMETRY_WARNINGS
from foldsift.stats.load import load_table
from foldsift.stats.scan import run_scan
from foldsift.stats.sentence import CAVEAT_ORDER, MEDIAN_MIN_N, caveat, finding, says_median
from foldsift.stats.units import normalise_unit

SEED = 20261203
SCALES = {"k": 1e3, "M": 1e6, "bn": 1e9, "tn": 1e12}
WORD_SCALES = {"million": 1e6, "billion": 1e9, "trillion": 1e12}


# -- reading a written number back -----------------------------------------------------------


def read_compact(text: str) -> float:
    """The ratio a compact text stands for: ``1.90`` -> 1.9, ``÷5.3k`` -> 1/5300,
    ``×12k`` -> 12000."""
    match = re.fullmatch(r"([×÷]?)([0-9.,]+)(k|M|bn|tn)?", text)
    assert match, f"not a compact ratio: {text!r}"
    sign, digits, scale = match.groups()
    value = float(digits.replace(",", "")) * SCALES.get(scale or "", 1.0)
    return 1 / value if sign == "÷" else value


def read_words(text: str) -> float:
    """The ratio a text in words stands for: ``0.24`` -> 0.24, ``5,300× lower`` -> 1/5300,
    ``1.2 million× higher`` -> 1.2e6."""
    match = re.fullmatch(r"([0-9.,]+)(?: (million|billion|trillion))?(× (?:higher|lower))?", text)
    assert match, f"not a ratio in words: {text!r}"
    digits, scale, direction = match.groups()
    value = float(digits.replace(",", "")) * WORD_SCALES.get(scale or "", 1.0)
    return 1 / value if direction == "× lower" else value


def allowed_error(ratio: float) -> float:
    """The relative rounding error the rule allows: two significant digits for a fold
    (half a unit in the second digit: at most 1/20), the decimals elsewhere."""
    if not fmt.PLAIN_LOW <= ratio < fmt.PLAIN_HIGH:
        return 0.051
    step = 0.001 if ratio < 0.0995 else 0.01 if ratio < 9.995 else 0.1
    return 0.5 * step / ratio + 1e-12


MAGNITUDES = [10.0**k * m for k in range(-9, 10) for m in (1.0, 1.9, 3.3, 7.77)]


@pytest.mark.parametrize("ratio", MAGNITUDES, ids=lambda r: f"{r:.3g}")
def test_every_magnitude_reads_back_within_its_rounding(ratio: float) -> None:
    compact, words = fmt.ratio_text(ratio), fmt.ratio_words(ratio)
    for text, read in ((compact, read_compact), (words, read_words)):
        assert "e" not in text.replace("lower", "").replace("higher", ""), text
        assert math.isclose(read(text), ratio, rel_tol=allowed_error(ratio)), (ratio, text)
    # the list's ratio column is 7 cells wide, its CI column 12
    assert len(compact) <= 7, compact
    if 1e-9 <= ratio < 1e9:  # folds up to a billion
        assert len(fmt.interval_text(ratio, ratio * 1.3)) <= 12, fmt.interval_text(
            ratio, ratio * 1.3
        )


@given(st.floats(min_value=-25.0, max_value=25.0, allow_nan=False))
def test_any_ratio_reads_back(log_ratio: float) -> None:
    """Property over e^-25 .. e^25: both forms read back within the rule's rounding, say
    the direction right, and the fold appears exactly outside the decimal range."""
    ratio = math.exp(log_ratio)
    compact, words = fmt.ratio_text(ratio), fmt.ratio_words(ratio)
    assert math.isclose(read_compact(compact), ratio, rel_tol=allowed_error(ratio))
    assert math.isclose(read_words(words), ratio, rel_tol=allowed_error(ratio))
    folded = not fmt.PLAIN_LOW <= ratio < fmt.PLAIN_HIGH
    assert (compact[0] in "×÷") == folded
    assert ("lower" in words) == (folded and ratio < 1)
    assert ("higher" in words) == (folded and ratio > 1)


@pytest.mark.parametrize(
    ("ratio", "compact", "words"),
    [
        (1.9e-4, "÷5.3k", "5,300× lower"),
        (1234.0, "×1.2k", "1,200× higher"),
        (0.24, "0.24", "0.24"),
        (1.9, "1.90", "1.90"),
        (12.5, "12.5", "12.5"),
        (96.0, "96.0", "96.0"),
        (1.0, "1.00", "1.00"),
        (0.999, "1.00", "1.00"),
        (0.0123, "0.012", "0.012"),
        (0.005, "÷200", "200× lower"),
        (2.0e4, "×20k", "20,000× higher"),
        (1.0e-9, "÷1.0bn", "1.0 billion× lower"),
        (1.0e9, "×1.0bn", "1.0 billion× higher"),
        (3.0e6, "×3.0M", "3.0 million× higher"),
    ],
)
def test_worked_examples(ratio: float, compact: str, words: str) -> None:
    """The examples of the rule as the module docstring states it."""
    assert fmt.ratio_text(ratio) == compact
    assert fmt.ratio_words(ratio) == words


@pytest.mark.parametrize("value", [None, math.nan, math.inf, -math.inf, -2.0, 0.0, -1e-9])
def test_what_is_not_a_ratio_reads_as_the_placeholder(value: float | None) -> None:
    assert fmt.ratio_text(value) == fmt.MISSING
    assert fmt.ratio_words(value) == fmt.MISSING
    assert fmt.interval_text(value, 2.0) == f"{fmt.MISSING}–2.00"
    assert fmt.interval_words(0.5, value) == f"0.50 to {fmt.MISSING}"


def in_range(ratio: float) -> bool:
    return fmt.PLAIN_LOW <= ratio < fmt.PLAIN_HIGH


@given(
    st.floats(min_value=-22.0, max_value=22.0, allow_nan=False),
    st.floats(min_value=0.0, max_value=6.0, allow_nan=False),
)
def test_intervals_use_the_same_rule_as_the_ratio(log_low: float, width: float) -> None:
    """Both bounds as the ratio column writes them; when one bound is beyond the decimal
    range, both are folds (each reading back to its bound within two digits)."""
    low, high = math.exp(log_low), math.exp(log_low + width)
    compact = fmt.interval_text(low, high).split("–")
    words = fmt.interval_words(low, high).split(" to ")
    assert fmt.interval_text(low, high, " to ").split(" to ") == compact
    if in_range(low) and in_range(high):
        assert compact == [fmt.ratio_text(low), fmt.ratio_text(high)]
        assert words == [fmt.ratio_words(low), fmt.ratio_words(high)]
        return
    for bound, short, long in zip((low, high), compact, words, strict=True):
        assert short[0] in "×÷" and long.endswith(("× lower", "× higher"))
        assert math.isclose(read_compact(short), bound, rel_tol=0.051), (bound, short)
        assert math.isclose(read_words(long), bound, rel_tol=0.051), (bound, long)
        if not in_range(bound):
            assert short == fmt.ratio_text(bound) and long == fmt.ratio_words(bound)


def test_an_interval_of_folds_reads_as_folds() -> None:
    assert fmt.interval_words(1 / 5300, 1 / 21) == "5,300× lower to 21× lower"
    assert fmt.interval_text(1 / 5300, 1 / 21) == "÷5.3k–÷21"
    assert fmt.interval_text(1 / 150, 1.3, " to ") == "÷150 to ×1.3"
    assert fmt.interval_words(0.5, 2.0) == "0.50 to 2.00"


# -- percent change ------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("percent", "expected"),
    [
        (-90.0, "-90%"),
        (900.0, "+900%"),
        (-48.0, "-48%"),
        (23.4, "+23%"),
        (-0.2, "-0.2%"),
        (0.01, "0%"),
        (-90.5, "÷11"),  # ratio 0.095: 10.5-fold lower
        (900.5, "×10"),
        (-99.981, "÷5.3k"),
        (123_300.0, "×1.2k"),
    ],
)
def test_percent_change_only_where_it_reads(percent: float, expected: str) -> None:
    assert fmt.percent_text(percent) == expected


@given(st.floats(min_value=-30.0, max_value=30.0, allow_nan=False))
def test_percent_change_or_the_fold(log_ratio: float) -> None:
    """Inside -90% .. +900% a signed percentage that reads back to 100(r - 1); outside, the
    fold, which for ratios outside the decimal range is the ratio column's own text."""
    ratio = math.exp(log_ratio)
    percent = 100 * (ratio - 1)
    text = fmt.percent_text(percent, ratio)
    if -90 <= percent <= 900:
        assert text.endswith("%") and "e" not in text
        assert abs(float(text.rstrip("%")) - percent) <= 0.5 + 1e-9
    else:
        assert text[0] in "×÷" and not text.endswith("%")
        assert math.isclose(read_compact(text), ratio, rel_tol=0.051)
        if not fmt.PLAIN_LOW <= ratio < fmt.PLAIN_HIGH:
            assert text == fmt.ratio_text(ratio)


@pytest.mark.parametrize("value", [None, math.nan, math.inf, -150.0])
def test_percent_placeholder(value: float | None) -> None:
    assert fmt.percent_text(value) == fmt.MISSING


def test_percent_of_an_underflowed_ratio_is_a_fold_not_minus_100() -> None:
    # 100 * (1e-20 - 1) is exactly -100.0 in floating point.
    assert 100 * (1e-20 - 1) == -100.0
    assert fmt.percent_text(-100.0) == "÷>999tn"
    assert fmt.percent_text(-100.0, 1e-20) == "÷>999tn"


# -- units in outcome names ------------------------------------------------------------------


@pytest.mark.parametrize(
    ("name", "shown"),
    [
        ("chloride_g_per_l", "chloride (g/L)"),
        ("chloride_g_per_L", "chloride (g/L)"),
        ("copper_mg_per_kg", "copper (mg/kg)"),
        ("molybdenum_ug_per_kg", "molybdenum (µg/kg)"),
        ("electrical_conductivity_us_per_cm", "electrical conductivity (µS/cm)"),
        ("coliforms_cfu_per_100ml", "coliforms (CFU/100 mL)"),
        ("Lead_MG_PER_L", "Lead (mg/L)"),
        ("lead (mg/l)", "lead (mg/L)"),
        ("lead [ug/L]", "lead (µg/L)"),
        ("arsenic (mg/kg)", "arsenic (mg/kg)"),
        ("clay_pct", "clay (%)"),
        ("score (1-5)", "score (1-5)"),  # not a unit: left as written
        ("mg_per_kg", "mg per kg"),  # a unit and nothing else: not an outcome name to split
        ("flow_m3_per_s", "flow m3 per s"),  # seconds are not read (s is siemens)
    ],
)
def test_units_in_names_read_one_way(name: str, shown: str) -> None:
    assert fmt.readable_outcome(name) == shown


@pytest.mark.parametrize(
    ("name", "written"),
    [("chloride_g_per_l", "g/L"), ("x_ug_per_kg", "ug/kg"), ("ec_us_per_cm", "uS/cm")],
)
def test_name_units_match_the_long_tables_spelling(name: str, written: str) -> None:
    """An outcome's unit from its column name reads as the unit column of a long table
    spells the same unit, so wide and long data show one spelling."""
    assert fmt.unit_from_name(name) == normalise_unit(written)


# -- the sentence ----------------------------------------------------------------------------


def scan_rows(tmp_path: Path, groups: dict[str, np.ndarray]) -> list[ComparisonRow]:
    """Comparisons of one outcome ``zinc_mg_per_kg`` between the given groups (site ``a`` is
    the reference of each pair)."""
    frame = pl.DataFrame(
        {
            "site": np.concatenate([[name] * len(v) for name, v in groups.items()]),
            "zinc_mg_per_kg": np.concatenate(list(groups.values())),
        }
    )
    path = tmp_path / "zinc.csv"
    frame.write_csv(path)
    result = run_scan(load_table(path))
    return [comparison_row(result.comparisons, i) for i in range(result.comparisons.height)]


def only_row(tmp_path: Path, a: np.ndarray, b: np.ndarray) -> ComparisonRow:
    (row,) = scan_rows(tmp_path, {"a": a, "b": b})
    assert (row["level_a"], row["level_b"]) == ("a", "b")
    return row


def gm_ratio(a: np.ndarray, b: np.ndarray) -> float:
    """Ratio of geometric means, by scipy."""
    return float(sps.gmean(b) / sps.gmean(a))


def welch_ci(a: np.ndarray, b: np.ndarray) -> tuple[float, float]:
    """95% CI of the GM ratio: scipy's Welch t-test on the logs, exponentiated (NIST/SEMATECH
    e-Handbook 1.3.5.3 for the test)."""
    ci = sps.ttest_ind(np.log(b), np.log(a), equal_var=False).confidence_interval(0.95)
    return math.exp(ci.low), math.exp(ci.high)


def test_sentence_states_the_gm_ratio_and_its_ci(tmp_path: Path) -> None:
    rng = np.random.default_rng(SEED)
    a, b = np.exp(rng.normal(2.0, 0.4, 30)), np.exp(rng.normal(2.7, 0.4, 30))
    row = only_row(tmp_path, a, b)
    text = finding(row)
    low, high = welch_ci(a, b)
    expected = (
        f"zinc (mg/kg) in site b is {fmt.ratio_words(gm_ratio(a, b))}× that in site a"
        " (estimated by the ratio of geometric means, which is the ratio of medians when"
        " each group's logged values are symmetric;"
        f" 95% CI {fmt.interval_words(low, high)};"
    )
    assert expected in text, text
    said = re.search(r" is ([0-9.]+)× that in", text)
    assert said and math.isclose(float(said[1]), gm_ratio(a, b), rel_tol=allowed_error(2.0))


def test_sentence_states_a_large_change_as_a_fold(tmp_path: Path) -> None:
    rng = np.random.default_rng(SEED + 1)
    a, b = np.exp(rng.normal(9.0, 0.5, 20)), np.exp(rng.normal(0.4, 0.5, 20))
    row = only_row(tmp_path, a, b)
    text = finding(row)
    said = re.search(r" is ([0-9,]+)× lower than in site a", text)
    assert said, text
    assert math.isclose(1 / float(said[1].replace(",", "")), gm_ratio(a, b), rel_tol=0.051)
    low, high = welch_ci(a, b)
    assert f"95% CI {fmt.interval_words(low, high)}" in text
    assert "e-0" not in text and "-100%" not in text


@pytest.mark.parametrize(("n", "median"), [(MEDIAN_MIN_N - 1, False), (MEDIAN_MIN_N, True)])
def test_median_only_with_enough_values(tmp_path: Path, n: int, median: bool) -> None:
    """Normal logs (no symmetry warning at this seed): medians from MEDIAN_MIN_N values in
    each group, geometric means below."""
    rng = np.random.default_rng(SEED + 2)
    a, b = np.exp(rng.normal(1.0, 0.3, n)), np.exp(rng.normal(1.5, 0.3, n))
    row = only_row(tmp_path, a, b)
    assert not set(row["warnings"]) & set(SYMMETRY_WARNINGS), row["warnings"]
    assert says_median(row) is median
    start = "The median zinc" if median else "The geometric mean zinc"
    assert finding(row).startswith(start)


def test_skewed_logs_make_it_a_geometric_mean(tmp_path: Path) -> None:
    """Logs drawn from an exponential distribution (skewness 2): the scan warns, the sentence
    says geometric mean, and the skew caveat names the skewed group with its sample
    skewness as scipy computes it (``bias=True``, the moment estimator)."""
    rng = np.random.default_rng(SEED + 3)
    a = np.exp(rng.normal(1.0, 1.0, 60))
    b = np.exp(rng.exponential(1.0, 60))
    row = only_row(tmp_path, a, b)
    assert "log-skew" in row["warnings"]
    text = finding(row)
    assert text.startswith("The geometric mean zinc")
    assert "median" not in text.split("(")[0]
    phrase = CAVEAT_ORDER["log-skew"](cast(dict[str, Any], row))
    said = re.fullmatch(r"the logs of site b are skewed \(skewness ([0-9.-]+)\)", phrase)
    assert said, phrase
    assert math.isclose(float(said[1]), sps.skew(np.log(b), bias=True), rel_tol=0.05)


def test_spread_caveat_gives_both_log_sds(tmp_path: Path) -> None:
    """Log SDs 0.2 and 1.0 with 40 values each: the spread caveat quotes numpy's SDs."""
    rng = np.random.default_rng(SEED + 4)
    a, b = np.exp(rng.normal(1.0, 0.2, 40)), np.exp(rng.normal(1.2, 1.0, 40))
    row = only_row(tmp_path, a, b)
    assert "spread-differs" in row["warnings"]
    text = caveat(row)
    sds = re.search(r"log SD ([0-9.]+) in site a vs ([0-9.]+) in site b", text)
    assert sds, text
    for said, values in zip(sds.groups(), (a, b), strict=True):
        assert math.isclose(float(said), np.std(np.log(values), ddof=1), rel_tol=0.05)  # 2 digits
    assert "one multiplier does not describe the change" in text


def test_small_n_caveat_names_the_group_and_its_count(tmp_path: Path) -> None:
    rng = np.random.default_rng(SEED + 5)
    a, b = np.exp(rng.normal(1.0, 0.3, 20)), np.exp(rng.normal(1.0, 0.3, 4))
    row = only_row(tmp_path, a, b)
    assert caveat(row).startswith("Main caveat: only 4 values in site b")


def _with(row: ComparisonRow, warnings: list[str], **figures: Any) -> ComparisonRow:
    changed = dict(row) | figures | {"warnings": warnings}
    return cast(ComparisonRow, changed)


@pytest.fixture(scope="module")
def plain_row(tmp_path_factory: pytest.TempPathFactory) -> ComparisonRow:
    """A real row (30 values per group) with figures every caveat can quote."""
    rng = np.random.default_rng(SEED + 6)
    a, b = np.exp(rng.normal(1.0, 0.3, 30)), np.exp(rng.normal(1.4, 0.3, 30))
    row = only_row(tmp_path_factory.mktemp("plain"), a, b)
    return _with(
        row,
        [],
        n_excluded_b=6,
        censored_share_a=0.2,
        n_no_limit_a=3,
        n_above_range_b=2,
        limit_low_a=0.5,
        limit_high_a=0.5,
        limit_low_b=2.0,
        limit_high_b=4.0,
        fit_reason_b="fewer than 2 detected values",
        n_b=4,
    )


def test_each_warning_has_a_caveat_in_words(plain_row: ComparisonRow) -> None:
    for name in CAVEAT_ORDER:
        text = caveat(_with(plain_row, [name]))
        assert text.startswith("Main caveat: ") and text.endswith(".")
        assert name not in text, f"{name}: the caveat says the warning's name, not its meaning"


def test_the_largest_caveat_is_named(plain_row: ComparisonRow) -> None:
    """Of any two warnings, the one earlier in CAVEAT_ORDER is the caveat stated, and the
    other is counted."""
    names = list(CAVEAT_ORDER)
    for i, first in enumerate(names):
        alone = caveat(_with(plain_row, [first]))
        for second in names[i + 1 :]:
            both = caveat(_with(plain_row, [second, first]))
            assert both == f"{alone} 1 other warning.", (first, second)


def test_no_warning_no_caveat(plain_row: ComparisonRow) -> None:
    assert caveat(plain_row) == ""
    assert "caveat" not in finding(plain_row)


def test_sentence_has_no_markup_or_warning_names(tmp_path: Path) -> None:
    """What the export writes: plain text, numbers by the display rule, no "[...]" markup
    and no warning names standing in for their meaning."""
    rng = np.random.default_rng(SEED + 7)
    groups = {
        "a": np.exp(rng.normal(1.0, 0.3, 30)),
        "b": np.exp(rng.normal(1.0, 1.2, 30)),
        "c": np.exp(rng.normal(1.5, 0.3, 4)),
        "d": np.exp(rng.exponential(1.0, 40)),
    }
    for row in scan_rows(tmp_path, groups):
        text = finding(row)
        assert "[" not in text and "e-0" not in text and "e+0" not in text
        for name in row["warnings"]:
            assert name not in text, (name, text)


# -- what the app draws ----------------------------------------------------------------------


async def test_list_and_detail_draw_a_large_change_as_a_fold(tmp_path: Path) -> None:
    """Site b about 5,000 times lower than site a: the list's row shows the compact fold for
    the ratio and its CI (no "e-0", no "-100%"), the sentence says it in words, and both
    read back to scipy's ratio of geometric means."""
    from app_support import current, listing, running, sentence

    rng = np.random.default_rng(SEED + 8)
    a, b = np.exp(rng.normal(9.0, 0.5, 20)), np.exp(rng.normal(0.4, 0.5, 20))
    data = tmp_path / "zinc.csv"
    pl.DataFrame(
        {"site": ["a"] * 20 + ["b"] * 20, "zinc_mg_per_kg": np.concatenate([a, b])}
    ).write_csv(data)
    async with running(tmp_path, data) as (app, _pilot):
        row = current(app)
        drawn = listing(app).render_line(1).text
        ratio = fmt.ratio_text(row["ratio"])
        assert ratio.startswith("÷") and ratio in drawn, drawn
        assert fmt.interval_text(row["ci_low"], row["ci_high"]) in drawn, drawn
        assert "e-0" not in drawn and "-100%" not in drawn
        assert math.isclose(read_compact(ratio), gm_ratio(a, b), rel_tol=0.051)
        said = re.search(r" is ([0-9,]+)× lower than in site a", sentence(app))
        assert said, sentence(app)
        assert math.isclose(1 / float(said[1].replace(",", "")), gm_ratio(a, b), rel_tol=0.051)


def test_no_interval_is_one_dash():
    """A comparison with no result has no interval: one dash, not a dash for each bound
    around the joiner (which read as a damaged range in the list)."""
    from foldsift.stats.formatting import MISSING, interval_text

    assert interval_text(None, None) == MISSING
    assert interval_text(float("nan"), float("nan"), " to ") == MISSING
    assert interval_text(None, 2.0) == f"{MISSING}–2.00"
