"""Back-to-back terminal histograms of two groups on one axis (plotext, no display needed).

Group b's bars rise above the axis and group a's hang below it, on shared bins, so the two
shapes can be compared without one hiding the other.
"""

from __future__ import annotations

import math

import numpy as np
import plotext as plt
from rich.text import Text

COLOR_A = "cyan"
COLOR_B = "orange"
#: The same colours for rich text beside the charts.
STYLE_A = "cyan"
STYLE_B = "dark_orange"


def _geometric_mean(values: np.ndarray) -> float:
    return float(np.exp(np.mean(np.log(values)))) if values.size else math.nan


def back_to_back(
    values_a: np.ndarray,
    values_b: np.ndarray,
    *,
    log_scale: bool,
    width: int,
    height: int,
    title: str,
) -> Text:
    """A chart with b above and a below the axis; GM marked with ┃ lines, medians with ┆."""
    values_a = np.asarray(values_a, dtype=float)
    values_b = np.asarray(values_b, dtype=float)
    if values_a.size + values_b.size == 0:
        return Text("no usable values to draw", style="italic")
    transform = np.log if log_scale else (lambda v: v)
    data_a, data_b = transform(values_a), transform(values_b)
    both = np.concatenate([data_a, data_b])
    low, high = float(both.min()), float(both.max())
    if high <= low:
        high = low + 1.0
    bins = int(max(6, min(24, (width - 10) // 3)))
    edges = np.linspace(low, high, bins + 1)
    counts_a, _ = np.histogram(data_a, edges)
    counts_b, _ = np.histogram(data_b, edges)
    centres = (edges[:-1] + edges[1:]) / 2
    plt.clf()
    plt.theme("clear")
    plt.plotsize(max(width, 20), max(height, 6))
    plt.bar(list(centres), list(counts_b), color=COLOR_B, width=0.8)
    plt.bar(list(centres), list(-counts_a), color=COLOR_A, width=0.8)
    plt.hline(0, "gray")
    for values, color in ((values_a, COLOR_A), (values_b, COLOR_B)):
        if values.size:
            plt.vline(float(transform(_geometric_mean(values))), color)
            plt.vline(float(transform(np.median(values))), color + "+")
    raw_ticks = (
        _nice_ticks(math.exp(low), math.exp(high), log_scale)
        if log_scale
        else _nice_ticks(low, high, False)
    )
    positions = [math.log(v) if log_scale else v for v in raw_ticks]
    plt.xticks(positions, [_tick(v) for v in raw_ticks])
    # One count scale for both groups, so bar heights compare directly.
    tallest = max(int(counts_a.max(initial=1)), int(counts_b.max(initial=1)), 1)
    plt.ylim(-tallest, tallest)
    plt.yticks([-tallest, 0, tallest], [str(tallest), "0", str(tallest)])
    plt.title(title)
    return Text.from_ansi(plt.build())


def _nice_ticks(low: float, high: float, log_scale: bool, most: int = 5) -> list[float]:
    """Round tick values inside [low, high]: 1-2-5 steps, or 1-2-5 × 10^k on a log scale."""
    if not (math.isfinite(low) and math.isfinite(high)) or high <= low:
        return [low]
    if log_scale and low > 0:
        ticks = []
        for exponent in range(math.floor(math.log10(low)), math.ceil(math.log10(high)) + 1):
            for mantissa in (1, 2, 5):
                value = mantissa * 10.0**exponent
                if low <= value <= high:
                    ticks.append(value)
        if len(ticks) > most:
            ticks = [v for v in ticks if math.isclose(math.log10(v) % 1, 0, abs_tol=1e-9)] or ticks
        if len(ticks) >= 2:
            return ticks
    span = high - low
    step = 10 ** math.floor(math.log10(span / most))
    for factor in (1, 2, 5, 10):
        if span / (step * factor) <= most:
            step *= factor
            break
    first = math.ceil(low / step) * step
    return [first + i * step for i in range(int((high - first) / step + 1e-9) + 1)]


def _tick(value: float) -> str:
    if value == 0:
        return "0"
    if abs(value) >= 100000 or abs(value) < 0.001:
        return f"{value:.0e}"
    return f"{value:g}"
