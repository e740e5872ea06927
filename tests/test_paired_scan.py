"""Paired and 2×2 crossover designs through the whole scan: ``foldsift scan --pair-by``,
``run_scan`` and the review session, against independent references.

Sources, named beside each check:

* scipy.stats.ttest_rel on the logs of the units with both values (t, p, df and its
  ``confidence_interval``): the paired t-test (NIST/SEMATECH e-Handbook of Statistical
  Methods, sec. 7.3.1). Several values of a unit at one level are combined by their
  geometric mean first: that rule is the project's, the test is scipy's.
* scipy.stats.ttest_ind(equal_var=False) on the logs: Welch's test for a grouping whose
  levels are not measured on the same units.
* statsmodels ``multipletests(method="fdr_bh")``: Benjamini-Hochberg q-values over the
  whole scan's p-values.
* statsmodels ``ttost_paired``: two one-sided paired tests against the band (0.80, 1.25)
  on the logs; the 90% CI of the ratio from scipy's paired CI at 0.90 (the interval the
  two one-sided tests at 5% use; common practice).
* statsmodels OLS of ``logy ~ C(sequence) + C(subject) + C(period) + C(treatment)``: the
  usual analysis of variance of a 2×2 crossover on the logs (treatment coefficient, its
  95% and 90% CIs, p, residual mean square).
* The lognormal CV, sqrt(exp(sigma^2) - 1), with sigma^2 = s_d^2 / 2 the log variance of one
  measurement (standard property of the lognormal distribution; from memory).
* Counts (pairs, units at one level only, units left out, combined values) and the
  geometric means of duplicates: a plain Python loop over the CSV rows in this file.
* Open data: ACTG 175 (AIDS Clinical Trials Group Study 175; Hammer et al., N Engl J Med
  1996;335:1081-1090) shipped with lifelines as ``lifelines/datasets/ACTG175.csv``: CD4
  counts of the same patients at weeks 0, 20 and 96 (cd40, cd420, cd496).
* Identities (common practice): swapping the reference level inverts the ratio and its CI;
  scaling one level's values by k scales the ratio by k; the geometric mean of the
  within-unit ratios is the ratio of a paired comparison (exp of the mean log ratio).
"""

from __future__ import annotations

import csv
import importlib.resources
import io
import math
import warnings
from collections import defaultdict
from pathlib import Path

import numpy as np
import pandas as pd
import polars as pl
import pytest
import statsmodels.formula.api as smf
from scipy import stats as sps
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.weightstats import ttost_paired

from foldsift.stats.errors import InputError
from foldsift.stats.load import load_table
from foldsift.stats.policy import ValuePolicy
from foldsift.stats.scan import ScanSettings, run_scan
from foldsift.tui.cli import main
from foldsift.tui.session import ReviewSession, SessionOptions

#: Agreement with scipy / statsmodels on the same arithmetic (values pass through a CSV
#: written with full float precision).
RTOL = 1e-9
EXIT_BAD_INPUT = 2
BAND = (0.8, 1.25)
YEARS = ("2019", "2020", "2021")
#: Columns of the scan's CSV read as text (levels and names look like numbers).
TEXT = ("grouping", "within", "stratum", "level_a", "level_b", "pair_by", "influential_unit")


# -- helpers --------------------------------------------------------------------------------


def write_rows(path: Path, rows: list[dict[str, object]]) -> Path:
    fields = list(dict.fromkeys(name for row in rows for name in row))
    with path.open("w", newline="") as handle:
        writer = csv.DictWriter(handle, fieldnames=fields)
        writer.writeheader()
        writer.writerows(rows)
    return path


def read_rows(path: Path) -> list[dict[str, str]]:
    with path.open(newline="") as handle:
        return list(csv.DictReader(handle))


def scan_cli(capsys: pytest.CaptureFixture[str], path: Path, *options: str) -> pl.DataFrame:
    """``foldsift scan PATH OPTIONS`` in process; the CSV it prints as a frame."""
    code = main(["scan", str(path), *options])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    return pl.read_csv(
        io.StringIO(captured.out),
        schema_overrides=dict.fromkeys(TEXT, pl.Utf8),
        infer_schema_length=None,
    )


