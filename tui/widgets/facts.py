"""The facts of one comparison as a single rich Text: the sentence, a small aligned table of
numbers, the warnings explained and the review state. One Text (not a rich Table) keeps the
repaint cheap when the cursor moves. Ratios, intervals, p and q, percentages and counts are
written by ``stats.formatting``; other figures by ``plain_number`` (never in e-notation).
Names and notes are appended as plain text (never markup), their control characters as
symbols.

The table is laid out for the pane's width, so that the pane shows it as written: every row
is a label, at least one space, and its value; a remark that does not fit beside the value
goes on lines of its own under the value, and a narrow pane uses short labels (``SHORT``)."""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

from rich.cells import cell_len, chop_cells
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
    p_text,
    percent_text,
    ratio_text,
)
from foldsift.stats.robust import RobustCheck
from foldsift.stats.sentence import finding

from ..store import stamp_snapshot
from .histograms import STYLE_A, STYLE_B
from .plain import make_visible, visible

#: An interval that cannot be given (no result, or a bound that is not a ratio) reads so.
NO_INTERVAL = "none"
#: Figures smaller than this in size read "≈0" (their digits would fill the line).
TINY = 1e-12
_LARGE = ((1e6, "M"), (1e9, "bn"), (1e12, "tn"))


def plain_number(value: float | None, digits: int = 3) -> str:
    """A figure (a mean, a median, a limit, a log SD, a skewness, df) in plain digits, never
    in e-notation: ``digits`` decimals below 1 (``0.576``, ``-0.03``), or as many as give
    ``digits`` significant ones below 0.001 (``0.000123``); ``digits`` significant digits
    from 1 (``2.3``, ``33.5``, ``154``); whole numbers with thousands separators from 1,000
    (``1,050``, ``12,346``); from a million ``digits`` significant digits and M, bn or tn
    (``1.23M``, ``45.6bn``). Below ``TINY`` in size "≈0"; missing or infinite "–"."""
    if value is None or not math.isfinite(value):
        return MISSING
    size = abs(value)
    if size == 0:
        return "0"
    if size < TINY:
        return "≈0"
    if size < 1:
        decimals = digits if size >= 10**-digits else digits - 1 - math.floor(math.log10(size))
        return f"{value:.{decimals}f}".rstrip("0").rstrip(".")
    short = f"{value:.{digits}g}"
    if "e" not in short:  # from 1 to 1,000 (999.7 reads "1e+03" here, so it goes on)
        return short
    if size < 999_999.5:
        return f"{value:,.0f}"
    for scale, symbol in _LARGE:
        short = f"{value / scale:.{digits}g}"
        if "e" not in short:
            return short + symbol
    return f"{value / 1e12:,.0f}tn"


def interval(low: float | None, high: float | None, joiner: str = " to ") -> str:
    """A confidence interval of a ratio (``stats.formatting.interval_text``), or
    ``NO_INTERVAL`` when either bound is missing."""
    if MISSING in (ratio_text(low), ratio_text(high)):
        return NO_INTERVAL
    return interval_text(low, high, joiner)


@dataclass(frozen=True)
class Columns:
    """Where the parts of a row start: the label column (one cell wider than its longest
    label), a one-value row's value column (its least space before a remark included) and
    each group's column in the two-group rows."""

    label: int
    value: int
    group: int


#: Panes of ``NARROW`` cells and more: full labels.
WIDE = Columns(label=18, value=12, group=13)
#: Narrower panes (37 cells at 80x24): short labels in a narrower column.
SLIM = Columns(label=14, value=9, group=11)
NARROW = 46
#: The least space between a value and a remark beside it.
GAP = 2
#: Between the parts of a remark that share a line.
JOIN = " · "
#: The short form of each label longer than ``SLIM`` allows (12 cells at most).
SHORT = {
    "ratio b/a (GM)": "GM ratio b/a",
    "with DL/2 instead": "with DL/2",
    "ratio of medians": "median ratio",
    "within-unit CV": "within CV",
    "below detection": "below limit",
    "detection limits": "limits",
    "geometric mean": "geo. mean",
    "skewness (logs)": "skew (logs)",
    "skewness (raw)": "skew (raw)",
    "Shapiro p (logs)": "Shapiro (log)",
    "bootstrap medians": "bootstrap",
    "Hodges-Lehmann": "HL ratio",
}


