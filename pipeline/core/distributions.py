"""The tail areas and quantiles castline's tests and intervals need (Student's t, chi-squared,
F, the normal), from scipy.special's functions.

scipy.stats computes these same values with these same functions (its t, chi2 and f
distributions call stdtr, stdtrit, chdtrc and fdtrc), but importing it costs some
0.7 s of a run on a small machine, where scipy.special costs 0.1 s. The functions
broadcast as numpy does; a degree of freedom of zero or less gives NaN, as scipy.stats'.
"""

from __future__ import annotations

import numpy as np
import scipy.special as special


def t_quantile(probability, df):
    """Return Student's t quantile: the value below which ``probability`` of the distribution lies
    (minus infinity at 0, where scipy.special's stdtrit gives plus infinity)."""
    probability = np.asarray(probability, dtype=float)
    quantile = special.stdtrit(df, probability)
    return np.where((probability == 0) & ~np.isnan(quantile), -np.inf, quantile)[()]


def t_upper(statistic, df):
    """Return the upper tail area of Student's t beyond ``statistic`` (scipy.stats.t.sf)."""
    return special.stdtr(df, -np.asarray(statistic, dtype=float))


def chi2_upper(statistic, df):
    """Return the upper tail area of the chi-squared distribution beyond ``statistic``
    (scipy.stats.chi2.sf): 1 below zero, where the distribution has no mass."""
    return special.chdtrc(df, np.maximum(np.asarray(statistic, dtype=float), 0.0))


def f_upper(statistic, df_model, df_resid):
    """Return the upper tail area of the F distribution beyond ``statistic`` (scipy.stats.f.sf):
    1 below zero."""
    return special.fdtrc(df_model, df_resid, np.maximum(np.asarray(statistic, dtype=float), 0.0))


def normal_quantile(probability):
    """Return the standard normal quantile (scipy.stats.norm.ppf)."""
    return special.ndtri(probability)


def normal_order_medians(count: int) -> np.ndarray:
    """Return the medians of the order statistics of ``count`` standard normal draws, by
    Filliben's (1975) approximation of the uniform ones: the theoretical quantiles a normal
    quantile plot sets the sorted residuals against (as scipy.stats.probplot)."""
    uniform = np.empty(count)
    if count == 0:
        return uniform
    uniform[-1] = 0.5 ** (1.0 / count)
    uniform[0] = 1 - uniform[-1]
    i = np.arange(2, count)
    uniform[1:-1] = (i - 0.3175) / (count + 0.365)
    return special.ndtri(uniform)
