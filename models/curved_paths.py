"""Curved 3-D paths of the six-beam trap: the factor that carries the straight-line table to them.

The capture table of :mod:`capture` integrates every line straight. Curved paths differ:
the transverse push of the other beams makes some fast atoms miss the trap region and
brings slow atoms in from beyond the trap disk. Their ratio (mean vc^4 of curved 3-D
trajectories over the table's) is tabulated on a coarse grid over the working range
(``models/data/capture_correction.json``, written by
``benchmarks/make_capture_correction.py`` with a compiled 3-D integrator of the force law
and capture criterion of :mod:`capture_reference`, over the aligned trap's symmetric
directions and impact parameters out to 1.5 trap radii) and interpolated here.

Accuracy (measured 2026-12-03 by ``benchmarks/bench_model.py``: 200 random aligned Rb-87
traps of 2-12 mm waist, 0.5-30 I_sat per beam, 1-4 linewidths of detuning and 4-25 G/cm,
against 3-D trajectories over 3072 lines): the model's mean vc^4 is within 16.4 % RMS of
them (5.1 % RMS where the detuning is within 3 linewidths and s0 >= 2; 78 % at most, where
the capture collapses), against 41.9 % RMS for the straight-line table alone.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from trapbudget.models.table_grid import grid_coordinates, grid_geometry, read_data

__all__ = ["CORRECTION_FILE", "CORRECTION_GRID", "curved_path_factor"]

#: Axes of the curved-path correction (format of ``capture.TABLE_GRID``; coarser, over the
#: working range: 0.4-12 mm waists of the alkalis, 0.5-40 I_sat per beam, 0.75-5.25
#: linewidths of detuning, 0.2-20 half-linewidths of Zeeman shift across a waist; beyond
#: it the edge values hold).
CORRECTION_GRID = (
    ("eta", 2.0, 60.0, 5, 0.0),
    ("saturation", 0.5, 40.0, 5, 0.0),
    ("detuning", 0.75, 5.25, 12, 1.0),
    ("zeta", 0.2, 20.0, 7, 1.0),
)
#: The shipped correction, in models/data/ (written by benchmarks/make_capture_correction.py).
CORRECTION_FILE = "capture_correction.json"

_CORRECTION: list = []


def _correction():
    """The shipped curved-path correction and its grid (read once, on first use)."""
    if not _CORRECTION:
        data = read_data(CORRECTION_FILE, CORRECTION_GRID)
        shape = tuple(n for *_, n, _ in CORRECTION_GRID)
        table = np.asarray(data["log_ratio"], float).reshape(*shape, 1)
        lows, steps, offsets, _ = grid_geometry(CORRECTION_GRID)
        _CORRECTION.extend([np.ascontiguousarray(table), lows, steps, offsets])
    return _CORRECTION


def curved_path_factor(
    eta: ArrayLike, saturation: ArrayLike, red_detuning: ArrayLike, zeta: ArrayLike
) -> NDArray:
    """Mean vc^4 of curved 3-D paths over the straight-line table's, for the aligned trap.

    Parameters
    ----------
    eta, saturation, red_detuning, zeta : array_like
        The table variables of :mod:`capture` (broadcast together).

    Returns
    -------
    ndarray
        The factor, interpolated linearly in its logarithm on :data:`CORRECTION_GRID`
        (uniform in log(value + offset)) and held at its edge values beyond the grid.
    """
    from trapbudget.models import _kernels

    table, lows, steps, offsets = _correction()
    coords, shape = grid_coordinates(offsets, eta, saturation, red_detuning, zeta)
    coords = np.where(np.isfinite(coords), coords, lows)
    out = np.empty((coords.shape[0], 1))
    _kernels.interpolate(table, lows, steps, np.ascontiguousarray(coords), _LINEAR, out)
    return np.exp(out[:, 0]).reshape(shape)


_LINEAR = np.zeros(4, dtype=np.int64)
