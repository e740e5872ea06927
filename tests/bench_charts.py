"""Benchmark: drawing both groups' charts (``histograms.draw_groups``) for large groups.

Run as a script (it is not collected by pytest):

    .venv/bin/python tests/bench_charts.py

Two lognormal groups of 30,000 values each (fixed seed, a few detection limits) are drawn
at the chart pane's sizes of the 80x24, 120x36 and 200x50 terminals; the script prints the
median and the slowest of ``REPEATS`` draws per size (wall clock) and the median CPU time
(steadier on a busy machine). The text drawn is what the widget
shows; Textual's own layout and paint are not included.
"""

from __future__ import annotations

import statistics
import time

import numpy as np

from foldsift.tui.widgets.histograms import STYLE_A, STYLE_B, Group, draw_groups

SEED = 20261203
VALUES = 30_000
REPEATS = 50
#: The chart pane's content size (columns, rows) at each terminal size, as the app lays it out.
PANES = {"80x24": (40, 9), "120x36": (60, 15), "200x50": (100, 22)}


def main() -> None:
    rng = np.random.default_rng(SEED)
    a = Group("a reference", np.exp(rng.normal(3.0, 0.6, VALUES)), STYLE_A, np.array([2.0]))
    b = Group("b other", np.exp(rng.normal(3.4, 0.9, VALUES)), STYLE_B, np.array([1.5, 3.0]))
    print(f"draw_groups, {VALUES:,} values per group, {REPEATS} draws per size")
    for name, (width, height) in PANES.items():
        draw_groups(a, b, width=width, height=height, title="t")  # warm up
        times, cpu = [], []
        for _ in range(REPEATS):
            start, start_cpu = time.perf_counter(), time.process_time()
            draw_groups(a, b, width=width, height=height, title="t")
            times.append(time.perf_counter() - start)
            cpu.append(time.process_time() - start_cpu)
        print(
            f"  {name:>7} (pane {width}x{height}): median {1000 * statistics.median(times):.2f} ms,"
            f" slowest {1000 * max(times):.2f} ms; CPU median {1000 * statistics.median(cpu):.2f} ms"
        )


if __name__ == "__main__":
    main()
