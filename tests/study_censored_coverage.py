"""Monte Carlo study of the censored-lognormal comparison (a script, not a test).

Prints two tables:

1. Coverage of the nominal 95% CI of the ratio of geometric means at n = 10, 20, 50 per
   group, 10%, 30%, 50% censoring and true ratios 1 and 2, for candidate reference rules of
   the censored ML difference (``RULES``: normal or Student's t, Welch–Satterthwaite df from
   the detected counts or from the group sizes, ML variances as they are or times
   n / (n - 1)), for the pooled (common sigma) comparison, and for DL/2 substitution with
   Welch's t.
2. The false-positive rate at alpha = 0.05 when both groups come from the same distribution
   but group b was measured with higher limits (10% vs 50% censored), for the same rules.

Design: ln X ~ Normal(mu, 1), mu = 0 in group a and ln(ratio) in group b. Each entry gets one
of three detection limits at random, at the quantiles share * (0.5, 1, 1.5) of group a's
distribution, so group a is censored at the stated share on average; group b shares the
limits (the same laboratory method), so at ratio 2 it is censored less (the realised shares
are printed). Every replicate's two groups are two groups of one big vectorised fit.

Run: .venv/bin/python tests/study_censored_coverage.py [--replicates 20000] [--seed 20240610]
"""

from __future__ import annotations

import argparse
import time
from dataclasses import dataclass

import numpy as np
from scipy import stats as sps

from foldsift.stats.censored import (
    CensoredComparison,
    CensoredFit,
    compare_censored,
    compare_pooled,
    fit_censored_lognormal,
    fit_censored_pooled,
)

CONFIDENCE = 0.95
ALPHA = 1 - CONFIDENCE
QUANTILE_SPREAD = np.array([0.5, 1.0, 1.5])


@dataclass(frozen=True)
class Sample:
    """Replicates × 2 groups × n entries: the reported value (limit where censored)."""

    values: np.ndarray
    censored: np.ndarray

    @property
    def shape(self) -> tuple[int, int, int]:
        r, g, n = self.values.shape
        return r, g, n


def draw(
    rng: np.random.Generator, replicates: int, n: int, log_ratio: float, shares: tuple[float, float]
) -> Sample:
    """Lognormal values with per-entry limits at quantiles of group a's distribution; group a's
    limits for censored share ``shares[0]``, group b's for ``shares[1]``."""
    logs = rng.standard_normal((replicates, 2, n))
    logs[:, 1, :] += log_ratio
    limit_logs = np.stack([sps.norm.ppf(share * QUANTILE_SPREAD) for share in shares])
    pick = rng.integers(0, QUANTILE_SPREAD.size, (replicates, 2, n))
    limits = np.take_along_axis(limit_logs[None, :, :], pick, axis=2)
    censored = logs < limits
    return Sample(np.exp(np.where(censored, limits, logs)), censored)


def fit(sample: Sample) -> tuple[CensoredFit, CensoredFit]:
    r, g, n = sample.shape
    ids = np.repeat(np.arange(r * g), n)
    result = fit_censored_lognormal(
        sample.values.reshape(-1), sample.censored.reshape(-1), ids, r * g
    )
    return result.take(np.arange(0, r * g, 2)), result.take(np.arange(1, r * g, 2))


RULES = {
    "N,ML": "normal quantile, ML SE",
    "t(k),ML": "Student's t, Welch-Satterthwaite df from the detected counts k, ML SE",
    "t(k),inf": "the same with each ML variance times n / (n - 1)",
    "t(n),ML": "Student's t, Welch-Satterthwaite df from the group sizes n, ML SE",
    "t(n),inf*": "the same with each ML variance times n / (n - 1): compare_censored (chosen)",
    "pooled*": "common sigma, joint fit: compare_pooled",
    "DL/2+Welch": "DL/2 substitution, then Welch's t on the logs",
}


def candidate_intervals(
    sample: Sample, a: CensoredFit, b: CensoredFit
) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Centre and half-width of each rule's CI (NaN where a group was not fitted)."""
    d = b.mu - a.mu
    n_a, n_b = a.n.astype(float), b.n.astype(float)
    k_a, k_b = a.n_detected.astype(float), b.n_detected.astype(float)
    ml_a, ml_b = a.var_mu, b.var_mu
    inflated_a, inflated_b = ml_a * n_a / (n_a - 1), ml_b * n_b / (n_b - 1)

    def welch_df(v_a: np.ndarray, v_b: np.ndarray, m_a: np.ndarray, m_b: np.ndarray) -> np.ndarray:
        return (v_a + v_b) ** 2 / (v_a**2 / (m_a - 1) + v_b**2 / (m_b - 1))

    def t(df: np.ndarray) -> np.ndarray:
        return np.asarray(sps.t.ppf(0.5 + CONFIDENCE / 2, df))

    ml = np.sqrt(ml_a + ml_b)
    inflated = np.sqrt(inflated_a + inflated_b)
    chosen = compare_censored(a, b, confidence=CONFIDENCE)
    pooled = fit_pooled(sample)
    return {
        "N,ML": (d, sps.norm.ppf(0.5 + CONFIDENCE / 2) * ml),
        "t(k),ML": (d, t(welch_df(ml_a, ml_b, k_a, k_b)) * ml),
        "t(k),inf": (d, t(welch_df(inflated_a, inflated_b, k_a, k_b)) * inflated),
        "t(n),ML": (d, t(welch_df(ml_a, ml_b, n_a, n_b)) * ml),
        "t(n),inf*": (chosen.d, (chosen.ci_high - chosen.ci_low) / 2),
        "pooled*": (pooled.d, (pooled.ci_high - pooled.ci_low) / 2),
        "DL/2+Welch": substitution_welch(sample),
    }


