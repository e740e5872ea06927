"""One plain sentence per comparison, stating the multiplicative finding and its largest
caveat in words. The sentence is shown in the detail pane and exported, so it holds no
markup; every number in it is written by ``stats.formatting`` as the detail writes it."""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any, cast

import polars as pl

from .columns import SENTENCE, ComparisonRow, Side, side
from .diagnostics import LOG_SKEW_MIN_N, SMALL_N, SYMMETRY_WARNINGS
from .formatting import (
    MISSING,
    any_fold,
    interval_words,
    level_text,
    number_text,
    p_text,
    ratio_words,
    readable_outcome,
)
from .vocabulary import WarningName

__all__ = [
    "CAVEAT_ORDER",
    "MEDIAN_MIN_N",
    "caveat",
    "finding",
    "group_name",
    "readable_outcome",
    "says_median",
    "sentence_column",
    "stratum_phrase",
]

#: Both groups need this many values before the sentence speaks of medians: below it the
#: skewness check does not run, so the symmetry of the logs is untested.
MEDIAN_MIN_N = LOG_SKEW_MIN_N

SIDES: tuple[Side, Side] = ("a", "b")


def group_name(grouping: str, level: str) -> str:
    """``field`` + ``ashgrove`` -> "field ashgrove"; a level that names its grouping
    (``season`` + ``spring season``) is used alone."""
    return level if grouping.lower() in level.lower() else f"{grouping} {level}"


def stratum_phrase(row: ComparisonRow) -> str:
    """``, within season spring`` for a comparison inside a stratum, else ``""``."""
    if row["within"] is None:
        return ""
    return f", within {row['within']} {row['stratum']}"


def says_median(row: ComparisonRow) -> bool:
    """Whether the sentence may call the ratio one of medians: none of the symmetry
    warnings (``diagnostics.SYMMETRY_WARNINGS``: log-skew, log-not-normal, median-vs-gm,
    spread-differs) applies and both groups have at least ``MEDIAN_MIN_N`` (8) values.
    The ratio of geometric means equals the ratio of medians when each group's logs are
    symmetric; otherwise the sentence says "geometric mean"."""
    if set(row["warnings"]) & set(SYMMETRY_WARNINGS):
        return False
    return min(row["n_a"], row["n_b"]) >= MEDIAN_MIN_N


def _not_comparable(row: ComparisonRow, outcome: str, group_a: str, group_b: str) -> str:
    reasons = [
        f"{group}: {reason}"
        for group, reason in ((group_a, row["fit_reason_a"]), (group_b, row["fit_reason_b"]))
        if reason
    ]
    if reasons:
        why = "no censored fit for " + "; ".join(reasons)
    elif "too-few" in row["warnings"]:
        why = "too few usable values"
    else:
        why = "no spread in the values"
    return (
        f"{outcome}: {group_b} against {group_a}{stratum_phrase(row)} cannot be compared ({why})."
    )


def censored_phrase(row: ComparisonRow) -> str:
    """How the below-detection entries of the two groups were treated, with their share:
    "31% below detection, fitted by censored maximum likelihood"; "" when there are none."""
    censored = row["n_censored_a"] + row["n_censored_b"]
    if censored == 0 and row["n_right_a"] + row["n_right_b"] == 0:
        return ""
    total = row["n_a"] + row["n_b"] + row["n_excluded_a"] + row["n_excluded_b"]
    share = f"{censored / total if total else 0.0:.0%} below detection"
    above = row["n_right_a"] + row["n_right_b"]
    if above:
        share += f" and {above} above the range"
    how = _TREATMENT.get(row["method"], "")
    return f"{share}, {how}" if how else share


#: How each method treats below-detection entries, in words (none for plain methods).
_TREATMENT = {
    "censored ML": "fitted by censored maximum likelihood",
    "nondetects left out": "left out",
    "DL/2 substituted": "replaced by half the detection limit",
    "DL/sqrt2 substituted": "replaced by the detection limit divided by sqrt(2)",
    "paired t, nondetects left out": "left out of the pairs",
    "paired t, DL/2 substituted": "replaced by half the detection limit",
    "paired t, DL/sqrt2 substituted": "replaced by the detection limit divided by sqrt(2)",
    "2x2 crossover": "left out",
}


def times_words(value: float | None, folded: bool | None = None) -> str:
    """A ratio as a multiplier in words: ``2.30×`` in the decimal range, ``5,300× lower``
    beyond or when ``folded`` (``formatting.ratio_words``)."""
    words = ratio_words(value, folded)
    if value is None or words == MISSING or "×" in words:
        return words
    return f"{words}×"


def _excludes_one(low: float | None, high: float | None) -> bool:
    return low is not None and high is not None and (low > 1 or high < 1)


