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
    tick_values = np.linspace(low, high, 4)
    labels = [_tick(math.exp(v) if log_scale else v) for v in tick_values]
    plt.xticks(list(tick_values), labels)
    top = max(int(counts_b.max(initial=1)), 1)
    bottom = max(int(counts_a.max(initial=1)), 1)
    plt.yticks([-bottom, 0, top], [str(bottom), "0", str(top)])
    plt.title(title)
    return Text.from_ansi(plt.build())


def _tick(value: float) -> str:
    if value == 0:
        return "0"
    if abs(value) >= 1000 or abs(value) < 0.01:
        return f"{value:.1e}"
    return f"{value:.3g}"
