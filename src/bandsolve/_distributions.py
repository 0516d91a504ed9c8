"""Quantiles and upper-tail probabilities of the t, F, χ², beta and normal distributions.

Each function calls the ``scipy.special`` function that the matching ``scipy.stats``
distribution method calls (``stats.t.ppf`` is ``special.stdtrit``, and so on), so the values
are scipy.stats' own (tested against it). Importing ``scipy.stats`` costs about 0.5 s of
start-up for the command line, ``scipy.special`` a tenth of that.
"""

from __future__ import annotations

import numpy as np
from scipy import special

__all__ = ["beta_quantile", "chi2_quantile", "chi2_sf", "f_quantile", "f_sf",
           "normal_isf", "normal_quantile", "t_quantile", "t_sf"]


def t_quantile(q, df):
    """Student t quantile, ``stats.t.ppf(q, df)``."""
    return special.stdtrit(df, q)


def t_sf(x, df):
    """Student t upper tail ``P(T > x)``, ``stats.t.sf(x, df)``."""
    return special.stdtr(df, -np.asarray(x, dtype=float))


def f_quantile(q, dfn, dfd):
    """F quantile, ``stats.f.ppf(q, dfn, dfd)``."""
    return special.fdtri(dfn, dfd, q)


def f_sf(x, dfn, dfd):
    """F upper tail ``P(F > x)``, ``stats.f.sf(x, dfn, dfd)``."""
    return special.fdtrc(dfn, dfd, x)


def chi2_quantile(q, df):
    """χ² quantile, ``stats.chi2.ppf(q, df)`` (twice the inverse regularized gamma)."""
    return 2.0 * special.gammaincinv(np.asarray(df, dtype=float) / 2.0, q)


def chi2_sf(x, df):
    """χ² upper tail ``P(X > x)``, ``stats.chi2.sf(x, df)``."""
    return special.chdtrc(df, x)


def beta_quantile(q, a, b):
    """Beta quantile, ``stats.beta.ppf(q, a, b)`` (inverse regularized incomplete beta)."""
    return special.betaincinv(a, b, q)


def normal_quantile(q):
    """Standard normal quantile, ``stats.norm.ppf(q)``."""
    return special.ndtri(q)


def normal_isf(q):
    """Standard normal upper quantile, ``stats.norm.isf(q)`` = ``−ndtri(q)``."""
    return -special.ndtri(q)