def fit_pooled(sample: Sample) -> CensoredComparison:
    r, g, n = sample.shape
    pair = np.repeat(np.arange(r), g * n)
    side = np.tile(np.repeat(np.arange(g), n), r)
    joint = fit_censored_pooled(
        sample.values.reshape(-1), sample.censored.reshape(-1), side, pair, r
    )
    return compare_pooled(joint, confidence=CONFIDENCE)


def substitution_welch(sample: Sample, factor: float = 0.5) -> tuple[np.ndarray, np.ndarray]:
    """DL/2 substitution, then Welch's t on the logs: centre and half-width of the CI."""
    logs = np.log(np.where(sample.censored, sample.values * factor, sample.values))
    n = logs.shape[2]
    mean = logs.mean(axis=2)
    share = logs.var(axis=2, ddof=1) / n
    se2 = share.sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        df = se2**2 / (share**2 / (n - 1)).sum(axis=1)
        half = sps.t.ppf(0.5 + CONFIDENCE / 2, df) * np.sqrt(se2)
    return mean[:, 1] - mean[:, 0], half


def covered(centre: np.ndarray, half: np.ndarray, truth: float) -> tuple[float, int]:
    """Percentage of fitted replicates whose CI covers ``truth``, and how many were fitted."""
    usable = np.isfinite(centre) & np.isfinite(half)
    hits = np.abs(centre[usable] - truth) <= half[usable]
    return 100 * float(hits.mean()), int(usable.sum())


def coverage_table(rng: np.random.Generator, replicates: int) -> list[str]:
    header = f"{'n':>4} {'cens':>5} {'ratio':>5} {'cens a/b %':>11} {'fitted %':>8} "
    lines = [header + " ".join(f"{name:>10}" for name in RULES)]
    for n in (10, 20, 50):
        for share in (0.1, 0.3, 0.5):
            for ratio in (1.0, 2.0):
                sample = draw(rng, replicates, n, np.log(ratio), (share, share))
                a, b = fit(sample)
                intervals = candidate_intervals(sample, a, b)
                cells = [covered(*intervals[name], np.log(ratio))[0] for name in RULES]
                fitted = 100 * float(np.isfinite(intervals["t(n),inf*"][1]).mean())
                cens = 100 * sample.censored.mean(axis=(0, 2))
                row = f"{n:>4} {share:>5.0%} {ratio:>5g} {cens[0]:>5.1f}/{cens[1]:<5.1f} {fitted:>8.1f} "
                lines.append(row + " ".join(f"{value:>10.1f}" for value in cells))
    return lines


def false_positive_table(rng: np.random.Generator, replicates: int) -> list[str]:
    header = f"{'n':>4} {'cens a/b %':>11} {'fitted %':>8} "
    lines = [header + " ".join(f"{name:>10}" for name in RULES)]
    for n in (10, 20, 50, 100):
        sample = draw(rng, replicates, n, 0.0, (0.1, 0.5))
        a, b = fit(sample)
        intervals = candidate_intervals(sample, a, b)
        rates = [100 - covered(*intervals[name], 0.0)[0] for name in RULES]
        fitted = 100 * float(np.isfinite(intervals["t(n),inf*"][1]).mean())
        cens = 100 * sample.censored.mean(axis=(0, 2))
        row = f"{n:>4} {cens[0]:>5.1f}/{cens[1]:<5.1f} {fitted:>8.1f} "
        lines.append(row + " ".join(f"{value:>10.1f}" for value in rates))
    return lines


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--replicates", type=int, default=20000)
    parser.add_argument("--seed", type=int, default=20240610)
    args = parser.parse_args()
    rng = np.random.default_rng(args.seed)
    start = time.perf_counter()
    mc_se = 100 * np.sqrt(CONFIDENCE * ALPHA / args.replicates)
    print(f"Coverage of the nominal 95% CI of the ratio (%), {args.replicates} replicates per row,")
    print(
        f"Monte Carlo SE about {mc_se:.2f} points; sigma of the logs = 1, three limits per group."
    )
    print("\n".join(f"  {name:<11}{meaning}" for name, meaning in RULES.items()))
    print("\n".join(coverage_table(rng, args.replicates)))
    print()
    print(
        "False-positive rate at alpha = 0.05 (%), equal distributions, group b with higher limits;"
    )
    print(f"Monte Carlo SE about {100 * np.sqrt(ALPHA * CONFIDENCE / args.replicates):.2f} points.")
    print("\n".join(false_positive_table(rng, args.replicates)))
    print(f"\n{time.perf_counter() - start:.0f} s")


if __name__ == "__main__":
    main()
