"""Given-data first-order indices: class-conditional means on one sample (any dependence)."""

from __future__ import annotations

import numpy as np
from scipy import sparse

from trapbudget.sensitivity.indices.bootstrap import (
    _BOOTSTRAP_BLOCK,
    ConfidenceInterval,
    bootstrap_indices,
    resample_weights,
)

__all__ = ["default_bins", "first_order_given_data", "rank_classes"]


def default_bins(n: int) -> int:
    """Number of equal-count classes for given-data estimators of n points.

    The partition size of Plischke, Borgonovo & Smith (2013), as SALib's
    delta method uses it: ``ceil(n ** (2 / (7 + tanh((1500 - n) / 500))))``,
    at most 48.
    """
    exponent = 2.0 / (7.0 + np.tanh((1500.0 - n) / 500.0))
    return int(min(int(np.ceil(n**exponent)), 48))


def rank_classes(x: np.ndarray, n_bins: int) -> np.ndarray:
    """Equal-count class (0..n_bins-1) of each row of each column of x (n, d).

    Rank r (1..n, ties by order) falls in class c when edges[c] < r <= edges[c+1],
    edges = linspace(0, n, n_bins + 1): the partition of Plischke et al. (2013)
    as SALib's delta method draws it.
    """
    n = x.shape[0]
    ranks = np.argsort(np.argsort(x, axis=0, kind="stable"), axis=0) + 1
    edges = np.linspace(0, n, n_bins + 1)
    return np.searchsorted(edges, ranks, side="left") - 1


def first_order_given_data(
    x: np.ndarray,
    y: np.ndarray,
    *,
    n_bins: int | None = None,
    n_bootstrap: int = 200,
    confidence_level: float = 0.95,
    rng: int | np.random.Generator | None = None,
) -> tuple[np.ndarray, ConfidenceInterval]:
    """First-order index of each column of ``x`` from given data (class means).

    Parameters
    ----------
    x : numpy.ndarray, shape (n, d)
        Input samples (any joint distribution: correlated inputs are fine).
    y : numpy.ndarray, shape (n,) or (n, m)
        Outputs.
    n_bins : int, optional
        Equal-count classes per input; default :func:`default_bins`.
    n_bootstrap : int, default 200
        Resamples for the percentile interval (0: NaN bounds).
    confidence_level : float, default 0.95
    rng : int or numpy.random.Generator, optional

    Returns
    -------
    first_order : numpy.ndarray, shape (d,) or (d, m)
    interval : ConfidenceInterval

    Notes
    -----
    ``S_i = sum_c (n_c / n) (mean(y | c) - mean(y))^2 / Var(y)`` over the
    classes c of the ranks of x_i (Plischke, Borgonovo & Smith 2013, eq. 13).
    Biased upward by about ``(n_bins - 1) / n`` for a non-influential input.

    References
    ----------
    E. Plischke, E. Borgonovo, C. L. Smith, "Global sensitivity measures from
    given data", Eur. J. Oper. Res. 226, 536 (2013).
    """
    x = np.asarray(x, dtype=float)
    x = x.reshape(x.shape[0], -1)
    y_in = np.asarray(y, dtype=float)
    single = y_in.ndim == 1
    y2 = y_in.reshape(y_in.shape[0], -1)
    n, d = x.shape
    m = y2.shape[1]
    n_bins = default_bins(n) if n_bins is None else int(n_bins)
    classes = rank_classes(x, n_bins)
    # Sparse class membership (n, d*n_bins): one entry per row and input, and the
    # same pattern carrying y for each output, so a weighted class sum is one
    # sparse product for all resamples.
    rows = np.repeat(np.arange(n), d)
    cols = (classes + n_bins * np.arange(d)[None, :]).ravel()
    member = sparse.csr_array((np.ones(n * d), (rows, cols)), shape=(n, d * n_bins))
    carriers = [
        sparse.csr_array((np.repeat(y2[:, k], d), (rows, cols)), shape=(n, d * n_bins))
        for k in range(m)
    ]

    def estimate(w: np.ndarray) -> np.ndarray:  # w (r, n) -> (r, d, m)
        total = w.sum(axis=1)[:, None]  # (r, 1)
        mean = (w @ y2) / total  # (r, m)
        var = (w @ (y2 * y2)) / total - mean**2
        counts = (member.T @ w.T).T.reshape(-1, d, n_bins)  # (r, d, c)
        sums = np.stack([(c.T @ w.T).T for c in carriers], axis=-1).reshape(-1, d, n_bins, m)
        with np.errstate(invalid="ignore", divide="ignore"):
            means = sums / counts[..., None]
        dev = np.where(counts[..., None] > 0, means - mean[:, None, None, :], 0.0)
        vi = np.sum(counts[..., None] * dev**2, axis=2) / total[:, :, None]
        return vi / np.where(var > 0, var, np.nan)[:, None, :]

    point = estimate(np.ones((1, n)))[0]
    if n_bootstrap:
        r = bootstrap_indices(n, n_bootstrap, rng)
        per_block = max(1, _BOOTSTRAP_BLOCK // (n * max(d * m // 4, 1)))
        reps = []
        for start in range(0, n_bootstrap, per_block):
            reps.append(estimate(resample_weights(r[:, start : start + per_block])))
        reps = np.concatenate(reps)  # type: ignore[assignment]
        alpha = (1 - confidence_level) / 2
        low, high = np.quantile(reps, [alpha, 1 - alpha], axis=0)
    else:
        low = high = np.full_like(point, np.nan)
    if single:
        point, low, high = point[:, 0], low[:, 0], high[:, 0]
    return point, ConfidenceInterval(low, high)
