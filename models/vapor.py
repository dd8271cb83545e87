"""Alkali vapor in the cell: pressure, density, speed distribution, background loss.

Pure, broadcasting NumPy functions in SI: temperature in K, pressure in Pa,
density in 1/m^3, speeds in m/s, mass in kg.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike
from scipy import constants, special

from trapbudget.models.species import VaporPressure

__all__ = [
    "ARPORNTHIP_COEFFICIENT",
    "background_loss_rate",
    "flux_fraction_slower",
    "fraction_slower",
    "mean_speed",
    "most_probable_speed",
    "number_density",
    "saturated_density",
    "saturated_pressure",
]

_KB = constants.k
_TORR = constants.torr  # Pa

ARPORNTHIP_COEFFICIENT: float = 1.0 / (2.0e-8 * _TORR)
"""Background-gas loss rate per pressure, 1/(Pa s).

From the rule ``P ~ (2e-8 torr s) / tau`` of Arpornthip, Sackett & Hughes,
Phys. Rev. A 85, 033420 (2012), good to about a factor 2 across common
background gases: ``1/tau = P / (2e-8 torr s)``, about 3.75e5 per Pa per s.
"""


def saturated_pressure(vapor: VaporPressure, temperature: ArrayLike) -> np.ndarray:
    """Saturated vapor pressure of an alkali metal, Pa.

    Parameters
    ----------
    vapor : VaporPressure
        Coefficients of the element (``Species.vapor``).
    temperature : array_like, K
        Temperature of the coldest spot of the cell (reservoir), K.

    Returns
    -------
    numpy.ndarray, Pa

    Notes
    -----
    ``log10(P / atm) = A + B / T``, solid branch below the melting point and
    liquid branch above (quoted to +-5 %).

    References
    ----------
    C. B. Alcock, V. P. Itkin and M. K. Horrigan, Can. Metall. Q. 23, 309
    (1984), Table 2.
    """
    return vapor.pressure(temperature)


def number_density(pressure: ArrayLike, temperature: ArrayLike) -> np.ndarray:
    """Number density of an ideal gas, ``n = P / (k_B T)``, 1/m^3.

    Parameters
    ----------
    pressure : array_like, Pa
    temperature : array_like, K

    Returns
    -------
    numpy.ndarray, 1/m^3
    """
    p = np.asarray(pressure, dtype=float)
    t = np.asarray(temperature, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return p / (_KB * t)


def saturated_density(vapor: VaporPressure, temperature: ArrayLike) -> np.ndarray:
    """Number density of the saturated vapor at ``temperature``, 1/m^3.

    Parameters
    ----------
    vapor : VaporPressure
    temperature : array_like, K

    Returns
    -------
    numpy.ndarray, 1/m^3
        ``P_sat(T) / (k_B T)``; see :func:`saturated_pressure`.
    """
    return number_density(saturated_pressure(vapor, temperature), temperature)


def most_probable_speed(mass: ArrayLike, temperature: ArrayLike) -> np.ndarray:
    """Most probable speed of a Maxwell-Boltzmann gas, ``sqrt(2 k_B T / m)``, m/s.

    Parameters
    ----------
    mass : array_like, kg
    temperature : array_like, K

    Returns
    -------
    numpy.ndarray, m/s

    References
    ----------
    F. Reif, "Fundamentals of Statistical and Thermal Physics" (McGraw-Hill,
    1965), ch. 7.
    """
    return np.sqrt(2.0 * _KB * np.asarray(temperature, dtype=float) / np.asarray(mass, float))


def mean_speed(mass: ArrayLike, temperature: ArrayLike) -> np.ndarray:
    """Mean speed of a Maxwell-Boltzmann gas, ``sqrt(8 k_B T / (pi m))``, m/s.

    Parameters
    ----------
    mass : array_like, kg
    temperature : array_like, K

    Returns
    -------
    numpy.ndarray, m/s

    References
    ----------
    F. Reif, "Fundamentals of Statistical and Thermal Physics" (McGraw-Hill,
    1965), ch. 7.
    """
    t = np.asarray(temperature, dtype=float)
    return np.sqrt(8.0 * _KB * t / (np.pi * np.asarray(mass, dtype=float)))


def _speed_ratio(capture_velocity: ArrayLike, most_probable: ArrayLike) -> np.ndarray:
    vc = np.asarray(capture_velocity, dtype=float)
    vp = np.asarray(most_probable, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.clip(vc, 0.0, None) / vp


def fraction_slower(capture_velocity: ArrayLike, most_probable_speed: ArrayLike) -> np.ndarray:
    """Fraction of a thermal gas (by number) with speed below ``capture_velocity``.

    Parameters
    ----------
    capture_velocity : array_like, m/s
    most_probable_speed : array_like, m/s
        ``sqrt(2 k_B T / m)``.

    Returns
    -------
    numpy.ndarray
        In [0, 1]; 0 for a non-positive capture velocity.

    Notes
    -----
    With ``x = vc / vp``, integrating ``4 pi v^2 f(v)`` from 0 to vc gives
    ``erf(x) - (2 / sqrt(pi)) x exp(-x^2)``.

    References
    ----------
    F. Reif, "Fundamentals of Statistical and Thermal Physics" (McGraw-Hill,
    1965), ch. 7; C. J. Foot, "Atomic Physics" (OUP, 2005), ch. 9.
    """
    x = _speed_ratio(capture_velocity, most_probable_speed)
    # the same function as the regularized incomplete gamma P(3/2, x^2), which keeps full
    # precision for small x (where the closed form cancels) and gives 1 at x = inf
    return special.gammainc(1.5, x**2)


def flux_fraction_slower(
    capture_velocity: ArrayLike, most_probable_speed: ArrayLike
) -> np.ndarray:
    """Fraction of the thermal flux onto a wall carried by atoms slower than ``capture_velocity``.

    Parameters
    ----------
    capture_velocity : array_like, m/s
    most_probable_speed : array_like, m/s

    Returns
    -------
    numpy.ndarray
        In [0, 1]; 0 for a non-positive capture velocity.

    Notes
    -----
    The flux is weighted by ``v``: ``int_0^vc v^3 exp(-v^2/vp^2) dv / int_0^inf ...``
    ``= 1 - (1 + x^2) exp(-x^2)``, ``x = vc / vp``; for small x it is ``x^4 / 2``.

    References
    ----------
    F. Reif, "Fundamentals of Statistical and Thermal Physics" (McGraw-Hill,
    1965), ch. 7 (effusion); C. J. Foot, "Atomic Physics" (OUP, 2005), ch. 9.
    """
    x = _speed_ratio(capture_velocity, most_probable_speed)
    # = P(2, x^2), the regularized incomplete gamma: precise for small x, 1 at x = inf
    return special.gammainc(2.0, x**2)


def background_loss_rate(pressure: ArrayLike, coefficient: ArrayLike) -> np.ndarray:
    """Loss rate of trapped atoms by collisions with background gas, 1/s.

    Parameters
    ----------
    pressure : array_like, Pa
        Background (non-alkali) gas pressure.
    coefficient : array_like, 1/(Pa s)
        Loss rate per pressure, e.g. :data:`ARPORNTHIP_COEFFICIENT`.

    Returns
    -------
    numpy.ndarray, 1/s
        ``coefficient x pressure``.

    References
    ----------
    V. Arpornthip, C. A. Sackett and K. J. Hughes, Phys. Rev. A 85, 033420 (2012).
    """
    return np.asarray(coefficient, dtype=float) * np.asarray(pressure, dtype=float)