def _substitution_contrast(row: ComparisonRow) -> str:
    """What DL/2 substitution would have said instead, for a censoring-sensitive finding."""
    if row["half_dl_ratio"] is None:
        return "the finding depends on how the below-detection entries are treated"
    half_dl = (row["half_dl_ratio"], row["half_dl_ci_low"], row["half_dl_ci_high"])
    half = (
        f"with half the detection limit put in instead, the ratio would be "
        f"{times_words(row['half_dl_ratio'], any_fold(*half_dl))} "
        f"({level_text(row['confidence'])} CI "
        f"{interval_words(row['half_dl_ci_low'], row['half_dl_ci_high'])})"
    )
    fitted = _excludes_one(row["ci_low"], row["ci_high"])
    substituted = _excludes_one(row["half_dl_ci_low"], row["half_dl_ci_high"])
    if fitted != substituted:
        change = "its interval would exclude 1" if substituted else "its interval would include 1"
    else:
        change = (
            f"the equivalence class would be {row['half_dl_band_class'] or 'none'} "
            f"instead of {row['band_class'] or 'none'}"
        )
    return f"the finding is sensitive to the below-detection entries; {half}, and {change}"


# -- caveats: one phrase per warning, from the row's own figures ------------------------------

_Figures = Mapping[str, Any]


def _names(row: _Figures) -> dict[Side, str]:
    return {s: group_name(row["grouping"], row[side("level", s)]) for s in SIDES}


def _larger(row: _Figures, figure: str, key: Callable[[Any], float] = float) -> Side:
    """The side whose ``figure`` is larger by ``key`` (a missing figure counts as 0)."""
    values = {s: row[side(figure, s)] for s in SIDES}
    return max(SIDES, key=lambda s: key(values[s]) if values[s] is not None else 0.0)


def _small_n(row: _Figures) -> str:
    names = _names(row)
    small = [s for s in SIDES if row[side("n", s)] < SMALL_N]
    parts = [f"{row[side('n', s)]} values in {names[s]}" for s in small[:1]]
    parts += [f"{row[side('n', s)]} in {names[s]}" for s in small[1:]]
    return "only " + " and ".join(parts)


def _not_fitted(row: _Figures) -> str:
    names = _names(row)
    unfitted = [
        f"{names[s]} ({row[side('fit_reason', s)]})" for s in SIDES if row[side("fit_reason", s)]
    ]
    return "no censored fit was made for " + " and ".join(unfitted)


def _no_limit(row: _Figures) -> str:
    which = _larger(row, "n_no_limit")
    count = row[side("n_no_limit", which)]
    return (
        f"{count} below-detection entries without a limit in {_names(row)[which]} were left "
        "out, so that group looks higher than it is"
    )


def _excluded_share(row: _Figures) -> str:
    def share(s: Side) -> float:
        left_out = row[side("n_excluded", s)]
        total = left_out + row[side("n", s)]
        return float(left_out / total) if total else 0.0

    which = max(SIDES, key=share)
    return (
        f"{share(which):.0%} of the entries of {_names(row)[which]} were left out (zero, "
        "negative or below detection), so the rest may not represent that group"
    )


def _spread(row: _Figures) -> str:
    names = _names(row)
    a, b = (f"{number_text(row[side('sd_log', s)], 2)} in {names[s]}" for s in SIDES)
    return (
        f"the spread differs between the groups (log SD {a} vs {b}), so one multiplier "
        "does not describe the change"
    )


def _median_vs_gm(row: _Figures) -> str:
    return (
        f"the ratio of sample medians ({times_words(row['median_ratio'])}) disagrees with "
        "the ratio of geometric means beyond their uncertainty"
    )


def _censored_share(row: _Figures) -> str:
    which = _larger(row, "censored_share")
    share = row[side("censored_share", which)] or 0.0
    consequence = {
        "censored ML": "the fit leans on the lognormal shape for the part it cannot see",
        "nondetects left out": "leaving them out makes that group look higher",
    }.get(row["method"], "the substituted values weigh on the result")
    return f"{share:.0%} of {_names(row)[which]} is below detection; {consequence}"


def _limits(row: _Figures) -> str:
    def limits(s: Side) -> str:
        low, high = row[side("limit_low", s)], row[side("limit_high", s)]
        if low is None:
            return "none"
        return (
            number_text(low, 2)
            if high in (None, low)
            else f"{number_text(low, 2)}–{number_text(high, 2)}"
        )

    names = _names(row)
    text = f"the detection limits differ ({names['a']} {limits('a')}, {names['b']} {limits('b')})"
    if row["method"] == "censored ML":
        return text + "; the censored fit allows for that, a substitution would not"
    return text + ", which biases a comparison with substituted values"


def _above_range(row: _Figures) -> str:
    which = _larger(row, "n_above_range")
    how = "fitted as lying above it" if row["method"] == "censored ML" else "used at its top"
    count = row[side("n_above_range", which)]
    return f"{count} entries of {_names(row)[which]} are above the measuring range ({how})"