def wrap(text: str, width: int) -> list[str]:
    """``text`` in lines of at most ``width`` cells, broken at spaces; a word longer than a
    line is cut into pieces. Always at least one line."""
    lines: list[str] = []
    line = ""
    for word in text.split():
        for piece in chop_cells(word, width) if cell_len(word) > width else [word]:
            joined = f"{line} {piece}" if line else piece
            if cell_len(joined) <= width:
                line = joined
            else:
                lines.append(line)
                line = piece
    return [*lines, line] if line or not lines else lines


def pack(parts: Sequence[str], width: int) -> list[str]:
    """The parts of a remark in lines of at most ``width`` cells: parts that fit together
    share a line (joined by ``JOIN``); a part longer than a line is wrapped at its spaces."""
    lines: list[str] = []
    line = ""
    for part in parts:
        joined = f"{line}{JOIN}{part}" if line else part
        if cell_len(joined) <= width:
            line = joined
            continue
        if line:
            lines.append(line)
        *full, line = wrap(part, width)
        lines.extend(full)
    return [*lines, line] if line else lines


class _Table:
    """Rows of a label and one value per group, or of a label, a value and a remark, laid
    out for ``width`` cells: no line is longer, and a label never touches its value."""

    def __init__(self, text: Text, width: int) -> None:
        self.text = text
        self.width = width
        self.columns = WIDE if width >= NARROW else SLIM
        # Narrowed to leave room for a "b" head; widened by ``heads`` where names or values
        # need it and the pane has the room.
        self.group = max(min(self.columns.group, width - self.columns.label - 1), 2)

    @property
    def room(self) -> int:
        """The cells right of the label column."""
        return max(self.width - self.columns.label, 1)

    def label_for(self, label: str) -> str:
        """The label as written: its short form where the full one leaves no space."""
        if cell_len(label) < self.columns.label:
            return label
        return SHORT.get(label, label)

    def fits(self, label: str) -> bool:
        return cell_len(self.label_for(label)) < self.columns.label

    def _indent(self) -> None:
        self.text.append(" " * self.columns.label)

    def _label(self, label: str) -> None:
        """The label padded to its column; a label that does not fit has a line of its own
        and the row's value starts on the next line."""
        label = self.label_for(label)
        if cell_len(label) < self.columns.label:
            self.text.append(label + " " * (self.columns.label - cell_len(label)))
            return
        for piece in wrap(label, self.width):
            self.text.append(piece + "\n")
        self._indent()

    def heads(self, level_a: str, level_b: str, widest: tuple[int, int] = (0, 0)) -> None:
        """Column heads "a: name" and "b: name"; when a name does not fit its column, the
        full names go on a line of their own and the heads are just "a" and "b". ``widest``
        is the widest value of each group in the rows below: a column holds its values with
        a space to spare when the pane has the room."""
        level_a, level_b = visible(level_a), visible(level_b)
        label = self.columns.label
        if label + widest[0] + 1 + widest[1] <= self.width:
            self.group = max(self.group, widest[0] + 1)
        needed = max(cell_len(level_a), cell_len(level_b)) + 4
        if needed > self.group and label + 2 * needed <= self.width:
            self.group = needed  # widen both columns when the pane has the room
        fits = needed <= self.group
        if not fits:
            self._names(level_a, level_b)
        head_a, head_b = (f"a: {level_a}", f"b: {level_b}") if fits else ("a", "b")
        self._indent()
        self.text.append(head_a.ljust(self.group), style=f"bold {STYLE_A}")
        self.text.append(head_b + "\n", style=f"bold {STYLE_B}")

    def _names(self, level_a: str, level_b: str) -> None:
        """Both groups' names on one line, or one line each when that is too long."""
        one_line = cell_len(level_a) + cell_len(level_b) + 9 <= self.width
        for which, name, style in (("a", level_a, STYLE_A), ("b", level_b, STYLE_B)):
            lead = "   " if which == "b" and one_line else ""
            for piece in wrap(f"{which}: {name}", self.width - len(lead)):
                self.text.append(lead + piece, style=f"bold {style}")
                if not one_line or which == "b":
                    self.text.append("\n")

    def pair(self, label: str, value_a: str, value_b: str) -> None:
        self._label(label)
        width_a, width_b = cell_len(value_a), cell_len(value_b)
        if width_a < self.group and self.columns.label + self.group + width_b <= self.width:
            self.text.append(value_a + " " * (self.group - width_a), style=STYLE_A)
            self.text.append(value_b + "\n", style=STYLE_B)
            return
        # Too wide for the columns: each group's value on lines of its own, named.
        for which, value, style in (("a", value_a, STYLE_A), ("b", value_b, STYLE_B)):
            for index, piece in enumerate(wrap(f"{which}: {value}", self.room)):
                if which == "b" or index:
                    self._indent()
                self.text.append(piece + "\n", style=style)

    def line(self, label: str, value: str, *remarks: str, below: bool = False) -> None:
        """A label, its value and the remark's parts: beside the value in the remark column
        when each part fits there (``below=False``), else on lines of their own under the
        value."""
        self._label(label)
        parts = [remark for remark in remarks if remark]
        if not below and self._beside(value, parts):
            return
        for index, piece in enumerate(wrap(value, self.room)):
            if index:
                self._indent()
            self.text.append(piece + "\n", style="bold")
        for remark in pack(parts, self.room):
            self._indent()
            self.text.append(remark + "\n")

    def _beside(self, value: str, parts: list[str]) -> bool:
        """Write the value in its column and the remark's parts in the remark column, when
        the value leaves ``GAP`` cells and each part fits; else write nothing: False."""
        start = self.columns.label + self.columns.value
        beside = self.width - start
        if beside < 0 or cell_len(value) > self.columns.value - GAP:
            return False
        if any(cell_len(part) > beside for part in parts):
            return False
        lines = pack(parts, beside)
        padding = " " * (self.columns.value - cell_len(value)) if lines else ""
        self.text.append(value + padding, style="bold")
        self.text.append((lines[0] if lines else "") + "\n")
        for remark in lines[1:]:
            self.text.append(" " * start + remark + "\n")
        return True


