"""The facts of one comparison as a single rich Text: the sentence, a small aligned table of
numbers, the warnings explained and the review state. One Text (not a rich Table) keeps the
repaint cheap when the cursor moves. Every number is written by ``stats.formatting``. Names
and notes are appended as plain text (never markup), their control characters as symbols."""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

from rich.cells import cell_len
from rich.text import Text

from foldsift.stats import columns as col
from foldsift.stats.columns import ReviewedRow
from foldsift.stats.diagnostics import explain
from foldsift.stats.formatting import (
    MISSING,
    any_fold,
    count_text,
    interval_text,
    level_text,
    number_text,
    p_text,
    percent_text,
    ratio_text,
)
from foldsift.stats.robust import RobustCheck
from foldsift.stats.sentence import finding

from ..store import stamp_snapshot
from .histograms import STYLE_A, STYLE_B
from .plain import make_visible, visible

LABEL_WIDTH = 18
VALUE_WIDTH = 13
#: Below this width the two columns of figures narrow so that rows fit a small pane.
NARROW = 46


class _Table:
    """Rows of a label and one value per group, or a label, a value and a remark."""

    def __init__(self, text: Text, width: int) -> None:
        self.text = text
        self.width = width
        self.label_width, self.value_width = (
            (LABEL_WIDTH, VALUE_WIDTH) if width >= NARROW else (15, 10)
        )

    def _label(self, label: str) -> None:
        self.text.append(label[: self.label_width].ljust(self.label_width))

    def heads(self, level_a: str, level_b: str) -> None:
        """Column heads "a: name" and "b: name"; when a name does not fit its column, the
        full names go on a line of their own and the heads are just "a" and "b"."""
        level_a, level_b = visible(level_a), visible(level_b)
        needed = max(cell_len(level_a), cell_len(level_b)) + 4
        if needed > self.value_width and self.label_width + 2 * needed <= self.width:
            self.value_width = needed  # widen both columns when the pane has the room
        fits = needed <= self.value_width
        if not fits:
            self.text.append("a: ", style=f"bold {STYLE_A}")
            self.text.append(level_a, style=f"bold {STYLE_A}")
            self.text.append("   b: ", style=f"bold {STYLE_B}")
            self.text.append(level_b + "\n", style=f"bold {STYLE_B}")
        head_a, head_b = (f"a: {level_a}", f"b: {level_b}") if fits else ("a", "b")
        self.text.append(" " * self.label_width)
        self.text.append(head_a.ljust(self.value_width), style=f"bold {STYLE_A}")
        self.text.append(head_b + "\n", style=f"bold {STYLE_B}")

    def pair(self, label: str, value_a: str, value_b: str) -> None:
        self._label(label)
        self.text.append(value_a.ljust(self.value_width), style=STYLE_A)
        self.text.append(value_b + "\n", style=STYLE_B)

    def line(self, label: str, value: str, remark: str = "") -> None:
        self._label(label)
        # A value as wide as its column keeps one space before the remark.
        self.text.append(value.ljust(self.value_width - 1) + " ", style="bold")
        self.text.append(remark + "\n")


#: The per-group rows: label, figure (``side(figure, "a")`` and ``"b"``) and its format.
GROUP_ROWS: tuple[tuple[str, str, Callable[[Any], str]], ...] = (
    ("n used", "n", count_text),
    ("left out", "n_excluded", count_text),
    ("substituted", "n_substituted", count_text),
    ("below detection", "n_censored", count_text),
    ("geometric mean", "gm", number_text),
    ("median", "median", number_text),
    ("log SD", "sd_log", number_text),
    ("skewness (logs)", "skew_log", number_text),
    ("skewness (raw)", "skew_raw", number_text),
    ("Shapiro p (logs)", "shapiro_p", p_text),
)
#: What each method means, beside its name in the estimates.
METHOD_REMARKS = {
    "t-test on logs": "no entries below detection",
    "censored ML": "below-detection entries fitted at their limits (lognormal)",
    "nondetects left out": "below-detection entries left out",
    "DL/2 substituted": "below-detection entries set to half the limit",
    "DL/sqrt2 substituted": "below-detection entries set to the limit / sqrt(2)",
    "paired t on logs": "within-unit log ratios (units measured at both levels)",
    "paired t, nondetects left out": "within-unit log ratios; units below detection left out",
    "paired t, DL/2 substituted": "within-unit log ratios; below detection set to DL/2",
    "paired t, DL/sqrt2 substituted": "within-unit log ratios; below detection set to DL/sqrt(2)",
    "2x2 crossover": "analysis of variance on the logs: sequence, subject, period, treatment",
}
#: Rows shown only when either group has such entries (laboratory codes).
CODE_ROWS: tuple[tuple[str, str, Callable[[Any], str]], ...] = (
    ("ND, no limit", "n_no_limit", count_text),
    ("above range", "n_above_range", count_text),
    ("estimated (J)", "n_estimated", count_text),
)


