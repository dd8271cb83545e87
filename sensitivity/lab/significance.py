"""Significance of daily remainders: Student t with estimated scatter, and log-wide control."""

from __future__ import annotations

import math

import numpy as np
from scipy import stats

__all__ = ["benjamini_hochberg", "holm", "remainder_test"]


def remainder_test(
    remainder: np.ndarray, var_noise: np.ndarray, var_total: np.ndarray, dof_noise: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Two-sided test of each remainder against its standard deviation.

    Parameters
    ----------
    remainder : ndarray
        Measured minus predicted change of each day.
    var_noise : ndarray
        The part of its variance estimated from the log's scatter.
    var_total : ndarray
        Its whole variance (estimated scatter plus known terms).
    dof_noise : float
        Degrees of freedom of the scatter estimate (inf when it is given).

    Returns
    -------
    t, dof, p : ndarray
        ``remainder / sqrt(var_total)``, the Welch-Satterthwaite degrees of
        freedom ``dof_noise (var_total / var_noise)^2`` (only the scatter is
        estimated) and the two-sided Student-t tail.

    References
    ----------
    F. E. Satterthwaite, Biometrics Bull. 2, 110 (1946); JCGM 100:2008, G.4.
    """
    sigma = np.sqrt(var_total)
    with np.errstate(divide="ignore", invalid="ignore"):
        dof = np.where(var_noise > 0, dof_noise * (var_total / var_noise) ** 2, math.inf)
        t = np.where(sigma > 0, remainder / sigma, np.inf * np.sign(remainder))
    finite = np.isfinite(dof)
    p = np.where(
        finite,
        2 * stats.t.sf(np.abs(t), np.where(finite, dof, 1.0)),
        2 * stats.norm.sf(np.abs(t)),
    )
    return t, dof, p


def holm(p: np.ndarray, tested: np.ndarray, alpha: float) -> np.ndarray:
    """Holm's step-down rule over the tested days (family-wise error at most alpha).

    References
    ----------
    S. Holm, "A simple sequentially rejective multiple test procedure",
    Scand. J. Stat. 6, 65 (1979).
    """
    out = np.zeros(p.shape, dtype=bool)
    index = np.flatnonzero(tested)
    order = index[np.argsort(p[index], kind="stable")]
    m = order.size
    for k, day in enumerate(order):
        if p[day] > alpha / (m - k):
            break
        out[day] = True
    return out


def benjamini_hochberg(p: np.ndarray, tested: np.ndarray, alpha: float) -> np.ndarray:
    """Benjamini-Hochberg step-up rule over the tested days (false-discovery rate alpha).

    References
    ----------
    Y. Benjamini, Y. Hochberg, J. R. Stat. Soc. B 57, 289 (1995).
    """
    out = np.zeros(p.shape, dtype=bool)
    index = np.flatnonzero(tested)
    if index.size == 0:
        return out
    order = index[np.argsort(p[index], kind="stable")]
    m = order.size
    passing = np.flatnonzero(p[order] <= alpha * np.arange(1, m + 1) / m)
    if passing.size:
        out[order[: passing[-1] + 1]] = True
    return out