#: The per-group rows: label, figure (``side(figure, "a")`` and ``"b"``) and its format.
GROUP_ROWS: tuple[tuple[str, str, Callable[[Any], str]], ...] = (
    ("n used", "n", count_text),
    ("left out", "n_excluded", count_text),
    ("substituted", "n_substituted", count_text),
    ("below detection", "n_censored", count_text),
    ("geometric mean", "gm", plain_number),
    ("median", "median", plain_number),
    ("log SD", "sd_log", plain_number),
    ("skewness (logs)", "skew_log", plain_number),
    ("skewness (raw)", "skew_raw", plain_number),
    ("Shapiro p (logs)", "shapiro_p", p_text),
)
#: What each method means, under its name in the estimates.
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
        return f"< {plain_number(at_most)}"
    return plain_number(median)


def _limits(row: dict[str, Any], which: col.Side) -> str:
    low = row[col.side("limit_low", which)]
    high = row[col.side("limit_high", which)]
    if low is None:
        return MISSING
    return plain_number(low) if low == high else f"{plain_number(low)}-{plain_number(high)}"


def _share(row: dict[str, Any], which: col.Side) -> str:
    count = row[col.side("n_censored", which)]
    share = row[col.side("censored_share", which)]
    if not count:
        return "0"
    return f"{count_text(count)} ({share:.0%})" if share is not None else count_text(count)


def _group_rows(row: ReviewedRow) -> list[tuple[str, str, str]]:
    """Label, group a's value and group b's value of every per-group row shown."""
    figures: dict[str, Any] = dict(row)
    censored = bool(row["n_censored_a"] or row["n_censored_b"])
    rows = []
    for label, figure, write in GROUP_ROWS:
        a, b = figures[col.side(figure, "a")], figures[col.side(figure, "b")]
        if figure == "n_censored" and censored:
            rows.append((label, _share(figures, "a"), _share(figures, "b")))
            rows.append(("detection limits", _limits(figures, "a"), _limits(figures, "b")))
        elif figure == "median" and censored:
            rows.append(("median (K-M)", _median(figures, "a"), _median(figures, "b")))
        else:
            rows.append((label, write(a), write(b)))
    for label, figure, write in CODE_ROWS:
        a, b = figures[col.side(figure, "a")], figures[col.side(figure, "b")]
        if a or b:
            rows.append((label, write(a), write(b)))
    return rows


def _groups(table: _Table, row: ReviewedRow) -> None:
    rows = _group_rows(row)
    widest = (
        max(cell_len(value_a) for _, value_a, _ in rows),
        max(cell_len(value_b) for _, _, value_b in rows),
    )
    table.heads(row["level_a"], row["level_b"], widest)
    for label, value_a, value_b in rows:
        table.pair(label, value_a, value_b)
    figures: dict[str, Any] = dict(row)
    sides: tuple[col.Side, ...] = ("a", "b")
    for which in sides:
        reason = figures[col.side("fit_reason", which)]
        if reason:
            table.line(f"no fit for {which}", MISSING, str(reason))


