"""Confidence intervals from independent randomizations (replicates) of a QMC design.

The rows of one scrambled Sobol' sequence are not independent draws, so
resampling them (the bootstrap) does not estimate the spread of an estimate
made from them. R independent scramblings are: the R estimates are i.i.d., and
their mean has the Student-t interval on R - 1 degrees of freedom.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from scipy import stats

__all__ = [
    "DEFAULT_REPLICATES",
    "ReplicateInterval",
    "check_replicates",
    "replicate_interval",
    "split_replicates",
]

#: Independent randomizations of a Sobol' design, by default (at least 10 for a
#: t-quantile within 15 % of the normal one at 95 %: t(0.975, 9) = 2.26).
DEFAULT_REPLICATES = 10


class ReplicateInterval(NamedTuple):
    """Mean of R replicate estimates, its standard error and t-interval."""

    estimate: np.ndarray
    standard_error: np.ndarray
    low: np.ndarray
    high: np.ndarray


def check_replicates(n_replicates: int, *, minimum: int = 2) -> int:
    """Return ``n_replicates`` as int, or raise ValueError naming the minimum."""
    if (
        not isinstance(n_replicates, int | np.integer)
        or isinstance(n_replicates, bool)
        or n_replicates < minimum
    ):
        raise ValueError(
            f"n_replicates must be an integer >= {minimum}; got {n_replicates!r} "
            f"(use {DEFAULT_REPLICATES})"
        )
    return int(n_replicates)


def replicate_interval(estimates: np.ndarray, *, confidence_level: float) -> ReplicateInterval:
    """Student-t interval of the mean of independent replicate estimates.

    Parameters
    ----------
    estimates : numpy.ndarray, shape (R, ...)
        One estimate per independent randomization (R >= 2).
    confidence_level : float
        Two-sided level in (0, 1).

    Returns
    -------
    ReplicateInterval
        ``estimate`` the mean over replicates, ``standard_error``
        ``s / sqrt(R)`` (s with ddof = 1), ``low``/``high`` =
        ``estimate -+ t_{R-1}(1/2 + level/2) * standard_error``. NaN where a
        replicate is NaN.

    Notes
    -----
    The R estimates are i.i.d. with the distribution of one randomized QMC
    estimate; for approximately normal replicates the interval has the
    stated coverage (L'Ecuyer & Lemieux 2002, section 3.3; Owen, ch. 17).

    References
    ----------
    P. L'Ecuyer, C. Lemieux, "Recent advances in randomized quasi-Monte Carlo
    methods", in Modeling Uncertainty, Kluwer (2002), pp. 419-474;
    A. B. Owen, "Monte Carlo theory, methods and examples" (2013), ch. 17.
    """
    values = np.asarray(estimates, dtype=float)
    r = values.shape[0]
    if r < 2:
        raise ValueError(f"a replicate interval needs at least 2 replicates; got {r}")
    mean = values.mean(axis=0)
    se = values.std(axis=0, ddof=1) / np.sqrt(r)
    t = float(stats.t.ppf(0.5 + confidence_level / 2, r - 1))
    return ReplicateInterval(mean, se, mean - t * se, mean + t * se)


def split_replicates(values: np.ndarray, n_replicates: int, *, axis: int = 0) -> np.ndarray:
    """View of ``values`` with ``axis`` (length R n, replicate-major) split into (R, n).

    The replicate axis comes first in the result.
    """
    values = np.asarray(values)
    size = values.shape[axis]
    if size % n_replicates:
        raise ValueError(f"{size} rows do not split into {n_replicates} replicates of equal size")
    moved = np.moveaxis(values, axis, 0)
    return moved.reshape(n_replicates, size // n_replicates, *moved.shape[1:])
