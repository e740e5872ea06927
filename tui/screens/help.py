"""The text of the help and about pages (shown by ``dialogs.TextScreen``)."""

from __future__ import annotations

from foldsift.stats.diagnostics import WARNINGS
from foldsift.stats.equivalence import BAND_CLASSES, DEFAULT_BAND
from foldsift.stats.formatting import interval_text

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
    ("n", "write a note (ctrl+s saves, escape cancels; a draft is kept as you type)"),
    ("b", "cross-checks: bootstrap CI of the median ratio, Hodges-Lehmann"),
    ("B / escape", "cross-check every shown comparison (progress in the status) / stop"),
    ("x", "export flagged, decided, filtered or all rows to CSV"),
    ("z", "pane sizes: balanced, large detail, large list"),
    ("tab", "move between the list, the filter and the detail"),
    ("?  /  i", "this help / about, cautions and what the review file holds"),
    ("ctrl+q", "quit (every change is already saved; an open note is saved too)"),
)


def help_text(band: tuple[float, float] = DEFAULT_BAND) -> str:
    """Keys, filter words, equivalence classes (against ``band``) and warnings."""
    lines = ["# foldsift keys", ""]
    lines += [f"- **{key}** — {does}" for key, does in KEYS]
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