def _median(row: dict[str, Any], which: col.Side) -> str:
    """The median, "< limit" where the Kaplan-Meier median is undefined (over half the
    entries below their limits)."""
    median = row[col.side("median", which)]
    at_most = row[col.side("median_at_most", which)]
    if median is None and at_most is not None:
        return f"< {number_text(at_most)}"
    return str(number_text(median))


def _limits(row: dict[str, Any], which: col.Side) -> str:
    low = row[col.side("limit_low", which)]
    high = row[col.side("limit_high", which)]
    if low is None:
        return MISSING
    return number_text(low) if low == high else f"{number_text(low)}-{number_text(high)}"


def _share(row: dict[str, Any], which: col.Side) -> str:
    count = row[col.side("n_censored", which)]
    share = row[col.side("censored_share", which)]
    if not count:
        return "0"
    return f"{count_text(count)} ({share:.0%})" if share is not None else count_text(count)


def _groups(table: _Table, row: ReviewedRow) -> None:
    figures: dict[str, Any] = dict(row)
    table.heads(row["level_a"], row["level_b"])
    censored = bool(row["n_censored_a"] or row["n_censored_b"])
    for label, figure, write in GROUP_ROWS:
        a, b = figures[col.side(figure, "a")], figures[col.side(figure, "b")]
        if figure == "n_censored" and censored:
            table.pair(label, _share(figures, "a"), _share(figures, "b"))
            table.pair("detection limits", _limits(figures, "a"), _limits(figures, "b"))
        elif figure == "median" and censored:
            table.pair("median (K-M)", _median(figures, "a"), _median(figures, "b"))
        else:
            table.pair(label, write(a), write(b))
    for label, figure, write in CODE_ROWS:
        a, b = figures[col.side(figure, "a")], figures[col.side(figure, "b")]
        if a or b:
            table.pair(label, write(a), write(b))
    sides: tuple[col.Side, ...] = ("a", "b")
    for which in sides:
        reason = figures[col.side("fit_reason", which)]
        if reason:
            table.line(f"no fit for {which}", "-", str(reason))


def _estimates(table: _Table, row: ReviewedRow, band: tuple[float, float]) -> None:
    level = level_text(row["confidence"])
    test = "Welch" if row["test"] == "welch" else "pooled"
    ci = interval_text(row["ci_low"], row["ci_high"], " to ")
    folded = any_fold(row["ratio"], row["ci_low"], row["ci_high"])
    table.line("ratio b/a (GM)", ratio_text(row["ratio"], folded), f"{level} CI {ci}")
    table.line("method", str(row["method"]), METHOD_REMARKS[row["method"]])
    if row["half_dl_ratio"] is not None:
        half_ci = interval_text(row["half_dl_ci_low"], row["half_dl_ci_high"], " to ")
        table.line("with DL/2 instead", ratio_text(row["half_dl_ratio"]), f"{level} CI {half_ci}")
    change = f"change {percent_text(row['percent_change'])}"
    table.line("ratio of medians", ratio_text(row["median_ratio"]), change)
    on = f"{test} t on logs" if row["pair_by"] is None else "paired"
    degrees = f"df {number_text(row['df'])} ({on})"
    table.line("log2 ratio", number_text(row["log2_ratio"]), degrees)
    _pairing(table, row)
    adjusted = f"Holm {p_text(row['p_holm'])} · q {p_text(row['q_bh'])}"
    table.line("p", p_text(row["p_value"]), adjusted)
    tost = interval_text(row["tost_ci_low"], row["tost_ci_high"], " to ")
    table.line(f"band {interval_text(*band)}", row["band_class"] or MISSING, f"90% CI {tost}")
    detectable = f"80%-power detectable {ratio_text(row['detectable_ratio'])}×"
    table.line("CI high/low", number_text(row["ci_fold"]), detectable)
    if row["n_needed"] is not None:
        table.line("n per group needed", number_text(row["n_needed"]), "for the target ratio")


