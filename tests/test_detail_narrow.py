"""The detail pane's facts at the widths the pane has: 37 cells in an 80x24 terminal, 57 at
120x36, 97 and 98 at 200x50 (with and without its scroll bar), 32 at 70x20, and 45 and 46,
either side of the width where short labels begin. Rows of the demo: a censored-ML row, a
row whose geometric means run to five digits (both with the n per group a target ratio of
1.5 needs), a paired row of the plot survey scanned with
pair_by="plot", and a row with no result (a plot of the survey scanned unpaired, too few
values); each without cross-checks ("press b") and with them.

What is checked, on the lines the pane shows (the Text as Textual wraps it for the Static):
every label is followed by at least one space and then its own value; no line is wider
than the pane, and the table's lines are no wider before the wrap either (so they are shown
as laid out, not broken at column 0); no number is in e-notation; an interval that cannot
be given reads "none"; the method and its remark are on lines of their own.

References: p and q values as ``stats.formatting`` writes them (the list's rule, unchanged
by the pane); geometric means against scipy.stats.gmean of the group's values; the Welch
degrees of freedom against scipy.stats.ttest_ind(equal_var=False) on the logs; plain figures
read back with Python's float().
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import numpy as np
import polars as pl
import pytest
from rich.cells import cell_len
from scipy import stats as scipy_stats
from textual.content import Content
from textual.geometry import Region

from foldsift.demo.generate import demo_path, plots_path
from foldsift.stats.columns import ReviewedRow, reviewed_row
from foldsift.stats.formatting import any_fold, count_text, p_text, ratio_text
from foldsift.stats.robust import RobustCheck
from foldsift.stats.scan import ScanSettings
from foldsift.tui.session import ReviewSession, SessionOptions
from foldsift.tui.widgets.detail import Facts
from foldsift.tui.widgets.facts import NO_INTERVAL, facts_text, plain_number

from app_support import current, review, running

BAND = (0.8, 1.25)
#: 37: the pane at 80x24; 57: 120x36; 97/98: 200x50; 32: 70x20; 45/46: either side of the
#: width where the short labels begin.
WIDTHS = (32, 37, 45, 46, 57, 97, 98)
TITLES = {"the estimate", "the two groups", "cross-checks"}
#: Every label the table may show, in full and short.
LABELS = (
    "ratio b/a (GM)",
    "GM ratio b/a",
    "method",
    "with DL/2 instead",
    "with DL/2",
    "ratio of medians",
    "median ratio",
    "log2 ratio",
    "pairs",
    "within-unit CV",
    "within CV",
    "dominant unit",
    "p",
    "band 0.80–1.25",
    "band",
    "CI high/low",
    "n per group",
    "n used",
    "left out",
    "substituted",
    "below detection",
    "below limit",
    "detection limits",
    "limits",
    "geometric mean",
    "geo. mean",
    "median",
    "median (K-M)",
    "log SD",
    "skewness (logs)",
    "skew (logs)",
    "skewness (raw)",
    "skew (raw)",
    "Shapiro p (logs)",
    "Shapiro (log)",
    "ND, no limit",
    "above range",
    "estimated (J)",
    "no fit for a",
    "no fit for b",
    "cross-checks",
    "bootstrap medians",
    "bootstrap",
    "Hodges-Lehmann",
    "HL ratio",
    "Peto-Prentice",
)
#: The first value after a label, from the row as ``stats.formatting`` writes it.
FIRST_VALUE: dict[str, Callable[[dict[str, Any]], str]] = {
    "ratio b/a (GM)": lambda r: ratio_text(
        r["ratio"], any_fold(r["ratio"], r["ci_low"], r["ci_high"])
    ),
    "with DL/2 instead": lambda r: ratio_text(r["half_dl_ratio"]),
    "ratio of medians": lambda r: ratio_text(r["median_ratio"]),
    "p": lambda r: p_text(r["p_value"]),
    "pairs": lambda r: count_text(r["n_pairs"]),
    "n used": lambda r: f"{count_text(r['n_a'])} {count_text(r['n_b'])}",
    "below detection": lambda r: count_text(r["n_censored_a"]),
    "Shapiro p (logs)": lambda r: f"{p_text(r['shapiro_p_a'])} {p_text(r['shapiro_p_b'])}",
    "method": lambda r: str(r["method"]),
}
FIRST_VALUE.update(
    {
        "GM ratio b/a": FIRST_VALUE["ratio b/a (GM)"],
        "with DL/2": FIRST_VALUE["with DL/2 instead"],
        "median ratio": FIRST_VALUE["ratio of medians"],
        "below limit": FIRST_VALUE["below detection"],
        "Shapiro (log)": FIRST_VALUE["Shapiro p (logs)"],
    }
)
#: The remark under each method shown by these rows.
METHOD_REMARKS = {
    "censored ML": "below-detection entries fitted at their limits (lognormal)",
    "t-test on logs": "no entries below detection",
    "paired t on logs": "within-unit log ratios (units measured at both levels)",
}
E_NOTATION = re.compile(r"\d(?:\.\d+)?[eE][+-]?\d")


# -- the rows ------------------------------------------------------------------------------


class Case:
    """A row of the demo, its session (for the groups' values) and its cross-checks."""

    def __init__(self, session: ReviewSession, row: ReviewedRow) -> None:
        self.session = session
        self.row = row
        session.cross_check(session.rows.filter(pl.col("key") == row["key"]))
        self.check: RobustCheck = session.checks[row["key"]]


def _first(frame: pl.DataFrame, condition: pl.Expr) -> ReviewedRow:
    found = frame.filter(condition)
    assert found.height, f"the demo has no row where {condition}"
    return reviewed_row(found, 0)


@pytest.fixture(scope="module")
def cases(tmp_path_factory: pytest.TempPathFactory) -> Iterator[dict[str, Case]]:
    folder = tmp_path_factory.mktemp("detail")
    # A target ratio adds the row of the n per group it needs.
    soils = ReviewSession.open(
        SessionOptions(
            demo_path(),
            reviews_path=folder / "s.sqlite",
            settings=ScanSettings(target_ratio=1.5),
        )
    )
    paired = ReviewSession.open(
        SessionOptions(
            plots_path(),
            reviews_path=folder / "p.sqlite",
            settings=ScanSettings(pair_by="plot"),
        )
    )
    # Plots named as a grouping (guessing takes plot labels for units): a plot sampled once
    # has one value, so some comparisons have no result.
    unpaired = ReviewSession.open(
        SessionOptions(plots_path(), groupings=("plot",), reviews_path=folder / "u.sqlite")
    )
    method = pl.col("method").cast(pl.String)
    try:
        yield {
            "censored ML": Case(
                soils, _first(soils.rows, (method == "censored ML") & (pl.col("n_censored_b") > 0))
            ),
            "large means": Case(
                soils,
                _first(
                    soils.rows,
                    (pl.col("outcome").cast(pl.String) == "iron_mg_per_kg")
                    & (pl.col("gm_b") > 10_000),
                ),
            ),
            "paired": Case(paired, _first(paired.rows, method == "paired t on logs")),
            "no result": Case(unpaired, _first(unpaired.rows, pl.col("ratio").is_null())),
        }
    finally:
        for session in (soils, paired, unpaired):
            session.close()


def pane_lines(case: Case, width: int, checked: bool) -> tuple[list[str], list[str]]:
    """The lines the pane shows (the Static wraps the Text to its width), and the table's
    lines as written (from "the estimate" on)."""
    text = facts_text(case.row, BAND, case.check if checked else None, width)
    shown = [line.plain for line in Content.from_rich_text(text).wrap(width)]
    written = text.plain.split("\n")
    return shown, written[written.index("the estimate") :]


def table_part(lines: list[str]) -> list[str]:
    return lines[lines.index("the estimate") :]


# -- the label check, and that it catches what was reported ----------------------------------


def label_problems(lines: list[str], row: dict[str, Any] | None = None) -> list[str]:
    """Lines of the table whose label is unknown (cut), touches its value, or is followed by
    another value than its own."""
    problems = []
    for line in lines:
        if not line.strip() or line in TITLES or line.startswith((" ", "a: ")):
            continue  # a blank line, a title, a continuation or the groups' names
        known = [label for label in LABELS if line.startswith(label)]
        if not known:
            problems.append(f"no whole label: {line!r}")
            continue
        label = max(known, key=len)
        rest = line[len(label) :]
        if rest and not rest.startswith(" "):
            problems.append(f"label touches its value: {line!r}")
        elif row is not None and label in FIRST_VALUE:
            expected = FIRST_VALUE[label](row)
            if rest.split()[: len(expected.split())] != expected.split():
                problems.append(f"{label!r} is not followed by {expected!r}: {line!r}")
    return problems


def test_the_label_check_catches_the_lines_reported_at_80x24() -> None:
    """The lines a newcomer saw at 80x24 before the change are caught (the value 4.58 after
    the DL/2 label was the row's ratio)."""
    reported = [
        "with DL/2 inste4.58      95% CI 3.41 to 6.16",
        "ratio of median3.96      change +296%",
        "below detection15 (32%)  2 (4%)",
        "detection limit120       120",
        "Shapiro p (logs–         –",
    ]
    row = {"half_dl_ratio": 4.58}
    assert len(label_problems(reported, row)) == len(reported)


# -- the pane at each width ------------------------------------------------------------------


@pytest.mark.parametrize("checked", [False, True], ids=["press-b", "cross-checked"])
@pytest.mark.parametrize("width", WIDTHS)
@pytest.mark.parametrize("name", ["censored ML", "large means", "paired", "no result"])
def test_every_label_is_followed_by_a_space_and_its_value(
    cases: dict[str, Case], name: str, width: int, checked: bool
) -> None:
    shown, written = pane_lines(cases[name], width, checked)
    assert label_problems(table_part(shown), dict(cases[name].row)) == []
    assert table_part(shown) == written, "the table is shown as laid out"


@pytest.mark.parametrize("checked", [False, True], ids=["press-b", "cross-checked"])
@pytest.mark.parametrize("width", WIDTHS)
@pytest.mark.parametrize("name", ["censored ML", "large means", "paired", "no result"])
def test_no_line_is_wider_than_the_pane_and_no_number_in_e_notation(
    cases: dict[str, Case], name: str, width: int, checked: bool
) -> None:
    shown, written = pane_lines(cases[name], width, checked)
    assert [line for line in shown if cell_len(line) > width] == []
    assert [line for line in written if cell_len(line) > width] == []
    assert [line for line in shown if E_NOTATION.search(line)] == []


@pytest.mark.parametrize("width", WIDTHS)
@pytest.mark.parametrize("name", ["censored ML", "large means", "paired", "no result"])
def test_the_method_and_its_remark_are_on_lines_of_their_own(
    cases: dict[str, Case], name: str, width: int
) -> None:
    row = cases[name].row
    _, written = pane_lines(cases[name], width, False)
    at = next(i for i, line in enumerate(written) if line.startswith("method "))
    assert written[at].split(None, 1)[1] == row["method"]
    remark = []
    for line in written[at + 1 :]:
        if not line.startswith(" "):
            break
        remark.append(line.strip())
    assert " ".join(remark) == METHOD_REMARKS[str(row["method"])]


@pytest.mark.parametrize("width", WIDTHS)
def test_no_result_reads_none_for_every_interval(cases: dict[str, Case], width: int) -> None:
    shown, _ = pane_lines(cases["no result"], width, True)
    text = "\n".join(shown)
    assert "–––" not in text and "– to –" not in text and "– –" not in text
    after_ci = re.findall(r"\bCI (\S+)", text)
    # the ratio's, the band's 90% and the Hodges-Lehmann CI ("CI of" is the bootstrap's
    # remark, "CI high/low" a label)
    intervals = [word for word in after_ci if word not in ("of", "high/low")]
    assert intervals == [NO_INTERVAL] * 3
    bootstrap = next(line for line in shown if line.startswith("bootstrap"))
    value = bootstrap.removeprefix("bootstrap medians").removeprefix("bootstrap").split()
    assert value[0] == NO_INTERVAL


# -- the figures read right ------------------------------------------------------------------


def _shown_number(text: str) -> float:
    return float(text.replace(",", ""))


@pytest.mark.parametrize("width", [37, 57])
def test_five_digit_means_and_df_are_plain_and_match_scipy(
    cases: dict[str, Case], width: int
) -> None:
    """Geometric means against scipy.stats.gmean of each group's values, Welch df against
    scipy.stats.ttest_ind(equal_var=False) on the logs, to the three significant digits (or
    the whole number) shown."""
    case = cases["large means"]
    values_a, values_b = case.session.group_values(case.row)
    shown, _ = pane_lines(case, width, False)
    shown = shown[shown.index("the estimate") :]  # the table, not the sentence above it
    means = next(line for line in shown if line.startswith(("geometric mean", "geo. mean")))
    gm_a, gm_b = (_shown_number(word) for word in means.split()[-2:])
    assert gm_a == pytest.approx(scipy_stats.gmean(values_a), abs=0.5)
    assert gm_b == pytest.approx(scipy_stats.gmean(values_b), abs=0.5)
    assert "," in means.split()[-1]  # 17,824: separated thousands
    welch = scipy_stats.ttest_ind(np.log(values_b), np.log(values_a), equal_var=False)
    df = re.search(r"\bdf ([0-9][0-9,.]*)", "\n".join(shown))
    assert df is not None
    assert _shown_number(df.group(1)) == pytest.approx(welch.df, rel=5e-3)


@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_plain_numbers_from_a_trillionth_to_a_quadrillion(sign: float) -> None:
    """Every magnitude reads without e-notation and, read back with float(), is the value to
    the digits shown: three significant digits below 1,000 and from a million (M, bn, tn),
    the whole number from 1,000, three decimals from 0.001 to 1."""
    scales = {"M": 1e6, "bn": 1e9, "tn": 1e12}
    for value in sign * np.geomspace(1e-11, 1e15, 261):
        text = plain_number(float(value))
        assert not E_NOTATION.search(text), text
        suffix = next((s for s in scales if text.endswith(s)), "")
        back = _shown_number(text.removesuffix(suffix)) * scales.get(suffix, 1.0)
        size = abs(value)
        if 1e-3 <= size < 1:
            assert back == pytest.approx(value, abs=5e-4), text
        elif 1e3 <= size < 1e6:
            assert back == pytest.approx(value, abs=0.5), text
        else:
            assert back == pytest.approx(value, rel=5e-3), text
    assert plain_number(1050.3) == "1,050"
    assert plain_number(999.7) == "1,000"
    assert plain_number(math.nan) == "–"
    assert plain_number(sign * 1e-13) == "≈0"  # below TINY: the digits would fill the line


# -- the pane in the app ---------------------------------------------------------------------


@pytest.mark.usefixtures("sandbox")
@pytest.mark.parametrize("size", [(80, 24), (120, 36), (200, 50)])
async def test_the_pane_paints_the_table_as_laid_out(tmp_path: Path, size: tuple[int, int]) -> None:
    """The facts are laid out for the width the pane paints them in (the pane less its
    scroll bar), so the painted table is the written one, line for line."""
    async with running(tmp_path, size=size) as (app, pilot):
        for key in ("z", "z", "z"):  # every pane size
            facts = review(app).query_one(Facts)
            sentence = review(app).query_one("#sentence")
            width = sentence.size.width
            assert facts.text_width in (width, width - 1)  # less one where no bar shows
            region = Region(0, 0, width, sentence.size.height)
            painted = [strip.text.rstrip() for strip in sentence.render_lines(region)]
            written = str(sentence.render()).split("\n")
            assert table_part(painted) == [line.rstrip() for line in table_part(written)]
            assert label_problems(table_part(painted), dict(current(app))) == []
            await pilot.press(key)
            await pilot.pause()
