"""Exact Shapley attribution of a change in an output to the changes of its inputs."""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np

from trapbudget.sensitivity.errors import DataError
from trapbudget.sensitivity.lab.driftlog import MAX_CHANNELS
from trapbudget.sensitivity.protocol import evaluate_in_chunks

__all__ = ["shapley_attribution"]


def shapley_attribution(
    model: Any,
    *,
    reference: Mapping[str, float],
    points: Mapping[str, np.ndarray],
    base: Mapping[str, float],
    output: str,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Exact Shapley attribution of output changes to the changed inputs.

    Parameters
    ----------
    model : model protocol object
    reference : mapping of str to float
        Reference value of each channel input (SI).
    points : mapping of str to ndarray, shape (n,)
        Values of the same inputs at n points.
    base : mapping of str to float
        Every other input, held fixed.
    output : str
        Output attributed.

    Returns
    -------
    attribution : ndarray, shape (n, k)
        Share of each channel in the change at each point.
    change : ndarray, shape (n,)
        f(point) - f(reference).
    at_reference : ndarray, shape ()
        f(reference).

    Notes
    -----
    ``phi_i = sum_{S not containing i} |S|! (k - |S| - 1)! / k! [f(S + i) - f(S)]``
    with ``f(S)`` the output with the channels in S at the point and the
    others at the reference. All 2^k coalitions of every point are evaluated
    in one vectorized model call; by the efficiency property the phi sum to
    ``f(point) - f(reference)`` to rounding.

    References
    ----------
    L. S. Shapley, "A value for n-person games", in Contributions to the
    Theory of Games II (Princeton 1953); for attribution of model outputs,
    S. M. Lundberg and S.-I. Lee, NeurIPS 2017.
    """
    channels = list(points)
    k = len(channels)
    if k > MAX_CHANNELS:
        raise DataError(
            f"{k} monitored channels; exact attribution handles at most {MAX_CHANNELS}: "
            "map fewer columns"
        )
    n = len(next(iter(points.values()))) if channels else 0
    masks = np.array([[(s >> i) & 1 for i in range(k)] for s in range(2**k)], dtype=bool)
    values: dict[str, np.ndarray] = {
        name: np.full((n, 2**k), float(v)) for name, v in base.items() if name not in points
    }
    for i, name in enumerate(channels):
        day = np.asarray(points[name], dtype=float)[:, np.newaxis]
        values[name] = np.where(masks[np.newaxis, :, i], day, float(reference[name]))
    # Every coalition of every point in one flat run through the one evaluation path.
    flat = {name: np.ascontiguousarray(v).ravel() for name, v in values.items()}
    out = np.asarray(
        evaluate_in_chunks(model, flat, n_samples=max(n * 2**k, 1))[output], dtype=float
    )
    out = np.broadcast_to(out.reshape(-1), (n * 2**k,)).reshape(n, 2**k)
    size = masks.sum(axis=1)
    weight = np.array(
        [math.factorial(s) * math.factorial(k - s - 1) / math.factorial(k) for s in range(k)]
    )
    attribution = np.zeros((n, k))
    index = np.arange(2**k)
    for i in range(k):
        without = index[~masks[:, i]]
        with_i = without | (1 << i)
        attribution[:, i] = (out[:, with_i] - out[:, without]) @ weight[size[without]]
    return attribution, out[:, -1] - out[:, 0], out[0, 0] if n else np.nan  # type: ignore[return-value]