def _skew(row: _Figures) -> str:
    which = _larger(row, "skew_log", key=abs)
    skew = number_text(row[side("skew_log", which)], 2)
    return f"the logs of {_names(row)[which]} are skewed (skewness {skew})"


def _not_normal(row: _Figures) -> str:
    which = _larger(row, "shapiro_p", key=lambda p: -p)
    p = p_text(row[side("shapiro_p", which)], "p")
    return f"the logs of {_names(row)[which]} do not look normal (Shapiro-Wilk {p})"


def _units_apart(row: _Figures) -> str:
    return "the analyte was also reported in a unit that does not convert; those are apart"


#: Warnings in the order of how much they weigh on the stated ratio, the largest first, with
#: the phrase that says each in words.
CAVEAT_ORDER: dict[WarningName, Callable[[_Figures], str]] = {
    "units-repeated": lambda row: (
        "some units give several values to one group and are counted as independent, so "
        "the interval is too narrow"
    ),
    "censoring-sensitive": lambda row: _substitution_contrast(cast(ComparisonRow, row)),
    "not-fitted": _not_fitted,
    "small-n": _small_n,
    "no-limit": _no_limit,
    "excluded-share": _excluded_share,
    "spread-differs": _spread,
    "median-vs-gm": _median_vs_gm,
    "censored-share": _censored_share,
    "limits-differ": _limits,
    "above-range": _above_range,
    "log-skew": _skew,
    "log-not-normal": _not_normal,
    "units-apart": _units_apart,
}


def caveat(row: ComparisonRow) -> str:
    """The largest caveat of a comparison in words, then how many other warnings it has:
    "Main caveat: only 4 values in field x. 1 other warning."; "" with no warning."""
    present = [name for name in CAVEAT_ORDER if name in row["warnings"]]
    if not present:
        return ""
    text = f"Main caveat: {CAVEAT_ORDER[present[0]](cast(_Figures, row))}."
    others = len(row["warnings"]) - 1
    if others:
        text += f" {others} other warning{'s' if others > 1 else ''}."
    return text


def paired_phrase(row: ComparisonRow) -> str:
    """ ", within the same wells" for a paired or crossover comparison (the unit column's
    name), else ""."""
    unit = row["pair_by"]
    if unit is None:
        return ""
    plural = unit if unit.endswith("s") else f"{unit}s"
    return f", within the same {plural}"


def _basis(row: ComparisonRow) -> str:
    """The test the numbers rest on, with the below-detection share and its treatment."""
    test = "Welch" if row["test"] == "welch" else "pooled"
    censored = censored_phrase(row)
    method = row["method"]
    if method == "censored ML":
        return f"{censored}; {test} t on the fitted log means"
    if method == "2x2 crossover":
        return f"2x2 crossover, {row['n_pairs']} subjects; analysis of variance on the logs"
    if str(method).startswith("paired t"):
        pairs = f"paired t on the logs of {row['n_pairs']} pairs"
        return f"{censored}; {pairs}" if censored else pairs
    return f"{censored}; {test} t-test on logs" if censored else f"{test} t-test on logs"


def finding(row: ComparisonRow) -> str:
    """The sentence for one row of the comparisons frame: the ratio of geometric means as a
    multiplier (called a ratio of medians only when ``says_median``), its CI, test, p and
    q, whether the interval includes 1, and the largest caveat (``caveat``)."""
    outcome = readable_outcome(row["outcome"])
    group_b = group_name(row["grouping"], row["level_b"])
    group_a = group_name(row["grouping"], row["level_a"])
    ratio = row["ratio"]
    if ratio is None:
        return _not_comparable(row, outcome, group_a, group_b)
    basis = _basis(row)
    median = says_median(row)
    what = (
        "estimated by the ratio of geometric means, which is the ratio of medians when each "
        "group's logged values are symmetric; "
        if median
        else ""
    )
    detail = (
        f"{what}{level_text(row['confidence'])} CI {interval_words(row['ci_low'], row['ci_high'])}; "
        f"{basis}, {p_text(row['p_value'], 'p')}, {p_text(row['q_bh'], 'q')}"
    )
    folded = any_fold(ratio, row["ci_low"], row["ci_high"])
    text = (
        f"The {'median' if median else 'geometric mean'} {outcome} in {group_b} is "
        f"{times_words(ratio, folded)} {'than in' if folded else 'that in'} {group_a}"
        f"{stratum_phrase(row)}{paired_phrase(row)} ({detail})."
    )
    low, high = row["ci_low"], row["ci_high"]
    if low is not None and high is not None and low <= 1 <= high:
        text += " The interval includes 1: no clear difference."
    more = caveat(row)
    return f"{text} {more}" if more else text


def sentence_column(frame: pl.DataFrame) -> pl.Series:
    """The ``sentence`` column for every row of a comparisons frame."""
    rows = frame.iter_rows(named=True)
    return pl.Series(SENTENCE, [finding(cast(ComparisonRow, row)) for row in rows], dtype=pl.Utf8)
