"""Adjusted p-values over a family of comparisons, vectorised with polars windows.

Holm (1979), Scand. J. Statist. 6:65-70: step-down family-wise error control.
Benjamini & Hochberg (1995), JRSS-B 57:289-300: step-up false discovery rate ("q").
NaN p-values are not members of any family and stay NaN.
"""

from __future__ import annotations

import numpy as np
import polars as pl

from .vocabulary import FAMILIES

__all__ = ["FAMILIES", "adjust"]


def adjust(p_values: np.ndarray, family: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Return (Holm, Benjamini–Hochberg) adjusted p-values, each family adjusted alone."""
    p = np.asarray(p_values, dtype=float)
    if family is None:
        family = np.zeros(p.shape[0], dtype=np.int64)
    frame = pl.DataFrame(
        {"row": np.arange(p.shape[0]), "family": np.asarray(family), "p": p}
    ).with_columns(pl.col("p").fill_nan(None))
    ranked = (
        frame.filter(pl.col("p").is_not_null())
        .sort("family", "p", "row")
        .with_columns(
            m=pl.len().over("family"),
            rank=pl.int_range(1, pl.len() + 1).over("family"),
        )
        .with_columns(
            holm=((pl.col("m") - pl.col("rank") + 1) * pl.col("p")).cum_max().over("family"),
            bh_raw=pl.col("m") * pl.col("p") / pl.col("rank"),
        )
        .with_columns(
            bh=pl.col("bh_raw").reverse().cum_min().reverse().over("family"),
        )
    )
    holm = np.full(p.shape[0], np.nan)
    bh = np.full(p.shape[0], np.nan)
    rows = ranked["row"].to_numpy()
    holm[rows] = np.minimum(ranked["holm"].to_numpy(), 1.0)
    bh[rows] = np.minimum(ranked["bh"].to_numpy(), 1.0)
    return holm, bh
