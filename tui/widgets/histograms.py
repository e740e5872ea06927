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
    limits: np.ndarray | None = None,
) -> Text:
    """Group b's histogram above the axis and group a's below it, on shared bins, each as a
    percentage of its own group so groups of different size compare; a line in each group's
    colour marks its geometric mean, a dotted one its median; grey lines mark ``limits``
    (detection limits of below-detection entries, which the bars do not hold)."""
    marks = np.asarray(limits if limits is not None else np.empty(0), dtype=float)
    values_a = np.asarray(values_a, dtype=float)
    values_b = np.asarray(values_b, dtype=float)
    if values_a.size + values_b.size == 0:
        return Text("no usable values to draw", style="italic")
    transform = np.log if log_scale else (lambda v: v)
    with np.errstate(all="ignore"):
        data_a, data_b = transform(values_a), transform(values_b)
    with np.errstate(all="ignore"):
        data_limits = transform(marks[marks > 0]) if log_scale else marks
    both = np.concatenate([data_a, data_b, data_limits])
    low, high = float(both.min()), float(both.max())
    if not (math.isfinite(low) and math.isfinite(high)) or not math.isfinite(high - low):
        return Text("values too large to draw on this scale", style="italic")
    if high <= low:
        high = low + 1.0
    if max(abs(low), abs(high)) > 1e300:  # plotext's own arithmetic overflows near here
        return Text("values too large to draw on this scale", style="italic")
    try:
        with np.errstate(all="ignore"):
            return _draw(
                data_a,
                data_b,
                values_a,
                values_b,
                low,
                high,
                log_scale,
                (width, height),
                title,
                data_limits,
            )
    except (ValueError, OverflowError, ZeroDivisionError) as error:  # never end the session
        plt.clf()  # a failed build leaves plotext's figure half made
        return Text(f"chart unavailable: {error}", style="italic")


def _draw(
    data_a: np.ndarray,
    data_b: np.ndarray,
    values_a: np.ndarray,
    values_b: np.ndarray,
    low: float,
    high: float,
    log_scale: bool,
    size: tuple[int, int],
    title: str,
    data_limits: np.ndarray,
) -> Text:
    width, height = size
    transform = np.log if log_scale else (lambda v: v)
    bins = int(max(6, min(24, (width - 10) // 3)))
    edges = np.linspace(low, high, bins + 1)
    counts_a, _ = np.histogram(data_a, edges)
    counts_b, _ = np.histogram(data_b, edges)
    share_a = 100 * counts_a / max(values_a.size, 1)
    share_b = 100 * counts_b / max(values_b.size, 1)
    tallest = max(float(share_a.max(initial=0)), float(share_b.max(initial=0)), 1.0)
    centres = list((edges[:-1] + edges[1:]) / 2)
    plt.clf()
    plt.theme("clear")
    plt.plotsize(max(width, 20), max(height, 6))
    plt.bar(centres, list(share_b), color=COLOR_B, width=0.8)
    plt.bar(centres, list(-share_a), color=COLOR_A, width=0.8)
    plt.hline(0, "gray")
    for position in data_limits[:8]:
        plt.vline(float(position), "gray+")
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
    # Each group as a percentage of itself, on one scale: groups of different size compare.
    plt.ylim(-tallest, tallest)
    label = f"{tallest:.0f}%"
    plt.yticks([-tallest, 0, tallest], [label, "0", label])
    plt.title(title)
    return Text.from_ansi(plt.build())


def _nice_ticks(low: float, high: float, log_scale: bool, most: int = 5) -> list[float]:
    """Round tick values inside [low, high]: 1-2-5 steps, or 1-2-5 × 10^k on a log scale."""
    if not (math.isfinite(low) and math.isfinite(high)) or high <= low:
        return [low]
    if log_scale and low > 0:
        ticks = _decade_ticks(low, high, most)
        if len(ticks) >= 2:
            return ticks
    return _linear_ticks(low, high, most)


def _decade_ticks(low: float, high: float, most: int) -> list[float]:
    """1, 2 and 5 × 10^k inside [low, high] (0 < low); only the powers of ten when there
    would be more than ``most``."""
    ticks = []
    for exponent in range(math.floor(math.log10(low)), math.ceil(math.log10(high)) + 1):
        for mantissa in (1, 2, 5):
            value = mantissa * 10.0**exponent
            if math.isfinite(value) and low <= value <= high:
                ticks.append(value)
    if len(ticks) > most:
        ticks = [v for v in ticks if math.isclose(math.log10(v) % 1, 0, abs_tol=1e-9)] or ticks
    return ticks


def _linear_ticks(low: float, high: float, most: int) -> list[float]:
    """Evenly spaced ticks inside [low, high], the step 1, 2 or 5 × 10^k, at most ``most``."""
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
