"""Laser cooling in a MOT: damping, spring constant and temperature.

Pure, broadcasting NumPy functions in SI: detuning in Hz of cyclic
frequency (red < 0), linewidth Gamma in 1/s (angular), wavenumber in 1/m,
gradient in T/m, temperature in K.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike
from scipy import constants

__all__ = [
    "damping_coefficient",
    "doppler_temperature",
    "spring_constant",
    "sub_doppler_temperature",
    "temperature",
]

_HBAR = constants.hbar
_KB = constants.k


def _as_float(*values: ArrayLike) -> list[np.ndarray]:
    return [np.asarray(v, dtype=float) for v in values]


def damping_coefficient(
    saturation: ArrayLike,
    detuning: ArrayLike,
    linewidth: ArrayLike,
    wavenumber: ArrayLike,
) -> np.ndarray:
    """Damping coefficient of one pair of counter-propagating beams (optical molasses), kg/s.

    Parameters
    ----------
    saturation : array_like
        Saturation parameter s0 of each beam of the pair.
    detuning : array_like, Hz
        Laser detuning (cyclic; red < 0).
    linewidth : array_like, 1/s
        Natural decay rate Gamma.
    wavenumber : array_like, 1/m
        k = 2 pi / lambda.

    Returns
    -------
    numpy.ndarray, kg/s
        Positive (a damping force ``F = -beta v``) for red detuning, negative for blue.

    Notes
    -----
    Low-velocity expansion of the two beams' scattering forces,
    ``beta = -8 hbar k^2 delta s0 / (Gamma (1 + s0 + (2 delta / Gamma)^2)^2)``,
    ``delta = 2 pi detuning``. For fixed s0 it is largest at
    ``delta = -Gamma / (2 sqrt(3))`` x sqrt(1 + s0).

    References
    ----------
    H. J. Metcalf and P. van der Straten, "Laser Cooling and Trapping"
    (Springer, 1999), ch. 7 (optical molasses).
    """
    s0, det, gamma, k = _as_float(saturation, detuning, linewidth, wavenumber)
    delta = 2.0 * np.pi * det
    return (
        -8.0 * _HBAR * k**2 * delta * s0 / (gamma * (1.0 + s0 + (2.0 * delta / gamma) ** 2) ** 2)
    )


def spring_constant(
    damping: ArrayLike,
    zeeman_coefficient: ArrayLike,
    gradient: ArrayLike,
    wavenumber: ArrayLike,
) -> np.ndarray:
    """Restoring-force constant of a MOT along one axis, N/m.

    Parameters
    ----------
    damping : array_like, kg/s
        Damping coefficient beta (:func:`damping_coefficient`).
    zeeman_coefficient : array_like, J/T
        mu' of the cycling transition (``Species.zeeman_coefficient``).
    gradient : array_like, T/m
        Field gradient A along that axis.
    wavenumber : array_like, 1/m

    Returns
    -------
    numpy.ndarray, N/m

    Notes
    -----
    The Zeeman shift ``mu' A x / hbar`` enters the force like the Doppler shift
    ``k v``, so ``F = -beta v - kappa x`` with ``kappa = mu' A beta / (hbar k)``.
    The trap frequency is ``sqrt(kappa / m) / (2 pi)``.

    References
    ----------
    H. J. Metcalf and P. van der Straten, "Laser Cooling and Trapping"
    (Springer, 1999), ch. 7 (the MOT).
    """
    beta, mu, a, k = _as_float(damping, zeeman_coefficient, gradient, wavenumber)
    return mu * a * beta / (_HBAR * k)


def doppler_temperature(
    total_saturation: ArrayLike, detuning: ArrayLike, linewidth: ArrayLike
) -> np.ndarray:
    """Doppler-cooling temperature in three-dimensional molasses, K.

    Parameters
    ----------
    total_saturation : array_like
        Saturation parameter of all cooling beams together, s_tot.
    detuning : array_like, Hz
        Laser detuning (cyclic; red < 0).
    linewidth : array_like, 1/s
        Natural decay rate Gamma.

    Returns
    -------
    numpy.ndarray, K
        ``inf`` for ``detuning >= 0``: blue or resonant light heats, no steady state.

    Notes
    -----
    Balance of the diffusion (heating) and damping (cooling) rates,

    ``k_B T = (hbar Gamma / 4) (1 + s_tot + (2 delta / Gamma)^2) / (2 |delta| / Gamma)``,

    ``delta = 2 pi detuning``. For ``s_tot -> 0`` the minimum is the Doppler
    limit ``hbar Gamma / 2`` at ``delta = -Gamma / 2``; intensity raises it
    through the ``s_tot`` term.

    References
    ----------
    P. D. Lett, W. D. Phillips, S. L. Rolston, C. E. Tanner, R. N. Watts and
    C. I. Westbrook, J. Opt. Soc. Am. B 6, 2084 (1989); H. J. Metcalf and
    P. van der Straten, "Laser Cooling and Trapping" (Springer, 1999), ch. 7.
    """
    s, det, gamma = _as_float(total_saturation, detuning, linewidth)
    x = 4.0 * np.pi * det / gamma  # 2 delta / Gamma
    with np.errstate(divide="ignore", invalid="ignore"):
        t = _HBAR * gamma / (4.0 * _KB) * (1.0 + s + x**2) / np.abs(x)
    return np.where(det < 0, t, np.inf)


def sub_doppler_temperature(
    coefficient: ArrayLike,
    total_saturation: ArrayLike,
    detuning: ArrayLike,
    linewidth: ArrayLike,
) -> np.ndarray:
    """Polarization-gradient (sub-Doppler) temperature, K.

    Parameters
    ----------
    coefficient : array_like
        Dimensionless prefactor C (calibratable; of order 0.1 to 1 in
        alkali molasses).
    total_saturation : array_like
        Saturation parameter of all cooling beams together, s_tot.
    detuning : array_like, Hz
        Laser detuning (cyclic; red < 0).
    linewidth : array_like, 1/s

    Returns
    -------
    numpy.ndarray, K
        ``inf`` for ``detuning >= 0`` (no cooling).

    Notes
    -----
    ``k_B T = C hbar Omega^2 / (4 |delta|)`` with the Rabi frequency of the
    total light ``Omega^2 = Gamma^2 s_tot / 2`` (from ``s = 2 Omega^2 / Gamma^2``)
    and ``delta = 2 pi detuning``: the light-shift scaling ``T ~ I / |delta|``
    valid for ``|delta| >> Gamma``. The prefactor is not universal (it depends
    on the level structure and polarization configuration), hence a
    calibratable constant. The recoil limit is applied by :func:`temperature`.

    References
    ----------
    J. Dalibard and C. Cohen-Tannoudji, J. Opt. Soc. Am. B 6, 2023 (1989);
    P. D. Lett et al., J. Opt. Soc. Am. B 6, 2084 (1989).
    """
    c, s, det, gamma = _as_float(coefficient, total_saturation, detuning, linewidth)
    delta = 2.0 * np.pi * np.abs(det)
    omega2 = gamma**2 * s / 2.0
    with np.errstate(divide="ignore", invalid="ignore"):
        t = c * _HBAR * omega2 / (4.0 * delta * _KB)
    return np.where(det < 0, t, np.inf)


def temperature(
    total_saturation: ArrayLike,
    detuning: ArrayLike,
    linewidth: ArrayLike,
    *,
    sub_doppler_coefficient: ArrayLike | None = None,
    recoil_temperature: ArrayLike,
) -> np.ndarray:
    """Temperature of the cloud: Doppler, or sub-Doppler when lower, floored at the recoil limit.

    Parameters
    ----------
    total_saturation : array_like
        Saturation parameter of all cooling beams together.
    detuning : array_like, Hz
        Laser detuning (cyclic; red < 0).
    linewidth : array_like, 1/s
    sub_doppler_coefficient : array_like or None
        Prefactor of :func:`sub_doppler_temperature`; ``None`` (default) means
        Doppler theory only.
    recoil_temperature : array_like, K
        Floor (``Species.recoil_temperature``).

    Returns
    -------
    numpy.ndarray, K
        ``inf`` for ``detuning >= 0``: blue or resonant light does not cool.

    Notes
    -----
    ``T = max(T_r, min(T_Doppler, T_sub))`` with a coefficient, else
    ``max(T_r, T_Doppler)``. The form is continuous in the coefficient (a
    coefficient of 0 gives the recoil floor, not the Doppler value), so a fit
    of the coefficient never meets a jump. In a MOT
    the field gradient and multiple scattering raise the temperature above
    molasses values; this function does not model that.

    References
    ----------
    P. D. Lett et al., J. Opt. Soc. Am. B 6, 2084 (1989); J. Dalibard and
    C. Cohen-Tannoudji, J. Opt. Soc. Am. B 6, 2023 (1989).
    """
    t = doppler_temperature(total_saturation, detuning, linewidth)
    if sub_doppler_coefficient is not None:
        coeff = np.asarray(sub_doppler_coefficient, dtype=float)
        t = np.minimum(t, sub_doppler_temperature(coeff, total_saturation, detuning, linewidth))
    t = np.maximum(t, np.asarray(recoil_temperature, dtype=float))
    return np.where(np.asarray(detuning, dtype=float) < 0, t, np.inf)
