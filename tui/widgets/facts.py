"""The facts of one comparison as a single rich Text: the sentence, a small aligned table of
numbers, the warnings explained and the review state. One Text (not a rich Table) keeps the
repaint cheap when the cursor moves."""

from __future__ import annotations

from rich.text import Text

from foldsift.stats.diagnostics import explain
from foldsift.stats.robust import RobustCheck
from foldsift.stats.sentence import finding, number, p_text, ratio_text

from .histograms import STYLE_A, STYLE_B

LABEL_WIDTH = 18
VALUE_WIDTH = 13


def _count(value: int | None) -> str:
    return "–" if value is None else str(value)


def facts_text(
    row: dict, band: tuple[float, float], check: RobustCheck | None, width: int = 80
) -> Text:
    """The facts as one Text; ``width`` narrows the columns so that rows fit a small pane."""
    label_width, value_width = (LABEL_WIDTH, VALUE_WIDTH) if width >= 46 else (15, 10)
    text = Text()
    text.append(finding(row) + "\n\n", style="bold")
    text.append(" " * label_width)
    text.append(
        f"a: {row['level_a']}"[: value_width - 1].ljust(value_width), style=f"bold {STYLE_A}"
    )
    text.append(f"b: {row['level_b']}"[: value_width - 1] + "\n", style=f"bold {STYLE_B}")

    def pair(label: str, name: str, fmt=number) -> None:
        text.append(label[:label_width].ljust(label_width))
        text.append(fmt(row.get(name + "_a")).ljust(value_width), style=STYLE_A)
        text.append(fmt(row.get(name + "_b")) + "\n", style=STYLE_B)

    def line(label: str, value: str, extra: str = "") -> None:
        text.append(label[:label_width].ljust(label_width))
        text.append(value.ljust(value_width), style="bold")
        text.append(extra + "\n")

    pair("n used", "n", _count)
    pair("left out", "n_excluded", _count)
    pair("substituted", "n_substituted", _count)
    pair("below detection", "n_censored", _count)
    pair("geometric mean", "gm")
    pair("median", "median")
    pair("log SD", "sd_log")
    pair("skewness (logs)", "skew_log")
    pair("skewness (raw)", "skew_raw")
    pair("Shapiro p (logs)", "shapiro_p", p_text)
    text.append("\n")
    level = round(100 * row["confidence"])
    test = "Welch" if row["test"] == "welch" else "pooled"
    line(
        "ratio b/a (GM)",
        ratio_text(row["ratio"]),
        f"{level}% CI {ratio_text(row['ci_low'])} to {ratio_text(row['ci_high'])}",
    )
    line(
        "ratio of medians",
        ratio_text(row["median_ratio"]),
        f"change {number(row['percent_change'])}%",
    )
    line(
        "log2 ratio",
        number(row.get("log2_ratio")),
        f"df {number(row.get('df'))} ({test} t on logs)",
    )
    line("p", p_text(row["p_value"]), f"Holm {p_text(row['p_holm'])} · q {p_text(row['q_bh'])}")
    line(
        f"band {band[0]:g}–{band[1]:g}",
        row.get("band_class") or "–",
        f"90% CI {ratio_text(row.get('tost_ci_low'))} to {ratio_text(row.get('tost_ci_high'))}",
    )
    line(
        "CI high/low",
        number(row.get("ci_fold")),
        f"80%-power detectable {ratio_text(row.get('detectable_ratio'))}×",
    )
    if row.get("n_needed") is not None:
        line("n per group needed", number(row["n_needed"]), "for the target ratio")
    if check is not None:
        line(
            "bootstrap medians",
            f"{ratio_text(check.median_ratio_ci_low)}–{ratio_text(check.median_ratio_ci_high)}",
            f"BCa {level}% CI of {ratio_text(check.median_ratio)}",
        )
        line(
            "Hodges-Lehmann",
            ratio_text(check.hl_ratio),
            f"CI {ratio_text(check.hl_ci_low)} to {ratio_text(check.hl_ci_high)}, "
            f"Mann-Whitney {p_text(check.mann_whitney_p, 'p')}",
        )
    else:
        line("cross-checks", "press b", "bootstrap CI of the median ratio, Hodges-Lehmann")
    text.append("\n")
    for name, explanation in explain(row["warnings"]):
        text.append(f"! {name}", style="bold yellow")
        text.append(f"  {explanation}\n")
    if not row["warnings"]:
        text.append("no warnings\n", style="green")
    review = []
    if row.get("decision"):
        review.append(f"decision: {row['decision']}")
    if row.get("flagged"):
        review.append("flagged")
    if row.get("on_earlier_data"):
        review.append("review made on an earlier version of the data file")
    if review:
        text.append(" · ".join(review) + "\n", style="bold")
    if row.get("note"):
        text.append("note: ", style="bold")
        text.append(row["note"] + "\n")
    return text
