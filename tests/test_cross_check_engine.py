"""Tests for the cross-check engine (stats.robust.CrossChecker) and its frame.

Properties of the seeding rule (one generator per group, seeded from the group's identity)
are checked against the engine itself run in other orders, threads and processes; where a
figure is checked against a number, the source is named beside it:
- Mann-Whitney p: scipy.stats.mannwhitneyu (independent library).
- Hodges-Lehmann ratio: exp of the median of all pairwise differences of the logs, from
  its definition (Hollander, Wolfe & Chicken, Nonparametric Statistical Methods, 3rd ed.,
  2014, sec. 4.3).
- Ratio of sample medians: np.median.
"""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
import threading
from collections import Counter
from dataclasses import astuple

import numpy as np
import polars as pl
import pytest
from scipy import stats as sps

from foldsift.stats import robust
from foldsift.stats.load import load_table
from foldsift.stats.scan import run_scan

RESAMPLES = 299


def _groups() -> dict[robust.GroupId, np.ndarray]:
    rng = np.random.default_rng(41)
    groups: dict[robust.GroupId, np.ndarray] = {}
    for outcome, scale in (("zinc", 1.0), ("lead", 0.4)):
        for level, (mu, size) in {
            "alder": (1.0, 14),
            "birch": (1.4, 11),
            "cedar": (0.8, 9),
            "dune": (1.1, 20),
        }.items():
            groups[("site", None, None, level, outcome)] = rng.lognormal(mu * scale, 0.7, size)
    for stratum in ("wet", "dry"):
        for level in ("alder", "birch"):
            groups[("site", "season", stratum, level, "zinc")] = rng.lognormal(1.0, 0.5, 8)
    groups[("site", None, None, "lonely", "zinc")] = np.array([3.3])
    return groups


GROUPS = _groups()


def _lookup(group: robust.GroupId) -> np.ndarray:
    return GROUPS.get(group, np.empty(0))


def _jobs() -> list[tuple[str, robust.GroupId, robust.GroupId]]:
    """Every pair of levels within each (grouping, within, stratum, outcome), plus pairs
    with a one-value group and a group that has no values at all."""
    by_family: dict[tuple, list[robust.GroupId]] = {}
    for group in GROUPS:
        grouping, within, stratum, _level, outcome = group
        by_family.setdefault((grouping, within, stratum, outcome), []).append(group)
    jobs = []
    for members in by_family.values():
        for i, a in enumerate(members):
            for b in members[i + 1 :]:
                jobs.append(("|".join(str(part) for part in (*a, b[3])), a, b))
    nowhere = ("site", None, None, "nowhere", "zinc")
    jobs.append(("to-nowhere", ("site", None, None, "alder", "zinc"), nowhere))
    return jobs


JOBS = _jobs()


def _same(x: robust.RobustCheck, y: robust.RobustCheck) -> None:
    """Identical figures (NaN equal to NaN) and the same reason."""
    np.testing.assert_array_equal(np.array(astuple(x)[:-1]), np.array(astuple(y)[:-1]))
    assert x.reason == y.reason


def _checker(seed: int = robust.DEFAULT_SEED, lookup=_lookup) -> robust.CrossChecker:
    return robust.CrossChecker(lookup, resamples=RESAMPLES, seed=seed)


def test_result_does_not_depend_on_what_was_checked_before():
    """A comparison checked alone, after other comparisons sharing its groups, or inside
    check_many in reverse order gives identical figures."""
    many = _checker().check_many(list(reversed(JOBS)))
    assert list(many) == [key for key, _, _ in reversed(JOBS)]
    for index, (key, a, b) in enumerate(JOBS):
        alone = _checker().check(a, b)
        warmed = _checker()
        for _, other_a, other_b in JOBS[index + 1 :] + JOBS[:index]:
            warmed.check(other_b, other_a)  # the same groups in other roles first
        _same(alone, warmed.check(a, b))
        _same(alone, many[key])


