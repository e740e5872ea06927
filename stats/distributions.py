"""The distribution functions the statistics use, taken from ``scipy.special``: the same
functions ``scipy.stats``' Student t, F, normal and noncentral t call underneath (scipy 1.17:
``t._sf`` is ``stdtr(df, -x)``, ``t._ppf`` is ``stdtrit``, ``f._cdf`` is ``fdtr``,
``nct._sf`` is ``_nct_sf`` clipped to [0, 1]), so the numbers are identical while a scan
does not import ``scipy.stats``, whose import costs about a second on a small machine.

Arguments outside a distribution's domain give NaN, as ``scipy.stats`` does; the F
distribution is only asked for non-negative ratios of variances here.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt
from scipy import special
from scipy.special import _ufuncs

ArrayLike = npt.ArrayLike
Array = npt.NDArray[np.float64]

__all__ = ["f_cdf", "nct_sf", "norm_cdf", "norm_ppf", "t_cdf", "t_ppf", "t_sf"]


def t_sf(x: ArrayLike, df: ArrayLike) -> Array:
    """P(T > x) for Student's t with ``df`` degrees of freedom."""
    return np.asarray(special.stdtr(df, np.negative(x)), dtype=np.float64)


def t_cdf(x: ArrayLike, df: ArrayLike) -> Array:
    return np.asarray(special.stdtr(df, x), dtype=np.float64)


def t_ppf(q: ArrayLike, df: ArrayLike) -> Array:
    """The q quantile of Student's t."""
    return np.asarray(special.stdtrit(df, q), dtype=np.float64)


def norm_ppf(q: ArrayLike) -> Array:
    return np.asarray(special.ndtri(q), dtype=np.float64)


def norm_cdf(x: ArrayLike) -> Array:
    return np.asarray(special.ndtr(x), dtype=np.float64)


def f_cdf(x: ArrayLike, dfn: ArrayLike, dfd: ArrayLike) -> Array:
    """P(F <= x) for the F distribution (x >= 0)."""
    return np.asarray(special.fdtr(dfn, dfd, x), dtype=np.float64)


def nct_sf(x: ArrayLike, df: ArrayLike, nc: ArrayLike) -> Array:
    """P(T > x) for the noncentral t."""
    with np.errstate(over="ignore"):
        return np.asarray(np.clip(_ufuncs._nct_sf(x, df, nc), 0, 1), dtype=np.float64)
