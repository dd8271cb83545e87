"""Quadrupole field of a MOT: coil gradient, Zeeman shift and stray-field offset.

Pure, broadcasting NumPy functions in SI: current in A, lengths in m,
field in T, gradient in T/m.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike
from scipy import constants

__all__ = ["coil_gradient", "radial_gradient", "trap_centre_shift", "zeeman_shift"]

_MU0 = constants.mu_0
_HBAR = constants.hbar


def coil_gradient(
    current: ArrayLike,
    *,
    turns: ArrayLike,
    radius: ArrayLike,
    separation: ArrayLike,
) -> np.ndarray:
    """Axial field gradient at the centre of an opposed (anti-Helmholtz) coil pair.

    Parameters
    ----------
    current : array_like, A
        Current in each coil (opposite senses).
    turns : array_like
        Number of turns N per coil (thin-coil approximation).
    radius : array_like, m
        Coil radius R.
    separation : array_like, m
        Distance 2a between the coil planes.

    Returns
    -------
    numpy.ndarray, T/m
        ``dBz/dz`` at the centre.

    Notes
    -----
    The on-axis field of one loop is ``Bz = mu0 N I R^2 / (2 (R^2 + z^2)^(3/2))``;
    differentiating the pair at ``z = +-a`` with opposite currents gives

    ``dBz/dz(0) = 3 mu0 N I R^2 a / (R^2 + a^2)^(5/2)``, ``a = separation / 2``.

    The gradient per current is largest at ``2a = R`` and the field is most
    linear (no third-order term) at ``2a = sqrt(3) R``.

    References
    ----------
    D. J. Griffiths, "Introduction to Electrodynamics", 4th ed. (Pearson,
    2013), ch. 5 (field on the axis of a loop); W. Bergeman, G. Erez and H. J. Metcalf,
    Phys. Rev. A 35, 1535 (1987) (quadrupole traps).
    """
    i = np.asarray(current, dtype=float)
    n = np.asarray(turns, dtype=float)
    r = np.asarray(radius, dtype=float)
    a = 0.5 * np.asarray(separation, dtype=float)
    return 3.0 * _MU0 * n * i * r**2 * a / (r**2 + a**2) ** 2.5


def radial_gradient(axial_gradient: ArrayLike) -> np.ndarray:
    """Magnitude of the radial gradient of a quadrupole field, T/m.

    Parameters
    ----------
    axial_gradient : array_like, T/m

    Returns
    -------
    numpy.ndarray, T/m
        ``axial_gradient / 2``.

    Notes
    -----
    ``div B = 0`` with cylindrical symmetry: ``dBx/dx = dBy/dy = -(1/2) dBz/dz``;
    the magnitude is returned.

    References
    ----------
    W. Bergeman, G. Erez and H. J. Metcalf, Phys. Rev. A 35, 1535 (1987).
    """
    return 0.5 * np.asarray(axial_gradient, dtype=float)


def zeeman_shift(zeeman_coefficient: ArrayLike, field: ArrayLike) -> np.ndarray:
    """Shift of the cycling transition's angular frequency in a magnetic field, rad/s.

    Parameters
    ----------
    zeeman_coefficient : array_like, J/T
        Differential magnetic moment ``mu' = (g_F' m_F' - g_F m_F) mu_B``
        (``Species.zeeman_coefficient``).
    field : array_like, T
        Field magnitude (or its signed component along the quantization axis).

    Returns
    -------
    numpy.ndarray, rad/s
        ``mu' B / hbar``. For ``mu' = mu_B`` this is 2 pi x 1.40 MHz/G.

    References
    ----------
    H. J. Metcalf and P. van der Straten, "Laser Cooling and Trapping"
    (Springer, 1999), ch. 7 (the MOT).
    """
    return np.asarray(zeeman_coefficient, dtype=float) * np.asarray(field, dtype=float) / _HBAR


def trap_centre_shift(bias_field: ArrayLike, gradient: ArrayLike) -> np.ndarray:
    """Displacement of the quadrupole field zero by a uniform stray field, m.

    Parameters
    ----------
    bias_field : array_like, T
        Component of the stray field along one axis.
    gradient : array_like, T/m
        Quadrupole gradient along that same axis: the axial gradient for a bias
        along the coil axis, :func:`radial_gradient` for a transverse bias
        (which therefore moves the zero twice as far).

    Returns
    -------
    numpy.ndarray, m
        ``d = B / A``. Near the centre the field along the axis is
        ``B(x) = A x + B_bias``, so the zero (and the trap centre) sits at
        ``x0 = -d``: the magnitude of the shift is ``|B / A|``. A zero gradient
        gives an infinite shift (no trap).

    References
    ----------
    H. J. Metcalf and P. van der Straten, "Laser Cooling and Trapping"
    (Springer, 1999), ch. 7 (the MOT).
    """
    b = np.asarray(bias_field, dtype=float)
    a = np.asarray(gradient, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(a != 0, b / np.where(a != 0, a, 1.0), np.copysign(np.inf, b))
