"""Shipped interpolation tables of the capture model: grid geometry, coordinates, data files.

A grid is a tuple of axes ``(name, low, high, points, offset)``, each uniform in
log(value + offset) (the format of ``capture.TABLE_GRID``).
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["grid_coordinates", "grid_geometry", "read_data"]


def grid_geometry(grid) -> tuple[NDArray, NDArray, NDArray, NDArray]:
    """Lows, steps, offsets and highs of a grid in the format of :data:`TABLE_GRID`.

    Each axis is uniform in log(value + offset); lows and highs are those logarithms.
    """
    lows = np.array([math.log(lo + off) for _, lo, _, _, off in grid])
    highs = np.array([math.log(hi + off) for _, _, hi, _, off in grid])
    steps = (highs - lows) / np.array([n - 1 for *_, n, _ in grid])
    offsets = np.array([off for *_, off in grid])
    return lows, steps, offsets, highs


def grid_coordinates(offsets: NDArray, *values: ArrayLike) -> tuple[NDArray, tuple]:
    """Table coordinates log(value + offset) of broadcast values, (n, 4), and their shape."""
    parts = np.broadcast_arrays(*(np.asarray(a, float) for a in values))
    with np.errstate(divide="ignore", invalid="ignore"):
        coords = np.stack(
            [
                np.log(np.maximum(p.reshape(-1) + o, 1e-300))
                for p, o in zip(parts, offsets, strict=True)
            ],
            axis=1,
        )
    return coords, parts[0].shape


def read_data(name: str, grid) -> dict:
    """A JSON data file shipped in models/data/, checked to be tabulated on ``grid``."""
    import json
    from importlib import resources

    data = json.loads((resources.files("trapbudget.models") / "data" / name).read_text("utf-8"))
    if tuple(tuple(row) for row in data["grid"]) != tuple(grid):
        raise RuntimeError(f"data/{name} does not match the grid of its module; regenerate it")
    return data
