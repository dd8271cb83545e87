"""Bootstrap of the rows of a design: valid where the rows are independent random draws.

Resamples are vectors of multiplicities (how often each row was drawn), so a
bootstrap estimate is a weighted mean and a block of them one matrix product.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

__all__ = [
    "ConfidenceInterval",
    "bootstrap_estimates",
    "bootstrap_indices",
    "bootstrap_interval",
    "resample_weights",
]

# Elements of one bootstrap weight block (resamples x base rows); bounds memory.
_BOOTSTRAP_BLOCK = 1 << 22


class ConfidenceInterval(NamedTuple):
    """Lower and upper bounds of a bootstrap confidence interval."""

    low: np.ndarray
    high: np.ndarray


def bootstrap_indices(n: int, n_bootstrap: int, rng) -> np.ndarray:
    """Resample row indices, shape (n, n_bootstrap), drawn as SALib draws them."""
    generator = np.random.default_rng(rng)
    return generator.integers(n, size=(n, n_bootstrap))


def resample_weights(indices: np.ndarray) -> np.ndarray:
    """Multiplicity of each of n rows in each resample: (n, r) indices -> (r, n) floats."""
    n, width = indices.shape
    flat = (indices + n * np.arange(width)[None, :]).ravel()
    return np.bincount(flat, minlength=n * width).reshape(width, n).astype(float)


def bootstrap_estimates(integrands, shape, n_bootstrap, rng, estimate):
    """Bootstrap replicates of every estimator, in blocks of resamples."""
    n = shape[0]
    r = bootstrap_indices(n, n_bootstrap, rng)  # (n, n_bootstrap)
    per_block = max(1, _BOOTSTRAP_BLOCK // max(n, integrands.shape[1]))
    firsts, totals, seconds = [], [], []
    for start in range(0, n_bootstrap, per_block):
        w = resample_weights(r[:, start : start + per_block])
        f, t, s = estimate(w, integrands, *shape)
        firsts.append(f)
        totals.append(t)
        if s is not None:
            seconds.append(s)
    first = np.concatenate(firsts)
    total = np.concatenate(totals)
    second = np.concatenate(seconds) if seconds else None
    return first, total, second


def bootstrap_interval(replicates, estimate, z, confidence_level, method):
    se = np.std(replicates, axis=0, ddof=1)
    if method == "normal":
        return ConfidenceInterval(estimate - z * se, estimate + z * se), se
    alpha = (1 - confidence_level) / 2
    low, high = np.quantile(replicates, [alpha, 1 - alpha], axis=0)
    return ConfidenceInterval(low, high), se