def _times(ratio: float | None) -> str:
    """A ratio as "1.39×"; a fold (``×1.2k``, ``÷20``) and "–" as they are."""
    text = ratio_text(ratio)
    return text if text == MISSING or text[0] in "×÷" else f"{text}×"


def _estimates(table: _Table, row: ReviewedRow, band: tuple[float, float]) -> None:
    level = level_text(row["confidence"])
    folded = any_fold(row["ratio"], row["ci_low"], row["ci_high"])
    ci = f"{level} CI {interval(row['ci_low'], row['ci_high'])}"
    table.line("ratio b/a (GM)", ratio_text(row["ratio"], folded), ci)
    table.line("method", str(row["method"]), METHOD_REMARKS[row["method"]], below=True)
    if row["half_dl_ratio"] is not None:
        half_ci = f"{level} CI {interval(row['half_dl_ci_low'], row['half_dl_ci_high'])}"
        table.line("with DL/2 instead", ratio_text(row["half_dl_ratio"]), half_ci)
    change = f"change {percent_text(row['percent_change'])}"
    table.line("ratio of medians", ratio_text(row["median_ratio"]), change)
    test = "Welch" if row["test"] == "welch" else "pooled"
    on = f"{test} t on logs" if row["pair_by"] is None else "paired"
    degrees = f"df {plain_number(row['df'])}"
    table.line("log2 ratio", plain_number(row["log2_ratio"]), degrees, on)
    _pairing(table, row)
    holm, q = f"Holm {p_text(row['p_holm'])}", f"q {p_text(row['q_bh'])}"
    table.line("p", p_text(row["p_value"]), holm, q)
    bounds = interval_text(*band)
    tost = f"90% CI {interval(row['tost_ci_low'], row['tost_ci_high'])}"
    if table.fits(f"band {bounds}"):
        table.line(f"band {bounds}", row["band_class"] or MISSING, tost)
    else:
        table.line("band", row["band_class"] or MISSING, f"bounds {bounds}", tost)
    detectable = f"80% power detects {_times(row['detectable_ratio'])}"
    table.line("CI high/low", plain_number(row["ci_fold"]), detectable)
    if row["n_needed"] is not None:
        needed = "needed for the target ratio"
        table.line("n per group", plain_number(row["n_needed"]), needed)


def _pairing(table: _Table, row: ReviewedRow) -> None:
    """The units of a paired or crossover comparison: pairs, units left unpaired, values
    combined, the within-unit CV and the unit behind ``unit-dominates``."""
    if row["pair_by"] is None:
        return
    unit = visible(row["pair_by"])
    unpaired = (row["n_only_a"] or 0) + (row["n_only_b"] or 0) + (row["n_unpaired_left_out"] or 0)
    parts = [f"{unit}s at both levels", f"{count_text(unpaired)} unpaired"]
    if row["n_combined"]:
        parts.append(f"{count_text(row['n_combined'])} combined")
    table.line("pairs", count_text(row["n_pairs"]), *parts)
    cv = row["within_cv"]
    table.line("within-unit CV", MISSING if cv is None else f"{cv:.1%}", f"within the same {unit}")
    if row["influential_unit"]:
        table.line("dominant unit", visible(row["influential_unit"]), "see unit-dominates")


def _cross_checks(table: _Table, row: ReviewedRow, check: RobustCheck | None) -> None:
    if check is None:
        table.line("cross-checks", "press b", "bootstrap CI of the median ratio", "Hodges-Lehmann")
        return
    level = level_text(row["confidence"])
    bootstrap = interval(check.median_ratio_ci_low, check.median_ratio_ci_high, "–")
    of_what = f"BCa {level} CI of {ratio_text(check.median_ratio)}"
    table.line("bootstrap medians", bootstrap, of_what)
    # Mann-Whitney first: it keeps its place beside the ratio in a pane of 57 cells.
    mann_whitney = f"Mann-Whitney {p_text(check.mann_whitney_p, 'p')}"
    hl_ci = f"ratio CI {interval(check.hl_ci_low, check.hl_ci_high)}"
    table.line("Hodges-Lehmann", ratio_text(check.hl_ratio), mann_whitney, hl_ci)
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