def refused(capsys: pytest.CaptureFixture[str], path: Path, *options: str) -> str:
    """Exit status 2, nothing on stdout, one stderr line starting 'foldsift:'."""
    code = main(["scan", str(path), *options])
    captured = capsys.readouterr()
    assert code == EXIT_BAD_INPUT
    assert captured.out == ""
    lines = [line for line in captured.err.splitlines() if line.strip()]
    assert len(lines) == 1, captured.err
    assert lines[0].startswith("foldsift:") and "Traceback" not in captured.err
    return lines[0]


def row_of(frame: pl.DataFrame, grouping: str, outcome: str, a: str, b: str) -> dict:
    chosen = frame.filter(
        (pl.col("grouping") == grouping)
        & (pl.col("outcome") == outcome)
        & (pl.col("level_a") == a)
        & (pl.col("level_b") == b)
    )
    assert chosen.height == 1, (grouping, outcome, a, b)
    return chosen.row(0, named=True)


def positive(text: str | None) -> float | None:
    """A plain number entry that the log can take (zero, negative, blank or text: None)."""
    try:
        value = float(text or "")
    except ValueError:
        return None
    return value if value > 0 else None


def reference_pairs(
    rows: list[dict[str, str]],
    unit: str,
    grouping: str,
    outcome: str,
    a: str,
    b: str,
    read=positive,
) -> dict[str, object]:
    """Pairs and counts of one comparison by a plain loop. ``read`` turns an entry into the
    value used (None: written but not used); several used values of a unit at a level are
    combined by their geometric mean; a unit whose only entries at a level were not used is
    left out."""
    used: dict[tuple[str, str], list[float]] = defaultdict(list)
    written: set[tuple[str, str]] = set()
    for row in rows:
        if row[grouping] not in (a, b) or not row[outcome].strip():
            continue
        key = (row[unit], row[grouping])
        written.add(key)
        value = read(row[outcome])
        if value is not None:
            used[key].append(value)
    counts = dict.fromkeys(("n_pairs", "n_only_a", "n_only_b", "n_left_out", "n_combined"), 0)
    x, y, names = [], [], []
    for name in sorted({u for u, _ in written}):
        at_a, at_b = used.get((name, a), []), used.get((name, b), [])
        if at_a and at_b:
            counts["n_pairs"] += 1
            counts["n_combined"] += (len(at_a) > 1) + (len(at_b) > 1)
            x.append(math.exp(sum(math.log(v) for v in at_a) / len(at_a)))
            y.append(math.exp(sum(math.log(v) for v in at_b) / len(at_b)))
            names.append(name)
        elif ((name, a) in written and not at_a) or ((name, b) in written and not at_b):
            counts["n_left_out"] += 1
        elif at_a:
            counts["n_only_a"] += 1
        else:
            counts["n_only_b"] += 1
    return {**counts, "x": np.array(x), "y": np.array(y), "units": names}


def assert_paired_t(row: dict, x: np.ndarray, y: np.ndarray, confidence: float = 0.95) -> None:
    """Ratio, CI, p, df and t of a row equal scipy's ttest_rel on the logs (b = y, a = x)."""
    test = sps.ttest_rel(np.log(y), np.log(x))
    low, high = test.confidence_interval(confidence)
    assert row["ratio"] == pytest.approx(math.exp(np.mean(np.log(y) - np.log(x))), rel=RTOL)
    assert row["ci_low"] == pytest.approx(math.exp(low), rel=RTOL)
    assert row["ci_high"] == pytest.approx(math.exp(high), rel=RTOL)
    assert row["p_value"] == pytest.approx(test.pvalue, rel=1e-7)
    assert row["t"] == pytest.approx(test.statistic, rel=RTOL)
    assert row["df"] == test.df


# -- 1. wells × years -----------------------------------------------------------------------


