"""The text of the help and about pages (shown by ``dialogs.TextScreen``)."""

from __future__ import annotations

from foldsift.stats.diagnostics import WARNINGS
from foldsift.stats.equivalence import BAND_CLASSES, DEFAULT_BAND
from foldsift.stats.formatting import RATIO_RULE, interval_text

from .. import filtering
from .dialogs import CAUTIONS

#: Every key of the app and what it does, in the order the help lists them.
KEYS: tuple[tuple[str, str], ...] = (
    ("↑ ↓ / j k, page up/down, home/end", "move through the list"),
    ("click a column title", "sort on it (again: reverse)"),
    ("s / r", "sort on the next column / reverse the order"),
    ("/", "type in the filter line (enter returns to the list)"),
    ("space", "flag or unflag the highlighted comparison"),
    ("1 / 2 / 3 / 0", "decision: keep / doubt / drop / none"),
    (
        "n",
        "write a note (ctrl+s saves; escape closes, asking first if it changed; a draft is"
        " kept as you type)",
    ),
    ("b", "cross-checks: bootstrap CI of the median ratio, Hodges-Lehmann, Peto-Prentice"),
    ("B / escape", "cross-check every shown comparison (progress in the status) / stop"),
    ("x", "export flagged, decided, filtered or all rows to CSV, short or full"),
    ("z", "pane sizes: balanced, large detail, large list"),
    (
        "v",
        "view: the list; every shown row's interval on one ratio axis (● q < 0.05, ○ not;"
        " ◀ ▶ a bound past the edge); the evidence map (ratio against −log10 q)",
    ),
    ("g  (intervals)", "rows in the list's order, or grouped by outcome"),
    ("← → ↑ ↓  (map)", "to the nearest point that way; j k step in list order"),
    ("tab", "move between the list, the filter and the detail"),
    ("?  /  i", "this help / about, cautions and what the review file holds"),
    ("ctrl+q", "quit (every change is already saved; an open note is saved too)"),
)


#: The list's columns and marks, as the help explains them. Columns shown depend on the
#: terminal's width: the ones marked "always" are on screen at 80 columns.
LIST_COLUMNS: tuple[tuple[str, str], ...] = (
    ("⚑", "flagged (always)"),
    ("outcome", "the measured column, with its unit (always)"),
    (
        "level b ÷ level a",
        "the two groups compared: b over a, a is the reference; ⇄ instead of ÷ when they "
        "were compared within the same units (--pair-by) (always)",
    ),
    ("ratio", "geometric mean of b ÷ geometric mean of a (always)"),
    ("CI", "its confidence interval (always)"),
    (
        "1 on axis",
        "the CI drawn on one log axis shared by the shown rows: │ is ratio 1, ● the ratio, "
        "─ the interval, ◀ ▶ past the edge (the axis reaches the 95th percentile of the rows' "
        "farthest bounds)",
    ),
    ("q", "Benjamini-Hochberg adjusted p across the family (always)"),
    ("warn", "!N: the comparison carries N warnings; the detail explains each (always)"),
    ("decision", "keep, doubt or drop, as you decided (always)"),
    ("✎", "the comparison has a note (always)"),
    ("n b/a", "usable values in b and in a"),
    ("p", "the t-test's p before adjustment"),
    ("grouping", "the grouping column (·stratum when compared within strata)"),
    (
        "change",
        "percent change of b over a (a fold beyond -90% / +900%); sorts on the size of the "
        "change either way",
    ),
    ("class", "where the 90% CI falls against the band of no practical difference"),
    ("method", "t-test on logs, censored ML, or a substitution for below-detection values"),
)


def help_text(band: tuple[float, float] = DEFAULT_BAND) -> str:
    """Keys, the list's columns, filter words, equivalence classes (against ``band``) and
    warnings."""
    lines = ["# foldsift keys", ""]
    lines += [f"- **{key}** — {does}" for key, does in KEYS]
    lines += ["", "# The list", ""]
    lines += [
        "Columns follow the terminal's width: the optional ones appear when there is room, "
        "and the column sorted on is always shown. Rows in italics hold a review made on "
        "earlier data (the comparison has changed since); flagged rows are coloured.",
        "",
    ]
    lines += [f"- **{name}** — {what}" for name, what in LIST_COLUMNS]
    lines += ["", "# How ratios read", "", RATIO_RULE]
    lines += ["", "# Filter line", "", filtering.FILTER_WORDS]
    lines += ["", "# Equivalence classes", ""]
    lines += [f"The band of this scan: {interval_text(*band)} (set it with --band).", ""]
    lines += [f"- **{name}**: {text}" for name, text in BAND_CLASSES.items()]
    lines += ["", "# Warnings", ""]
    lines += [f"- **{name}**: {text}" for name, text in WARNINGS.items()]
    return "\n".join(lines)


def about_text() -> str:
    return (
        "# About foldsift\n\n"
        "Each comparison is a two-sample t-test on the logs (Welch by default). The ratio is "
        "exp(mean log b − mean log a), the ratio of geometric means of b over a; it is the "
        "ratio of medians when each group's logs are symmetric. The CI is exp() of the CI of "
        "the difference of mean logs. Holm and Benjamini-Hochberg (q) adjust across the family.\n\n"
        + CAUTIONS
    )
