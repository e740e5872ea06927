"""The within-unit ratios of a paired comparison as one strip on a log axis: how many units
fall in each column (denser glyphs for more), the line at ratio 1, the band of no practical
difference shaded, and the comparison's ratio marked. Three lines of rich Text.
"""

from __future__ import annotations

import math

import numpy as np
from rich.text import Text

from .plain import visible

#: Glyphs for 1, 2-3, 4-7, 8-15 and 16 or more units in one column.
DENSITY = ("·", "•", "▪", "■", "█")
ONE, BAND, RATIO = "│", "░", "◆"


def _density(count: int) -> str:
    return DENSITY[min(int(math.log2(count)), len(DENSITY) - 1)]


def _ticks(low: float, high: float) -> list[float]:
    """Powers of two (or ten on wide ranges) inside [low, high], as plain numbers."""
    base = 2.0 if high / low <= 64 else 10.0
    first = math.ceil(math.log(low, base) - 1e-9)
    last = math.floor(math.log(high, base) + 1e-9)
    return [base**k for k in range(first, last + 1)]


def _label(value: float) -> str:
    return f"{value:g}" if 0.001 <= value < 100000 else f"{value:.0e}"


def ratio_strip(
    ratios: np.ndarray, ratio: float | None, band: tuple[float, float], width: int, unit: str
) -> Text:
    """The strip in ``width`` cells (title, strip, axis labels)."""
    values = np.asarray(ratios, dtype=float)
    values = values[np.isfinite(values) & (values > 0)]
    width = max(width, 20)
    title = Text(visible(f"within-unit ratios b/a, {values.size} {unit}s: "), style="bold")
    title.append(f"{RATIO} ratio  {ONE} 1  {BAND} band")
    if values.size == 0:
        return Text.assemble(title, "\n", Text("no pairs to draw", style="italic"))
    points = [*values.tolist(), 1.0, *band] + ([ratio] if ratio else [])
    low, high = math.log(min(points)), math.log(max(points))
    pad = max((high - low) * 0.05, 0.05)
    low, high = low - pad, high + pad

    def column(value: float) -> int:
        return min(width - 1, max(0, int((math.log(value) - low) / (high - low) * width)))

    counts = np.bincount([column(v) for v in values], minlength=width)
    cells = [BAND if column(band[0]) <= i <= column(band[1]) else " " for i in range(width)]
    cells[column(1.0)] = ONE
    for i in np.flatnonzero(counts):
        cells[i] = _density(int(counts[i]))
    strip = Text("".join(cells))
    if ratio:
        at = column(ratio)
        strip = Text("".join(cells[:at]) + RATIO + "".join(cells[at + 1 :]))
        strip.stylize("bold", at, at + 1)
    labels = [" "] * width
    for tick in _ticks(math.exp(low), math.exp(high)):
        text, at = _label(tick), column(tick)
        start = max(0, min(width - len(text), at - len(text) // 2))
        if all(c == " " for c in labels[max(0, start - 1) : start + len(text) + 1]):
            labels[start : start + len(text)] = list(text)
    return Text.assemble(title, "\n", strip, "\n", Text("".join(labels), style="dim"))