def wells_rows(seed: int = 11, wells: int = 24) -> list[dict[str, object]]:
    """Wells (each in one site) sampled in 3 years: arsenic rises by year, zinc barely
    changes; some wells miss a year, W03 has two rows in 2020 and W07's 2021 arsenic is 0."""
    rng = np.random.default_rng(seed)
    rows: list[dict[str, object]] = []
    skipped = {(2, "2019"), (5, "2021"), (9, "2020"), (14, "2019"), (14, "2021"), (20, "2020")}
    for w in range(wells):
        effect = rng.normal(0, 0.8)
        for j, year in enumerate(YEARS):
            if (w, year) in skipped:
                continue
            copies = 2 if (w, year) == (3, "2020") else 1
            for _ in range(copies):
                rows.append(
                    {
                        "well": f"W{w:02d}",
                        "site": "north" if w < wells // 2 else "south",
                        "year": year,
                        "arsenic": math.exp(1 + effect + 0.25 * j + rng.normal(0, 0.3)),
                        "zinc": math.exp(3 + effect + 0.01 * j + rng.normal(0, 0.04)),
                    }
                )
    for row in rows:
        if row["well"] == "W07" and row["year"] == "2021":
            row["arsenic"] = 0.0
    return rows


@pytest.fixture(scope="module")
def wells_csv(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return write_rows(tmp_path_factory.mktemp("wells") / "wells.csv", wells_rows())


@pytest.fixture
def wells_scan(capsys, wells_csv) -> pl.DataFrame:
    return scan_cli(capsys, wells_csv, "--pair-by", "well")


def test_paired_rows_match_ttest_rel_and_plain_counts(wells_scan, wells_csv):
    rows = read_rows(wells_csv)
    paired = wells_scan.filter(pl.col("grouping") == "year")
    assert paired.height == 6  # 3 level pairs × 2 outcomes
    seen = set()
    for outcome in ("arsenic", "zinc"):
        for i, j in ((0, 1), (0, 2), (1, 2)):
            a, b = YEARS[i], YEARS[j]
            row = row_of(paired, "year", outcome, a, b)
            ref = reference_pairs(rows, "well", "year", outcome, a, b)
            # Counts: the plain loop above.
            got = [row[k] for k in ("n_pairs", "n_only_a", "n_only_b", "n_combined")]
            assert got == [ref[k] for k in ("n_pairs", "n_only_a", "n_only_b", "n_combined")]
            assert row["n_unpaired_left_out"] == ref["n_left_out"]
            assert row["method"] == "paired t on logs" and row["pair_by"] == "well"
            # scipy ttest_rel on the logs of the units with both values.
            assert_paired_t(row, ref["x"], ref["y"])
            # Lognormal CV with the log variance of one measurement s_d^2 / 2.
            s_d = np.std(np.log(ref["y"]) - np.log(ref["x"]), ddof=1)
            assert row["within_cv"] == pytest.approx(math.sqrt(math.exp(s_d**2 / 2) - 1), rel=RTOL)
            seen |= {k for k in ("n_only_a", "n_only_b", "n_combined", "n_left_out") if ref[k]}
    # The data exercise every count: units at one level only, combined values, left out.
    assert seen == {"n_only_a", "n_only_b", "n_combined", "n_left_out"}


def test_paired_equivalence_matches_ttost_paired(wells_scan, wells_csv):
    rows = read_rows(wells_csv)
    classes = set()
    for row in wells_scan.filter(pl.col("grouping") == "year").iter_rows(named=True):
        ref = reference_pairs(rows, "well", "year", row["outcome"], row["level_a"], row["level_b"])
        logx, logy = np.log(ref["x"]), np.log(ref["y"])
        # statsmodels' two one-sided paired tests on the logs against log(0.8), log(1.25).
        p_tost, _, _ = ttost_paired(logy, logx, math.log(BAND[0]), math.log(BAND[1]))
        assert row["p_tost"] == pytest.approx(p_tost, rel=1e-7)
        low90, high90 = sps.ttest_rel(logy, logx).confidence_interval(0.90)
        assert row["tost_ci_low"] == pytest.approx(math.exp(low90), rel=RTOL)
        assert row["tost_ci_high"] == pytest.approx(math.exp(high90), rel=RTOL)
        inside = BAND[0] <= math.exp(low90) and math.exp(high90) <= BAND[1]
        excludes_one = row["ci_low"] > 1 or row["ci_high"] < 1
        expected = {
            (True, True): "minor-difference",
            (True, False): "different",
            (False, True): "equivalent",
            (False, False): "inconclusive",
        }[(excludes_one, inside)]
        assert row["band_class"] == expected
        classes.add(expected)
    assert len(classes) >= 2  # the data reach more than one class


def test_grouping_not_within_units_stays_welch_and_q_spans_the_scan(wells_scan, wells_csv):
    rows = read_rows(wells_csv)
    for outcome in ("arsenic", "zinc"):
        row = row_of(wells_scan, "site", outcome, "north", "south")
        logs = {
            site: np.log([v for r in rows if r["site"] == site and (v := positive(r[outcome]))])
            for site in ("north", "south")
        }
        # scipy's Welch test on the logs of every usable row.
        test = sps.ttest_ind(logs["south"], logs["north"], equal_var=False)
        low, high = test.confidence_interval(0.95)
        assert row["method"] == "t-test on logs"
        assert row["pair_by"] is None and row["n_pairs"] is None and row["within_cv"] is None
        assert row["ratio"] == pytest.approx(
            math.exp(logs["south"].mean() - logs["north"].mean()), rel=RTOL
        )
        assert (row["ci_low"], row["ci_high"]) == pytest.approx(
            (math.exp(low), math.exp(high)), rel=RTOL
        )
        assert row["p_value"] == pytest.approx(test.pvalue, rel=1e-7)
        assert row["df"] == pytest.approx(test.df, rel=RTOL)
    # statsmodels Benjamini-Hochberg over every p of the scan (paired and independent).
    _, q, _, _ = multipletests(wells_scan["p_value"].to_numpy(), method="fdr_bh")
    np.testing.assert_allclose(wells_scan["q_bh"].to_numpy(), q, rtol=RTOL)
    assert wells_scan.height == 8


def test_run_scan_gives_the_cli_numbers(wells_csv, wells_scan):
    """The same scan through load_table(design=...) and run_scan."""
    table = load_table(wells_csv, design=["well"])
    assert "well" not in table.groupings and "well" not in table.outcomes
    result = run_scan(table, ScanSettings(pair_by="well"))
    mine = result.comparisons.sort("key")
    cli = wells_scan.sort("key")
    assert mine["key"].to_list() == cli["key"].to_list()
    for name in ("ratio", "ci_low", "ci_high", "p_value", "q_bh", "within_cv"):
        np.testing.assert_allclose(
            mine[name].cast(pl.Float64).fill_null(np.nan).to_numpy(),
            cli[name].cast(pl.Float64).fill_null(np.nan).to_numpy(),
            rtol=1e-12,
        )
    with pytest.raises(InputError, match="the unit column 'well' was not read"):
        run_scan(load_table(wells_csv), ScanSettings(pair_by="well"))


# -- 2. ACTG 175 ----------------------------------------------------------------------------


@pytest.fixture(scope="module")
def actg_csv(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, list[dict[str, str]]]:
    """One row per patient × week (0, 20, 96) with the CD4 count; a missing count is a
    blank cell."""
    pytest.importorskip("lifelines")
    source = importlib.resources.files("lifelines.datasets") / "ACTG175.csv"
    with source.open(newline="") as handle:
        wide = list(csv.DictReader(handle))
    columns = {"0": "cd40", "20": "cd420", "96": "cd496"}
    long = [
        {"patient": f"p{r['pidnum']}", "week": week, "cd4": "" if r[c] == "NA" else r[c]}
        for week, c in columns.items()
        for r in wide
    ]
    path = write_rows(tmp_path_factory.mktemp("actg") / "actg175_long.csv", long)
    return path, read_rows(path)


def test_actg175_cd4_by_week_matches_ttest_rel(capsys, actg_csv):
    path, rows = actg_csv
    frame = scan_cli(capsys, path, "--pair-by", "patient", "--group", "week", "--outcome", "cd4")
    assert frame.height == 3
    for a, b in (("0", "20"), ("0", "96"), ("20", "96")):
        row = row_of(frame, "week", "cd4", a, b)
        ref = reference_pairs(rows, "patient", "week", "cd4", a, b)
        assert row["n_pairs"] == ref["n_pairs"] > 1000
        assert (row["n_only_a"], row["n_only_b"]) == (ref["n_only_a"], ref["n_only_b"])
        assert row["n_unpaired_left_out"] == ref["n_left_out"]
        assert row["method"] == "paired t on logs"
        assert_paired_t(row, ref["x"], ref["y"])  # scipy ttest_rel on the logs
    # Week 96 is missing for many patients: they are at one level only.
    assert row_of(frame, "week", "cd4", "0", "96")["n_only_a"] > 500


# -- 3. 2×2 crossover -----------------------------------------------------------------------


def crossover_rows(seed: int, sizes: tuple[int, int]) -> list[dict[str, object]]:
    """Sequences RT and TR; subject and period effects; treatment T at 0.9 × R."""
    rng = np.random.default_rng(seed)
    rows: list[dict[str, object]] = []
    for sequence, size in zip(("RT", "TR"), sizes, strict=True):
        for k in range(size):
            subject = rng.normal(0, 0.5, size=2)
            for period in (1, 2):
                treatment = sequence[period - 1]
                shift = 0.1 * (period == 2) + math.log(0.9) * (treatment == "T")
                x, y = np.exp(1 + subject + shift + rng.normal(0, [0.2, 0.05]))
                rows.append(
                    {
                        "subject": f"{sequence}-{k}",
                        "sequence": sequence,
                        "period": period,
                        "treatment": treatment,
                        "x": x,
                        "y": y,
                    }
                )
    return rows


def ols_crossover(rows: list[dict[str, object]], outcome: str):
    data = pd.DataFrame(rows).assign(logy=lambda d: np.log(d[outcome]))
    with warnings.catch_warnings():
        # Subjects are nested in sequences: rank-deficient by construction (statsmodels
        # uses the pseudo-inverse); the treatment contrast is estimable.
        warnings.simplefilter("ignore")
        return smf.ols("logy ~ C(sequence) + C(subject) + C(period) + C(treatment)", data).fit()


CROSSOVER = ["--pair-by", "subject", "--period", "period", "--sequence", "sequence"]


@pytest.mark.parametrize(
    ("seed", "sizes"), [(1, (8, 8)), (2, (11, 6))], ids=["balanced", "unbalanced"]
)
def test_crossover_matches_ols(capsys, tmp_path, seed, sizes):
    rows = crossover_rows(seed, sizes)
    path = write_rows(tmp_path / "crossover.csv", rows)
    frame = scan_cli(capsys, path, *CROSSOVER)
    assert frame.height == 2  # one treatment comparison per outcome
    term = "C(treatment)[T.T]"
    for outcome in ("x", "y"):
        row = row_of(frame, "treatment", outcome, "R", "T")
        fit = ols_crossover(rows, outcome)  # statsmodels OLS of the usual model
        assert row["method"] == "2x2 crossover" and row["n_pairs"] == sum(sizes)
        assert row["ratio"] == pytest.approx(math.exp(fit.params[term]), rel=RTOL)
        for level, (low, high) in (
            (0.95, ("ci_low", "ci_high")),
            (0.90, ("tost_ci_low", "tost_ci_high")),
        ):
            ols_low, ols_high = fit.conf_int(alpha=1 - level).loc[term]
            assert row[low] == pytest.approx(math.exp(ols_low), rel=RTOL)
            assert row[high] == pytest.approx(math.exp(ols_high), rel=RTOL)
        assert row["p_value"] == pytest.approx(fit.pvalues[term], rel=1e-7)
        assert row["df"] == fit.df_resid
        assert row["within_cv"] == pytest.approx(math.sqrt(math.exp(fit.mse_resid) - 1), rel=RTOL)
    # The same through load_table(design=...) and run_scan.
    table = load_table(path, design=["subject", "period", "sequence"])
    settings = ScanSettings(pair_by="subject", period="period", sequence="sequence")
    result = run_scan(table, settings).comparisons.sort("outcome")
    np.testing.assert_allclose(
        result["ratio"].to_numpy(), frame.sort("outcome")["ratio"].to_numpy(), rtol=1e-12
    )
    assert result["method"].cast(pl.Utf8).to_list() == ["2x2 crossover"] * 2


def test_crossover_refusals(capsys, tmp_path):
    rows = crossover_rows(3, (5, 5))
    good = write_rows(tmp_path / "crossover.csv", rows)
    third = rows + [{**rows[0], "period": 3, "treatment": "R"}]
    three = write_rows(tmp_path / "three_periods.csv", third)
    line = refused(capsys, three, *CROSSOVER)
    assert "3 periods" in line and "'period'" in line and "2x2" in line
    line = refused(capsys, good, "--pair-by", "subject", "--period", "period")
    assert "needs both the period and the sequence column" in line
    line = refused(capsys, good, "--period", "period", "--sequence", "sequence")
    assert "needs the subject column (--pair-by)" in line
    line = refused(
        capsys, good, "--pair-by", "patient", "--period", "period", "--sequence", "sequence"
    )
    assert "'patient'" in line and "no column" in line


# -- 4. below-detection entries -------------------------------------------------------------


def censored_rows(seed: int = 5, units: int = 16) -> list[dict[str, object]]:
    """Plots measured before and after; a few entries below a limit of 0.5 ("<0.5")."""
    rng = np.random.default_rng(seed)
    rows: list[dict[str, object]] = []
    below = {(1, "before"), (4, "after"), (9, "after"), (12, "before")}
    for u in range(units):
        effect = rng.normal(0, 0.6)
        for j, when in enumerate(("before", "after")):
            value = math.exp(0.5 + effect + 0.3 * j + rng.normal(0, 0.3))
            text = "<0.5" if (u, when) in below else f"{value!r}"
            rows.append({"plot": f"P{u:02d}", "when": when, "lead": text})
    return rows


@pytest.fixture
def censored_csv(tmp_path) -> Path:
    return write_rows(tmp_path / "lead.csv", censored_rows())


def scan_rows(path: Path, design: list[str], **settings) -> pl.DataFrame:
    """``run_scan`` of a CSV with these design columns and settings."""
    table = load_table(path, design=design)
    comparisons = run_scan(table, ScanSettings(**settings)).comparisons
    return comparisons.with_columns(pl.col("method").cast(pl.Utf8))


def test_nondetects_in_pairs_are_left_out_by_default(censored_csv):
    frame = scan_rows(censored_csv, ["plot"], pair_by="plot")
    row = row_of(frame, "when", "lead", "after", "before")
    ref = reference_pairs(read_rows(censored_csv), "plot", "when", "lead", "after", "before")
    assert row["method"] == "paired t, nondetects left out"
    assert row["n_unpaired_left_out"] == ref["n_left_out"] == 4
    assert row["n_pairs"] == ref["n_pairs"] == 12
    assert_paired_t(row, ref["x"], ref["y"])  # scipy ttest_rel on the detected pairs


def test_nondetects_in_pairs_substituted_at_half_the_limit(censored_csv):
    policy = ValuePolicy(censored="half-dl")
    frame = scan_rows(censored_csv, ["plot"], pair_by="plot", policy=policy)
    row = row_of(frame, "when", "lead", "after", "before")

    def half_limit(text: str) -> float | None:
        return float(text[1:]) / 2 if text.startswith("<") else positive(text)

    ref = reference_pairs(
        read_rows(censored_csv), "plot", "when", "lead", "after", "before", read=half_limit
    )
    assert row["method"] == "paired t, DL/2 substituted"
    assert row["n_pairs"] == ref["n_pairs"] == 16 and row["n_unpaired_left_out"] == 0
    assert_paired_t(row, ref["x"], ref["y"])  # scipy ttest_rel on the substituted logs


@pytest.mark.parametrize(
    ("data", "options", "basis"),
    [
        ("lead", ["--pair-by", "plot"], "paired t on the logs of 12 pairs"),
        ("lead", ["--pair-by", "plot", "--censored", "half-dl"], "paired t on the logs of 16"),
        ("crossover", CROSSOVER, "2x2 crossover"),
    ],
    ids=["paired-left-out", "paired-half-dl", "crossover"],
)
def test_scan_cli_writes_sentences_of_designs_with_nondetects(
    capsys, tmp_path, censored_csv, data, options, basis
):
    if data == "lead":
        path = censored_csv
    else:
        rows = crossover_rows(4, (6, 6))
        rows[3]["x"] = "<0.5"
        path = write_rows(tmp_path / "crossover.csv", rows)
    frame = scan_cli(capsys, path, *options)
    assert all(basis in sentence for sentence in frame["sentence"].to_list())


# -- 5. identities --------------------------------------------------------------------------


def two_years(k: float = 1.0, seed: int = 21) -> list[dict[str, object]]:
    rng = np.random.default_rng(seed)
    rows: list[dict[str, object]] = []
    for w in range(14):
        effect = rng.normal(0, 0.7)
        for j, year in enumerate(("2019", "2021")):
            value = math.exp(1 + effect + 0.2 * j + rng.normal(0, 0.25))
            rows.append({"well": f"W{w}", "year": year, "nitrate": value * (k if j else 1)})
    return rows


def test_swapping_the_reference_inverts_ratio_and_ci(capsys, tmp_path):
    path = write_rows(tmp_path / "two.csv", two_years())
    forward = row_of(scan_cli(capsys, path, "--pair-by", "well"), "year", "nitrate", "2019", "2021")
    swapped = scan_cli(capsys, path, "--pair-by", "well", "--reference", "2021")
    backward = row_of(swapped, "year", "nitrate", "2021", "2019")
    assert backward["ratio"] == pytest.approx(1 / forward["ratio"], rel=1e-12)
    assert backward["ci_low"] == pytest.approx(1 / forward["ci_high"], rel=1e-12)
    assert backward["ci_high"] == pytest.approx(1 / forward["ci_low"], rel=1e-12)
    assert backward["p_value"] == pytest.approx(forward["p_value"], rel=1e-12)
    assert backward["method"] == forward["method"] == "paired t on logs"


@pytest.mark.parametrize("k", [3.0, 0.125])
def test_scaling_one_level_scales_the_ratio(capsys, tmp_path, k):
    plain = write_rows(tmp_path / "plain.csv", two_years())
    scaled = write_rows(tmp_path / "scaled.csv", two_years(k))
    before = row_of(scan_cli(capsys, plain, "--pair-by", "well"), "year", "nitrate", "2019", "2021")
    after = row_of(scan_cli(capsys, scaled, "--pair-by", "well"), "year", "nitrate", "2019", "2021")
    for name in ("ratio", "ci_low", "ci_high"):
        assert after[name] == pytest.approx(k * before[name], rel=1e-9)
    assert after["within_cv"] == pytest.approx(before["within_cv"], rel=1e-9)
    assert after["n_pairs"] == before["n_pairs"] == 14


# -- 6. duplicates refused ------------------------------------------------------------------


def test_duplicates_refuse_names_the_unit(capsys, wells_csv):
    line = refused(capsys, wells_csv, "--pair-by", "well", "--duplicates", "refuse")
    assert "'W03'" in line and "'2020'" in line and "several values" in line


# -- 7. sentence and the session's within-unit ratios ---------------------------------------


def test_sentence_says_within_the_same_wells(wells_scan):
    for row in wells_scan.iter_rows(named=True):
        said = ", within the same wells" in row["sentence"]
        assert said == (row["grouping"] == "year"), row["sentence"]


def test_session_pair_ratios_have_the_rows_geometric_mean(tmp_path, wells_csv):
    options = SessionOptions(
        data_path=wells_csv,
        settings=ScanSettings(pair_by="well"),
        reviews_path=tmp_path / "reviews.sqlite",
    )
    session = ReviewSession.open(options)
    try:
        rows = read_rows(wells_csv)
        keys = session.rows.filter(pl.col("grouping") == "year")["key"].to_list()
        assert len(keys) == 6
        for key in keys:
            row = session.row(key)
            assert row is not None
            ratios = session.pair_ratios(row)
            # exp(mean log of the ratios) is the paired ratio (math identity).
            assert math.exp(np.mean(np.log(ratios))) == pytest.approx(row["ratio"], rel=1e-9)
            ref = reference_pairs(
                rows, "well", "year", row["outcome"], row["level_a"], row["level_b"]
            )
            np.testing.assert_allclose(np.sort(ratios), np.sort(ref["y"] / ref["x"]), rtol=1e-9)
        site = session.rows.filter(pl.col("grouping") == "site")["key"][0]
        site_row = session.row(site)
        assert site_row is not None and session.pair_ratios(site_row).size == 0
    finally:
        session.close()


# -- 8. pairing warnings --------------------------------------------------------------------


def test_one_extreme_unit_dominates_and_is_named(capsys, tmp_path):
    rng = np.random.default_rng(8)
    d = rng.normal(0.1, 0.1, size=14)
    d[6] = 1.5
    rows = [
        {"well": f"W{i}", "visit": visit, "copper": value}
        for i, shift in enumerate(d)
        for visit, value in (("1", 2.0), ("2", 2.0 * math.exp(shift)))
    ]
    path = write_rows(tmp_path / "extreme.csv", rows)
    row = row_of(scan_cli(capsys, path, "--pair-by", "well"), "visit", "copper", "1", "2")
    assert "unit-dominates" in row["warnings"].split(";")
    assert row["influential_unit"] == "W6"


def test_few_paired_units_warn(capsys, tmp_path):
    rng = np.random.default_rng(9)
    rows = [
        {"well": f"W{i}", "visit": "1", "copper": float(rng.lognormal(1, 0.3))} for i in range(10)
    ] + [{"well": f"W{i}", "visit": "2", "copper": float(rng.lognormal(1, 0.3))} for i in range(4)]
    path = write_rows(tmp_path / "few.csv", rows)
    row = row_of(scan_cli(capsys, path, "--pair-by", "well"), "visit", "copper", "1", "2")
    assert (row["n_pairs"], row["n_only_a"], row["n_only_b"]) == (4, 6, 0)
    assert "few-paired" in row["warnings"].split(";")
    assert row["influential_unit"] is None


def test_units_repeated_in_a_grouping_not_within_units_are_warned(wells_scan, wells_csv):
    """Wells are nested in sites and sampled in three years: in the site comparison each
    well gives up to three values that the Welch test counts as independent units
    (pseudoreplication; Hurlbert 1984, Ecological Monographs 54:187-211, from memory), so
    those rows carry ``units-repeated`` and say so first in the sentence; the paired year
    rows do not. The counts behind it: a plain loop over the CSV rows."""
    rows = read_rows(wells_csv)
    per_site: dict[tuple[str, str], int] = defaultdict(int)
    for r in rows:
        if positive(r["arsenic"]) is not None:
            per_site[(r["site"], r["well"])] += 1
    assert max(per_site.values()) > 1  # the data repeat units within a site
    for row in wells_scan.iter_rows(named=True):
        warned = "units-repeated" in row["warnings"].split(";")
        assert warned == (row["grouping"] == "site"), row
        if warned:
            assert "counted as independent" in row["sentence"]


def test_one_value_per_unit_and_group_is_not_warned(capsys, tmp_path):
    """One year of the same wells: each well gives one value per site, so nothing repeats
    (and nothing is paired: the year column has one level and is no grouping)."""
    rows = [dict(r, year="2020") for r in wells_rows() if r["year"] == "2020"]
    seen: set[str] = set()
    single = [r for r in rows if not (r["well"] in seen or seen.add(r["well"]))]
    path = write_rows(tmp_path / "one_year.csv", single)
    frame = scan_cli(capsys, path, "--pair-by", "well", "--group", "site")
    assert frame.height == 2
    assert not any("units-repeated" in w for w in frame["warnings"].fill_null("").to_list())


def test_without_pair_by_nothing_is_said_about_units(capsys, wells_csv):
    frame = scan_cli(capsys, wells_csv, "--group", "site", "--group", "year")
    assert not any("units-repeated" in w for w in frame["warnings"].fill_null("").to_list())