def test_figures_match_outside_references():
    """Median ratio (np.median), Hodges-Lehmann ratio (HWC 2014 sec. 4.3, by definition) and
    Mann-Whitney p (scipy.stats.mannwhitneyu) for every comparison with two values a side;
    the others are NaN with a reason."""
    checks = _checker().check_many(JOBS)
    for key, a_id, b_id in JOBS:
        a, b, check = _lookup(a_id), _lookup(b_id), checks[key]
        if a.size < 2 or b.size < 2:
            assert math.isnan(check.median_ratio) and math.isnan(check.mann_whitney_p)
            assert check.reason
            continue
        assert check.median_ratio == pytest.approx(np.median(b) / np.median(a), rel=1e-15)
        # HL: median of all pairwise differences of the logs (definition)
        shift = np.median(np.subtract.outer(np.log(b), np.log(a)))
        assert check.hl_ratio == pytest.approx(math.exp(shift), rel=1e-13)
        # scipy.stats.mannwhitneyu, b against the reference a
        p = sps.mannwhitneyu(b, a, alternative="two-sided").pvalue
        assert check.mann_whitney_p == pytest.approx(p, rel=1e-12)
        assert check.median_ratio_ci_low <= check.median_ratio <= check.median_ratio_ci_high


def test_each_group_is_looked_up_and_resampled_once():
    """Replicates are drawn once per group: the lookup runs once for each group however
    many comparisons it is part of."""
    calls: Counter = Counter()

    def counting(group: robust.GroupId) -> np.ndarray:
        calls[group] += 1
        return _lookup(group)

    checker = _checker(lookup=counting)
    checker.check_many(JOBS)
    checker.check_many(list(reversed(JOBS)))
    assert set(calls.values()) == {1}
    assert len(calls) == len({g for _, a, b in JOBS for g in (a, b)})


def test_seed_is_the_same_in_another_process():
    """The per-group seed is a stable function of (seed, group): a fresh interpreter with a
    different string-hash seed gives the same figures."""
    key, a, b = JOBS[0]
    here = _checker().check(a, b)
    script = (
        "import json, numpy as np\n"
        "from foldsift.stats import robust\n"
        f"a, b = np.array({GROUPS[a].tolist()!r}), np.array({GROUPS[b].tolist()!r})\n"
        f"groups = {{{a!r}: a, {b!r}: b}}\n"
        f"checker = robust.CrossChecker(groups.__getitem__, resamples={RESAMPLES})\n"
        f"c = checker.check({a!r}, {b!r})\n"
        "print(json.dumps([c.median_ratio_ci_low, c.median_ratio_ci_high]))\n"
    )
    for hash_seed in ("1", "2"):
        env = {**os.environ, "PYTHONHASHSEED": hash_seed}
        out = subprocess.run(
            [sys.executable, "-c", script], env=env, capture_output=True, text=True, check=True
        )
        assert json.loads(out.stdout) == [here.median_ratio_ci_low, here.median_ratio_ci_high]


def test_different_seeds_give_different_bootstrap_ends():
    """Another seed draws other replicates, so other BCa ends; the rank-based figures do
    not use random numbers and stay the same."""
    first = _checker(seed=1).check_many(JOBS)
    second = _checker(seed=2).check_many(JOBS)
    assert first.keys() == second.keys()
    moved = 0
    for key in first:
        x, y = first[key], second[key]
        if math.isnan(x.median_ratio):
            continue
        moved += (x.median_ratio_ci_low, x.median_ratio_ci_high) != (
            y.median_ratio_ci_low,
            y.median_ratio_ci_high,
        )
        assert (x.hl_ratio, x.hl_ci_low, x.hl_ci_high, x.mann_whitney_p) == (
            y.hl_ratio,
            y.hl_ci_low,
            y.hl_ci_high,
            y.mann_whitney_p,
        )
    assert moved >= 1


def test_group_seed_separates_groups_and_seeds():
    """Seed words differ between groups that differ in any part, and between seeds."""
    groups = list(GROUPS)
    words = {tuple(robust.group_seed(7, g)) for g in groups}
    assert len(words) == len(groups)
    assert robust.group_seed(7, groups[0]) != robust.group_seed(8, groups[0])


def test_progress_reaches_the_end_and_cancel_stops_early():
    """progress(done, total) comes at least every 10 jobs and ends at (total, total);
    cancelled() true stops before the next job, and progress reports how far it got."""
    calls: list[tuple[int, int]] = []
    total = len(JOBS)
    full = _checker().check_many(JOBS, progress=lambda d, t: calls.append((d, t)))
    assert len(full) == total
    assert calls[-1] == (total, total)
    assert all(t == total for _, t in calls)
    done = [d for d, _ in calls]
    assert done == sorted(set(done))
    assert all(later - earlier <= 10 for earlier, later in zip([0, *done], done, strict=False))

    asked: list[bool] = []

    def cancelled() -> bool:
        asked.append(True)
        return len(asked) > 7

    calls.clear()
    partial = _checker().check_many(
        JOBS, progress=lambda d, t: calls.append((d, t)), cancelled=cancelled
    )
    assert list(partial) == [key for key, _, _ in JOBS[:7]]
    assert calls[-1] == (7, total)
    for key in partial:
        _same(partial[key], full[key])


