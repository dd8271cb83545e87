"""What a lab measures of a trap: the loading signal in time and the ballistic expansion."""

from __future__ import annotations

from typing import Any

import numpy as np
import scipy.constants as const

__all__ = ["loading_curve", "time_of_flight_radius"]


def loading_curve(
    time: Any, steady_state: float, time_constant: float, two_body_fraction: float = 0.0
) -> np.ndarray:
    """Atom number (or a signal proportional to it) while a MOT loads from empty.

    Parameters
    ----------
    time : array_like, s
        Time since loading started.
    steady_state : float
        N_s, the value approached at long times (signal units).
    time_constant : float, s
        1/gamma, the exponential time constant.
    two_body_fraction : float
        chi = N_s / |N_-| in [0, 1); 0 for pure one-body loss.

    Returns
    -------
    ndarray
        ``N_s (1 - exp(-t/tau)) / (1 + chi exp(-t/tau))``.

    Notes
    -----
    Solution of ``dN/dt = R - N/tau_1 - b N^2`` with ``N(0) = 0``: the roots
    ``N_s > 0 > N_-`` of the right-hand side give
    ``gamma = sqrt(1/tau_1^2 + 4 b R)`` and ``chi = -N_s/N_-``; then
    ``R = gamma N_s / (1 + chi)``, ``1/tau_1 = gamma (1 - chi) / (1 + chi)`` and
    ``b = gamma chi / (N_s (1 + chi))``. With ``chi = 0`` it is
    ``N_s (1 - exp(-t/tau))`` with ``N_s = R tau``.

    References
    ----------
    Rate equation as in C. Monroe, W. Swann, H. Robinson and C. Wieman,
    Phys. Rev. Lett. 65, 1571 (1990); two-body term as in the MOT loss
    literature reviewed by J. Weiner et al., Rev. Mod. Phys. 71, 1 (1999).
    """
    decay = np.exp(-np.asarray(time, dtype=float) / time_constant)
    return steady_state * (1.0 - decay) / (1.0 + two_body_fraction * decay)


def time_of_flight_radius(time: Any, initial_radius: float, temperature: float, *, mass: float):
    """Rms radius of a thermal cloud after free expansion.

    Parameters
    ----------
    time : array_like, s
        Expansion time.
    initial_radius : float, m
        sigma_0, rms radius at release.
    temperature : float, K
    mass : float, kg

    Returns
    -------
    ndarray, m
        ``sqrt(sigma_0^2 + k_B T t^2 / m)``.

    References
    ----------
    Ballistic expansion of a Maxwell-Boltzmann cloud: e.g. H. J. Metcalf and
    P. van der Straten, "Laser Cooling and Trapping" (Springer 1999).
    """
    t = np.asarray(time, dtype=float)
    return np.sqrt(initial_radius**2 + const.k * temperature * t**2 / mass)