def _pairing(table: _Table, row: ReviewedRow) -> None:
    """The units of a paired or crossover comparison: pairs, units left unpaired, values
    combined, the within-unit CV and the unit behind ``unit-dominates``."""
    if row["pair_by"] is None:
        return
    unit = visible(row["pair_by"])
    unpaired = (row["n_only_a"] or 0) + (row["n_only_b"] or 0) + (row["n_unpaired_left_out"] or 0)
    remark = f"{unit}s at both levels; {count_text(unpaired)} unpaired"
    if row["n_combined"]:
        remark += f", {count_text(row['n_combined'])} combined"
    table.line("pairs", count_text(row["n_pairs"]), remark)
    cv = row["within_cv"]
    table.line("within-unit CV", MISSING if cv is None else f"{cv:.1%}", f"within the same {unit}")
    if row["influential_unit"]:
        table.line("dominant unit", visible(row["influential_unit"]), "see unit-dominates")


def _cross_checks(table: _Table, row: ReviewedRow, check: RobustCheck | None) -> None:
    if check is None:
        table.line("cross-checks", "press b", "bootstrap CI of the median ratio, Hodges-Lehmann")
        return
    level = level_text(row["confidence"])
    bootstrap = interval_text(check.median_ratio_ci_low, check.median_ratio_ci_high)
    of_what = f"BCa {level} CI of {ratio_text(check.median_ratio)}"
    table.line("bootstrap medians", bootstrap, of_what)
    hl_ci = interval_text(check.hl_ci_low, check.hl_ci_high, " to ")
    remark = f"CI {hl_ci}, Mann-Whitney {p_text(check.mann_whitney_p, 'p')}"
    table.line("Hodges-Lehmann", ratio_text(check.hl_ratio), remark)
    if not math.isnan(check.peto_prentice_p):
        table.line(
            "Peto-Prentice",
            p_text(check.peto_prentice_p, "p"),
            "uses the limits; the checks above use detected values only",
        )


def _warnings(text: Text, row: ReviewedRow) -> None:
    for name, explanation in explain(row["warnings"]):
        text.append(f"! {name}", style="bold yellow")
        text.append(f"  {explanation}\n")
    if not row["warnings"]:
        text.append("no warnings\n", style="green")


def _what_changed(row: ReviewedRow) -> str:
    """ "review made on earlier data: n 48/47 -> 48/46, ratio 3.99 -> 4.10" where the review's
    stamp holds what it judged; a plainer line for reviews stamped before stamps did."""
    then = stamp_snapshot(row["review_fingerprint"] or "")
    if then is None:
        return "review made on an earlier version of the data"
    n_a, n_b, ratio = then
    changes = []
    if (n_b, n_a) != (row["n_b"], row["n_a"]):
        changes.append(f"n {n_b}/{n_a} -> {row['n_b']}/{row['n_a']}")
    if ratio != row["ratio"]:
        changes.append(f"ratio {ratio_text(ratio)} -> {ratio_text(row['ratio'])}")
    detail = ", ".join(changes) or "other figures of this comparison changed"
    return f"review made on earlier data: {detail}"


def _review(text: Text, row: ReviewedRow) -> None:
    state = []
    if row["decision"] is not None:
        state.append(f"decision: {row['decision']}")
    if row["flagged"]:
        state.append("flagged")
    if row["on_earlier_data"]:
        state.append(_what_changed(row))
    if state:
        text.append(" · ".join(state) + "\n", style="bold")
    if row["note"]:
        text.append("note: ", style="bold")
        text.append(visible(row["note"], lines=True) + "\n")


def _section(text: Text, title: str) -> None:
    """A plain section title: the facts are grouped by what they are about."""
    text.append(f"{title}\n", style="bold underline")


def facts_text(
    row: ReviewedRow, band: tuple[float, float], check: RobustCheck | None, width: int = 80
) -> Text:
    """The facts as one Text, the finding first: its sentence and its caveats (warnings),
    then the estimate and its uncertainty, then the two groups side by side, then the
    cross-checks and the review. ``width`` narrows the columns to fit a small pane."""
    text = Text()
    text.append(visible(finding(row)) + "\n", style="bold")
    text.append("b: " + visible(row["level_b"]), style=f"bold {STYLE_B}")
    text.append(" over ")
    text.append("a: " + visible(row["level_a"]), style=f"bold {STYLE_A}")
    text.append(" (the reference)\n\n")
    _warnings(text, row)
    _review(text, row)
    text.append("\n")
    table = _Table(text, width)
    _section(text, "the estimate")
    _estimates(table, row, band)
    text.append("\n")
    _section(text, "the two groups")
    _groups(table, row)
    text.append("\n")
    _section(text, "cross-checks")
    _cross_checks(table, row, check)
    return make_visible(text)