def test_threads_sharing_a_checker_get_the_one_thread_results():
    """Two threads checking overlapping comparisons (in opposite orders) on one checker get
    the same figures as one thread alone, and each group is still looked up once."""
    expected = _checker().check_many(JOBS)
    calls: Counter = Counter()
    guard = threading.Lock()

    def counting(group: robust.GroupId) -> np.ndarray:
        with guard:
            calls[group] += 1
        return _lookup(group)

    shared = _checker(lookup=counting)
    start = threading.Barrier(2)
    results: list[dict[str, robust.RobustCheck]] = [{}, {}]

    def run(slot: int, jobs: list) -> None:
        start.wait()
        results[slot] = shared.check_many(jobs)

    threads = [
        threading.Thread(target=run, args=(0, JOBS[: 2 * len(JOBS) // 3])),
        threading.Thread(target=run, args=(1, list(reversed(JOBS[len(JOBS) // 3 :])))),
    ]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert len(results[0]) + len(results[1]) > len(JOBS)  # they overlap
    for got in results:
        for key, check in got.items():
            _same(check, expected[key])
    assert set(calls.values()) == {1}


def test_checks_frame_has_one_row_per_key_with_nulls():
    """Rows in the order of the keys given; NaN and keys without a check become null."""
    checks = _checker().check_many(JOBS)
    keys = ["not-checked", *reversed(list(checks))]
    frame = robust.checks_frame(keys, checks)
    assert frame.columns == ["key", *robust.CROSS_CHECK_COLUMNS]
    assert frame.schema["key"] == pl.Utf8
    assert all(frame.schema[name] == pl.Float64 for name in robust.CROSS_CHECK_COLUMNS)
    assert frame["key"].to_list() == keys
    first = frame.row(0, named=True)
    assert all(first[name] is None for name in robust.CROSS_CHECK_COLUMNS)
    for row in frame.slice(1).iter_rows(named=True):
        check = checks[row["key"]]
        figures = (
            check.median_ratio_ci_low,
            check.median_ratio_ci_high,
            check.hl_ratio,
            check.hl_ci_low,
            check.hl_ci_high,
            check.mann_whitney_p,
            check.peto_prentice_p,  # NaN here: these groups have no censored entries
        )
        for name, figure in zip(robust.CROSS_CHECK_COLUMNS, figures, strict=True):
            assert row[name] == (None if math.isnan(figure) else figure)
    assert robust.checks_frame([], {}).height == 0
    assert robust.CROSS_CHECK_COLUMNS == robust.ROBUST_COLUMNS


def test_robust_all_gives_the_cross_checker_numbers():
    """robust_all on a scan equals CrossChecker.check on the same groups (looked up here
    from the raw values the table was built from), row by row."""
    rng = np.random.default_rng(17)
    raw = {
        "alder": rng.lognormal(1.0, 0.6, 14),
        "birch": rng.lognormal(1.4, 0.6, 11),
        "cedar": rng.lognormal(0.8, 0.9, 9),
        "lonely": np.array([3.3]),
    }
    frame = pl.DataFrame(
        {
            "site": [name for name, values in raw.items() for _ in values],
            "zinc": np.concatenate(list(raw.values())),
        }
    )
    result = run_scan(load_table(frame=frame, groupings=["site"], outcomes=["zinc"]))
    out = robust.robust_all(result, resamples=RESAMPLES, seed=5)
    assert out.height == result.comparisons.height
    checker = robust.CrossChecker(
        lambda group: raw[group[3]],
        confidence=result.settings.confidence,
        resamples=RESAMPLES,
        seed=5,
    )
    expected = robust.checks_frame(
        [str(i) for i in range(out.height)],
        {
            str(i): checker.check(
                ("site", None, None, row["level_a"], "zinc"),
                ("site", None, None, row["level_b"], "zinc"),
            )
            for i, row in enumerate(out.iter_rows(named=True))
        },
    )
    columns = list(robust.CROSS_CHECK_COLUMNS)
    assert out.select(columns).equals(expected.select(columns))
    assert out.select(columns).null_count().row(0) != (out.height,) * len(columns)
